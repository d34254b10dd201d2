"""Driving order of a listed trip: from the truck's depot through its stops and back, with leg distances.

Flask-free and SQL-free: it is given the depot's point and each stop's point (or ``None``) and calls the
planning core (``service.planning.fleet``): road distance ``d = circuity × great-circle`` (default 1.3,
:class:`~service.planning.fleet.distance.CircuityDistance`) and the shortest closed tour of
:func:`~service.planning.fleet.routing.shortest_tour` (exact Held–Karp up to 12 stops, 2-opt/Or-opt
above). ``docs/fleet.md`` §2–3 give the formulas and sources.

A trip is routed only when the truck has a depot with coordinates and every stop has coordinates.
Otherwise its stops keep the plan's order and the answer says why (:class:`TripRoute` with
``legs`` empty and ``reason`` set) — a partial route would hide a stop, so none is drawn.

Routes are cached per (depot point, stops and their points): a truck's week repeats the same stop sets,
so each distinct trip is routed once per process (bounded LRU).
"""

from __future__ import annotations

import functools
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

from service.planning.fleet.distance import CircuityDistance, Point
from service.planning.fleet.routing import shortest_tour

__all__ = ["Leg", "Point", "TripRoute", "point_of", "route_json", "trip_route"]

#: Routed trips kept per process (distinct stop sets with their depot).
CACHE_SIZE = 4096
#: Kilometres are rounded to this many decimals in answers (metres).
KM_DECIMALS = 3

NO_DEPOT = "The truck has no depot, so its trips keep the plan's order (set the truck's depot)."
DEPOT_WITHOUT_POINT = "The truck's depot {code} has no coordinates, so its trips keep the plan's order."


@dataclass(frozen=True)
class Leg:
    """One leg of a route: ``start`` and ``end`` are site codes or the depot's code; ``km`` road km."""

    start: str
    end: str
    km: float


@dataclass(frozen=True)
class TripRoute:
    """A trip in driving order, or why it is not.

    ``order``: the stops' site codes in driving order (empty when not routed); ``legs``: depot → first
    stop … last stop → depot (``len(order) + 1`` legs); ``km``: their sum; ``exact``: the order is the
    proven shortest (Held–Karp). ``reason`` is ``None`` when routed, else a sentence saying why not.
    """

    depot: str | None
    order: tuple[str, ...]
    legs: tuple[Leg, ...]
    km: float | None
    exact: bool
    reason: str | None
    #: The depot's point then each stop's point in driving order (empty when not routed).
    points: tuple[Point, ...] = ()

    @property
    def routed(self) -> bool:
        return self.reason is None

    def sequence(self, site: str) -> int | None:
        """The stop's 1-based position in driving order, ``None`` when not routed."""
        return self.order.index(site) + 1 if self.routed and site in self.order else None


def _unrouted(depot: str | None, reason: str) -> TripRoute:
    return TripRoute(depot, (), (), None, False, reason)


@functools.lru_cache(maxsize=CACHE_SIZE)
def _routed(depot: str, depot_point: Point, stops: tuple[tuple[str, Point], ...], circuity: float) -> TripRoute:
    points = [depot_point, *(p for _, p in stops)]
    d = CircuityDistance(circuity).matrix(points, points)
    # A repeated point (two tanks at one address) gives a zero leg; the tour is still well defined.
    tour = shortest_tour(np.asarray(d))
    names = [depot, *(code for code, _ in stops)]
    order = tuple(names[i] for i in tour.order[1:-1])
    legs = tuple(
        Leg(names[a], names[b], round(km, KM_DECIMALS))
        for a, b, km in zip(tour.order[:-1], tour.order[1:], tour.legs, strict=True)
    )
    ordered = tuple(points[i] for i in tour.order[:-1])
    return TripRoute(depot, order, legs, round(tour.length, KM_DECIMALS), tour.exact, None, ordered)


def trip_route(
    depot: str | None,
    depot_point: Point | None,
    stops: Sequence[tuple[str, Point | None]],
    circuity: float = CircuityDistance.factor,
) -> TripRoute:
    """Route one trip: ``stops`` are ``(site code, point or None)`` in the plan's order.

    Not routed (``reason`` set, plan order kept) when the truck has no depot, the depot has no point,
    or any stop has no point (the reason names those sites). A trip without stops is a zero route.
    """
    if depot is None:
        return _unrouted(None, NO_DEPOT)
    if depot_point is None:
        return _unrouted(depot, DEPOT_WITHOUT_POINT.format(code=depot))
    missing = [code for code, point in stops if point is None]
    if missing:
        names = ", ".join(missing)
        return _unrouted(depot, f"Sites without coordinates ({names}), so this trip keeps the plan's order.")
    known = tuple((code, point) for code, point in stops if point is not None)
    return _routed(depot, depot_point, known, float(circuity))


def point_of(latitude: float | None, longitude: float | None) -> Point | None:
    """A point from stored coordinates, ``None`` unless both are set and in range."""
    if latitude is None or longitude is None:
        return None
    if not (-90 <= latitude <= 90 and -180 <= longitude <= 180):
        return None
    return Point(float(latitude), float(longitude))


def route_json(route: TripRoute) -> dict[str, object] | None:
    """The API's ``route`` object of a trip (``None`` when not routed; ``route_note`` says why)."""
    if not route.routed:
        return None
    return {
        "depot": route.depot,
        "stops": list(route.order),
        "legs": [{"from": leg.start, "to": leg.end, "km": leg.km} for leg in route.legs],
        "km": route.km,
        "exact": route.exact,
    }
