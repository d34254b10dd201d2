"""Calendar view of an active plan: dated trips, corrected quantities, projected levels, notices.

Flask-free: every function takes a session and the settings. Used by the weekly trips call of the
API and by the status page, so both always show the same numbers.

Day ``k`` of a plan's calendar is ``start_date + k`` days; trips before the start date do not
exist. Quantities are corrected from the latest reading of each site (service.planning.projection),
each to last until that site's next listed delivery (the calendar's gaps differ: a Friday delivery
on Monday to Friday lasts until Monday), looking past the window for it.
Stops are listed in the plan's order (site code order); each trip also carries its ``route``
(``service.routes``): the stops in driving order from and back to the truck's depot with the leg
distances, or why it is not routed (no depot, or a stop or the depot without coordinates).

Current limits always win over the plan's snapshot: the projection gets each site's current
demand, safe-fill level and safety stock and the truck's current capacity and ``max_stops``; a
site that is now inactive, deleted or on another truck gets no stop. A stop whose quantity a
changed limit cut carries a ``limits_changed`` notice naming the field and both values; a stop
dropped for ``max_stops`` and a site taken out are reported the same way at the top level.

The calendar: trips are listed by the core's ``trips_between`` on the plan's own weekly pattern
(its recorded ``working_days`` and ``trips_per_day``), closed on what closes the truck now
(``service.working_calendar.window_truck``: its closed dates, its region's holidays, weekdays it
no longer works). A delivery on a closed date moves to an earlier working day with room; where
none has room the core's warning becomes a ``calendar`` notice naming the date and the sites.
Trips are numbered within their date (``trip``, from 1).
"""

from __future__ import annotations

import bisect
import dataclasses
import datetime as dt
import math
import re
from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any
from zoneinfo import ZoneInfo

from sqlalchemy.orm import Session

from service import consumption, routes, trip_compartments, weather, working_calendar
from service.config import Settings
from service.persistence import deliveries as delivery_store
from service.persistence import fleet as fleet_store
from service.persistence import plans as plan_store
from service.persistence import repository as repo
from service.persistence import tanks
from service.persistence.models import Plan, Site, Truck, utcnow
from service.planning import trips_between
from service.planning.consumption import DEFAULT_WINDOW_DAYS
from service.planning.projection import (
    TOLERANCE,
    CorrectedStop,
    CorrectedTrip,
    PlannedTrip,
    Projection,
    Tank,
    day_start,
)

WEEK = re.compile(r"^([0-9]{4})-W([0-9]{2})$")
ISO_DATE = re.compile(r"(?<![0-9])([0-9]{4}-[0-9]{2}-[0-9]{2})(?![0-9])")
#: Readings older than this many days before the window are not replayed (the projection would
#: only repeat the plan by then); such a site counts as having no recent reading.
LOOKBACK_DAYS = 400
#: Days past a site's longest planned gap that the listing looks beyond a window for each site's
#: next delivery (a run of closed dates moves deliveries earlier and so lengthens a gap).
NEXT_GAP_MARGIN_DAYS = 31


class NoActivePlan(LookupError):
    """The truck has no active plan."""

    def __init__(self, truck_code: str) -> None:
        super().__init__(f"Truck {truck_code!r} has no active plan; record one and activate it.")
        self.truck_code = truck_code


@dataclass(frozen=True)
class Notice:
    # run_out_risk | empty_risk | consumption_changed | limits_changed | plan_stale | no_recent_reading |
    # calendar | no_active_plan
    kind: str
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
    delivered_quantity: float | None = None
    delivered_at: dt.datetime | None = None
    #: ``(compartment number from 1, quantity)`` pieces of the load; None when the truck has none.
    compartments: tuple[tuple[int, float], ...] | None = None


@dataclass(frozen=True)
class DayTrip:
    date: dt.date
    trip: int  # 1-based within its date
    load: float
    capacity: float
    stops: tuple[PlannedStop, ...]
    #: The stops in driving order from and back to the truck's depot, or why not (``service.routes``).
    route: routes.TripRoute = routes.TripRoute(None, (), (), None, False, routes.NO_DEPOT)


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
    status: str  # the joint result's: optimal | feasible | time_limit


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


def summary(session: Session, plan: Plan, drift: plan_store.Drift | None = None) -> PlanSummary:
    drift = drift or plan_store.drift(session, plan)
    r = plan_store.stored_result(plan)
    return PlanSummary(
        plan.id,
        r["method"],
        r["dispatch_interval_days"],
        r["cost_per_day"],
        r["lower_bound_per_day"],
        r["gap"],
        plan.start_date,
        drift.stale,
        tuple(drift.changed_sites),
        r["status"],
    )


