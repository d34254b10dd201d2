"""Input records and their validation into numpy arrays.

The arrays use the notation of ``docs/planning.md``: demand ``d_i``, holding term
``H_i = h_i d_i / 2``, stop cost ``k_i``, usable cycle stock
``q_i = min(f_i V_i - s_i, W)``, longest cycle ``U_i = q_i / d_i`` (days) and its whole-day
floor ``u_i``.
"""

from __future__ import annotations

import datetime as dt
import math
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

from service.planning.errors import PlanningInputError

#: Relative tolerance when flooring ``U_i``: ``U_i (1 + 1e-9)`` is floored, so that rounding of ``q_i / d_i``
#: never loses a day (``0.94 × 4 300 / 4 042`` is 0.9999999999999999 in floats and is one whole day).
WHOLE_DAY_TOLERANCE = 1e-9
#: ISO weekdays, Monday = 1 … Sunday = 7.
ALL_WEEKDAYS = (1, 2, 3, 4, 5, 6, 7)
#: No whole-day cycle longer than this is considered (10 years, the API's largest base_days). A tank
#: holding 10^18 days of demand made the discrete searches allocate exabytes (found by fuzzing).
MAX_WHOLE_DAYS = 3660


@dataclass(frozen=True)
class SiteInput:
    """One tank site: demand per day, holding cost per unit per day, cost per stop, tank data."""

    code: str
    demand_per_day: float
    holding_cost: float
    stop_cost: float
    tank_capacity: float
    safe_fill: float = 0.9
    safety_stock: float = 0.0


@dataclass(frozen=True)
class TruckInput:
    """The truck: cost per trip, optional load capacity and stops per trip, and its working calendar.

    ``working_days`` are the ISO weekdays it works (1 = Monday … 7 = Sunday), ``trips_per_day`` the
    trips it can run on one working date (``None``: no limit), ``closed_dates`` dates it does not work
    (holidays are expanded by the service layer). The defaults (all seven days, no trip limit, no closed
    date) are the setting in which a plan is the exact optimum of its policy class.
    """

    dispatch_cost: float
    capacity: float | None = None
    max_stops: int | None = None
    working_days: tuple[int, ...] = ALL_WEEKDAYS
    trips_per_day: int | None = None
    closed_dates: tuple[dt.date, ...] = ()


@dataclass(frozen=True)
class Problem:
    """Validated planning data as arrays (one entry per site, input order).

    Attributes
    ----------
    codes : tuple of str
    demand, stop_cost, H : ndarray
        ``d_i``, ``k_i`` and ``H_i = h_i d_i / 2``.
    cap_days, whole_days : ndarray
        ``U_i = q_i / d_i`` and ``u_i = floor(U_i (1 + WHOLE_DAY_TOLERANCE))`` (a relative tolerance).
    tank_binds : ndarray of bool
        Whether the tank (not the truck) sets ``q_i`` (ties count as the tank).
    dispatch_cost, capacity, max_stops
        ``K``, ``W`` (``inf`` when none) and the stop limit (``None`` when none).
    working_days, trips_per_day, closed_dates
        Sorted ISO weekdays, trips per date (``None`` when no limit), sorted distinct closed dates.
    """

    codes: tuple[str, ...]
    demand: np.ndarray
    stop_cost: np.ndarray
    H: np.ndarray
    cap_days: np.ndarray
    whole_days: np.ndarray
    tank_binds: np.ndarray
    dispatch_cost: float
    capacity: float
    max_stops: int | None
    working_days: tuple[int, ...] = ALL_WEEKDAYS
    trips_per_day: int | None = None
    closed_dates: tuple[dt.date, ...] = ()

    @property
    def n(self) -> int:
        return len(self.codes)


_SITE_RULES = (
    # field, predicate on the float array, wording
    ("demand_per_day", lambda x: x > 0, "a finite number > 0"),
    ("holding_cost", lambda x: x >= 0, "a finite number >= 0"),
    ("stop_cost", lambda x: x >= 0, "a finite number >= 0"),
    ("tank_capacity", lambda x: x > 0, "a finite number > 0"),
    ("safe_fill", lambda x: (x > 0) & (x <= 1), "a number in (0, 1]"),
    ("safety_stock", lambda x: x >= 0, "a finite number >= 0"),
)


def _site_error(sites: Sequence[SiteInput], i: int, field: str, text: str) -> PlanningInputError:
    code = sites[i].code
    return PlanningInputError(f"site `{code}`: {text}", field=field, index=i, code=code)


def _column(sites: Sequence[SiteInput], field: str, wording: str) -> np.ndarray:
    values = []
    for i, site in enumerate(sites):
        value = getattr(site, field)
        if isinstance(value, bool) or not isinstance(value, (int, float, np.integer, np.floating)):
            raise _site_error(sites, i, field, f"{field} must be {wording}, got {value!r}")
        values.append(float(value))
    return np.asarray(values, dtype=float)


