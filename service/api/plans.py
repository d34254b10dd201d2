"""Recorded plans (immutable, idempotent creation), activation, and the weekly trips."""

from __future__ import annotations

import datetime as dt
from typing import Any

from flask import Response, current_app, json, request, url_for
from flask.views import MethodView

from service import bounded, idempotency, routes, schedule
from service.api import http_headers as hh
from service.api.blueprint import Blueprint
from service.api.etags import content_etag, not_modified, require_if_match
from service.api.pagination import link_headers
from service.api.schemas.plans import (
    PlanListSchema,
    PlanQueryArgsSchema,
    PlanRequestSchema,
    PlanSchema,
    TripsQueryArgsSchema,
    TripsSchema,
)
from service.api.schemas.problem import ProblemSchema
from service.api.trucks import truck_or_404
from service.auth import allow, current_caller
from service.cache import LruCache
from service.errors import PROBLEM_JSON, Problem
from service.persistence import fleet as fleet_store
from service.persistence import pages
from service.persistence import plans as plan_store
from service.persistence import repository as repo
from service.persistence.models import Plan, Truck
from service.planning import PlanningInputError, plan_joint
from service.request_db import get_session, read_engine, read_session

PREFIX = ""
blp = Blueprint("plans", __name__, description="Recorded plans and the trips dispatch software loads each week")

#: Per-process cache of trips answers, keyed by the window, the day and the store's change marker
#: (service.persistence.plans.change_stamp): repeated weekly calls skip the replay.
TRIPS_CACHE: LruCache[tuple[bytes, str]] = LruCache(256)
HEAVY = ("trips", "inputs")
#: Error alternatives are documented as RFC 9457 problem documents, like every other error.
PROBLEM = {"schema": ProblemSchema, "content_type": PROBLEM_JSON}


def _plan(plan_id: int) -> Plan:
    return plan_store.plan_by_id(get_session(), plan_id)


def plan_json(plan: Plan, truck_code: str, *, heavy: bool = True) -> dict[str, Any]:
    """A plan: its own fields plus every field of the joint result, at the top level."""
    stale, changed = plan_store.staleness(get_session(), plan)
    stored = plan_store.stored_result(plan)
    result = {k: v for k, v in stored.items() if k not in ("status", "success", "message")}
    body = {
        "id": plan.id,
        "truck": truck_code,
        "status": plan.status,
        "planning_status": stored["status"],
        "stale": stale,
        "changed_sites": changed,
        "start_date": plan.start_date.isoformat(),
        "created_at": plan.created_at.isoformat(),
        "created_by": plan.created_by,
        "inputs": plan.inputs,
        "inputs_digest": plan.inputs_digest,
        **result,
    }
    if heavy:
        body["trips"] = _routed_trips(truck_code, result.get("trips") or [])
    return body if heavy else {k: v for k, v in body.items() if k not in HEAVY}


def _routed_trips(truck_code: str, trips: list[dict[str, Any]]) -> list[dict[str, Any]]:
    """The plan's trips, each with its ``route`` from the truck's current depot and the sites'
    current coordinates (``service.routes``; null with ``route_note`` when not routable)."""
    session = get_session()
    truck = repo.truck_by_code(session, truck_code)
    depot_point = None
    if truck.depot is not None:
        depot = fleet_store.depot_by_code(session, truck.depot)
        depot_point = routes.point_of(depot.latitude, depot.longitude)
    codes = {stop["code"] for trip in trips for stop in trip["stops"]}
    sites = repo.sites_by_code(session, codes)
    points = {code: routes.point_of(site.latitude, site.longitude) for code, site in sites.items()}
    out = []
    for trip in trips:
        route = routes.trip_route(truck.depot, depot_point, [(s["code"], points.get(s["code"])) for s in trip["stops"]])
        out.append({**trip, "route": routes.route_json(route), "route_note": route.reason})
    return out


def _json_response(body: Any, status: int = 200, **headers: str) -> Response:
    response = Response(json.dumps(body), status=status, mimetype="application/json")
    response.headers.update(headers)
    return response


def _snapshot(session, code: str, *, for_update: bool = False) -> tuple[Truck, list, dict[str, Any]]:  # type: ignore[no-untyped-def]
    truck = repo.truck_by_code(session, code, for_update=for_update)
    sites = plan_store.sites_for_plan(session, truck) if for_update else repo.active_sites(session, truck)
    if not sites:
        raise Problem(422, f"Truck {code!r} has no active sites to plan.", kind="no-sites")
    return truck, sites, plan_store.snapshot(truck, sites)