def _run_out_notice(site: str, name: str, date: dt.date) -> Notice:
    return Notice(
        "run_out_risk",
        f"{name} ({site}) is projected to fall below its safety stock on {date.isoformat()}.",
        site,
        date,
    )


def _empty_notice(site: str, name: str, date: dt.date) -> Notice:
    return Notice("empty_risk", f"{name} ({site}) is projected to run empty on {date.isoformat()}.", site, date)


def _consumption_notice(site: Site, drift: Any, unit: str) -> Notice:
    """``consumption_changed``: the drift test says the stored demand is wrong (docs/planning.md §11.4)."""
    return Notice(
        "consumption_changed",
        f"{site.name} ({site.code}) uses {amount(drift.rate_per_day)} {unit}/day "
        f"({amount(drift.rate_low)}–{amount(drift.rate_high)} at {1 - drift.alpha:.0%}), not the stored "
        f"{amount(site.demand_per_day)}: the readings and deliveries show it at a false-alarm rate of "
        f"{drift.alpha:g}. Check the tank, then apply the estimate (POST .../apply-estimate) and re-plan.",
        site.code,
    )


def amount(value: float | None) -> str:
    """A number for a message: at most three decimals, no trailing zeros ("none" for no limit)."""
    if value is None:
        return "none"
    text = f"{value:.3f}".rstrip("0").rstrip(".")
    return "0" if text == "-0" else text


#: The site fields that set the room below the safe fill (safety stock: without a projected level).
ROOM_FIELDS = ("tank_capacity", "safe_fill", "safety_stock")
#: Fields measured in the service's quantity unit (the others are counts, fractions or money).
QUANTITY_FIELDS = ("demand_per_day", "tank_capacity", "safety_stock", "capacity")


def _value(value: object) -> str:
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, int | float):
        return amount(value)
    return "none" if value is None else repr(value)


def _changed(field: str, recorded: object, current: object, unit: str) -> str:
    """``tank_capacity changed from 8000 to 3000 L`` (the unit only for quantity fields)."""
    suffix = f" {unit}" if field in QUANTITY_FIELDS else ""
    return f"{field} changed from {_value(recorded)} to {_value(current)}{suffix}"


def _describe(change: plan_store.Change, unit: str) -> str:
    """One change of the plan's inputs, for the staleness notice."""
    if change.field == "added":
        return "added to the truck"
    if change.field == "deleted":
        return "deleted"
    if change.field == "truck":
        return f"moved to truck {change.current}"
    if change.field == "active":
        return "no longer active"
    if change.field == "edited":
        return "edited (fields the plan does not use)"
    return _changed(change.field, change.recorded, change.current, unit)


def _stale_notice(plan: Plan, changes: Sequence[plan_store.Change], unit: str) -> Notice:
    """``plan_stale`` naming each changed field of each site and of the truck."""
    parts: dict[str, list[str]] = {}
    for change in changes:
        who = f"truck {change.code}" if change.subject == "truck" else change.code
        parts.setdefault(who, []).append(_describe(change, unit))
    which = "; ".join(f"{who}: {', '.join(texts)}" for who, texts in parts.items())
    return Notice("plan_stale", f"Plan {plan.id} is stale (re-plan to use the current parameters): {which}.")


@dataclass
class _Replay:
    plan: Plan
    truck: Truck
    projection: Projection
    trips: list[CorrectedTrip]
    names: dict[str, str]
    recent: dict[str, bool]
    stale_days: int
    summary: PlanSummary
    drift: plan_store.Drift
    recorded: dict[str, dict]
    #: Sites of the plan that get no stop (inactive, deleted, moved), with their planned dates.
    removed: dict[str, list[dt.date]]
    unit: str
    #: Sites whose tank_capacity, safe_fill or safety_stock changed, and whether the truck shrank:
    #: only their stops can carry a stop-level limits_changed.
    room_changed: frozenset[str]
    capacity_shrank: bool
    #: The core's warnings about closed dates no move could keep within the limits.
    calendar_warnings: tuple[str, ...]
    #: The core's warnings about dates whose compartment split needs more than trips_per_day trips.
    compartment_warnings: tuple[str, ...]
    #: The plan's sites that get stops (active, on the plan's truck), by code.
    served: dict[str, Site]
    #: The sites whose stored demand the drift test rejects (``consumption_changed``), by code.
    drifted: dict[str, Notice]


