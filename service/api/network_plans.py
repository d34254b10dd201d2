"""Network plans (issue 16): a job that assigns sites to trucks and plans every truck, and its activation."""

from __future__ import annotations

from typing import Any

from flask import Response, current_app, json, url_for
from flask.views import MethodView

from service import bounded, idempotency, network_activation, network_inputs, schedule
from service.api import http_headers as hh
from service.api.blueprint import Blueprint
from service.api.etags import content_etag, not_modified
from service.api.pagination import link_headers
from service.api.schemas.network_plans import (
    NetworkActivationSchema,
    NetworkPlanListSchema,
    NetworkPlanQueryArgsSchema,
    NetworkPlanRequestSchema,
    NetworkPlanSchema,
)
from service.api.schemas.problem import ProblemSchema
from service.auth import allow, current_caller
from service.config import Settings
from service.errors import PROBLEM_JSON, Problem
from service.persistence import network_jobs as jobs
from service.persistence import pages
from service.persistence import repository as repo
from service.persistence.models import NetworkPlanJob, utcnow
from service.request_db import get_session

PREFIX = "/network-plans"
PROBLEM = {"schema": ProblemSchema, "content_type": PROBLEM_JSON}
blp = Blueprint(
    "network_plans", __name__, description="Network plans: which truck serves each site, and every truck's routes"
)


def _settings() -> Settings:
    return current_app.config["ULLAGE_SETTINGS"]


def _iso(value: Any) -> str | None:
    return None if value is None else value.isoformat()


def job_json(job: NetworkPlanJob, *, with_result: bool = True) -> dict[str, Any]:
    """The job resource (``NetworkPlanSchema``)."""
    elapsed = left = None
    if job.started_at is not None:
        elapsed = max(0.0, ((job.finished_at or utcnow()) - job.started_at).total_seconds())
        if job.status == "done":
            left = 0.0
        elif job.status == "running" and job.progress > 0:
            left = elapsed * (1.0 - job.progress) / job.progress
    body = {
        "id": job.id,
        "status": job.status,
        "progress": job.progress,
        "elapsed_seconds": elapsed,
        "estimated_seconds_left": left,
        "created_at": _iso(job.created_at),
        "created_by": job.created_by,
        "started_at": _iso(job.started_at),
        "finished_at": _iso(job.finished_at),
        "start_date": job.start_date.isoformat(),
        "time_budget_seconds": job.inputs["time_budget_seconds"],
        "trucks": [t["code"] for t in job.inputs["trucks"]],
        "site_count": len(job.inputs["sites"]),
        "attempts": job.attempts,
        "inputs_digest": job.inputs_digest,
        "error": job.error,
        "activated_at": _iso(job.activated_at),
        "activated_by": job.activated_by,
    }
    if with_result:
        body["result"] = job.result
    return body


def _job(job_id: int) -> NetworkPlanJob:
    """The job; a running one whose heartbeat is older than the lease is failed first (and committed)."""
    session = get_session()
    job = jobs.job_by_id(session, job_id)
    lease = _settings().network_lease_seconds
    if job.status == "running" and job.heartbeat_at is not None:
        if (utcnow() - job.heartbeat_at).total_seconds() > lease and jobs.fail_stale(session, lease):
            session.commit()
            session.refresh(job)
    return job


def _snapshot(body: dict[str, Any]) -> dict[str, Any]:
    try:
        inputs = network_inputs.snapshot(get_session(), body["trucks"])
    except repo.NotFound as exc:
        raise Problem(422, str(exc), kind="validation", errors=[{"pointer": "#/trucks", "detail": str(exc)}]) from exc
    if not inputs["trucks"] or not inputs["sites"]:
        raise Problem(422, "No active truck with active sites to plan.", kind="no-sites")
    sites, trucks = network_inputs.missing_places(inputs)
    if sites or trucks:
        parts = []
        if sites:
            parts.append(f"sites without coordinates (latitude/longitude): {', '.join(sites)}")
        if trucks:
            parts.append(f"trucks without a depot: {', '.join(trucks)}")
        raise Problem(
            422,
            "The fleet level needs every site's place and every truck's depot; " + "; ".join(parts) + ".",
            kind="planning-input",
            extensions={"sites": sites, "trucks": trucks},
        )
    limit = _settings().network_max_sites
    if len(inputs["sites"]) > limit:
        raise Problem(
            422,
            f"{len(inputs['sites'])} sites: one network plan takes at most {limit} (ULLAGE_NETWORK_MAX_SITES).",
            kind="too-many-sites",
        )
    return inputs


def _create(body: dict[str, Any]) -> Response:
    settings = _settings()
    inputs = _snapshot(body)
    budget = min(body["time_budget_seconds"] or settings.network_plan_seconds, settings.network_plan_seconds)
    inputs["time_budget_seconds"] = budget
    start = body["start_date"] or schedule.today(settings)
    job = jobs.add_job(get_session(), created_by=current_caller().name, start_date=start, inputs=inputs)
    location = url_for("network_plans.NetworkPlanById", job_id=job.id)
    return Response(json.dumps(job_json(job)), status=202, mimetype="application/json", headers={"Location": location})