def check_truck_number(value, field: str, *, optional: bool, integer: bool, minimum: float, strict: bool):
    if value is None and optional:
        return None
    kind = "an integer" if integer else "a finite number"
    wording = f"{kind} {'>' if strict else '>='} {minimum:g}" + (" or null" if optional else "")
    ok_type = (
        isinstance(value, (int, np.integer)) if integer else isinstance(value, (int, float, np.integer, np.floating))
    )
    if isinstance(value, bool) or not ok_type:
        raise PlanningInputError(f"truck: {field} must be {wording}, got {value!r}", field=field)
    x = float(value)
    if not math.isfinite(x) or (x <= minimum if strict else x < minimum):
        raise PlanningInputError(f"truck: {field} must be {wording}, got {value!r}", field=field)
    return int(value) if integer else x


def check_calendar(truck: TruckInput) -> tuple[tuple[int, ...], int | None, tuple[dt.date, ...]]:
    """Validate the truck's working calendar: sorted weekdays, trips per date, sorted closed dates.

    Raises
    ------
    PlanningInputError
        Field ``working_days`` (not a non-empty collection of distinct integers 1..7),
        ``trips_per_day`` (not an integer >= 1 or null) or ``closed_dates`` (not dates).
    """
    days = truck.working_days
    try:
        items = list(days)
    except TypeError:
        items = None
    if (
        items is None
        or isinstance(days, (str, bytes))
        or not items
        or any(isinstance(x, bool) or not isinstance(x, (int, np.integer)) or not 1 <= x <= 7 for x in items)
        or len(set(items)) != len(items)
    ):
        raise PlanningInputError(
            f"truck: working_days must be a non-empty set of ISO weekdays 1..7, got {days!r}", field="working_days"
        )
    trips = check_truck_number(truck.trips_per_day, "trips_per_day", optional=True, integer=True, minimum=1, strict=False)
    closed = truck.closed_dates
    try:
        closed_items = list(closed)
    except TypeError:
        closed_items = None
    if closed_items is None or any(
        not isinstance(x, dt.date) or isinstance(x, dt.datetime) for x in closed_items
    ):
        raise PlanningInputError(f"truck: closed_dates must be a list of dates, got {closed!r}", field="closed_dates")
    return tuple(sorted(int(x) for x in items)), trips, tuple(sorted(set(closed_items)))


def validate(sites: Sequence[SiteInput], truck: TruckInput) -> Problem:
    """Check the inputs and return them as a :class:`Problem`.

    Raises
    ------
    PlanningInputError
        For an empty site list, a missing or duplicate code, a non-finite or out-of-range
        number, or a site whose usable stock ``q_i = min(f_i V_i - s_i, W)`` lasts less than
        one day (``U_i = q_i / d_i < 1``).
    """
    K = check_truck_number(truck.dispatch_cost, "dispatch_cost", optional=False, integer=False, minimum=0, strict=False)
    W = check_truck_number(truck.capacity, "capacity", optional=True, integer=False, minimum=0, strict=True)
    S = check_truck_number(truck.max_stops, "max_stops", optional=True, integer=True, minimum=1, strict=False)
    working_days, trips_per_day, closed_dates = check_calendar(truck)
    sites = list(sites)
    if not sites:
        raise PlanningInputError("sites: at least one site is required", field="sites")
    seen: dict[str, int] = {}
    for i, site in enumerate(sites):
        if not isinstance(site.code, str) or not site.code:
            raise PlanningInputError(
                f"site #{i}: code must be a non-empty string, got {site.code!r}", field="code", index=i
            )
        if site.code in seen:
            raise _site_error(sites, i, "code", f"code is a duplicate of site #{seen[site.code]}")
        seen[site.code] = i
    columns = {}
    for field, rule, wording in _SITE_RULES:
        x = _column(sites, field, wording)
        bad = ~(np.isfinite(x) & rule(x))
        if bad.any():
            i = int(np.argmax(bad))
            raise _site_error(sites, i, field, f"{field} must be {wording}, got {getattr(sites[i], field)!r}")
        columns[field] = x
    d = columns["demand_per_day"]
    tank_stock = columns["tank_capacity"] * columns["safe_fill"] - columns["safety_stock"]
    capacity = math.inf if W is None else W
    usable = np.minimum(tank_stock, capacity)
    cap_days = usable / d
    short = ~(cap_days * (1 + WHOLE_DAY_TOLERANCE) >= 1.0)
    if short.any():
        i = int(np.argmax(short))
        raise _site_error(
            sites,
            i,
            "tank_capacity",
            f"usable stock {usable[i]:g} holds less than one day of demand {d[i]:g} "
            "(tank_capacity × safe_fill − safety_stock, capped by truck capacity)",
        )
    whole_days = np.minimum(np.floor(cap_days * (1 + WHOLE_DAY_TOLERANCE)), MAX_WHOLE_DAYS).astype(np.int64)
    return Problem(
        codes=tuple(seen),
        demand=d,
        stop_cost=columns["stop_cost"],
        H=columns["holding_cost"] * d / 2.0,
        cap_days=np.maximum(cap_days, np.minimum(whole_days, 1)),  # a ratio rounded just below 1 counts as 1
        whole_days=whole_days,
        tank_binds=tank_stock <= capacity,
        dispatch_cost=K,
        capacity=capacity,
        max_stops=S,
        working_days=working_days,
        trips_per_day=trips_per_day,
        closed_dates=closed_dates,
    )
