"""Activating a done network plan: move each site to its truck and make each truck's plan its active plan.

All on the caller's session, committed once by the caller (``POST /network-plans/{id}/activate``):

1. lock the snapshot's trucks, then their sites (the lock order of ``DEVELOPERS.md``), and compare each
   row's ``version`` with the snapshot; any difference (or a row gone or inactive) → :class:`Changed`;
2. move each served site whose truck changed (``truck_id``; its ``version`` moves, as every site change);
3. record each truck's plan as an ordinary recorded plan (``plans`` table: the snapshot of the truck and
   its sites as they are after the move, the result in the one-truck planner's shape, so the weekly
   trips, the status page and GET /plans read it as any other plan) and activate it, superseding the
   truck's previous active plan; a truck of the snapshot left with no site has its active plan superseded;
4. mark the job activated.

What the recorded result holds: the truck plan's per-site patterns (``sites``: cycle, offset, period,
delivery days — what the trips calendar replays), its trips of the listed days in driving order
(stops as code and quantity; the routes, legs and compartments stay in the job's result), its cost per
day with the distance part, and ``lower_bound_per_day = 0``: the bound of a network plan is the whole
network's (the job's ``lower_bound_per_day``), no one truck's.
"""

from __future__ import annotations

import datetime as dt
import math
from collections.abc import Sequence
from typing import Any

from sqlalchemy.orm import Session

from service.persistence import network_jobs as jobs
from service.persistence import plans as plan_store
from service.persistence import repository as repo
from service.persistence.models import NetworkPlanJob, Site, Truck
from service.planning.fleet.network import ROUTED_DAYS


class Changed(Exception):
    """Rows that changed since the snapshot (codes)."""

    def __init__(self, sites: tuple[str, ...], trucks: tuple[str, ...]):
        super().__init__(f"changed since the network plan: sites {sites}, trucks {trucks}")
        self.sites, self.trucks = sites, trucks


class AlreadyActivated(Exception):
    """The job was activated meanwhile."""


def _method(sites: Sequence[dict[str, Any]]) -> tuple[str, int | None]:
    """``power_of_two`` with its base when every cycle is a whole base × 2^k, else ``integer``."""
    cycles = [float(s["cycle_days"]) for s in sites]
    if not cycles or any(c != round(c) for c in cycles):
        return "integer", None
    base = int(min(cycles))
    ratios = [int(c) / base for c in cycles]
    if all(r == int(r) and int(r) & (int(r) - 1) == 0 for r in ratios):
        return "power_of_two", base
    return "integer", None


def _interval(days: list[int], repeat: int, truncated: bool) -> int:
    if not days:
        return 0
    gaps = [b - a for a, b in zip(days, days[1:], strict=False)]
    if not truncated:
        gaps.append(days[0] + repeat - days[-1])
    return min(gaps) if gaps else repeat


def joint_result(plan: dict[str, Any], job: NetworkPlanJob) -> dict[str, Any]:
    """A truck's plan of a network result in the shape of a recorded one-truck plan's result."""
    method, base = _method(plan["sites"])
    trips = [
        {
            "day": t["day"],
            "date": t["date"],
            "trip": t["trip"],
            "load": t["load"],
            "stops": [{"code": s["code"], "quantity": s["quantity"]} for s in t["stops"]],
        }
        for t in plan["trips"]
    ]
    repeat = int(plan["repeat_days"])
    truncated = bool(plan["trips_truncated"])
    per_repeat = len(trips) if not truncated else math.ceil(len(trips) * repeat / ROUTED_DAYS)
    network = job.result or {}
    return {
        "status": plan["status"],
        "success": True,
        "message": f"Truck {plan['truck']}'s plan of network plan {job.id} ({plan['source']} candidate).",
        "method": method,
        "base_days": base,
        "dispatch_interval_days": _interval(sorted({t["day"] for t in trips}), repeat, truncated),
        "repeat_days": repeat,
        "trips_per_repeat": per_repeat,
        "cost_per_day": plan["cost_per_day"],
        "cost_breakdown": plan["cost_breakdown"],
        "lower_bound_per_day": 0.0,
        "gap": 0.0,
        "peak_load": max((t["load"] for t in trips), default=0.0),
        "trips_truncated": truncated,
        "sites": plan["sites"],
        "trips": trips,
        "warnings": [
            *plan["warnings"],
            f"From network plan {job.id}: its lower bound ({network.get('lower_bound_per_day', 0.0):.2f} per day, "
            f"gap {network.get('gap', 0.0):.1%}) is the whole network's; this truck has no bound of its own.",
        ],
        "start_date": job.start_date.isoformat(),
        "needed": None,
    }


def _check(inputs: dict[str, Any], trucks: dict[str, Truck], sites: dict[str, Site]) -> None:
    changed_trucks = sorted(
        t["code"]
        for t in inputs["trucks"]
        if t["code"] not in trucks or trucks[t["code"]].version != t["version"] or not trucks[t["code"]].active
    )
    changed_sites = sorted(
        s["code"]
        for s in inputs["sites"]
        if s["code"] not in sites or sites[s["code"]].version != s["version"] or not sites[s["code"]].active
    )
    if changed_sites or changed_trucks:
        raise Changed(tuple(changed_sites), tuple(changed_trucks))


def activate(session: Session, job: NetworkPlanJob, by: str, now: dt.datetime | None = None) -> list[int]:
    """Apply a done job (module docstring); the ids of the plans recorded and activated.

    Raises :class:`Changed` (nothing applied) or :class:`AlreadyActivated`.
    """
    inputs, result = job.inputs, job.result or {}
    trucks = jobs.lock_trucks(session, [t["code"] for t in inputs["trucks"]])
    sites = jobs.lock_sites(session, [s["code"] for s in inputs["sites"]])
    _check(inputs, trucks, sites)
    assignment: dict[str, str] = result.get("assignment", {})
    for code, truck_code in sorted(assignment.items()):
        repo.apply_changes(sites[code], {"truck_id": trucks[truck_code].id}, ("truck_id",))
    session.flush()
    recorded: list[int] = []
    planned = {p["truck"]: p for p in result.get("trucks", [])}
    for truck_code in sorted(trucks):
        truck = trucks[truck_code]
        plan = planned.get(truck_code)
        own = [sites[c] for c in sorted(assignment) if assignment[c] == truck_code]
        if plan is None or not own:
            plan_store.supersede_active(session, truck)
            continue
        row = plan_store.add_plan(
            session,
            truck,
            own,
            method=_method(plan["sites"])[0],
            start_date=job.start_date,
            created_by=by,
            inputs=plan_store.snapshot(truck, own),
            result=joint_result(plan, job),
        )
        plan_store.activate(session, row)
        recorded.append(row.id)
    if not jobs.mark_activated(session, job.id, by, now):
        raise AlreadyActivated(f"Network plan {job.id} was activated meanwhile.")
    return recorded
