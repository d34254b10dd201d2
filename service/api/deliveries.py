"""Recorded deliveries (what happened) and the bulk uploads of deliveries and readings.

A delivery is history: it is never recomputed. The weekly trips and the consumption estimate read
the recorded deliveries together with the readings, in time order.
"""

from __future__ import annotations

import datetime as dt
import json
from collections.abc import Callable
from typing import Any

from flask import Response, request, url_for
from flask.views import MethodView

from service import idempotency
from service.api import bulk
from service.api import http_headers as hh
from service.api.blueprint import Blueprint, accepts_body
from service.api.schemas.deliveries import (
    BulkDeliverySchema,
    BulkReadingSchema,
    BulkResultSchema,
    DeliveryListSchema,
    DeliveryRequestSchema,
    DeliverySchema,
)
from service.api.schemas.plans import IdPageArgsSchema
from service.api.schemas.problem import ProblemSchema
from service.api.sites import site_or_404
from service.auth import allow, current_caller
from service.errors import PROBLEM_JSON, Problem
from service.persistence import deliveries as store
from service.persistence import repository as repo
from service.persistence.models import Delivery, Site, utcnow
from service.request_db import get_session

PREFIX = ""
PROBLEM = {"schema": ProblemSchema, "content_type": PROBLEM_JSON}
CLOCK_SKEW = dt.timedelta(minutes=2)
blp = Blueprint("deliveries", __name__, description="Recorded deliveries; bulk uploads of deliveries and readings")
IDEMPOTENCY_PARAMETER = {
    "in": "header",
    "name": idempotency.HEADER,
    "required": False,
    "schema": {"type": "string", "pattern": r"^[\x21-\x7e]{1,255}$"},
    "description": "Optional. Same key + same body → the first response again, with "
    f"`{idempotency.REPLAYED_HEADER}: true`; kept 24 h per token.",
}
BULK_FORMAT = (
    "A JSON array of row objects, or UTF-8 CSV with a header row naming the same fields (number cells "
    f"plain ASCII decimals, empty cells left out). At most {bulk.MAX_ROWS} rows; all or nothing."
)


def bulk_upload(csv_example: str) -> Callable[[Callable[..., Any]], Callable[..., Any]]:
    """The role, media types and documentation of a bulk upload's POST (``csv_example``: a CSV body)."""
    decorators = (
        allow("dispatcher"),
        accepts_body("application/json", "text/csv"),
        blp.response(201, BulkResultSchema),
        blp.alt_response(
            413, description=f"More than {bulk.MAX_ROWS} CSV rows (a JSON array that long: 422)", **PROBLEM
        ),
        blp.alt_response(422, description="A bad row: `errors` points at each bad cell; nothing recorded", **PROBLEM),
        blp.doc(
            requestBody={
                "required": True,
                "description": BULK_FORMAT,
                "content": {
                    "application/json": {
                        "schema": {
                            "type": "array",
                            "items": {"type": "object"},
                            "minItems": 1,
                            "maxItems": bulk.MAX_ROWS,
                        }
                    },
                    "text/csv": {"schema": {"type": "string"}, "example": csv_example},
                },
            }
        ),
    )

    def decorate(view: Callable[..., Any]) -> Callable[..., Any]:
        for decorator in reversed(decorators):  # innermost first, as stacked @ lines apply
            view = decorator(view)
        return view

    return decorate


def dump(delivery: Delivery, code: str, truck_code: str | None) -> dict[str, Any]:
    return {
        "id": delivery.id,
        "site": code,
        "truck": truck_code,
        "quantity": delivery.quantity,
        "delivered_at": delivery.delivered_at.astimezone(dt.UTC),
        "level_before": delivery.level_before,
        "level_after": delivery.level_after,
        "note": delivery.note,
        "created_at": delivery.created_at,
        "created_by": delivery.created_by,
    }


def delivery_problems(site: Site, row: dict[str, Any], now: dt.datetime) -> list[tuple[str, str]]:
    """The checks of a reading, for a delivery: no future time, no level above the tank."""
    problems = []
    if row["delivered_at"] > now + CLOCK_SKEW:
        problems.append(("delivered_at", "In the future."))
    for name in ("level_before", "level_after"):
        if row.get(name) is not None and row[name] > site.tank_capacity:
            problems.append((name, f"Above tank_capacity {site.tank_capacity:g}."))
    if row["quantity"] > site.tank_capacity:
        problems.append(("quantity", f"More than the tank holds ({site.tank_capacity:g})."))
    return problems


def _refuse(problems: list[tuple[str, str]]) -> None:
    if problems:
        raise Problem(
            422,
            " ".join(f"{field}: {detail}" for field, detail in problems),
            kind="validation",
            errors=[{"pointer": f"#/{field}", "detail": detail} for field, detail in problems],
        )


def _truck_id(code: str | None, pointer: str = "#/truck") -> int | None:
    if code is None:
        return None
    truck = store.trucks_by_codes(get_session(), [code]).get(code)
    if truck is None:
        raise Problem(
            422,
            f"No truck with code {code!r}.",
            kind="validation",
            errors=[{"pointer": pointer, "detail": "No such truck."}],
        )
    return truck.id


