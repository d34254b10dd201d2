"""Recorded plans, their input snapshots and staleness; tank readings. Functions never commit."""

from __future__ import annotations

import datetime as dt
import hashlib
import json
from collections.abc import Iterable, Sequence
from dataclasses import dataclass, fields
from typing import Any

from sqlalchemy import Engine, and_, func, or_, select, update
from sqlalchemy.orm import Session

from service import working_calendar
from service.persistence.db import read_one
from service.persistence.models import ChangeStamp, Plan, PlanSite, Reading, Site, Truck
from service.persistence.repository import NotFound, active_sites, lock_for_update
from service.planning import JointResult, SiteInput, SitePlan, Status, Stop, Trip, TruckInput
from service.planning.inputs import SITE_PARAMETERS

SITE_INPUTS = SITE_PARAMETERS


def truck_input(snapshot: dict[str, Any], start: dt.date) -> TruckInput:
    """The truck of a snapshot, on its recorded calendar, for a plan starting on ``start``."""
    return working_calendar.plan_truck(
        snapshot["dispatch_cost"],
        snapshot["capacity"],
        snapshot["max_stops"],
        working_calendar.Calendar.recorded(snapshot),
        start,
    )


def site_inputs(snapshot: Sequence[dict[str, Any]]) -> list[SiteInput]:
    return [SiteInput(code=s["code"], **{k: s[k] for k in SITE_INPUTS}) for s in snapshot]


def snapshot(truck: Truck, sites: Iterable[Site]) -> dict[str, Any]:
    """Every input a plan is computed from, with the row versions."""
    return {
        "truck": {
            "code": truck.code,
            "dispatch_cost": truck.dispatch_cost,
            "capacity": truck.capacity,
            "max_stops": truck.max_stops,
            **working_calendar.Calendar.of(truck).stored(),
            "version": truck.version,
        },
        "sites": [snapshot_site(s) for s in sites],
    }


def snapshot_site(site: Site) -> dict[str, Any]:
    """A site's recorded fields in a plan's snapshot: code, name, version and the planner's inputs."""
    return {"code": site.code, "name": site.name, "version": site.version, **{k: getattr(site, k) for k in SITE_INPUTS}}


def digest(inputs: dict[str, Any]) -> str:
    """SHA-256 of the canonical JSON of the inputs (sorted keys, no spaces)."""
    return hashlib.sha256(json.dumps(inputs, sort_keys=True, separators=(",", ":")).encode()).hexdigest()


def sites_for_plan(session: Session, truck: Truck) -> list[Site]:
    """The truck's active sites, locked against change until the plan commits (PostgreSQL FOR SHARE)."""
    sites = active_sites(session, truck)
    if session.get_bind().dialect.name == "postgresql" and sites:
        session.execute(select(Site.id).where(Site.id.in_([s.id for s in sites])).with_for_update(read=True))
        for site in sites:
            session.refresh(site)
    return sites


def add_plan(
    session: Session,
    truck: Truck,
    sites: Sequence[Site],
    *,
    method: str,
    start_date: dt.date,
    created_by: str,
    inputs: dict[str, Any],
    result: dict[str, Any],
) -> Plan:
    plan = Plan(
        truck_id=truck.id,
        status="proposed",
        method=method,
        start_date=start_date,
        created_by=created_by,
        inputs=inputs,
        inputs_digest=digest(inputs),
        result=result,
    )
    session.add(plan)
    session.flush()
    session.add_all(PlanSite(plan_id=plan.id, site_id=s.id) for s in sites)
    session.flush()
    return plan


def plan_by_id(session: Session, plan_id: int) -> Plan:
    plan = session.get(Plan, plan_id)
    if plan is None:
        raise NotFound(f"No plan with id {plan_id}.")
    return plan


def active_plan(session: Session, truck: Truck) -> Plan | None:
    return session.scalars(select(Plan).where(Plan.truck_id == truck.id, Plan.status == "active")).one_or_none()


def activate(session: Session, plan: Plan) -> Plan:
    """Make ``plan`` its truck's one active plan; the previous one becomes superseded.

    The truck row is locked first (PostgreSQL ``FOR UPDATE``; SQLite writers are serialised by
    ``BEGIN IMMEDIATE``), and a partial unique index allows one active plan per truck.
    """
    session.scalars(lock_for_update(session, select(Truck).where(Truck.id == plan.truck_id))).one()
    session.refresh(plan)
    if plan.status != "active":
        session.execute(
            update(Plan).where(Plan.truck_id == plan.truck_id, Plan.status == "active").values(status="superseded")
        )
        session.execute(update(Plan).where(Plan.id == plan.id).values(status="active"))
        session.flush()
        session.refresh(plan)
    return plan


