"""Frozen result records of the planning core and their JSON-able form."""

from __future__ import annotations

import datetime as dt
import enum
from dataclasses import dataclass, fields


class Status(enum.IntEnum):
    """Outcome of a joint computation.

    ``OPTIMAL``: a plan proven optimal (its cost equals the bound to 1e-9 relative, or the class optimum
    in the setting where the class is exact); ``FEASIBLE``: a drivable plan, optimality not proven;
    ``TIME_LIMIT``: the deadline cut the search, the best drivable plan found is returned;
    ``INFEASIBLE``: no plan satisfies the rules (``success`` false, ``needed`` says what would help).
    """

    OPTIMAL = 0
    FEASIBLE = 1
    INFEASIBLE = 2
    TIME_LIMIT = 3


def _plain(value):
    if isinstance(value, Status):
        return value.name.lower()
    if isinstance(value, dt.date):
        return value.isoformat()
    if isinstance(value, tuple | list):
        return [_plain(v) for v in value]
    if isinstance(value, dict):
        return {str(k): _plain(v) for k, v in value.items()}
    if hasattr(value, "__dataclass_fields__"):
        return {f.name: _plain(getattr(value, f.name)) for f in fields(value)}
    return value


class _ToDict:
    def to_dict(self) -> dict:
        """The record as plain JSON-able Python types (enums as lowercase names, dates and times as ISO 8601)."""
        return _plain(self)


@dataclass(frozen=True)
class CycleResult(_ToDict):
    """Best cycle of one site served alone by the truck.

    Attributes
    ----------
    cycle_days_continuous, cost_per_day_continuous : float
        ``T_c = min(sqrt((K + k) / H), U)`` and ``(K + k) / T_c + H T_c``.
    cycle_days : int
        Whole-day cycle ``T_w``: the better of ``floor(T_c)`` and ``ceil(T_c)`` in ``[1, U]``.
    quantity : float
        Delivery size ``d T_w``.
    cost_per_day : float
        ``(K + k) / T_w + H T_w``.
    binding : {"tank", "truck"} or None
        Which cap shortens the free optimum (the smaller cap when both do).
    """

    cycle_days_continuous: float
    cost_per_day_continuous: float
    cycle_days: int
    quantity: float
    cost_per_day: float
    binding: str | None


@dataclass(frozen=True)
class SitePlan(_ToDict):
    """One site's delivery pattern in a joint plan.

    The site is delivered on days ``o + j · period_days`` (day 0 = the plan's ``start_date``) for every
    ``o`` in ``delivery_days`` (sorted, ``0 ≤ o < period_days``). ``cycle_days = period_days /
    len(delivery_days)`` is the mean gap (a whole number for a plain cycle), ``offset_days =
    delivery_days[0]``, ``quantity = d · cycle_days`` the mean delivery (each delivery is ``d`` times the
    days to the next one), ``longest_gap_days`` the longest gap, and ``cost_per_day = (k · n + H Σ g²) /
    period_days`` the site's stop and holding share (``H = h d / 2``, ``g`` the gaps; ``k / T + H T`` for a
    plain cycle of ``T`` days).
    """

    code: str
    cycle_days: float
    offset_days: int
    quantity: float
    cost_per_day: float
    binding: str | None
    period_days: int
    delivery_days: tuple[int, ...]
    longest_gap_days: int


@dataclass(frozen=True)
class Stop(_ToDict):
    """A delivery of ``quantity`` to site ``code`` on a trip."""

    code: str
    quantity: float


@dataclass(frozen=True)
class Trip(_ToDict):
    """One truck trip: ``day`` (days since the plan's start date), its ``date``, ``trip`` (1-based index
    within the date), the load and the stops (in input order of the sites)."""

    day: int
    date: dt.date
    trip: int
    load: float
    stops: tuple[Stop, ...]


@dataclass(frozen=True)
class JointResult(_ToDict):
    """A drivable joint delivery plan for the sites of one truck (see ``docs/planning.md``).

    Attributes
    ----------
    status, success, message
        See :class:`Status`; ``success`` is False only for ``INFEASIBLE`` (then zero costs, no sites,
        no trips, and ``needed``).
    method : {"power_of_two", "integer"}
        The policy family the plan's rhythm came from.
    base_days : int or None
        Base of the power-of-two cycles (days, or working days on a working-day calendar); ``None``
        for the integer method.
    dispatch_interval_days : int
        Shortest gap in days between two consecutive trip dates of the repeat period (cyclically; 0
        when infeasible).
    repeat_days : int
        ``R``: the plan repeats every ``R`` days (a whole number of weeks unless all seven days work).
    trips_per_repeat : int
        Every trip of one repeat period.
    cost_per_day : float
        ``(K · trips_per_repeat + Σ stop costs + Σ_i H_i Σ gaps²) / R`` over one repeat period, without
        closed dates (the stationary cost).
    cost_breakdown : dict
        ``{"dispatch", "stops", "holding"}``, summing to ``cost_per_day``.
    lower_bound_per_day, gap : float
        A lower bound on every drivable plan and ``cost / bound − 1`` (0 when the bound is 0).
    peak_load : float
        Largest load of one trip.
    trips_truncated : bool
        True when ``trips`` lists fewer days than ``R``.
    start_date : datetime.date
        Day 0.
    needed : dict or None
        When infeasible: ``{"trips_per_day": int or None, "remove_sites": [codes]}``.
    """

    status: Status
    success: bool
    message: str
    method: str
    base_days: int | None
    dispatch_interval_days: int
    repeat_days: int
    trips_per_repeat: int
    cost_per_day: float
    cost_breakdown: dict
    lower_bound_per_day: float
    gap: float
    peak_load: float
    trips_truncated: bool
    sites: tuple[SitePlan, ...]
    trips: tuple[Trip, ...]
    warnings: tuple[str, ...]
    start_date: dt.date
    needed: dict | None