@blp.route("/sites/<string:code>/deliveries")
class SiteDeliveries(MethodView):
    @allow("dispatcher")
    @blp.arguments(DeliveryRequestSchema)
    @blp.response(201, DeliverySchema, headers={"Location": hh.LOCATION, idempotency.REPLAYED_HEADER: hh.REPLAYED})
    @blp.alt_response(
        409, description="A request with the same Idempotency-Key is still running", headers=hh.RETRY, **PROBLEM
    )
    @blp.alt_response(
        422,
        description="Invalid body, a future time, a level above the tank, an unknown truck, or "
        "an Idempotency-Key reused with another body",
        **PROBLEM,
    )
    @blp.header_parameters(IDEMPOTENCY_PARAMETER)
    def post(self, body, code):
        """Record a delivery that was made (retry-safe with Idempotency-Key)

        Dispatcher or admin. `quantity` delivered at `delivered_at` (with its UTC offset, not in the
        future); optional `truck`, the gauge `level_before` / `level_after` (at most the tank) and a
        `note`. The weekly trips then show the stop as delivered and project from it; the consumption
        estimate counts it. Send an Idempotency-Key to retry safely: a repeat returns the first answer
        (with `Ullage-Replayed: true`) and records nothing.
        """

        def work() -> Response:
            session = get_session()
            site = site_or_404(code)
            _refuse(delivery_problems(site, body, utcnow()))
            truck_id = _truck_id(body["truck"])
            delivery = store.add_delivery(session, site, body, truck_id, current_caller().name)
            response = Response(
                json.dumps(DeliverySchema().dump(dump(delivery, site.code, body["truck"]))),
                status=201,
                mimetype="application/json",
            )
            response.headers["Location"] = url_for("deliveries.SiteDeliveries", code=site.code)
            return response

        return idempotency.run(work)

    @allow("viewer")
    @blp.arguments(IdPageArgsSchema, location="query")
    @blp.response(200, DeliveryListSchema, headers=hh.PAGED)
    def get(self, args, code):
        """Deliveries of a site, newest delivered_at first

        At most `limit` per page, newest `delivered_at` first (ties: newest recorded first); the `Link`
        header names the next page (`after` is the id of this page's last delivery).
        """
        session = get_session()
        site = site_or_404(code)
        rows, more = store.deliveries_page(session, site.id, args["limit"], args.get("after"))
        codes = repo.truck_codes(session, (r.truck_id for r in rows if r.truck_id is not None))
        headers = {}
        if more:
            link = url_for(request.endpoint, code=site.code, limit=args["limit"], after=rows[-1].id)
            headers["Link"] = f'<{link}>; rel="next"'
        return {"items": [dump(r, site.code, codes.get(r.truck_id)) for r in rows]}, headers


@blp.route("/deliveries")
class BulkDeliveries(MethodView):
    @bulk_upload("site,quantity,delivered_at\r\nHV-FARM-01,1800,2026-12-01T07:10:00+01:00\r\n")
    def post(self):
        """Record many deliveries (JSON array or CSV; all or nothing)

        Dispatcher or admin. Each row is a delivery with the `site` code; the checks of one delivery
        apply to every row. One bad row answers 422 naming each bad cell (`#/<i>/<field>` in JSON,
        `#/rows/<n>/<field>` in CSV, the header being row 1) and nothing is recorded.
        """
        session = get_session()
        now = utcnow()
        raw = bulk.raw_rows(("quantity", "level_before", "level_after"))
        sites = store.sites_by_codes(session, bulk.named(raw, "site"))
        trucks = store.trucks_by_codes(session, bulk.named(raw, "truck"))

        def check(row: dict[str, Any]) -> list[tuple[str, str]]:
            site = sites.get(row["site"])
            if site is None:
                return [("site", "No such site.")]
            problems = delivery_problems(site, row, now)
            if row["truck"] is not None and row["truck"] not in trucks:
                problems.append(("truck", "No such truck."))
            return problems

        rows = bulk.load_rows(raw, BulkDeliverySchema(), check)
        created = store.add_deliveries(
            session,
            [
                r | {"site_id": sites[r["site"]].id, "truck_id": trucks[r["truck"]].id if r["truck"] else None}
                for r in rows
            ],
            current_caller().name,
        )
        session.commit()
        return {"created": created}


@blp.route("/readings")
class BulkReadings(MethodView):
    @bulk_upload("site,level,measured_at\r\nHV-FARM-01,1240,2026-12-01T07:00:00+01:00\r\n")
    def post(self):
        """Record many tank readings (JSON array or CSV; all or nothing)

        Dispatcher or admin. For telemetry gateways and end-of-day uploads: each row has `site`,
        `level` and `measured_at`, checked as one reading is (not in the future, at most the tank).
        One bad row answers 422 naming each bad cell and nothing is recorded.
        """
        session = get_session()
        now = utcnow()
        raw = bulk.raw_rows(("level",))
        sites = store.sites_by_codes(session, bulk.named(raw, "site"))

        def check(row: dict[str, Any]) -> list[tuple[str, str]]:
            site = sites.get(row["site"])
            if site is None:
                return [("site", "No such site.")]
            problems = []
            if row["measured_at"] > now + CLOCK_SKEW:
                problems.append(("measured_at", "In the future."))
            if row["level"] > site.tank_capacity:
                problems.append(("level", f"Above tank_capacity {site.tank_capacity:g}."))
            return problems

        rows = bulk.load_rows(raw, BulkReadingSchema(), check)
        created = store.add_readings(
            session, [(sites[r["site"]].id, r["level"], r["measured_at"]) for r in rows], current_caller().name
        )
        session.commit()
        return {"created": created}
