"""A truck's working calendar, and how it becomes the planning core's ``TruckInput``.

One place for every user of the calendar: the joint calculation, plan recording, the weekly trips
(``service.schedule``) and the status page. Flask-free and database-free: it takes a truck row, a
plan's input snapshot or a request body, and dates.

The calendar (issue 13): ``working_days`` (ISO weekdays, 1 = Monday … 7 = Sunday),
``trips_per_day`` (trips on one working day), ``closed_dates`` (ISO dates the truck does not
work) and ``holiday_region`` (a region code of the ``holidays`` package, ``"GB"``, ``"GB-SCT"``,
``"US-NY"``, ``"DE-BY"``; its public holidays close the truck). The core is pure and knows no
holidays: the service expands the region's holidays in the dates concerned and hands the core one
list of closed dates. The ``holidays`` package computes them from its rules, offline.
"""

from __future__ import annotations

import datetime as dt
import functools
import warnings
from collections.abc import Iterable, Mapping
from dataclasses import dataclass
from typing import Any

import holidays

from service.planning import TruckInput

FIELDS = ("working_days", "trips_per_day", "closed_dates", "holiday_region")
DEFAULT_WORKING_DAYS = (1, 2, 3, 4, 5)
DEFAULT_TRIPS_PER_DAY = 1
MAX_TRIPS_PER_DAY = 24
MAX_CLOSED_DATES = 1000
#: Days after a plan's start whose holidays go to the planner: the core lists up to 3 660 days.
PLAN_HORIZON_DAYS = 3660
#: Days around a trips window whose holidays go to the listing: a delivery on a closed date moves
#: to an earlier working day, so closures after the window can move trips into it.
WINDOW_MARGIN_DAYS = 366
WEEKDAY_NAMES = ("Mon", "Tue", "Wed", "Thu", "Fri", "Sat", "Sun")


@dataclass(frozen=True)
class Calendar:
    """A truck's calendar. ``trips_per_day`` is ``None`` only for plans recorded before calendars
    existed (they were computed for every day and any number of trips)."""

    working_days: tuple[int, ...] = DEFAULT_WORKING_DAYS
    trips_per_day: int | None = DEFAULT_TRIPS_PER_DAY
    closed_dates: tuple[dt.date, ...] = ()
    holiday_region: str | None = None

    @classmethod
    def of(cls, source: Any) -> Calendar:
        """The calendar of a truck row, or of a mapping with the four fields (a request body or a
        plan's snapshot of the truck; dates as ``date`` or ISO text). Missing fields take the defaults."""
        get = source.get if isinstance(source, Mapping) else functools.partial(getattr, source)
        days = get("working_days", None)
        trips = get("trips_per_day", DEFAULT_TRIPS_PER_DAY)
        closed = get("closed_dates", None) or ()
        return cls(
            tuple(sorted(days)) if days else DEFAULT_WORKING_DAYS,
            DEFAULT_TRIPS_PER_DAY if trips is None else int(trips),
            tuple(sorted(_date(d) for d in closed)),
            get("holiday_region", None),
        )

    @classmethod
    def recorded(cls, truck_snapshot: Mapping[str, Any]) -> Calendar:
        """The calendar a plan was computed with. A snapshot from before calendars (no
        ``working_days``) gets the core's own setting: every day, no limit on trips."""
        if "working_days" not in truck_snapshot:
            return cls((1, 2, 3, 4, 5, 6, 7), None, (), None)
        return cls.of(truck_snapshot)

    def stored(self) -> dict[str, Any]:
        """The four fields as stored and snapshotted (JSON: lists, ISO dates)."""
        return {
            "working_days": list(self.working_days),
            "trips_per_day": self.trips_per_day,
            "closed_dates": [d.isoformat() for d in self.closed_dates],
            "holiday_region": self.holiday_region,
        }

    def closed_between(self, first: dt.date, last: dt.date) -> tuple[dt.date, ...]:
        """Every closed date from ``first`` to ``last``: the listed ones and the region's holidays."""
        listed = {d for d in self.closed_dates if first <= d <= last}
        return tuple(sorted(listed | set(holiday_dates(self.holiday_region, first, last))))

    def off_reason(self, day: dt.date) -> str | None:
        """Why the truck does not work on ``day`` (a weekday off, a closed date, a holiday), else ``None``."""
        if day.isoweekday() not in self.working_days:
            return f"does not work on {WEEKDAY_NAMES[day.isoweekday() - 1]}"
        if day in self.closed_dates:
            return "closed on this date"
        if day in holiday_dates(self.holiday_region, day, day):
            return f"public holiday in {self.holiday_region}"
        return None

    def describe(self) -> str:
        """One line for people: ``Mon–Fri, 1 trip a day, holidays: GB``."""
        parts = [weekdays_text(self.working_days)]
        if self.trips_per_day is not None:
            parts.append(f"{self.trips_per_day} trip{'' if self.trips_per_day == 1 else 's'} a day")
        if self.holiday_region:
            parts.append(f"holidays: {self.holiday_region}")
        if self.closed_dates:
            count = len(self.closed_dates)
            parts.append(f"{count} closed date{'' if count == 1 else 's'}")
        return ", ".join(parts)


def _date(value: dt.date | str) -> dt.date:
    return value if isinstance(value, dt.date) else dt.date.fromisoformat(value)