def _served(plan: Plan, drift: plan_store.Drift) -> dict[str, Site]:
    """The plan's sites that still exist, are active and are on the plan's truck."""
    recorded = {s["code"] for s in plan.inputs["sites"]}
    return {
        code: site
        for code, site in drift.sites.items()
        if code in recorded and site.active and site.truck_id == plan.truck_id
    }


def _delivery_days(trips: Sequence[Any]) -> dict[str, list[int]]:
    """Each site's delivery days (days since the plan's start), in order, from listed trips."""
    out: dict[str, list[int]] = {}
    for trip in sorted(trips, key=lambda t: t.day):
        for stop in trip.stops:
            days = out.setdefault(stop.code, [])
            if not days or days[-1] != trip.day:
                days.append(trip.day)
    return out


def _next_days(days: dict[str, list[int]], day: int, codes: Sequence[str]) -> dict[str, int]:
    """Days from ``day`` to each site's next listed delivery (rule 2's ``g``); unknown ones left out."""
    out = {}
    for code in codes:
        listed = days.get(code, [])
        at = bisect.bisect_right(listed, day)
        if at < len(listed):
            out[code] = listed[at] - day
    return out


def with_weather_demand(
    session: Session, tank: Tank, site: Site, first: dt.date, last: dt.date, settings: Settings
) -> Tank:
    """``tank`` with the expected demand of each day for a site with a ``weather_region``.

    Days from the reading's (else ``first``) to ``last`` plus the longest look-ahead of a gap:
    ``b + v · DD`` with the site's degree-day fit (``service.weather``) and the day's observed
    degree days, a posted forecast, else the mean of past years; other days and sites without a
    usable fit keep ``demand_per_day``.
    """
    if site.weather_region is None:
        return tank
    zone = ZoneInfo(settings.timezone)
    start = min(first, tank.reading_at.astimezone(zone).date()) if tank.reading_at else first
    end = last + dt.timedelta(days=tank.cycle_days + NEXT_GAP_MARGIN_DAYS)
    days = [start + dt.timedelta(days=k) for k in range((end - start).days + 1)]
    daily = weather.expected_daily_demand(session, site, days, zone, utcnow(), DEFAULT_WINDOW_DAYS)
    return dataclasses.replace(tank, daily_demand=daily) if daily else tank


