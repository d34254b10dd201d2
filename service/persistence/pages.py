"""Keyset pages of the list routes: at most ``limit`` rows after the key ``after``. Never commits.

One statement per page: it asks for ``limit + 1`` rows, so whether another page follows costs no
second query. ``after`` arrives with the key's type (a code, or an id already within its range).
"""

from __future__ import annotations

import datetime as dt
from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any

from sqlalchemy import Select, select
from sqlalchemy.orm import Session, defer

from service.persistence.models import Depot, NetworkPlanJob, Plan, Product, Reading, Site, Truck, WeatherDay


@dataclass(frozen=True)
class Page:
    """One page's rows and, while more remain, the key the next page starts after."""

    rows: Sequence[Any]
    next_after: Any | None


def _page(session: Session, statement: Select[Any], key: Any, limit: int, after: Any, descending: bool) -> Page:
    if after is not None:
        statement = statement.where(key < after if descending else key > after)
    statement = statement.order_by(key.desc() if descending else key).limit(limit + 1)
    rows = list(session.scalars(statement))
    if len(rows) <= limit:
        return Page(rows, None)
    rows = rows[:limit]
    return Page(rows, getattr(rows[-1], key.key))


def trucks_page(session: Session, limit: int, after: str | None) -> Page:
    """Trucks by code."""
    return _page(session, select(Truck), Truck.code, limit, after, False)


def depots_page(session: Session, limit: int, after: str | None) -> Page:
    """Depots by code."""
    return _page(session, select(Depot), Depot.code, limit, after, False)


def products_page(session: Session, limit: int, after: str | None) -> Page:
    """Products by code."""
    return _page(session, select(Product), Product.code, limit, after, False)


def sites_page(session: Session, limit: int, after: str | None, truck_code: str | None = None) -> Page:
    """Sites by code, only those of ``truck_code`` if given."""
    statement = select(Site)
    if truck_code is not None:
        statement = statement.join(Truck, Site.truck_id == Truck.id).where(Truck.code == truck_code)
    return _page(session, statement, Site.code, limit, after, False)


def plans_page(session: Session, truck_id: int, limit: int, after: int | None) -> Page:
    """A truck's plans, newest (highest id) first."""
    return _page(session, select(Plan).where(Plan.truck_id == truck_id), Plan.id, limit, after, True)


def readings_page(session: Session, site_id: int, limit: int, after: int | None) -> Page:
    """A site's readings, newest recorded (highest id) first."""
    return _page(session, select(Reading).where(Reading.site_id == site_id), Reading.id, limit, after, True)


def weather_days_page(
    session: Session, region: str, limit: int, after: dt.date | None, first: dt.date | None, last: dt.date | None
) -> Page:
    """A region's posted days, oldest first, within ``first`` … ``last`` when given."""
    statement = select(WeatherDay).where(WeatherDay.region == region)
    if first is not None:
        statement = statement.where(WeatherDay.day >= first)
    if last is not None:
        statement = statement.where(WeatherDay.day <= last)
    return _page(session, statement, WeatherDay.day, limit, after, False)


def network_jobs_page(session: Session, limit: int, after: int | None) -> Page:
    """Network plan jobs by id, newest first, without their results (the list omits them; one result
    of a 10 000-site plan is about 9 MB)."""
    return _page(session, select(NetworkPlanJob).options(defer(NetworkPlanJob.result)), NetworkPlanJob.id, limit, after, True)
