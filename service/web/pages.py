"""The pages: every truck's week (warnings, plan line, trips, small charts) and one site's chart."""

from __future__ import annotations

import datetime as dt
import re
from typing import Any
from zoneinfo import ZoneInfo

from flask import render_template, request
from markupsafe import Markup
from sqlalchemy.exc import DBAPIError

from service import bounded, consumption, schedule, working_calendar
from service.api.fields import FIRST_DATE, LAST_DATE, WEEK_RANGE
from service.auth import SESSION, allow
from service.cache import LruCache
from service.errors import Problem
from service.persistence import plans as plan_store
from service.persistence import repository as repo
from service.persistence import tanks
from service.persistence.models import Truck, utcnow
from service.planning.projection import TOLERANCE
from service.request_db import get_session, read_engine
from service.web import bp, error_page, formatting, log, network_plans, settings
from service.web.access import page
from service.web.chart import chart_id, level_svg
from service.web.route_map import route_svg

CHART_DAYS = 28
ASCII_WEEK = re.compile(r"[0-9]{4}-W[0-9]{2}")
#: Per-process cache of the overview's week (HTML without the page around it, which names the
#: person), keyed like the trips cache by the week, the day and the change stamp: a reload or a
#: second person costs a lookup instead of a replay of every truck (seconds for 300 sites). Two
#: parts (heading and warnings; the trucks), so the latest readings, whose age moves with the
#: clock, are rendered fresh between them.
WEEK_CACHE: LruCache[tuple[Markup, Markup]] = LruCache(8)

#: Warning kinds: a word for the badge and an order (most urgent first).
NOTICE_KINDS = {
    "run_out_risk": ("Run-out risk", 0),
    "empty_risk": ("Empty risk", 0),
    "consumption_changed": ("Consumption changed", 1),
    "limits_changed": ("Limits changed", 1),
    "calendar": ("Closed date", 1),
    "compartments": ("Compartments", 1),
    "no_active_plan": ("No active plan", 2),
    "plan_stale": ("Plan out of date", 3),
    "no_recent_reading": ("No recent reading", 4),
    "truck_not_shown": ("Not shown", 0),
}
#: What to do, said once after a warning whose message does not already say it (no "re-plan" in it).
ACTIONS = {
    "run_out_risk": "Check the tank's gauge; bring its delivery forward or re-plan.",
    "empty_risk": "Check the tank's gauge; bring its delivery forward or re-plan.",
    "limits_changed": "Re-plan to use the current limits.",
    "no_active_plan": "Record a plan and activate it.",
    "no_recent_reading": "Record a reading.",
}


@bp.get("")
@allow(SESSION)
@page
def overview() -> Any:
    """Every truck: warnings first, the active plan in one line, the week's trips, small level charts."""
    config, db = settings(), get_session()
    week = request.args.get("week") or schedule.current_week(config)
    try:
        if not ASCII_WEEK.fullmatch(week):
            raise ValueError(week)
        monday, sunday = schedule.iso_week(week)
    except (ValueError, TypeError, LookupError, OverflowError) as exc:
        raise Problem(400, "The week must be an ISO week such as 2026-W49.", title="Unknown week") from exc
    if not FIRST_DATE.year <= monday.isocalendar().year <= LAST_DATE.year:
        raise Problem(400, f"Choose a week {WEEK_RANGE}.", title="Unknown week")
    week = formatting.iso_week_of(monday)
    key = (week, schedule.today(config), plan_store.change_stamp(read_engine()))
    week_html = WEEK_CACHE.get(key)
    if week_html is None:
        bounded.charge(bounded.HEAVY_READ)  # a cached week is free
        week_html = WEEK_CACHE.put(key, _week_html(db, week, monday, sunday, config))
    head, trucks = week_html
    now = utcnow()
    readings = schedule.stocks(db, now, config)
    active = [site for site, _truck in tanks.active_sites(db)]
    demand = {site.code: site.demand_per_day for site in active}
    rates = consumption.estimated_rates(db, active)
    return render_template(
        "status_overview.html",
        week=week,
        head=head,
        trucks=trucks,
        readings=readings,
        demand=demand,
        rates=rates,
        now=now,
        today=key[1],
        network_plans=network_plans.recent(db, now, config.network_lease_seconds),
    )