def _replay(session: Session, plan: Plan, truck: Truck, first: dt.date, last: dt.date, settings: Settings) -> _Replay:
    zone = ZoneInfo(settings.timezone)
    result = plan_store.result_of(plan)
    drift = plan_store.drift(session, plan)
    recorded = {s["code"]: s for s in plan.inputs["sites"]}
    cycles = {s.code: s.cycle_days for s in result.sites}
    served = _served(plan, drift)
    readings = plan_store.latest_readings(session, [s.id for s in served.values()])
    horizon = day_start(first, zone) - dt.timedelta(days=LOOKBACK_DAYS)
    _readings, recorded_deliveries = delivery_store.history(session, [s.id for s in served.values()], horizon)
    learned = consumption.for_sites(session, list(served.values()), consumption.DEFAULT_DAYS)
    stale_before = day_start(today(settings), zone) - dt.timedelta(days=settings.reading_stale_days)
    tanks, recent = [], {}
    for code, site in served.items():
        reading = readings.get(site.id)
        if reading is not None and reading.measured_at < horizon:
            reading = None
        recent[code] = reading is not None and reading.measured_at >= stale_before
        tank = Tank(
            code,
            site.demand_per_day,
            site.safe_fill * site.tank_capacity,
            site.safety_stock,
            cycles[code],
            reading.level if reading else None,
            reading.measured_at if reading else None,
            tuple((d.delivered_at, d.quantity) for d in recorded_deliveries[site.id]),
            consumption.noise_cover(site, learned[site.id][0]),
        )
        tanks.append(with_weather_demand(session, tank, site, first, last, settings))
    starts = [t.reading_at.astimezone(zone).date() for t in tanks if t.reading_at is not None]
    sim_first = max(plan.start_date, min([first, *starts]))
    sim_last = max(last, sim_first)
    projection = Projection(tanks, truck.capacity, zone, truck.max_stops, truck.shift_start)
    planned: list[PlannedTrip] = []
    removed: dict[str, list[dt.date]] = {}
    warnings: tuple[str, ...] = ()
    compartment_warnings: tuple[str, ...] = ()
    if sim_last >= plan.start_date:
        window_truck = working_calendar.window_truck(plan.inputs["truck"], truck, sim_first, sim_last)
        first_day, last_day = (sim_first - plan.start_date).days, (sim_last - plan.start_date).days
        window = trips_between(result, window_truck, first_day, last_day)
        warnings = window.warnings
        # The deliveries after the window, only to know each site's next one (their warnings are
        # other windows' business).
        ahead = max((s.longest_gap_days for s in result.sites), default=0) + NEXT_GAP_MARGIN_DAYS
        after = trips_between(result, window_truck, last_day + 1, last_day + ahead).trips
        days = _delivery_days([*window.trips, *after])
        kept = []
        for trip in window.trips:
            date = plan.start_date + dt.timedelta(days=trip.day)
            for stop in trip.stops:
                if stop.code not in served:
                    removed.setdefault(stop.code, []).append(date)
            on_truck = tuple(s for s in trip.stops if s.code in served)
            if on_truck:
                kept.append(dataclasses.replace(trip, stops=on_truck))
        loaded = trip_compartments.listed(kept, truck, served, window_truck.trips_per_day)
        compartment_warnings = loaded.warnings
        for trip, spaces in zip(loaded.trips, loaded.spaces, strict=True):
            date = plan.start_date + dt.timedelta(days=trip.day)
            stops = tuple((s.code, s.quantity) for s in trip.stops)
            planned.append(PlannedTrip(date, stops, _next_days(days, trip.day, [c for c, _ in stops]), spaces))
    corrected = projection.correct(planned)
    projection.finish(day_start(last + dt.timedelta(days=1), zone))
    names = {code: (drift.sites[code].name if code in drift.sites else s["name"]) for code, s in recorded.items()}
    return _Replay(
        plan,
        truck,
        projection,
        corrected,
        names,
        recent,
        settings.reading_stale_days,
        summary(session, plan, drift),
        drift,
        recorded,
        removed,
        settings.quantity_unit,
        frozenset(c.code for c in drift.changes if c.subject == "site" and c.field in ROOM_FIELDS),
        truck.capacity < plan.inputs["truck"]["capacity"],
        warnings,
        compartment_warnings,
        served,
        {
            code: _consumption_notice(site, learned[site.id][1], settings.quantity_unit)
            for code, site in served.items()
            if learned[site.id][1].drifted
        },
    )


def _limit_notices_of(replay: _Replay, stop: CorrectedStop, date: dt.date) -> list[Notice]:
    """``limits_changed`` for each limit that changed since the plan and cut this stop's quantity.

    The room below the safe fill first (from ``min(wanted, recorded room)`` to ``min(wanted, room)``),
    then the truck's free space (from there to the quantity) when the truck's capacity shrank.
    """
    unit = replay.unit
    out: list[Notice] = []
    if not replay.capacity_shrank and stop.site not in replay.room_changed:
        return out
    snap, site = replay.recorded[stop.site], replay.drift.sites[stop.site]
    # Without a projected level the room is measured from the safety stock, so it counts too.
    base = snap["safety_stock"] if stop.projected_level_before is None else stop.projected_level_before
    fields = ROOM_FIELDS if stop.projected_level_before is None else ROOM_FIELDS[:2]
    changed = [_changed(f, snap[f], getattr(site, f), unit) for f in fields if snap[f] != getattr(site, f)]
    allowed = max(0.0, min(stop.wanted, snap["safe_fill"] * snap["tank_capacity"] - base))
    within_room = max(0.0, min(stop.wanted, stop.room))
    if changed and within_room < allowed - TOLERANCE:
        out.append(
            Notice(
                "limits_changed",
                f"{replay.names[stop.site]} ({stop.site}): {'; '.join(changed)}; quantity cut from "
                f"{amount(allowed)} to {amount(within_room)} {unit} to stay below the safe fill.",
                stop.site,
                date,
            )
        )
    recorded_capacity = replay.plan.inputs["truck"]["capacity"]
    if replay.capacity_shrank and stop.quantity < within_room - TOLERANCE:
        out.append(
            Notice(
                "limits_changed",
                f"truck {replay.truck.code}: {_changed('capacity', recorded_capacity, replay.truck.capacity, unit)}; "
                f"quantity cut from {amount(within_room)} to {amount(stop.quantity)} {unit} so the load fits "
                "the truck.",
                stop.site,
                date,
            )
        )
    return out


