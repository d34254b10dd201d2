"""Calendar view of an active plan: dated trips, corrected quantities, projected levels, notices.

Flask-free: every function takes a session and the settings. Used by the weekly trips call of the
API and by the status page, so both always show the same numbers.

Day ``k`` of a plan's calendar is ``start_date + k`` days; trips before the start date do not
exist. Quantities are corrected from the latest reading of each site (service.planning.projection).
Stops are listed in the plan's order (site code order).
"""

from __future__ import annotations

import datetime as dt
import re
from collections.abc import Sequence
from dataclasses import dataclass
from zoneinfo import ZoneInfo

from sqlalchemy import select
from sqlalchemy.orm import Session

from service.config import Settings
from service.persistence import plans as plan_store
from service.persistence.models import Plan, Site, Truck, utcnow
from service.planning import trips_between
from service.planning.projection import TOLERANCE, CorrectedStop, PlannedTrip, Projection, Tank, day_start

WEEK = re.compile(r"^([0-9]{4})-W([0-9]{2})$")
#: Readings older than this many days before the window are not replayed (the projection would
#: only repeat the plan by then); such a site counts as having no recent reading.
LOOKBACK_DAYS = 400


class NoActivePlan(LookupError):
    """The truck has no active plan."""

    def __init__(self, truck_code: str) -> None:
        super().__init__(f"Truck {truck_code!r} has no active plan; record one and activate it.")
        self.truck_code = truck_code


@dataclass(frozen=True)
class Notice:
    kind: str  # run_out_risk | plan_stale | no_recent_reading | no_active_plan
    message: str
    site: str | None = None
    date: dt.date | None = None


@dataclass(frozen=True)
class PlannedStop:
    site: str
    site_name: str
    planned_quantity: float
    quantity: float
    projected_level_before: float | None
    notices: tuple[Notice, ...]


@dataclass(frozen=True)
class DayTrip:
    date: dt.date
    load: float
    capacity: float
    stops: tuple[PlannedStop, ...]


@dataclass(frozen=True)
class PlanSummary:
    id: int
    method: str
    dispatch_interval_days: int
    cost_per_day: float
    lower_bound_per_day: float
    gap: float
    start_date: dt.date
    stale: bool
    changed_sites: tuple[str, ...]


@dataclass(frozen=True)
class TripsView:
    truck_code: str
    plan: PlanSummary | None
    first: dt.date
    last: dt.date
    trips: tuple[DayTrip, ...]
    notices: tuple[Notice, ...]


@dataclass(frozen=True)
class SiteLevels:
    site: str
    days: tuple[tuple[dt.date, float | None], ...]
    deliveries: tuple[tuple[dt.date, float], ...]
    safe_fill_level: float
    safety_stock: float
    tank_capacity: float
    notices: tuple[Notice, ...]


def iso_week(text: str) -> tuple[dt.date, dt.date]:
    """Monday and Sunday of an ISO 8601 week ``YYYY-Www``; ``ValueError`` for a week that does not exist."""
    match = WEEK.match(text)
    if not match:
        raise ValueError(f"{text!r} is not an ISO 8601 week like 2026-W50.")
    year, week = int(match[1]), int(match[2])
    try:
        monday = dt.date.fromisocalendar(year, week, 1)
        return monday, monday + dt.timedelta(days=6)
    except (ValueError, OverflowError) as exc:
        raise ValueError(f"{year} has no ISO week {week}.") from exc


def week_of(day: dt.date) -> str:
    iso = day.isocalendar()
    return f"{iso.year}-W{iso.week:02d}"


def today(settings: Settings) -> dt.date:
    return utcnow().astimezone(ZoneInfo(settings.timezone)).date()


def current_week(settings: Settings) -> str:
    return week_of(today(settings))


def summary(session: Session, plan: Plan) -> PlanSummary:
    stale, changed = plan_store.staleness(session, plan)
    r = plan.result
    return PlanSummary(
        plan.id,
        r["method"],
        r["dispatch_interval_days"],
        r["cost_per_day"],
        r["lower_bound_per_day"],
        r["gap"],
        plan.start_date,
        stale,
        tuple(changed),
    )