@blp.route("")
class NetworkPlans(MethodView):
    @allow("dispatcher")
    @blp.arguments(NetworkPlanRequestSchema)
    @blp.response(202, NetworkPlanSchema, headers=hh.PLAN_CREATED)
    @blp.alt_response(
        409, description="A request with the same Idempotency-Key is still running", headers=hh.RETRY, **PROBLEM
    )
    @blp.alt_response(
        422,
        description="Invalid body or unknown truck; no active truck with sites; sites without coordinates or trucks "
        "without a depot (type .../planning-input, named in `detail`, `sites` and `trucks`); more sites than "
        "ULLAGE_NETWORK_MAX_SITES; Idempotency-Key reused with another body",
        **PROBLEM,
    )
    @blp.alt_response(429, description="Too many planning requests of this token", headers=hh.RETRY, **PROBLEM)
    @blp.header_parameters(hh.idempotency_key("the first response again (the same job)"))
    def post(self, body):
        """Start a network plan of the active trucks and their active sites (answers 202 with the job)

        Dispatcher or admin. The job snapshots the trucks (depot, compartments, products, calendar),
        depots, products and sites (place, product, parameters) with their versions, and is computed
        in the background: GET its `Location` until `status` is `done` (or `failed`). Every site needs
        coordinates and every truck a depot (422 naming those without). Nothing changes until you
        activate the done job.
        """
        bounded.charge(bounded.PLANNING)
        return idempotency.run(lambda: _create(body))

    @allow("viewer")
    @blp.arguments(NetworkPlanQueryArgsSchema, location="query")
    @blp.response(200, NetworkPlanListSchema, headers=hh.PAGED)
    def get(self, args):
        """Network plans, newest first (items omit `result`)

        Paged by id, newest first; the `Link` header names the next page.
        """
        result = pages.network_jobs_page(get_session(), args["limit"], args.get("after"))
        items = [job_json(j, with_result=False) for j in result.rows]
        return Response(json.dumps({"items": items}), mimetype="application/json", headers=link_headers(result))


@blp.route("/<id:job_id>")
class NetworkPlanById(MethodView):
    @allow("viewer")
    @blp.response(200, NetworkPlanSchema, headers=hh.TAGGED)
    @blp.alt_response(304, description="Not modified: the If-None-Match tag is current", headers=hh.TAGGED)
    @blp.header_parameters(hh.IF_NONE_MATCH)
    def get(self, job_id):
        """A network plan job: status, progress, times, and the result when done

        `status` is `queued`, `running`, `done` or `failed` (`error` says why; a job whose worker
        stopped sending heartbeats for ULLAGE_NETWORK_LEASE_SECONDS is failed). `result` (when done):
        the assignment of sites to trucks, each truck's plan with its routed trips, the network's cost
        per day, its lower bound and gap, utilisation and the unserved sites with reasons.
        """
        body = json.dumps(job_json(_job(job_id))).encode()
        etag = content_etag(body)
        return not_modified(etag) or Response(body, mimetype="application/json", headers={"ETag": etag})


@blp.route("/<id:job_id>/activate")
class NetworkPlanActivation(MethodView):
    @allow("dispatcher")
    @blp.response(200, NetworkActivationSchema)
    @blp.alt_response(
        409,
        description="The job is not done or was activated already (type .../conflict), or trucks or sites changed "
        "since its snapshot (type .../inputs-changed: `sites` and `trucks` name them; post a new network plan)",
        **PROBLEM,
    )
    def post(self, job_id):
        """Apply a done network plan: move the sites and activate every truck's plan, in one transaction

        Dispatcher or admin. Every truck and site of the snapshot must still have the version it
        had (as with If-Match; otherwise 409 naming them, nothing applied). Each served site moves to
        its truck; each truck's plan is recorded as an ordinary plan (GET /plans/{id}) and becomes
        its active plan, superseding the previous one, so the weekly trips follow it.
        """
        session = get_session()
        job = _job(job_id)
        if job.status != "done" or job.activated_at is not None:
            state = "was activated already" if job.activated_at is not None else f"is {job.status}"
            raise Problem(409, f"Network plan {job_id} {state}; only a done plan is activated, once.", kind="conflict")
        try:
            plan_ids = network_activation.activate(session, job, current_caller().name)
        except network_activation.Changed as exc:
            session.rollback()
            named = [
                f"sites {', '.join(exc.sites)}" if exc.sites else "",
                f"trucks {', '.join(exc.trucks)}" if exc.trucks else "",
            ]
            raise Problem(
                409,
                f"Changed since network plan {job_id} was computed: {'; '.join(n for n in named if n)}. "
                "Nothing was applied; post a new network plan.",
                kind="inputs-changed",
                extensions={"sites": list(exc.sites), "trucks": list(exc.trucks)},
            ) from exc
        except network_activation.AlreadyActivated as exc:
            session.rollback()
            raise Problem(409, str(exc), kind="conflict") from exc
        except Exception:
            session.rollback()
            raise
        session.commit()
        session.refresh(job)
        body = job_json(job) | {"plans": plan_ids}
        return Response(json.dumps(body), mimetype="application/json")
