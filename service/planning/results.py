"""Frozen result records of the planning core and their JSON-able form."""

from __future__ import annotations

import datetime as dt
import enum
from dataclasses import dataclass, fields


class Status(enum.IntEnum):
    """Outcome of a joint computation (``OPTIMAL``: a policy is returned)."""

    OPTIMAL = 0
    INFEASIBLE = 2


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
    """One site in a joint policy; ``cost_per_day = k / T + H T`` (its stop and holding share)."""

    code: str
    cycle_days: int
    offset_days: int
    quantity: float
    cost_per_day: float
    binding: str | None


@dataclass(frozen=True)
class Stop(_ToDict):
    """A delivery of ``quantity`` to site ``code`` on a trip."""

    code: str
    quantity: float


@dataclass(frozen=True)
class Trip(_ToDict):
    """One truck trip on ``day`` (day 0 = first day of the repeat period)."""

    day: int
    load: float
    stops: tuple[Stop, ...]


@dataclass(frozen=True)
class JointResult(_ToDict):
    """A joint delivery policy for the sites of one truck (see ``docs/planning.md``).

    Attributes
    ----------
    status, success, message
        ``Status.OPTIMAL`` with ``success=True`` when a policy is returned; otherwise
        ``Status.INFEASIBLE``, ``success=False``, a message, zero costs and no sites.
    method : {"power_of_two", "integer"}
    base_days : int or None
        Base ``B`` of the power-of-two cycles ``B 2**p``; ``None`` for the integer method.
    dispatch_interval_days : int
        ``T0 = min T_i``; the truck leaves every ``T0`` days.
    repeat_days : int
        ``R = lcm(T_i)``.
    trips_per_repeat : int
        Truck trips in one repeat period, ``R / T0 + extra_trips``.
    cost_per_day : float
        ``K · trips_per_repeat / R + Σ k_i / T_i + Σ H_i T_i``.
    cost_breakdown : dict
        ``{"dispatch", "stops", "holding"}``, summing to ``cost_per_day``.
    lower_bound_per_day, gap : float
        The relaxation bound and ``cost / bound - 1`` (0 when the bound is 0).
    peak_load : float
        Largest load of one dispatch day (all its trips together; the largest trip load
        when no day needs an extra trip).
    extra_trips : int
        Trips per repeat period beyond one per dispatch day.
    trips_truncated : bool
        True when ``trips`` lists fewer days than ``R``.
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
    extra_trips: int
    trips_truncated: bool
    sites: tuple[SitePlan, ...]
    trips: tuple[Trip, ...]
    warnings: tuple[str, ...]
