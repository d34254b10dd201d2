"""Tank readings: record one, list them. Readings never change a recorded plan."""

import datetime as dt

from flask import url_for
from flask.views import MethodView
from sqlalchemy import select

from service.api import http_headers as hh
from service.api.blueprint import Blueprint
from service.api.pagination import page
from service.api.schemas.plans import IdPageArgsSchema, ReadingListSchema, ReadingRequestSchema, ReadingSchema
from service.api.sites import site_or_404
from service.auth import allow, current_caller
from service.errors import Problem
from service.persistence import plans as plan_store
from service.persistence.db import get_session
from service.persistence.models import Reading, utcnow

PREFIX = "/sites"
blp = Blueprint("readings", __name__, description="Tank level readings")
CLOCK_SKEW = dt.timedelta(minutes=2)


def dump(reading: Reading, code: str) -> dict:
    # In UTC, as stored: the POST answer then matches every later GET whatever offset was sent.
    return {
        "id": reading.id,
        "site": code,
        "level": reading.level,
        "measured_at": reading.measured_at.astimezone(dt.UTC),
        "created_at": reading.created_at,
        "created_by": reading.created_by,
    }


@blp.route("/<string:code>/readings")
class SiteReadings(MethodView):
    @allow("dispatcher")
    @blp.arguments(ReadingRequestSchema)
    @blp.response(201, ReadingSchema, headers={"Location": hh.LOCATION})
    def post(self, body, code):
        """Record a tank reading (0 ≤ level ≤ tank_capacity; measured_at with offset, not in the future)

        Dispatcher or admin. `level` is in the service unit; `measured_at` needs its UTC offset. The
        trips answer projects each site's latest reading forward; a recorded plan never changes.
        """
        session = get_session()
        site = site_or_404(code)
        if body["level"] > site.tank_capacity:
            raise Problem(
                422,
                f"level {body['level']:g} is above the tank capacity {site.tank_capacity:g}.",
                kind="validation",
                errors=[{"pointer": "#/level", "detail": "Above tank_capacity."}],
            )
        if body["measured_at"] > utcnow() + CLOCK_SKEW:
            raise Problem(
                422,
                "measured_at is in the future.",
                kind="validation",
                errors=[{"pointer": "#/measured_at", "detail": "In the future."}],
            )
        reading = plan_store.add_reading(session, site, body["level"], body["measured_at"], current_caller().name)
        session.commit()
        return dump(reading, site.code), {"Location": url_for("readings.SiteReadings", code=site.code)}

    @allow("viewer")
    @blp.arguments(IdPageArgsSchema, location="query")
    @blp.response(200, ReadingListSchema, headers=hh.PAGED)
    def get(self, args, code):
        """Readings of a site, newest first

        Newest recorded first, at most `limit` per page; the `Link` header names the next page.
        """
        site = site_or_404(code)
        rows, headers = page(
            get_session(),
            select(Reading).where(Reading.site_id == site.id),
            Reading.id,
            args,
            descending=True,
        )
        return {"items": [dump(r, site.code) for r in rows]}, headers