def _planned(inputs: dict[str, Any], body: dict[str, Any], start: dt.date) -> dict[str, Any]:
    """The joint result for a snapshot from ``start`` on its truck's calendar, computed in the pool
    (service.bounded). An infeasible result is not recorded: 422 with ``needed``."""
    bounded.check_sites(len(inputs["sites"]), "#")
    options = {
        "method": body["method"],
        "base_days": body["base_days"],
        "start_date": start,
        **bounded.planner_options(plan_joint),
    }
    try:
        result = bounded.run(
            bounded.joint_dict,
            plan_joint,
            plan_store.site_inputs(inputs["sites"]),
            plan_store.truck_input(inputs["truck"], start),
            options,
            cancellable=request.headers.get(idempotency.HEADER) is None,
        )
    except PlanningInputError as exc:
        raise Problem(422, f"The stored parameters cannot be planned: {exc}", kind="planning-input") from exc
    if not result["success"]:
        raise Problem(
            422,
            f"No drivable plan, nothing was recorded: {result['message']}",
            kind="infeasible",
            extensions={"needed": result.get("needed")},
        )
    return result


def _record(code: str, body: dict[str, Any]) -> Response:
    # Planned from a snapshot read without locks, so no writer waits while the plan is computed
    # (on SQLite the write transaction would hold the database's one write lock that long). The
    # truck and its sites are then locked and read again: a plan records exactly the versions it
    # was computed from, and when they changed meanwhile it is computed again under the lock.
    start = body["start_date"] or schedule.today(current_app.config["ULLAGE_SETTINGS"])
    with read_session() as reading:
        _, _, inputs = _snapshot(reading, code)
    result = _planned(inputs, body, start)
    session = get_session()
    truck, sites, locked = _snapshot(session, code, for_update=True)
    if locked != inputs:
        inputs, result = locked, _planned(locked, body, start)
    plan = plan_store.add_plan(
        session,
        truck,
        sites,
        method=result["method"],
        start_date=start,
        created_by=current_caller().name,
        inputs=inputs,
        result=result,
    )
    return _json_response(plan_json(plan, truck.code), 201, Location=url_for("plans.PlanById", plan_id=plan.id))


@blp.route("/trucks/<string:code>/plans")
class TruckPlans(MethodView):
    @allow("dispatcher")
    @blp.arguments(PlanRequestSchema)
    @blp.response(201, PlanSchema, headers=hh.PLAN_CREATED)
    @blp.alt_response(
        409, description="A request with the same Idempotency-Key is still running", headers=hh.RETRY, **PROBLEM
    )
    @blp.alt_response(
        422,
        description="Invalid body, no plannable sites, more sites than ULLAGE_MAX_PLAN_SITES, "
        "Idempotency-Key reused with another body, or no drivable plan on the truck's calendar "
        "(type .../infeasible: the detail names the binding limit or sites, `needed` says what would help)",
        **PROBLEM,
    )
    @blp.alt_response(429, description="Too many planning requests of this token", headers=hh.RETRY, **PROBLEM)
    @blp.alt_response(
        503, description="Planning busy, or stopped at the planning time limit", headers=hh.RETRY, **PROBLEM
    )
    @blp.header_parameters(hh.idempotency_key("the first response again"))
    def post(self, body, code):
        """Compute and record a plan from the truck's active sites on its calendar (honours Idempotency-Key)

        Dispatcher or admin. The plan records the exact versions of the truck (with its calendar) and
        sites it was computed from, and starts as `proposed`; activate it to make the weekly trips
        follow it. No drivable plan on the truck's calendar records nothing: 422 of type `infeasible`
        with `needed`. Send an Idempotency-Key to retry safely: a repeat returns the first answer
        (marked with `Ullage-Replayed: true`) and records nothing.
        """
        key = idempotency.parse_key(request.headers.get(idempotency.HEADER))
        claim = heartbeat = None
        if key is not None:
            outcome = idempotency.begin(current_caller(), key, request.method, request.path, request.get_data())
            if isinstance(outcome, Response):
                return outcome
            claim, heartbeat = outcome, idempotency.Heartbeat.start(outcome)
        try:
            bounded.charge(bounded.PLANNING)  # after the claim: a replayed answer costs nothing
            response = _record(code, body)
            if claim is not None:
                idempotency.finish(get_session(), claim, response)
            get_session().commit()
        except Exception:
            get_session().rollback()
            if claim is not None:
                idempotency.abandon(claim)
            raise
        finally:
            if heartbeat is not None:
                heartbeat.stop()  # after the transaction: a renewal may wait for its lock
        return response

    @allow("viewer")
    @blp.arguments(PlanQueryArgsSchema, location="query")
    @blp.response(200, PlanListSchema, headers=hh.PAGED)
    def get(self, args, code):
        """History of the truck's plans, newest first (items omit trips and inputs)

        Paged by plan id, newest first; the `Link` header names the next page. GET a plan for its
        trips and inputs.
        """
        truck = truck_or_404(code)
        result = pages.plans_page(get_session(), truck.id, args["limit"], args.get("after"))
        items = [plan_json(p, truck.code, heavy=False) for p in result.rows]
        return _json_response({"items": items}, **link_headers(result))


