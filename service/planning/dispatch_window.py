"""The trips of a joint policy on any window of days (e.g. the weekly dispatch call)."""

from __future__ import annotations

from service.planning.delivery_calendar import Calendar
from service.planning.errors import PlanningInputError
from service.planning.inputs import TruckInput, check_truck_number
from service.planning.results import JointResult, Trip


def trips_between(result: JointResult, truck: TruckInput, first_day: int, last_day: int) -> list[Trip]:
    """Trips on days ``first_day … last_day`` inclusive, exactly as the policy delivers them.

    Day 0 is the first day of the repeat period and the calendar repeats every
    ``result.repeat_days`` days, so any integer day is allowed. Over-full days are split
    into extra trips by the same rule as ``result.trips`` (see
    :mod:`service.planning.delivery_calendar`). The work is O(n log n) for the index plus, per
    dispatch day in the window, one lookup per distinct cycle length, whatever ``R``.
    An unsuccessful result has no trips.

    Raises
    ------
    PlanningInputError
        For an invalid truck or ``last_day < first_day`` (field ``"last_day"``).
    """
    capacity = check_truck_number(truck.capacity, "capacity", optional=True, integer=False, minimum=0, strict=True)
    max_stops = check_truck_number(truck.max_stops, "max_stops", optional=True, integer=True, minimum=1, strict=False)
    for name, value in (("first_day", first_day), ("last_day", last_day)):
        if isinstance(value, bool) or not isinstance(value, int):
            raise PlanningInputError(f"{name} must be an integer, got {value!r}", field=name)
    if last_day < first_day:
        raise PlanningInputError(f"last_day {last_day} is before first_day {first_day}", field="last_day")
    if not result.success:
        return []
    calendar = Calendar(
        [s.code for s in result.sites],
        [s.cycle_days for s in result.sites],
        [s.offset_days for s in result.sites],
        [s.quantity for s in result.sites],
        float("inf") if capacity is None else capacity,
        max_stops,
    )
    T0 = result.dispatch_interval_days
    first = -(-first_day // T0) * T0
    trips: list[Trip] = []
    for day in range(first, last_day + 1, T0):
        trips.extend(calendar.trips_on(day))
    return trips