def _stop(
    replay: _Replay, stop: CorrectedStop, date: dt.date, compartments: tuple[tuple[int, float], ...] | None = None
) -> PlannedStop:
    name = replay.names[stop.site]
    notices = [_run_out_notice(stop.site, name, stop.run_out.date)] if stop.run_out else []
    if stop.empty:
        notices.append(_empty_notice(stop.site, name, stop.empty.date))
    if stop.delivered_quantity is None:
        notices.extend(_limit_notices_of(replay, stop, date))
    return PlannedStop(
        stop.site,
        name,
        stop.planned_quantity,
        stop.quantity,
        stop.projected_level_before,
        tuple(notices),
        stop.delivered_quantity,
        stop.delivered_at,
        compartments,
    )


def _removed_reason(replay: _Replay, code: str) -> str:
    site = replay.drift.sites.get(code)
    if site is None:
        return "the site was deleted"
    if site.truck_id != replay.plan.truck_id:
        moved = next(c for c in replay.drift.changes if c.code == code and c.field == "truck")
        return f"truck changed from {moved.recorded} to {moved.current}"
    return "active changed from true to false"


def _limit_notices(replay: _Replay, first: dt.date, last: dt.date, only: str | None) -> list[Notice]:
    """Stops the current limits take away: sites taken out, and stops beyond ``max_stops``."""
    out = []
    for code, dates in sorted(replay.removed.items()):
        shown = [d for d in dates if first <= d <= last]
        if not shown or (only is not None and code != only):
            continue
        if len(shown) == 1:
            which = f"its planned delivery on {shown[0].isoformat()} gets"
        else:
            which = f"its {len(shown)} planned deliveries from {shown[0].isoformat()} to {shown[-1].isoformat()} get"
        out.append(
            Notice(
                "limits_changed",
                f"{replay.names[code]} ({code}): {_removed_reason(replay, code)}; {which} no stop.",
                code,
                shown[0],
            )
        )
    recorded_stops = replay.plan.inputs["truck"]["max_stops"]
    for trip in replay.trips:
        if not first <= trip.date <= last:
            continue
        for code in trip.dropped:
            if only is not None and code != only:
                continue
            out.append(
                Notice(
                    "limits_changed",
                    f"truck {replay.truck.code}: {_changed('max_stops', recorded_stops, replay.truck.max_stops, '')}; "
                    f"{replay.names[code]} ({code}) is dropped from the trip of {trip.date.isoformat()} "
                    "(the sites with the fewest days of stock keep their stops); "
                    "deliver it on another trip or re-plan.",
                    code,
                    trip.date,
                )
            )
    return out


def _named_sites(message: str, codes: Sequence[str]) -> list[str]:
    """The site codes a core warning names (the core quotes codes in backticks: `A1`)."""
    quoted = set(re.findall(r"`([^`]+)`", message))
    return [code for code in codes if code in quoted]


def _calendar_notices(
    replay: _Replay, first: dt.date, last: dt.date, only: str | None, kind: str = "calendar"
) -> list[Notice]:
    """``calendar`` notices: the core's warnings about closed dates in the window (by the first
    date each names; one that names none is shown in every window); with ``kind="compartments"``
    its warnings about dates the compartments split into more than ``trips_per_day`` trips."""
    out = []
    messages = replay.calendar_warnings if kind == "calendar" else replay.compartment_warnings
    for message in messages:
        match = ISO_DATE.search(message)
        date = dt.date.fromisoformat(match[1]) if match else None
        if date is not None and not first <= date <= last:
            continue
        sites = _named_sites(message, sorted(replay.recorded))
        if only is not None and only not in sites:
            continue
        site = only if only is not None else (sites[0] if len(sites) == 1 else None)
        out.append(Notice(kind, f"Truck {replay.truck.code}: {message}", site, date))
    return out


def _earliest(
    replay: _Replay, crossings: Sequence[Any], first: dt.date, last: dt.date, only: str | None, floor
) -> dict:
    """Each site's first crossing shown in the window (``floor(site)``: the level it crosses)."""
    earliest: dict[str, dt.date] = {}
    projection = replay.projection
    for run_out in crossings:
        if run_out.date > last or (only is not None and run_out.site != only):
            continue
        if run_out.date < first:
            # Replays start at the reading, so earlier crossings come back on every later window:
            # show one only while the site is still below the level when the window opens.
            level = projection.level_before(run_out.site, day_start(first, projection.zone))
            if level is None or level >= floor(run_out.site) - TOLERANCE:
                continue
        shown = max(run_out.date, first)
        earliest[run_out.site] = min(earliest.get(run_out.site, shown), shown)
    return earliest


