"""The dispatcher's morning: each tank's latest reading, every tank lowest first, a day's load sheets.

* The latest readings (on the overview, never cached: their age moves with the clock): level,
  time in the service time zone and how old, per active site.
* ``/status/lowest``: every active tank ranked by the days its stock now lasts above its safety
  stock (:func:`service.schedule.tank_stock`, :func:`service.schedule.lowest_first`: the latest
  reading falling at the site's use, plus the deliveries recorded since), with the
  days to empty and the next planned delivery; tanks without a reading last, saying so.
* ``/status/load-sheet?date=YYYY-MM-DD`` (default tomorrow in the service time zone): one
  printable A4 page per truck with trips that day (:func:`service.schedule.load_sheet`), one table
  per trip (numbered when a truck runs several that day). Trips follow the truck's working calendar;
  a truck that does not work that day is listed with the reason (weekday off, closed date, holiday).
  A routed trip lists its stops in driving order from and back to the truck's depot with each leg's
  road km (``service.routes``); otherwise they follow the plan's site order and the caption says why.
"""

from __future__ import annotations

import datetime as dt
import re
from dataclasses import replace
from typing import Any

from flask import render_template, request

from service import bounded, schedule, working_calendar
from service.api.fields import DATE_RANGE, FIRST_DATE, LAST_DATE
from service.auth import SESSION, allow
from service.cache import LruCache
from service.errors import Problem
from service.persistence import plans as plan_store
from service.persistence import repository as repo
from service.persistence import tanks
from service.persistence.models import utcnow
from service.request_db import get_session, read_engine
from service.web import bp, pages, settings
from service.web.access import page

ASCII_DATE = re.compile(r"[0-9]{4}-[0-9]{2}-[0-9]{2}")
#: Per-process cache of every site's next planned delivery, keyed by the day and the change stamp
#: (the stock now is computed on every request: it moves with the clock).
NEXT_CACHE: LruCache[dict[str, tuple[dt.date, float]]] = LruCache(4)


@bp.get("/lowest")
@allow(SESSION)
@page
def lowest() -> Any:
    """Every active tank, fewest days of stock above its safety stock first."""
    config, db = settings(), get_session()
    now, first = utcnow(), schedule.today(config)
    key = (first, plan_store.change_stamp(read_engine()))
    nexts = NEXT_CACHE.get(key)
    if nexts is None:
        bounded.charge(bounded.HEAVY_READ)  # cached deliveries are free
        nexts = NEXT_CACHE.put(
            key, schedule.next_deliveries(db, tanks.active_trucks(db), first, schedule.NEXT_DELIVERY_DAYS, config)
        )
    ranked = schedule.lowest_first(
        [replace(s, next_delivery=nexts.get(s.site)) for s in schedule.stocks(db, now, config)]
    )
    return render_template(
        "status_lowest.html",
        ranked=[s for s in ranked if s.level is not None],
        unread=[s for s in ranked if s.level is None],
        now=now,
        today=first,
        horizon=schedule.NEXT_DELIVERY_DAYS,
    )


@bp.get("/load-sheet")
@allow(SESSION)
@page
def load_sheet() -> Any:
    """One A4 page per truck with trips on the chosen day (default tomorrow)."""
    config, db = settings(), get_session()
    tomorrow = schedule.today(config) + dt.timedelta(days=1)
    day = _day(request.args.get("date"), tomorrow)
    bounded.charge(bounded.HEAVY_READ)
    sheets, idle = [], []
    for truck in tanks.active_trucks(db):
        try:
            sheet = schedule.load_sheet(db, truck, repo.active_sites(db, truck), day, config)
        except schedule.NoActivePlan:
            idle.append((truck, "no active plan"))
            continue
        if sheet.trips:
            sheets.append((sheet, pages.sheet_warnings(sheet, truck)))
        else:
            idle.append((truck, working_calendar.Calendar.of(truck).off_reason(day) or "no trip on this day"))
    return render_template(
        "status_load_sheet.html",
        day=day,
        tomorrow=tomorrow,
        sheets=sheets,
        idle=idle,
        printed=utcnow(),
        today=schedule.today(config),
    )


def _day(text: str | None, default: dt.date) -> dt.date:
    if not text:
        return default
    try:
        if not ASCII_DATE.fullmatch(text):
            raise ValueError(text)
        day = dt.date.fromisoformat(text)
    except ValueError as exc:
        raise Problem(400, "The date must be an ISO 8601 date such as 2026-12-04.", title="Unknown date") from exc
    if not FIRST_DATE <= day <= LAST_DATE:
        raise Problem(400, f"Choose a date {DATE_RANGE}.", title="Unknown date")
    return day