def weekdays_text(days: Iterable[int]) -> str:
    """``Mon–Fri``, ``Mon–Wed, Fri``, ``every day``: runs of three or more days as a range."""
    days = sorted(set(days))
    if len(days) == 7:
        return "every day"
    runs: list[list[int]] = []
    for day in days:
        if runs and day == runs[-1][-1] + 1:
            runs[-1].append(day)
        else:
            runs.append([day])
    out = []
    for run in runs:
        if len(run) >= 3:
            out.append(f"{WEEKDAY_NAMES[run[0] - 1]}–{WEEKDAY_NAMES[run[-1] - 1]}")
        else:
            out.extend(WEEKDAY_NAMES[d - 1] for d in run)
    return ", ".join(out)


@functools.cache
def _regions() -> dict[str, frozenset[str]]:
    """Country codes (ISO 3166-1 alpha-2) the installed ``holidays`` supports, with their subdivisions."""
    return {
        country: frozenset(subdivisions)
        for country, subdivisions in holidays.list_supported_countries(include_aliases=False).items()
        if len(country) == 2
    }


@functools.cache
def region_codes() -> tuple[str, ...]:
    """Every region :func:`region_error` accepts, sorted (the OpenAPI document lists them)."""
    regions = _regions()
    return tuple(sorted([*regions, *(f"{c}-{s}" for c, subdivisions in regions.items() for s in subdivisions)]))


def region_error(code: str) -> str | None:
    """Why ``code`` is not a holiday region of the installed ``holidays`` package (``None`` if it is).

    A region is a country code (``"GB"``) or a country and one of its subdivisions joined by a
    hyphen (``"GB-SCT"``, ``"US-NY"``, ``"DE-BY"``), spelled as the package lists them.
    """
    country, _, subdivision = code.partition("-")
    regions = _regions()
    if country not in regions:
        return f"{country!r} is not a country of the holidays package (use an ISO 3166-1 code such as 'GB')."
    if subdivision and subdivision not in regions[country]:
        known = ", ".join(sorted(regions[country])[:12]) or "none"
        return f"{subdivision!r} is not a subdivision of {country} in the holidays package (some it knows: {known})."
    if "-" in code and not subdivision:
        return "Give a country code, or a country and subdivision such as 'GB-SCT'."
    return None


@functools.lru_cache(maxsize=256)
def _holidays_of_years(region: str, first_year: int, last_year: int) -> tuple[dt.date, ...]:
    """The region's holidays of these years. Some regions' rules cover a range of years only (the
    package warns, e.g. "available only from 2001 to 2035"); other years then have none."""
    country, _, subdivision = region.partition("-")
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", UserWarning)
        calendar = holidays.country_holidays(
            country, subdiv=subdivision or None, years=range(first_year, last_year + 1)
        )
        return tuple(sorted(calendar))


def holiday_dates(region: str | None, first: dt.date, last: dt.date) -> tuple[dt.date, ...]:
    """The public holidays of ``region`` from ``first`` to ``last`` (none without a region)."""
    if not region or last < first:
        return ()
    return tuple(d for d in _holidays_of_years(region, first.year, last.year) if first <= d <= last)


def truck_input(
    dispatch_cost: float,
    capacity: float | None,
    max_stops: int | None,
    calendar: Calendar,
    first: dt.date,
    last: dt.date,
    *,
    also_closed: Iterable[dt.date] = (),
) -> TruckInput:
    """The core's truck: its limits and ``calendar``, closed on ``calendar``'s closed dates and
    holidays from ``first`` to ``last`` and on ``also_closed``."""
    closed = set(calendar.closed_between(first, last)) | set(also_closed)
    return TruckInput(
        dispatch_cost=dispatch_cost,
        capacity=capacity,
        max_stops=max_stops,
        working_days=calendar.working_days,
        trips_per_day=calendar.trips_per_day,
        closed_dates=tuple(sorted(closed)),
    )


def plan_truck(
    dispatch_cost: float, capacity: float | None, max_stops: int | None, calendar: Calendar, start: dt.date
) -> TruckInput:
    """The truck a plan starting on ``start`` is computed for (holidays over the listed horizon)."""
    return truck_input(
        dispatch_cost, capacity, max_stops, calendar, start, start + dt.timedelta(days=PLAN_HORIZON_DAYS)
    )


def window_truck(recorded: Mapping[str, Any], current: Any, first: dt.date, last: dt.date) -> TruckInput:
    """The truck a recorded plan's trips from ``first`` to ``last`` are listed with.

    The plan's own limits and weekly pattern (``working_days``, ``trips_per_day`` of its snapshot,
    so the listing repeats what was planned), closed on what closes the truck *now*: its current
    closed dates and its current region's holidays, and — for a plan that recorded a calendar —
    the weekdays it worked when planned but no longer works (the plan is then also stale). The
    core moves a delivery off a closed date or says why it cannot.
    """
    pattern, now = Calendar.recorded(recorded), Calendar.of(current)
    low, high = first - dt.timedelta(days=WINDOW_MARGIN_DAYS), last + dt.timedelta(days=WINDOW_MARGIN_DAYS)
    closed = set(now.closed_between(low, high))
    dropped = set(pattern.working_days) - set(now.working_days) if "working_days" in recorded else set()
    if dropped:
        day = low
        while day <= high:
            if day.isoweekday() in dropped:
                closed.add(day)
            day += dt.timedelta(days=1)
    return TruckInput(
        dispatch_cost=recorded["dispatch_cost"],
        capacity=recorded["capacity"],
        max_stops=recorded["max_stops"],
        working_days=pattern.working_days,
        trips_per_day=pattern.trips_per_day,
        closed_dates=tuple(sorted(closed)),
    )