def _notices(replay: _Replay, first: dt.date, last: dt.date, only: str | None = None) -> list[Notice]:
    out: list[Notice] = []
    projection = replay.projection
    below = _earliest(replay, projection.run_outs, first, last, only, lambda s: projection.tanks[s].safety_stock)
    for site, date in sorted(below.items(), key=lambda item: (item[1], item[0])):
        out.append(_run_out_notice(site, replay.names[site], date))
    empty = _earliest(replay, projection.empties, first, last, only, lambda s: TOLERANCE)
    for site, date in sorted(empty.items(), key=lambda item: (item[1], item[0])):
        out.append(_empty_notice(site, replay.names[site], date))
    out.extend(n for code, n in sorted(replay.drifted.items()) if only is None or code == only)
    out.extend(_limit_notices(replay, first, last, only))
    out.extend(_calendar_notices(replay, first, last, only))
    out.extend(_calendar_notices(replay, first, last, only, "compartments"))
    if replay.summary.stale and only is None:
        out.append(_stale_notice(replay.plan, replay.drift.changes, replay.unit))
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


def _points(
    session: Session, truck: Truck, sites: dict[str, Site]
) -> tuple[routes.Point | None, dict[str, routes.Point | None]]:
    """The truck's depot point (``None`` without a depot) and each site's point, by site code."""
    depot_point = None
    if truck.depot is not None:
        depot = fleet_store.depot_by_code(session, truck.depot)
        depot_point = routes.point_of(depot.latitude, depot.longitude)
    return depot_point, {code: routes.point_of(site.latitude, site.longitude) for code, site in sites.items()}


def trips_view(session: Session, truck: Truck, first: dt.date, last: dt.date, settings: Settings) -> TripsView:
    """The active plan's trips on ``first … last`` with corrected quantities and notices."""
    plan = plan_store.active_plan(session, truck)
    if plan is None:
        raise NoActivePlan(truck.code)
    replay = _replay(session, plan, truck, first, last, settings)
    depot_point, points = _points(session, truck, replay.drift.sites)
    trips: list[DayTrip] = []
    index: dict[dt.date, int] = {}
    for t in replay.trips:
        if first <= t.date <= last:
            index[t.date] = index.get(t.date, 0) + 1
            loads = trip_compartments.pieces(t, truck, replay.served)
            stops = tuple(_stop(replay, s, t.date, c) for s, c in zip(t.stops, loads, strict=True))
            route = routes.trip_route(truck.depot, depot_point, [(s.site, points.get(s.site)) for s in stops])
            trips.append(DayTrip(t.date, index[t.date], t.load, truck.capacity, stops, route))
    return TripsView(truck.code, replay.summary, first, last, tuple(trips), tuple(_notices(replay, first, last)))


def _alone(
    session: Session,
    site: Site,
    reading: Any,
    delivered: Sequence[Any],
    first: dt.date,
    last: dt.date,
    settings: Settings,
) -> Tank:
    """A site's tank on its own, off any plan: its latest reading, the deliveries recorded since
    (replayed in time order), a weather site's expected daily demand on ``first … last``."""
    tank = Tank(
        site.code,
        site.demand_per_day,
        site.safe_fill * site.tank_capacity,
        site.safety_stock,
        1,
        reading.level if reading else None,
        reading.measured_at if reading else None,
        tuple((d.delivered_at, d.quantity) for d in delivered),
    )
    return with_weather_demand(session, tank, site, first, last, settings) if reading else tank


def _unplanned_levels(
    session: Session, site: Site, dates: list[dt.date], settings: Settings, notice: Notice | None = None
) -> SiteLevels:
    """A site the active plan does not serve: its reading falling at its demand (a weather site's
    expected daily demand), the deliveries recorded since replayed, nothing planned."""
    zone = ZoneInfo(settings.timezone)
    reading = plan_store.latest_readings(session, [site.id]).get(site.id)
    delivered = delivery_store.since_latest_readings(session, [site.id])[site.id]
    tank = _alone(session, site, reading, delivered, dates[0], dates[-1], settings)
    alone = Projection([tank], 0.0, zone)
    alone.finish(day_start(dates[-1], zone))
    levels = tuple((d, alone.level_before(site.code, day_start(d, zone))) for d in dates)
    notice = notice or Notice(
        "no_active_plan", f"{site.name} ({site.code}) is in no active plan; no deliveries are planned.", site.code
    )
    return SiteLevels(site.code, levels, (), tank.safe_fill_level, site.safety_stock, site.tank_capacity, (notice,))