def _week_html(db: Any, week: str, monday: dt.date, sunday: dt.date, config: Any) -> tuple[Markup, Markup]:
    trucks = repo.active_trucks(db)
    panels, warnings = [], []
    for truck in trucks:
        try:
            panel = _truck_panel(db, truck, monday, sunday, config)
        except DBAPIError:
            raise  # the database itself: the whole page answers 503
        except Exception:  # noqa: BLE001 - one truck's bad data must not hide every other truck
            log.exception("status page: truck %s cannot be shown", truck.code)
            panel = _broken_panel(truck)
        panels.append(panel)
        warnings.extend(panel["warnings"])
    values = {
        "week": week,
        "monday": monday,
        "sunday": sunday,
        "previous_week": formatting.iso_week_of(monday - dt.timedelta(days=7)),
        "next_week": formatting.iso_week_of(monday + dt.timedelta(days=7)),
        "this_week": schedule.current_week(config),
        "panels": panels,
        "warnings": _sorted_warnings(warnings),
        "chart_days": CHART_DAYS,
    }
    # Rendered by our own autoescaping template.
    head, body = (Markup(render_template("status_week.html", part=part, **values)) for part in ("head", "trucks"))
    return head, body


@bp.get("/sites/<code>")
@allow(SESSION)
@page
def site_page(code: str) -> Any:
    """One site's projected tank level for the next 28 days."""
    config, db = settings(), get_session()
    try:
        site = repo.site_by_code(db, code)
    except repo.NotFound as exc:
        raise Problem(404, "There is no site with this code.", title="Not found") from exc
    truck = repo.truck_by_id(db, site.truck_id)
    first, now = schedule.today(config), utcnow()
    reading = plan_store.latest_readings(db, [site.id]).get(site.id)
    levels = schedule.site_levels(db, site, first, CHART_DAYS, config)
    label = f"{site.name} ({site.code})"
    chart = level_svg(levels, unit=config.quantity_unit, site_label=label, element_id=chart_id("chart", site.code))
    last = first + dt.timedelta(days=CHART_DAYS - 1)
    deliveries = [(d, q) for d, q in levels.deliveries if first <= d <= last]
    return render_template(
        "status_site.html",
        site=site,
        truck=truck,
        levels=levels,
        chart=chart,
        first=first,
        last=last,
        deliveries=deliveries,
        rate=consumption.estimated_rates(db, [site])[site.code],
        has_level=any(v is not None for _, v in levels.days),
        warnings=_sorted_warnings(_group_limits(_dedupe(levels.notices))),
        week=formatting.iso_week_of(first),
        reading=reading,
        now=now,
        today=first,
    )


@bp.route("/<path:rest>", methods=["GET", "POST"])
@allow(SESSION)
def not_found(rest: str) -> Any:
    return error_page(404, "Not Found", "There is no such page or site.")


def _truck_panel(db: Any, truck: Truck, monday: dt.date, sunday: dt.date, config: Any) -> dict[str, Any]:
    view, notices = None, []
    try:
        view = schedule.trips_view(db, truck, monday, sunday, config)
    except schedule.NoActivePlan:
        notices.append(_notice("no_active_plan", f"Truck {truck.code} has no active plan, so no trips are scheduled."))
    plan = view.plan if view is not None else None
    if view is not None:
        notices.extend(view.notices)
        for trip in view.trips:
            for stop in trip.stops:
                notices.extend(stop.notices)
    sites = repo.active_sites(db, truck)
    charts = []
    all_levels = schedule.truck_levels(db, truck, sites, monday, CHART_DAYS, config)
    for site in sites:
        levels = all_levels[site.code]
        # The week's calendar and compartments notices are the trips view's (one per date, naming every site).
        notices.extend(n for n in levels.notices if n.kind not in ("calendar", "compartments"))
        label = f"{site.name} ({site.code})"
        charts.append(
            {
                "site": site,
                "levels": levels,
                "svg": level_svg(
                    levels,
                    unit=config.quantity_unit,
                    site_label=label,
                    element_id=chart_id(f"mini-{truck.code}", site.code),
                    small=True,
                ),
                "has_level": any(v is not None for _, v in levels.days),
            }
        )
    if plan is None:  # the truck's own notice says it; one per site would only repeat it
        notices = [n for n in notices if _as_dict(n)["kind"] != "no_active_plan" or _as_dict(n)["site"] is None]
    warnings = [dict(w, truck=truck.code) for w in _group_readings(_group_limits(_dedupe(notices)), truck)]
    readings = plan_store.latest_readings(db, [site.id for site in sites])
    empty_reads = {
        site.code: readings[site.id] for site in sites if site.id in readings and readings[site.id].level <= TOLERANCE
    }
    warnings = [_with_empty(w, all_levels.get(w["site"]), empty_reads.get(w["site"]), config) for w in warnings]
    gap = float(plan.gap) * 100 if plan is not None and plan.gap is not None else None
    safety = {code: levels.safety_stock for code, levels in all_levels.items()}
    notes = {
        (trip.date, trip.trip, stop.site): _stop_notes(stop, safety.get(stop.site, 0.0))
        for trip in (view.trips if view is not None else ())
        for stop in trip.stops
    }
    return {
        "truck": truck,
        "calendar": working_calendar.Calendar.of(truck).describe(),
        "view": view,
        "routes": _trip_routes(truck, view),
        "plan": plan,
        "gap": gap,
        "charts": charts,
        "warnings": warnings,
        "notes": notes,
    }