@blp.route("/plans/<id:plan_id>")
class PlanById(MethodView):
    @allow("viewer")
    @blp.response(200, PlanSchema, headers=hh.TAGGED)
    @blp.alt_response(304, description="Not modified: the If-None-Match tag is current", headers=hh.TAGGED)
    @blp.header_parameters(hh.IF_NONE_MATCH)
    def get(self, plan_id):
        """A recorded plan, exactly as recommended (plus its current status and staleness)

        The `ETag` changes when the plan's status or staleness does; send it in If-Match when
        activating to activate exactly the plan you read.
        """
        plan = _plan(plan_id)
        truck = repo.truck_by_id(get_session(), plan.truck_id)
        body = json.dumps(plan_json(plan, truck.code)).encode()
        etag = content_etag(body)
        return not_modified(etag) or Response(body, mimetype="application/json", headers={"ETag": etag})


@blp.route("/plans/<id:plan_id>/activate")
class PlanActivation(MethodView):
    @allow("dispatcher")
    @blp.response(200, PlanSchema, headers=hh.TAGGED)
    @blp.alt_response(
        412, description="If-Match names a representation of the plan that is no longer current", **PROBLEM
    )
    @blp.header_parameters(hh.IF_MATCH_OPTIONAL)
    def post(self, plan_id):
        """Make the plan its truck's one active plan (the previous one becomes superseded)

        Dispatcher or admin. With If-Match (the `ETag` of your GET of the plan) the plan is activated
        only if it is still as you read it (412 otherwise: read it again). Answers with the plan and
        its new `ETag`.
        """
        session = get_session()
        plan = _plan(plan_id)
        if request.headers.get("If-Match") is not None:
            truck = repo.truck_by_id(session, plan.truck_id)
            require_if_match(content_etag(json.dumps(plan_json(plan, truck.code)).encode()))
        plan = plan_store.activate(session, plan)
        session.commit()
        truck = repo.truck_by_id(session, plan.truck_id)
        body = json.dumps(plan_json(plan, truck.code)).encode()
        return Response(body, mimetype="application/json", headers={"ETag": content_etag(body)})


def _window(args: dict[str, Any]) -> tuple[dt.date, dt.date]:
    if "week" in args and ("from_" in args or "to" in args):
        raise Problem(
            422,
            "Give either week or from and to, not both.",
            kind="validation",
            errors=[{"pointer": "#/query/week", "detail": "Not with from/to."}],
        )
    if "week" in args:
        try:
            return schedule.iso_week(args["week"])
        except ValueError as exc:
            detail = f"{str(exc).rstrip('.')}: give a week that exists, in the form 2026-W50."
            raise Problem(
                422, detail, kind="validation", errors=[{"pointer": "#/query/week", "detail": detail}]
            ) from exc
    if "from_" not in args or "to" not in args:
        raise Problem(
            422,
            "Give week=YYYY-Www, or both from and to (YYYY-MM-DD).",
            kind="validation",
            errors=[{"pointer": "#/query/week", "detail": "Missing."}],
        )
    first, last = args["from_"], args["to"]
    if last < first:
        raise Problem(
            422, "to is before from.", kind="validation", errors=[{"pointer": "#/query/to", "detail": "Before from."}]
        )
    longest = bounded.settings().max_trips_days
    if (last - first).days + 1 > longest:
        raise Problem(
            422,
            f"At most {longest} days per call (ULLAGE_MAX_TRIPS_DAYS).",
            kind="validation",
            errors=[{"pointer": "#/query/to", "detail": f"More than {longest} days after from."}],
        )
    return first, last