def truck_levels(
    session: Session, truck: Truck, sites: Sequence[Site], first: dt.date, days: int, settings: Settings
) -> dict[str, SiteLevels]:
    """:func:`site_levels` for several sites of one truck, from a single replay of its active plan."""
    zone = ZoneInfo(settings.timezone)
    last = first + dt.timedelta(days=days - 1)
    dates = [first + dt.timedelta(days=k) for k in range(days)]
    plan = plan_store.active_plan(session, truck)
    recorded = {s["code"]: s for s in plan.inputs["sites"]} if plan is not None else {}
    listed = any(s.code in recorded for s in sites)  # none without a plan
    replay = _replay(session, plan, truck, first, last, settings) if plan is not None and listed else None
    out = {}
    for site in sites:
        if replay is None or site.code not in recorded:
            out[site.code] = _unplanned_levels(session, site, dates, settings)
            continue
        if site.code not in replay.projection.tanks:
            out[site.code] = _unplanned_levels(
                session,
                site,
                dates,
                settings,
                Notice(
                    "limits_changed",
                    f"{site.name} ({site.code}): {_removed_reason(replay, site.code)}; the active plan "
                    f"{replay.plan.id} still lists it, but it gets no stop.",
                    site.code,
                ),
            )
            continue
        levels = tuple((d, replay.projection.level_before(site.code, day_start(d, zone))) for d in dates)
        deliveries = tuple(
            (t.date, s.quantity)
            for t in replay.trips
            if first <= t.date <= last
            for s in t.stops
            if s.site == site.code
        )
        stop_notices = [
            n
            for t in replay.trips
            if first <= t.date <= last
            for s in t.stops
            if s.site == site.code
            for n in _stop(replay, s, t.date).notices
            if n.kind == "limits_changed"
        ]
        out[site.code] = SiteLevels(
            site.code,
            levels,
            deliveries,
            site.safe_fill * site.tank_capacity,
            site.safety_stock,
            site.tank_capacity,
            tuple(_notices(replay, first, last, only=site.code) + stop_notices),
        )
    return out


def site_levels(session: Session, site: Site, first: dt.date, days: int, settings: Settings) -> SiteLevels:
    """Projected level at 00:00 of each of ``days`` days from ``first``, and the planned deliveries."""
    truck = repo.truck_by_id(session, site.truck_id)
    return truck_levels(session, truck, [site], first, days, settings)[site.code]


# ----------------------------------------------------------------------------------------------------
# The dispatcher's morning: every tank's stock now (lowest first) and one day's load sheet per truck.
# A tank's stock now is its latest reading falling at its demand, plus the deliveries recorded since.

#: How many days ahead the lowest-first view looks for each site's next planned delivery.
NEXT_DELIVERY_DAYS = 28


def level_state(level: float | None, safety_stock: float) -> str | None:
    """``empty`` (projected level ≤ 0), ``below safety stock`` (< the safety stock), else ``ok``;
    ``None`` without a level."""
    if level is None:
        return None
    if level <= TOLERANCE:
        return "empty"
    if level < safety_stock - TOLERANCE:
        return "below safety stock"
    return "ok"


@dataclass(frozen=True)
class TankStock:
    """One active site's stock at ``now``: its latest reading falling at ``demand_per_day`` (a
    weather site's expected demand of each day), the deliveries recorded since added at their
    times (:class:`Projection` of the tank alone, never below 0); the days that stock lasts above
    the safety stock, ``(level − safety_stock) / d``, negative below it, and to empty, ``level / d``,
    with ``d`` today's expected demand; and the next planned delivery from today on (date, quantity)."""

    site: str
    site_name: str
    truck: str
    reading_level: float | None
    reading_at: dt.datetime | None
    level: float | None
    safety_stock: float
    days_above_safety: float | None
    days_to_empty: float | None
    next_delivery: tuple[dt.date, float] | None

    @property
    def state(self) -> str | None:
        return level_state(self.level, self.safety_stock)


def next_deliveries(
    session: Session, trucks: Sequence[Truck], first: dt.date, days: int, settings: Settings
) -> dict[str, tuple[dt.date, float]]:
    """Each site's first planned stop with something to deliver on ``first … first + days − 1``
    (date, corrected quantity; a stop whose corrected quantity is 0 is not a delivery)."""
    out: dict[str, tuple[dt.date, float]] = {}
    for truck in trucks:
        try:
            view = trips_view(session, truck, first, first + dt.timedelta(days=days - 1), settings)
        except NoActivePlan:
            continue
        for trip in view.trips:
            for stop in trip.stops:
                if stop.quantity > TOLERANCE:
                    out.setdefault(stop.site, (trip.date, stop.quantity))
    return out


