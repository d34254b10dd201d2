"""Recorded deliveries and the readings/deliveries history a consumption estimate is built from.

Small functions over a session; they flush, never commit.
"""

from __future__ import annotations

import datetime as dt
from collections.abc import Iterable, Mapping, Sequence
from typing import Any

from sqlalchemy import and_, func, or_, select
from sqlalchemy.orm import Session

from service.persistence.models import Delivery, Reading, Site, Truck

DELIVERY_FIELDS = ("quantity", "delivered_at", "level_before", "level_after", "note")


def add_delivery(
    session: Session, site: Site, data: Mapping[str, Any], truck_id: int | None, created_by: str
) -> Delivery:
    """Record one delivery of ``site`` (``data``: :data:`DELIVERY_FIELDS`, missing ones empty)."""
    delivery = Delivery(
        site_id=site.id, truck_id=truck_id, created_by=created_by, **{k: data.get(k) for k in DELIVERY_FIELDS}
    )
    session.add(delivery)
    session.flush()
    return delivery


def deliveries_page(session: Session, site_id: int, limit: int, after: int | None) -> tuple[list[Delivery], bool]:
    """One page of a site's deliveries, newest ``delivered_at`` first (ties: newest id first).

    ``after`` is the id of the previous page's last delivery; answers the rows and whether more remain.
    """
    statement = select(Delivery).where(Delivery.site_id == site_id)
    if after is not None:
        last = session.get(Delivery, after)
        if last is None or last.site_id != site_id:
            return [], False
        statement = statement.where(
            or_(
                Delivery.delivered_at < last.delivered_at,
                and_(Delivery.delivered_at == last.delivered_at, Delivery.id < last.id),
            )
        )
    rows = list(session.scalars(statement.order_by(Delivery.delivered_at.desc(), Delivery.id.desc()).limit(limit + 1)))
    return rows[:limit], len(rows) > limit


def sites_by_codes(session: Session, codes: Iterable[str]) -> dict[str, Site]:
    """The sites of ``codes`` that exist, by code."""
    wanted = sorted(set(codes))
    if not wanted:
        return {}
    return {s.code: s for s in session.scalars(select(Site).where(Site.code.in_(wanted)))}


def trucks_by_codes(session: Session, codes: Iterable[str]) -> dict[str, Truck]:
    """The trucks of ``codes`` that exist, by code."""
    wanted = sorted(set(codes))
    if not wanted:
        return {}
    return {t.code: t for t in session.scalars(select(Truck).where(Truck.code.in_(wanted)))}


def add_readings(session: Session, rows: Sequence[tuple[int, float, dt.datetime]], created_by: str) -> int:
    """Insert ``(site_id, level, measured_at)`` readings in one flush; answers how many."""
    session.add_all(Reading(site_id=s, level=level, measured_at=at, created_by=created_by) for s, level, at in rows)
    session.flush()
    return len(rows)


def add_deliveries(session: Session, rows: Sequence[Mapping[str, Any]], created_by: str) -> int:
    """Insert deliveries (each: ``site_id``, ``truck_id`` and :data:`DELIVERY_FIELDS`) in one flush."""
    session.add_all(
        Delivery(
            site_id=r["site_id"],
            truck_id=r.get("truck_id"),
            created_by=created_by,
            **{k: r.get(k) for k in DELIVERY_FIELDS},
        )
        for r in rows
    )
    session.flush()
    return len(rows)


def history(
    session: Session, site_ids: Iterable[int], since: dt.datetime
) -> tuple[dict[int, list[Reading]], dict[int, list[Delivery]]]:
    """Readings and deliveries of the sites from ``since`` on, each list in time order (then id)."""
    ids = sorted(set(site_ids))
    readings: dict[int, list[Reading]] = {i: [] for i in ids}
    deliveries: dict[int, list[Delivery]] = {i: [] for i in ids}
    if not ids:
        return readings, deliveries
    for r in session.scalars(
        select(Reading)
        .where(Reading.site_id.in_(ids), Reading.measured_at >= since)
        .order_by(Reading.measured_at, Reading.id)
    ):
        readings[r.site_id].append(r)
    for d in session.scalars(
        select(Delivery)
        .where(Delivery.site_id.in_(ids), Delivery.delivered_at >= since)
        .order_by(Delivery.delivered_at, Delivery.id)
    ):
        deliveries[d.site_id].append(d)
    return readings, deliveries


def since_latest_readings(session: Session, site_ids: Iterable[int]) -> dict[int, list[Delivery]]:
    """Each site's deliveries at or after its newest reading, in time order (then id); sites
    without a reading have none (the projection replays only those strictly after the reading)."""
    ids = sorted(set(site_ids))
    out: dict[int, list[Delivery]] = {i: [] for i in ids}
    if not ids:
        return out
    newest = (
        select(Reading.site_id, func.max(Reading.measured_at).label("at"))
        .where(Reading.site_id.in_(ids))
        .group_by(Reading.site_id)
        .subquery()
    )
    for d in session.scalars(
        select(Delivery)
        .join(newest, (Delivery.site_id == newest.c.site_id) & (Delivery.delivered_at >= newest.c.at))
        .order_by(Delivery.delivered_at, Delivery.id)
    ):
        out[d.site_id].append(d)
    return out


def truck_sites(session: Session, truck_id: int) -> list[Site]:
    """Every active site of the truck, in code order."""
    return list(
        session.scalars(select(Site).where(Site.truck_id == truck_id, Site.active.is_(True)).order_by(Site.code))
    )