def notice_json(notice: schedule.Notice) -> dict[str, Any]:
    return {
        "kind": notice.kind,
        "message": notice.message,
        "site": notice.site,
        "date": notice.date.isoformat() if notice.date else None,
    }


def trips_json(view: schedule.TripsView) -> dict[str, Any]:
    return {
        "truck": view.truck_code,
        "plan_id": view.plan.id if view.plan else None,
        "from": view.first.isoformat(),
        "to": view.last.isoformat(),
        "trips": [
            {
                "date": t.date.isoformat(),
                "trip": t.trip,
                "load": t.load,
                "stops": [
                    {
                        "site": s.site,
                        "sequence": t.route.sequence(s.site),
                        "planned_quantity": s.planned_quantity,
                        "quantity": s.quantity,
                        "projected_level_before": s.projected_level_before,
                        "delivered_quantity": s.delivered_quantity,
                        "delivered_at": s.delivered_at.astimezone(dt.UTC).isoformat() if s.delivered_at else None,
                        "warnings": [notice_json(n) for n in s.notices],
                    }
                    | ({} if s.compartments is None else {"compartments": [list(p) for p in s.compartments]})
                    for s in t.stops
                ],
                "route": routes.route_json(t.route),
                "route_note": t.route.reason,
            }
            for t in view.trips
        ],
        "warnings": [notice_json(n) for n in view.notices],
    }


@blp.route("/trucks/<string:code>/trips")
class TruckTrips(MethodView):
    @allow("viewer")
    @blp.arguments(TripsQueryArgsSchema, location="query")
    @blp.response(200, TripsSchema, headers=hh.TAGGED)
    @blp.alt_response(304, description="Not modified: the If-None-Match tag is current", headers=hh.TAGGED)
    @blp.alt_response(409, description="The truck has no active plan", **PROBLEM)
    @blp.alt_response(
        422, description="Invalid window, or longer than ULLAGE_MAX_TRIPS_DAYS (default 92 days)", **PROBLEM
    )
    @blp.alt_response(429, description="Too many long windows (heavy reads) of this token", headers=hh.RETRY, **PROBLEM)
    @blp.alt_response(503, description="A long window found the planning processes busy", headers=hh.RETRY, **PROBLEM)
    @blp.header_parameters(hh.IF_NONE_MATCH)
    def get(self, args, code):
        """The active plan's trips for an ISO week or a date range, quantities corrected by readings

        The weekly call of dispatch software. Each stop has the plan's `planned_quantity` and the
        `quantity` to deliver, corrected by the site's latest reading; `warnings` say what to look at.
        Send the `ETag` back in If-None-Match to get 304 while nothing changed. Windows longer than ULLAGE_LONG_TRIPS_DAYS (default 35) are heavy reads: computed in the
        planning processes and counted against the token's heavy-read limit (cached answers are free).
        """
        first, last = _window(args)
        settings = current_app.config["ULLAGE_SETTINGS"]
        key = (code, first, last, schedule.today(settings), plan_store.change_stamp(read_engine()))
        cached = TRIPS_CACHE.get(key)
        if cached is None:
            if bounded.long_window(first, last):
                bounded.charge(bounded.HEAVY_READ)
                body = bounded.run(_trips_body, settings, code, first, last)
            else:
                body = _trips_body_here(get_session(), truck_or_404(code), first, last, settings)
            cached = TRIPS_CACHE.put(key, (body, content_etag(body)))
        body, etag = cached
        return not_modified(etag) or Response(body, mimetype="application/json", headers={"ETag": etag})


def _trips_body_here(session, truck: Truck, first: dt.date, last: dt.date, settings) -> bytes:  # type: ignore[no-untyped-def]
    try:
        view = schedule.trips_view(session, truck, first, last, settings)
    except schedule.NoActivePlan as exc:
        raise Problem(409, str(exc), kind="no-active-plan") from exc
    return bounded.dumps(trips_json(view))


def _trips_body(settings, code: str, first: dt.date, last: dt.date) -> bytes:  # type: ignore[no-untyped-def]
    """In a pool child: the trips answer of a long window, read on the child's own connection.

    Read after the caller read the change stamp it caches the answer under, so it is at least as
    new as that stamp, as in the worker itself.
    """
    with bounded.child_session(settings.database_url) as session:
        return _trips_body_here(session, repo.truck_by_code(session, code), first, last, settings)