def tank_stock(site: Site, truck_code: str, tank: Tank, now: dt.datetime, zone: ZoneInfo) -> TankStock:
    """:class:`TankStock` of one site from its tank alone (:func:`_alone`; without its next delivery)."""
    level = None
    if tank.reading_at is not None:
        alone = Projection([tank], 0.0, zone)
        when = max(now, tank.reading_at)
        alone.finish(when)
        level = alone.level_before(site.code, when)
    days_above = days_empty = None
    if level is not None:
        demand = tank.daily_demand.get(now.astimezone(zone).date(), site.demand_per_day)
        days_above = (level - site.safety_stock) / demand if demand > 0 else math.inf
        days_empty = level / demand if demand > 0 else math.inf
    return TankStock(
        site.code,
        site.name,
        truck_code,
        tank.reading_level,
        tank.reading_at,
        level,
        site.safety_stock,
        days_above,
        days_empty,
        None,
    )


def stocks(session: Session, now: dt.datetime, settings: Settings) -> list[TankStock]:
    """Every active site's :class:`TankStock` at ``now`` (no next delivery), in truck and site code order."""
    pairs = tanks.active_sites(session)
    ids = [site.id for site, _ in pairs]
    readings = plan_store.latest_readings(session, ids)
    delivered = delivery_store.since_latest_readings(session, ids)
    zone = ZoneInfo(settings.timezone)
    day = now.astimezone(zone).date()
    out = []
    for site, truck in pairs:
        tank = _alone(session, site, readings.get(site.id), delivered[site.id], day, day, settings)
        out.append(tank_stock(site, truck.code, tank, now, zone))
    return out


def lowest_first(items: Sequence[TankStock]) -> list[TankStock]:
    """Fewest days above the safety stock first (then fewest to empty, then code); tanks without a
    reading last, in code order."""

    def key(stock: TankStock) -> tuple[Any, ...]:
        if stock.level is None:
            return (1, 0.0, 0.0, stock.site)
        return (0, stock.days_above_safety, stock.days_to_empty, stock.site)

    return sorted(items, key=key)


@dataclass(frozen=True)
class SheetStop:
    """A stop on a load sheet: the planned stop, where the site is, and the room in its tank
    before the delivery (``safe_fill × tank_capacity − projected_level_before``; ``None`` without a
    projected level)."""

    stop: PlannedStop
    latitude: float | None
    longitude: float | None
    safe_fill_level: float
    room: float | None


@dataclass(frozen=True)
class SheetTrip:
    date: dt.date
    trip: int  # 1-based within its date (a truck may run several trips a day)
    load: float
    capacity: float
    #: In driving order when ``route`` is routed, else in the plan's site order.
    stops: tuple[SheetStop, ...]
    route: routes.TripRoute


@dataclass(frozen=True)
class TruckSheet:
    """One truck's trips on one day, and the notices of its plan that concern them."""

    truck_code: str
    truck_name: str
    plan_id: int | None
    trips: tuple[SheetTrip, ...]
    notices: tuple[Notice, ...]


def load_sheet(session: Session, truck: Truck, sites: Sequence[Site], day: dt.date, settings: Settings) -> TruckSheet:
    """The truck's trips on ``day`` (:func:`trips_view`) with each stop's coordinates and room, the
    stops in driving order when the trip is routed; ``NoActivePlan`` without an active plan."""
    view = trips_view(session, truck, day, day, settings)
    by_code = {site.code: site for site in sites}
    trips = []
    for trip in view.trips:
        stops = []
        for stop in trip.stops:
            site = by_code[stop.site]
            safe_fill_level = site.safe_fill * site.tank_capacity
            room = None if stop.projected_level_before is None else safe_fill_level - stop.projected_level_before
            stops.append(SheetStop(stop, site.latitude, site.longitude, safe_fill_level, room))
        if trip.route.routed:
            stops.sort(key=lambda s: trip.route.sequence(s.stop.site) or 0)
        trips.append(SheetTrip(trip.date, trip.trip, trip.load, trip.capacity, tuple(stops), trip.route))
    codes = {stop.site for trip in view.trips for stop in trip.stops}
    notices = tuple(n for n in view.notices if n.site is None or n.site in codes)
    plan_id = view.plan.id if view.plan is not None else None
    return TruckSheet(truck.code, truck.name, plan_id, tuple(trips), notices)