def _trip_routes(truck: Truck, view: schedule.TripsView | None) -> dict[tuple[dt.date, int], dict[str, Any]]:
    """Each trip's stops in driving order (plan order when not routed) and its route map."""
    out: dict[tuple[dt.date, int], dict[str, Any]] = {}
    for trip in view.trips if view is not None else ():
        route = trip.route
        stops = list(trip.stops)
        if route.routed:
            stops.sort(key=lambda stop: route.sequence(stop.site) or 0)
        names = {stop.site: stop.site_name for stop in trip.stops}
        element_id = chart_id(f"route-{truck.code}", f"{trip.date.isoformat()}-{trip.trip}")
        out[(trip.date, trip.trip)] = {"route": route, "stops": stops, "svg": route_svg(route, names, element_id)}
    return out


def _with_empty(
    warning: dict[str, Any], levels: schedule.SiteLevels | None, empty_read: Any, config: Any
) -> dict[str, Any]:
    """A run-out warning also says when the tank is empty: its latest reading was 0, or it is
    projected at 0 at 00:00 of a day the charts reach. Falling below the safety stock and running
    empty are different things."""
    if warning["kind"] != "run_out_risk" or warning["date"] is None:
        return warning
    message = warning["message"].rstrip(".")
    if empty_read is not None:
        at = empty_read.measured_at.astimezone(ZoneInfo(config.timezone))
        when = f"{at:%H:%M} that day" if at.date() == warning["date"] else f"{at:%Y-%m-%d %H:%M}"
        return dict(warning, message=f"{message}; it read 0 {config.quantity_unit} (empty) at {when}.")
    days = levels.days if levels is not None else ()
    empty = next((d for d, v in days if d >= warning["date"] and v is not None and v <= TOLERANCE), None)
    if empty is None:
        return warning
    return dict(warning, message=f"{message}, and empty by {empty.isoformat()}.")


def _stop_notes(stop: schedule.PlannedStop, safety_stock: float) -> list[dict[str, str]]:
    """A stop's notes in the trips table. A run-out risk is said in the warnings with the site, date
    and what to do; beside the stop a few words say whether the tank is projected empty or below its
    safety stock before this delivery, or when it falls below it after. Limit changes keep their
    message (it explains the quantity)."""
    out = []
    for notice in stop.notices:
        if notice.kind != "run_out_risk":
            out.append({"kind": notice.kind, "text": notice.message})
            continue
        state = schedule.level_state(stop.projected_level_before, safety_stock)
        if state in ("empty", "below safety stock"):
            text = f"{state} before this delivery"
        else:
            assert notice.date is not None  # a run_out_risk notice carries its date
            text = f"below safety stock from {notice.date.isoformat()}, before the next delivery"
        out.append({"kind": notice.kind, "text": text})
    return out


def sheet_warnings(sheet: schedule.TruckSheet, truck: Truck) -> list[dict[str, Any]]:
    """A load sheet's warnings: its trips' stop notices and the plan's notices about them, each once."""
    notices = [*sheet.notices, *(n for trip in sheet.trips for s in trip.stops for n in s.stop.notices)]
    return _sorted_warnings(_group_readings(_group_limits(_dedupe(notices)), truck))


