"""Frozen result records of the fleet level (the conventions of :mod:`service.planning.results`)."""

from __future__ import annotations

import datetime as dt
from dataclasses import dataclass

from service.planning.results import SitePlan, Status, _ToDict


@dataclass(frozen=True)
class RouteStop(_ToDict):
    """A stop of a routed trip: site ``code``, ``quantity``, the ``(compartment, quantity)`` pieces of its
    load (compartments numbered from 1) and ``leg_km``, the distance from the previous stop (or the depot)."""

    code: str
    quantity: float
    compartments: tuple[tuple[int, float], ...]
    leg_km: float


@dataclass(frozen=True)
class RoutedTrip(_ToDict):
    """One trip in driving order from and back to the depot: ``day`` (since the start date), ``date``,
    ``trip`` (1-based within the date), ``load``, ``stops``, ``return_km`` (last stop to the depot),
    ``distance_km`` (the whole route), ``cost`` (dispatch + cost per km × distance + stop costs) and
    ``duration_hours`` (``distance_km / average_speed_kmh + stops × stop_minutes / 60 + load_minutes / 60``;
    ``None`` when the truck has no average speed)."""

    day: int
    date: dt.date
    trip: int
    load: float
    stops: tuple[RouteStop, ...]
    return_km: float
    distance_km: float
    cost: float
    duration_hours: float | None = None


@dataclass(frozen=True)
class TruckPlan(_ToDict):
    """The plan of one truck.

    ``source``: ``"joint"`` (the drivable one-truck planner, trips routed), ``"direct"`` (the same planner with
    one stop per trip) or ``"cyclic"`` (the
    exhaustive cyclic search of :mod:`cyclic`). ``cost_per_day`` = ``(Σ trip costs) / repeat_days`` +
    holding, split in ``cost_breakdown`` ``{"dispatch", "distance", "stops", "holding"}``.
    ``utilisation``: ``{"trips_per_open_day", "trip_share"`` (trips over open days × trips_per_day;
    ``None`` without a trip limit), ``"load_share"`` (load over trips × capacity)``}``; with a shift also
    ``"shift_hours"``, ``"longest_day_hours"`` and ``"mean_day_hours"`` (over the days with trips, every
    day of the repeat period counted, not only the listed ones).
    """

    truck: str
    depot: str
    source: str
    status: Status
    sites: tuple[SitePlan, ...]
    trips: tuple[RoutedTrip, ...]
    repeat_days: int
    cost_per_day: float
    cost_breakdown: dict
    utilisation: dict
    trips_truncated: bool
    warnings: tuple[str, ...]


@dataclass(frozen=True)
class UnservedSite(_ToDict):
    """A site no truck serves, and why."""

    code: str
    reason: str


@dataclass(frozen=True)
class NetworkResult(_ToDict):
    """A network plan (``docs/fleet.md``).

    ``assignment`` maps each served site to its truck; ``cost_per_day`` sums the trucks' plans;
    ``lower_bound_per_day`` bounds every plan of the served sites under any assignment (``bound.py``),
    ``gap = cost / bound − 1``. ``status``: ``optimal`` when the gap is 0, ``feasible``, or
    ``time_limit`` when the budget cut the search; ``success`` is False only when no site is served.
    """

    status: Status
    success: bool
    message: str
    assignment: dict
    trucks: tuple[TruckPlan, ...]
    cost_per_day: float
    cost_breakdown: dict
    lower_bound_per_day: float
    gap: float
    unserved: tuple[UnservedSite, ...]
    elapsed_seconds: float
    warnings: tuple[str, ...]
