"""The fleet fields of trucks and sites that name other rows or depend on each other (422 if not).

A truck's ``depot`` and ``products`` and a site's ``product`` must name stored depots and
products; a truck's ``compartments`` sum to its ``capacity`` (``W = Σ C_j``, docs/fleet.md §1).
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from typing import Any

from service.api.schemas.sites import DEFAULT_SAFE_FILL
from service.errors import Problem
from service.persistence import fleet
from service.persistence.repository import NotFound
from service.request_db import get_session

#: Relative slack when the compartments are compared with the capacity (decimal inputs).
SUM_TOLERANCE = 1e-9


def _refuse(pointer: str, detail: str) -> Problem:
    return Problem(422, detail, kind="validation", errors=[{"pointer": pointer, "detail": detail}])


def check_truck(changes: Mapping[str, Any], capacity: float, compartments: list[float] | None) -> None:
    """Refuse an unknown depot or product and compartments that do not sum to the capacity.

    ``changes`` are the fields sent; ``capacity`` and ``compartments`` the truck's values after the
    change (the sent ones, else the stored ones).
    """
    session = get_session()
    if changes.get("depot") is not None:
        try:
            fleet.depot_by_code(session, changes["depot"])
        except NotFound as exc:
            raise _refuse("#/depot", str(exc)) from exc
    if changes.get("products") is not None:
        unknown = fleet.unknown_products(session, changes["products"])
        if unknown:
            index = changes["products"].index(unknown[0])
            raise _refuse(f"#/products/{index}", f"No product with code {unknown[0]!r}.")
    if ({"capacity", "compartments"} & changes.keys()) and compartments is not None:
        total = math.fsum(compartments)
        if not math.isclose(total, capacity, rel_tol=SUM_TOLERANCE):
            raise _refuse(
                "#/compartments", f"The compartments sum to {total:g}; they must sum to the capacity {capacity:g}."
            )


def check_shift(shift_hours: float | None, average_speed_kmh: float | None) -> None:
    """Refuse a truck whose ``shift_hours`` is set without ``average_speed_kmh`` (values after the change):
    a shift limits the day only when trips can be timed (docs/fleet.md §6a)."""
    if shift_hours is not None and average_speed_kmh is None:
        raise _refuse(
            "#/average_speed_kmh",
            "shift_hours needs average_speed_kmh (km/h) to time the trips; set both, or shift_hours null for no limit.",
        )


def check_site(changes: Mapping[str, Any]) -> float | None:
    """Refuse a site write that names an unknown product; the named product's default safe fill."""
    if changes.get("product") is not None:
        try:
            return float(fleet.product_by_code(get_session(), changes["product"]).safe_fill)
        except NotFound as exc:
            raise _refuse("#/product", str(exc)) from exc
    return None


def fill_safe_fill(data: dict[str, Any], product_safe_fill: float | None) -> None:
    """A new site without ``safe_fill`` gets its product's default safe fill, else ``DEFAULT_SAFE_FILL``."""
    if data.get("safe_fill") is None:
        data["safe_fill"] = DEFAULT_SAFE_FILL if product_safe_fill is None else product_safe_fill