def _broken_panel(truck: Truck) -> dict[str, Any]:
    """The panel of a truck whose week could not be computed: one line saying so."""
    notice = _notice(
        "truck_not_shown",
        f"Truck {truck.code}'s week cannot be shown because of an error on our side (it is logged). "
        "Its plan, trips and levels are missing from this page; the other trucks are shown.",
    )
    return {
        "truck": truck,
        "calendar": None,
        "view": None,
        "plan": None,
        "gap": None,
        "charts": [],
        "warnings": [dict(notice, truck=truck.code)],
        "error": notice["message"],
    }


def _group_readings(notices: list[dict[str, Any]], truck: Truck) -> list[dict[str, Any]]:
    """Several "no recent reading" notices of one truck become one line naming the sites."""
    missing = [n for n in notices if n["kind"] == "no_recent_reading" and n["site"]]
    if len(missing) <= 2:
        return notices
    sites = [n["site"] for n in missing]
    merged = _notice(
        "no_recent_reading",
        f"{len(sites)} sites of truck {truck.code} have no recent reading; "
        "their levels and quantities follow the plan, not a gauge:",
    )
    merged["sites"] = sites
    out = [n for n in notices if n not in missing]
    out.append(merged)
    return out


def _group_limits(notices: list[dict[str, Any]]) -> list[dict[str, Any]]:
    """One "limits changed" line per site and changed limit (its earliest), counting the other stops.

    A message names the site or truck and the changed field before its first ``;``, which is the key.
    """
    first: dict[tuple[Any, str], dict[str, Any]] = {}
    more: dict[tuple[Any, str], int] = {}
    out = []
    for notice in sorted(notices, key=lambda n: n["date"] or dt.date.min):
        key = (notice["site"], notice["message"].split(";")[0])
        if notice["kind"] != "limits_changed":
            out.append(notice)
        elif key in first:
            more[key] = more.get(key, 0) + 1
        else:
            first[key] = notice
    for key, notice in first.items():
        extra = more.get(key, 0)
        suffix = f" The same change affects {extra} more stop{'' if extra == 1 else 's'} of this site." if extra else ""
        out.append(dict(notice, message=notice["message"] + suffix))
    return out


def _notice(kind: str, message: str, site: str | None = None, date: dt.date | None = None) -> Any:
    return {"kind": kind, "message": message, "site": site, "date": date}


def _as_dict(notice: Any) -> dict[str, Any]:
    if isinstance(notice, dict):
        return notice
    return {"kind": notice.kind, "message": notice.message, "site": notice.site, "date": notice.date}


def _dedupe(notices: Any) -> list[dict[str, Any]]:
    seen, out = set(), []
    for notice in map(_as_dict, notices):
        key = (notice["kind"], notice["site"], notice["date"], notice["message"])
        if key not in seen:
            seen.add(key)
            out.append(notice)
    return out


def _sorted_warnings(notices: list[dict[str, Any]]) -> list[dict[str, Any]]:
    def key(notice: dict[str, Any]) -> tuple[Any, ...]:
        order = NOTICE_KINDS.get(notice["kind"], (notice["kind"], 9))[1]
        return (order, notice["date"] or dt.date.max, notice.get("truck") or "", notice["site"] or "")

    return [_worded(n) for n in sorted(notices, key=key)]


def _worded(notice: dict[str, Any]) -> dict[str, Any]:
    """The badge's word, the site code in the message as a link (``before``, ``after``), what to do,
    and the truck, site and date shown beside the message only when it does not already name them."""
    message, site = notice["message"], notice["site"]
    before, after = message, None
    if site and site in message:  # "Name (CODE)" where the message has it, else the first mention
        at = message.find(f"({site})") + 1 or message.find(site)
        before, after = message[:at], message[at + len(site) :]
    action = ACTIONS.get(notice["kind"])
    truck = notice.get("truck")
    return dict(
        notice,
        label=NOTICE_KINDS.get(notice["kind"], (notice["kind"].replace("_", " ").capitalize(), 9))[0],
        before=before,
        after=after,
        action=action if action and "re-plan" not in message.lower() else None,
        show_truck=bool(truck) and truck not in message,
        show_site=bool(site) and after is None,
        show_date=notice["date"] is not None and notice["date"].isoformat() not in message,
    )