def _run_out_notice(site: str, name: str, date: dt.date) -> Notice:
    return Notice(
        "run_out_risk",
        f"{name} ({site}) is projected to fall below its safety stock on {date.isoformat()}.",
        site,
        date,
    )


@dataclass
class _Replay:
    plan: Plan
    projection: Projection
    trips: list
    names: dict[str, str]
    recent: dict[str, bool]
    stale_days: int
    summary: PlanSummary


def _replay(session: Session, plan: Plan, first: dt.date, last: dt.date, settings: Settings) -> _Replay:
    zone = ZoneInfo(settings.timezone)
    result = plan_store.result_of(plan)
    truck_snapshot = plan.inputs["truck"]
    recorded = {s["code"]: s for s in plan.inputs["sites"]}
    cycles = {s.code: s.cycle_days for s in result.sites}
    current = {s.code: s for s in session.scalars(select(Site).where(Site.code.in_(list(recorded))))}
    readings = plan_store.latest_readings(session, [s.id for s in current.values()])
    horizon = day_start(first, zone) - dt.timedelta(days=LOOKBACK_DAYS)
    stale_before = day_start(today(settings), zone) - dt.timedelta(days=settings.reading_stale_days)
    tanks, recent = [], {}
    for code, s in recorded.items():
        site = current.get(code)
        reading = readings.get(site.id) if site is not None else None
        if reading is not None and reading.measured_at < horizon:
            reading = None
        recent[code] = reading is not None and reading.measured_at >= stale_before
        tanks.append(
            Tank(
                code,
                s["demand_per_day"],
                s["safe_fill"] * s["tank_capacity"],
                s["safety_stock"],
                cycles[code],
                reading.level if reading else None,
                reading.measured_at if reading else None,
            )
        )
    starts = [t.reading_at.astimezone(zone).date() for t in tanks if t.reading_at is not None]
    sim_first = max(plan.start_date, min([first, *starts]))
    sim_last = max(last, sim_first)
    capacity = truck_snapshot["capacity"]
    projection = Projection(tanks, capacity, zone)
    planned: list[PlannedTrip] = []
    if sim_last >= plan.start_date:
        for trip in trips_between(
            result,
            plan_store.truck_input(truck_snapshot),
            (sim_first - plan.start_date).days,
            (sim_last - plan.start_date).days,
        ):
            planned.append(
                PlannedTrip(
                    plan.start_date + dt.timedelta(days=trip.day), tuple((s.code, s.quantity) for s in trip.stops)
                )
            )
    corrected = projection.correct(planned)
    projection.finish(day_start(last + dt.timedelta(days=1), zone))
    names = {code: s["name"] for code, s in recorded.items()}
    return _Replay(plan, projection, corrected, names, recent, settings.reading_stale_days, summary(session, plan))


def _stop(replay: _Replay, stop: CorrectedStop) -> PlannedStop:
    name = replay.names[stop.site]
    notices = (_run_out_notice(stop.site, name, stop.run_out.date),) if stop.run_out else ()
    return PlannedStop(stop.site, name, stop.planned_quantity, stop.quantity, stop.projected_level_before, notices)


def _notices(replay: _Replay, first: dt.date, last: dt.date, only: str | None = None) -> list[Notice]:
    out: list[Notice] = []
    earliest: dict[str, dt.date] = {}
    projection = replay.projection
    for run_out in projection.run_outs:
        if run_out.date > last or (only is not None and run_out.site != only):
            continue
        if run_out.date < first:
            # Replays start at the reading, so earlier run-outs come back on every later window:
            # show one only while the site is still below its safety stock when the window opens.
            level = projection.level_before(run_out.site, day_start(first, projection.zone))
            if level is None or level >= projection.tanks[run_out.site].safety_stock - TOLERANCE:
                continue
        shown = max(run_out.date, first)
        earliest[run_out.site] = min(earliest.get(run_out.site, shown), shown)
    for site, date in sorted(earliest.items(), key=lambda item: (item[1], item[0])):
        out.append(_run_out_notice(site, replay.names[site], date))
    plan_summary = replay.summary
    if plan_summary.stale and only is None:
        which = ", ".join(plan_summary.changed_sites) or "the truck's own parameters"
        out.append(Notice("plan_stale", f"Plan {replay.plan.id} is stale: changed since it was computed: {which}."))
    for code, is_recent in sorted(replay.recent.items()):
        if not is_recent and (only is None or code == only):
            # An older reading (within LOOKBACK_DAYS) is still projected; say so instead of "planned".
            older = projection.tanks[code].reading_level is not None
            basis = "projected from an older reading" if older else "the planned ones"
            out.append(
                Notice(
                    "no_recent_reading",
                    f"{replay.names[code]} ({code}) has no reading in the last "
                    f"{replay.stale_days} days; its quantities are {basis}.",
                    code,
                )
            )
    return out