def supersede_active(session: Session, truck: Truck) -> None:
    """The truck's active plan, if any, becomes superseded (the truck then follows no plan)."""
    session.execute(
        update(Plan).where(Plan.truck_id == truck.id, Plan.status == "active").values(status="superseded")
    )
    session.flush()


@dataclass(frozen=True)
class Change:
    """One difference between a plan's input snapshot and the current rows.

    ``subject`` is ``"truck"`` or ``"site"``; ``field`` a recorded field name, or ``"active"``
    (the site left or joined the truck's active sites), ``"truck"`` (moved to another truck:
    ``current`` is its code), ``"deleted"``, ``"added"`` or ``"edited"`` (a newer version whose
    recorded fields are unchanged, e.g. its position).
    """

    subject: str
    code: str
    field: str
    recorded: Any = None
    current: Any = None


@dataclass(frozen=True)
class Drift:
    """The plan's truck and sites as they are now, and how they differ from the snapshot."""

    truck: Truck | None
    sites: dict[str, Site]  # every recorded site that still exists and every active site of the truck
    changes: tuple[Change, ...]

    @property
    def stale(self) -> bool:
        return bool(self.changes)

    @property
    def changed_sites(self) -> list[str]:
        return sorted({c.code for c in self.changes if c.subject == "site"})


TRUCK_INPUTS = ("dispatch_cost", "capacity", "max_stops", *working_calendar.FIELDS)


def _row_changes(
    subject: str, code: str, recorded: dict[str, Any], row: Truck | Site, fields: Sequence[str], more: Sequence[Change]
) -> list[Change]:
    """The recorded fields that differ, plus ``more``; ``edited`` when only the version moved.

    A field the snapshot does not have (a truck's calendar in a plan recorded before calendars) is
    not compared.
    """
    if row.version == recorded["version"]:
        return []
    out = [
        Change(subject, code, f, recorded[f], getattr(row, f))
        for f in fields
        if f in recorded and recorded[f] != getattr(row, f)
    ]
    out.extend(more)
    return out or [Change(subject, code, "edited", recorded["version"], row.version)]


def drift(session: Session, plan: Plan) -> Drift:
    """Compare the plan's snapshot with the current truck and sites (by row version, then field).

    Stale means any recorded row moved (even back to the same values), a recorded site is gone,
    inactive or on another truck, or the truck gained an active site.
    """
    truck_snapshot = plan.inputs["truck"]
    recorded = {s["code"]: s for s in plan.inputs["sites"]}
    truck = session.get(Truck, plan.truck_id)
    rows = session.scalars(
        select(Site).where(
            or_(Site.code.in_(list(recorded)), and_(Site.truck_id == plan.truck_id, Site.active.is_(True)))
        )
    )
    sites = {s.code: s for s in rows}
    changes: list[Change] = []
    if truck is None:
        changes.append(Change("truck", truck_snapshot["code"], "deleted"))
    else:
        changes.extend(_row_changes("truck", truck.code, truck_snapshot, truck, TRUCK_INPUTS, ()))
    moved = [s.truck_id for s in sites.values() if s.code in recorded and s.truck_id != plan.truck_id]
    truck_codes = dict(session.execute(select(Truck.id, Truck.code).where(Truck.id.in_(moved))).all()) if moved else {}
    for code in sorted(recorded.keys() | sites.keys()):
        site, snap = sites.get(code), recorded.get(code)
        if snap is None:
            changes.append(Change("site", code, "added"))
        elif site is None:
            changes.append(Change("site", code, "deleted"))
        else:
            more = []
            if site.truck_id != plan.truck_id:
                more.append(Change("site", code, "truck", truck_snapshot["code"], truck_codes[site.truck_id]))
            if not site.active:
                more.append(Change("site", code, "active", True, False))
            changes.extend(_row_changes("site", code, snap, site, ("name", *SITE_INPUTS), more))
    return Drift(truck, sites, tuple(changes))


def staleness(session: Session, plan: Plan) -> tuple[bool, list[str]]:
    """Whether the truck or its active sites moved since the plan, and which sites changed."""
    found = drift(session, plan)
    return found.stale, found.changed_sites


