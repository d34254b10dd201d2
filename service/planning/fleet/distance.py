"""Road distances between points: one small interface, and its default (great circle × circuity).

A :class:`DistanceSource` answers ``matrix(origins, destinations)`` with kilometres as an array of
shape ``(len(origins), len(destinations))``. The fleet level asks nothing else of it, so a road-network
matrix (a table read from a routing engine's export) can replace the default without touching the
planner.

Default, :class:`CircuityDistance`: the great-circle (haversine) distance on a sphere of the mean
Earth radius ``R = 6 371.0088 km`` (IUGG mean radius ``R1``; the radius the ``haversine`` package uses),

    a = sin²(Δφ/2) + cos φ1 cos φ2 sin²(Δλ/2),   d = 2 R asin(√a),

times a circuity factor (road distance over straight-line distance). Published country averages are
about 1.2–1.4 (Ballou, Rahardja & Sakai 2002, *Transportation Research A* 36 — recalled from memory,
see ``docs/fleet.md``); the default 1.3 is common practice.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass
from typing import Protocol

import numpy as np

from service.planning.errors import PlanningInputError

#: IUGG mean Earth radius R1 in kilometres.
EARTH_RADIUS_KM = 6371.0088
#: Default circuity factor (common practice; published country averages about 1.2–1.4).
DEFAULT_CIRCUITY = 1.3


@dataclass(frozen=True)
class Point:
    """A place in decimal degrees (WGS 84 latitude −90…90, longitude −180…180)."""

    latitude: float
    longitude: float


class DistanceSource(Protocol):
    """Road distances in kilometres: ``matrix(a, b)[i, j]`` from ``a[i]`` to ``b[j]`` (≥ 0, finite)."""

    def matrix(self, origins: Sequence[Point], destinations: Sequence[Point]) -> np.ndarray: ...


def _radians(points: Sequence[Point]) -> tuple[np.ndarray, np.ndarray]:
    lat = np.radians(np.fromiter((p.latitude for p in points), float, len(points)))
    lon = np.radians(np.fromiter((p.longitude for p in points), float, len(points)))
    return lat, lon


def great_circle_km(origins: Sequence[Point], destinations: Sequence[Point]) -> np.ndarray:
    """Haversine distances (km) between every origin and destination, shape ``(m, n)``."""
    lat1, lon1 = _radians(origins)
    lat2, lon2 = _radians(destinations)
    dlat = lat2[None, :] - lat1[:, None]
    dlon = lon2[None, :] - lon1[:, None]
    a = np.sin(dlat / 2) ** 2 + np.cos(lat1)[:, None] * np.cos(lat2)[None, :] * np.sin(dlon / 2) ** 2
    return 2 * EARTH_RADIUS_KM * np.arcsin(np.sqrt(np.clip(a, 0.0, 1.0)))


@dataclass(frozen=True)
class CircuityDistance:
    """Great-circle distance × ``factor`` (the module docstring)."""

    factor: float = DEFAULT_CIRCUITY

    def __post_init__(self):
        if isinstance(self.factor, bool) or not isinstance(self.factor, int | float) or not 1.0 <= self.factor <= 5.0:
            raise PlanningInputError(f"circuity must be a number in [1, 5], got {self.factor!r}", field="circuity")

    def matrix(self, origins: Sequence[Point], destinations: Sequence[Point]) -> np.ndarray:
        return self.factor * great_circle_km(origins, destinations)


def check_points(points: Sequence[Point | None], codes: Sequence[str], what: str) -> None:
    """Raise :class:`PlanningInputError` naming every item without valid coordinates."""
    bad = [
        code
        for code, p in zip(codes, points, strict=True)
        if p is None
        or not all(isinstance(v, int | float) and not isinstance(v, bool) for v in (p.latitude, p.longitude))
        or not (-90 <= p.latitude <= 90 and -180 <= p.longitude <= 180)
    ]
    if bad:
        names = ", ".join(f"`{c}`" for c in bad)
        raise PlanningInputError(f"{what} without valid coordinates: {names}", field="coordinates")