def trips_view(session: Session, truck: Truck, first: dt.date, last: dt.date, settings: Settings) -> TripsView:
    """The active plan's trips on ``first … last`` with corrected quantities and notices."""
    plan = plan_store.active_plan(session, truck)
    if plan is None:
        raise NoActivePlan(truck.code)
    replay = _replay(session, plan, first, last, settings)
    capacity = plan.inputs["truck"]["capacity"]
    trips = tuple(
        DayTrip(t.date, t.load, capacity, tuple(_stop(replay, s) for s in t.stops))
        for t in replay.trips
        if first <= t.date <= last
    )
    return TripsView(truck.code, replay.summary, first, last, trips, tuple(_notices(replay, first, last)))


def _unplanned_levels(session: Session, site: Site, dates: list[dt.date], zone: ZoneInfo) -> SiteLevels:
    """A site in no active plan: its reading falling at ``demand_per_day``, no deliveries."""
    reading = plan_store.latest_readings(session, [site.id]).get(site.id)
    safe_fill_level = site.safe_fill * site.tank_capacity
    tank = Tank(
        site.code,
        site.demand_per_day,
        safe_fill_level,
        site.safety_stock,
        1,
        reading.level if reading else None,
        reading.measured_at if reading else None,
    )
    alone = Projection([tank], 0.0, zone)
    levels = tuple((d, alone.level_before(site.code, day_start(d, zone))) for d in dates)
    notice = Notice(
        "no_active_plan", f"{site.name} ({site.code}) is in no active plan; no deliveries are planned.", site.code
    )
    return SiteLevels(site.code, levels, (), safe_fill_level, site.safety_stock, site.tank_capacity, (notice,))


def truck_levels(
    session: Session, truck: Truck, sites: Sequence[Site], first: dt.date, days: int, settings: Settings
) -> dict[str, SiteLevels]:
    """:func:`site_levels` for several sites of one truck, from a single replay of its active plan."""
    zone = ZoneInfo(settings.timezone)
    last = first + dt.timedelta(days=days - 1)
    dates = [first + dt.timedelta(days=k) for k in range(days)]
    plan = plan_store.active_plan(session, truck)
    recorded = {s["code"]: s for s in plan.inputs["sites"]} if plan is not None else {}
    replay = _replay(session, plan, first, last, settings) if any(s.code in recorded for s in sites) else None
    out = {}
    for site in sites:
        if replay is None or site.code not in recorded:
            out[site.code] = _unplanned_levels(session, site, dates, zone)
            continue
        levels = tuple((d, replay.projection.level_before(site.code, day_start(d, zone))) for d in dates)
        deliveries = tuple(
            (t.date, s.quantity)
            for t in replay.trips
            if first <= t.date <= last
            for s in t.stops
            if s.site == site.code
        )
        snapshot = recorded[site.code]
        out[site.code] = SiteLevels(
            site.code,
            levels,
            deliveries,
            snapshot["safe_fill"] * snapshot["tank_capacity"],
            snapshot["safety_stock"],
            snapshot["tank_capacity"],
            tuple(_notices(replay, first, last, only=site.code)),
        )
    return out


def site_levels(session: Session, site: Site, first: dt.date, days: int, settings: Settings) -> SiteLevels:
    """Projected level at 00:00 of each of ``days`` days from ``first``, and the planned deliveries."""
    truck = session.get(Truck, site.truck_id)
    return truck_levels(session, truck, [site], first, days, settings)[site.code]