#: Built once (statement construction costs more than running it): see change_stamp.
_CHANGE_STAMP = select(ChangeStamp.stamp).where(ChangeStamp.id == 1)


def change_stamp(engine: Engine) -> str | None:
    """The store's change marker: it moves with every commit that could change a trips view.

    The marker is the :class:`~service.persistence.models.ChangeStamp`: triggers give it a fresh
    random value in every transaction that changes a truck, site, reading or plan, and it becomes
    visible with that transaction's commit. A view read after the marker is therefore at least as
    new as the marker says. Deliberately coarse: a change anywhere invalidates every truck's cached
    trips (a truck's own change included, so a cached view also vouches for its truck code), which
    keeps the marker one primary-key lookup. It runs on every weekly call, after the request
    arrived, as one autocommit statement (:func:`~service.persistence.db.read_one`), so it sees
    every commit acknowledged before the request. ``None`` only if the row was deleted.
    """
    row = read_one(engine, _CHANGE_STAMP, {})
    return None if row is None else row[0]


def stored_result(plan: Plan) -> dict[str, Any]:
    """The plan's recorded result in today's shape.

    A result recorded before working calendars (issue 13) has no ``start_date`` and is upgraded as
    it is read, nothing is written: its cycles become patterns of one delivery a cycle
    (``period_days = longest_gap_days = cycle_days``, ``delivery_days = [offset_days]``), its trips
    get their date (from the plan's ``start_date``) and their index within the date, ``needed`` is
    null, ``extra_trips`` goes (every trip is listed) and ``peak_load`` becomes the largest load of
    one listed trip. Its status stays ``optimal``: it was the exact optimum of its class.
    """
    result = plan.result
    if "start_date" in result:
        return result
    out = {k: v for k, v in result.items() if k != "extra_trips"}
    out["start_date"] = plan.start_date.isoformat()
    out["needed"] = None
    out["sites"] = [
        {**s, "period_days": s["cycle_days"], "delivery_days": [s["offset_days"]], "longest_gap_days": s["cycle_days"]}
        for s in result["sites"]
    ]
    trips: list[dict[str, Any]] = []
    index: dict[int, int] = {}
    for trip in result["trips"]:
        index[trip["day"]] = index.get(trip["day"], 0) + 1
        date = plan.start_date + dt.timedelta(days=trip["day"])
        trips.append({"day": trip["day"], "date": date.isoformat(), "trip": index[trip["day"]], **trip})
    out["trips"] = trips
    if result.get("extra_trips") and trips:
        out["peak_load"] = max(t["load"] for t in trips)
    return out


def _record(cls: type, data: dict[str, Any], **converted: Any) -> Any:
    """``cls`` from the stored fields it has (JSON lists as tuples), with ``converted`` values."""
    names = {f.name for f in fields(cls)}
    plain = {k: tuple(v) if isinstance(v, list) else v for k, v in data.items() if k in names}
    return cls(**(plain | converted))


def result_of(plan: Plan) -> JointResult:
    """The recorded result as the planning core's object (for the trips calendar)."""
    data = stored_result(plan)
    return _record(
        JointResult,
        data,
        status=Status[data["status"].upper()],
        start_date=dt.date.fromisoformat(data["start_date"]),
        sites=tuple(_record(SitePlan, s) for s in data["sites"]),
        trips=tuple(
            _record(
                Trip,
                t,
                date=dt.date.fromisoformat(t["date"]),
                stops=tuple(Stop(**s) for s in t["stops"]),
            )
            for t in data["trips"]
        ),
    )


def add_reading(session: Session, site: Site, level: float, measured_at: dt.datetime, created_by: str) -> Reading:
    reading = Reading(site_id=site.id, level=level, measured_at=measured_at, created_by=created_by)
    session.add(reading)
    session.flush()
    return reading


def latest_readings(session: Session, site_ids: Iterable[int]) -> dict[int, Reading]:
    """The newest reading of each site (by ``measured_at``, then id)."""
    ids = list(site_ids)
    if not ids:
        return {}
    newest = (
        select(Reading.site_id, func.max(Reading.measured_at).label("at"))
        .where(Reading.site_id.in_(ids))
        .group_by(Reading.site_id)
        .subquery()
    )
    rows = session.scalars(
        select(Reading)
        .join(newest, (Reading.site_id == newest.c.site_id) & (Reading.measured_at == newest.c.at))
        .order_by(Reading.id)
    )
    return {r.site_id: r for r in rows}
