"""Daily mean temperatures per weather region: post them (admin), read them back.

The service never fetches weather: an admin posts observed days and forecasts, and sites with a
``weather_region`` get their heating degree days from them (docs/planning.md §11.6).
"""

from zoneinfo import ZoneInfo

from flask import current_app, request
from flask.views import MethodView
from marshmallow import ValidationError

from service.api import http_headers as hh
from service.api import weather_rows
from service.api.blueprint import Blueprint, accepts_body
from service.api.pagination import page
from service.api.schemas.common import code_field_validate
from service.api.schemas.weather import (
    WeatherListSchema,
    WeatherPostResultSchema,
    WeatherQueryArgsSchema,
)
from service.auth import allow, current_caller
from service.errors import Problem
from service.persistence import pages
from service.persistence import weather as weather_store
from service.persistence.models import WeatherDay, utcnow
from service.request_db import get_session

PREFIX = "/weather"
blp = Blueprint("weather", __name__, description="Daily mean temperatures per weather region")


def dump(day: WeatherDay) -> dict:
    return {
        "day": day.day,
        "mean_temperature": day.mean_temperature,
        "source": day.source,
        "created_at": day.created_at,
        "created_by": day.created_by,
    }


@blp.route("/<string:region>")
class RegionWeather(MethodView):
    @allow("admin")
    @accepts_body("application/json", "text/csv")
    @blp.response(200, WeatherPostResultSchema)
    @blp.doc(
        requestBody={
            "required": True,
            "description": weather_rows.FORMAT,
            "content": {
                "application/json": {
                    "schema": {"type": "array", "items": {"$ref": "#/components/schemas/WeatherDayIn"}},
                    "example": [{"day": "2026-01-05", "mean_temperature": 3.5}],
                },
                "text/csv": {"schema": {"type": "string"}, "example": weather_rows.CSV_EXAMPLE},
            },
        }
    )
    def post(self, region):
        """Post daily temperatures of a region (JSON array or CSV; all or nothing)

        Admin only. Each day gives `mean_temperature` or `min_temperature` and `max_temperature`
        (°C); re-posting a day replaces it. `source` defaults to `forecast` for days after today
        (service time zone), else `observed`. One bad row answers 422 naming each bad row and
        stores nothing.
        """
        try:
            code_field_validate(region)
        except ValidationError as exc:  # a region is named like a code
            raise Problem(
                422,
                "A weather region is 1–40 of A–Z, a–z, 0–9, '.', '_' or '-'.",
                kind="validation",
                errors=[{"pointer": "#/path/region", "detail": "Not a region code."}],
            ) from exc
        settings = current_app.config["ULLAGE_SETTINGS"]
        today = utcnow().astimezone(ZoneInfo(settings.timezone)).date()
        rows = weather_rows.parse(request.get_data(cache=False), request.mimetype, today)
        session = get_session()
        created, replaced = weather_store.post_days(session, region, rows, current_caller().name)
        session.commit()
        return {"region": region, "days": len(rows), "created": created, "replaced": replaced}

    @allow("viewer")
    @blp.arguments(WeatherQueryArgsSchema, location="query")
    @blp.response(200, WeatherListSchema, headers=hh.PAGED)
    def get(self, args, region):
        """Daily temperatures of a region, oldest first (keyset pages, optional date range)

        At most `limit` days per page ordered by day, within `from` … `to` when given; while more
        remain, the `Link` header names the next page. A region nobody posted has no days.
        """
        result = pages.weather_days_page(
            get_session(), region, args["limit"], args.get("after"), args.get("first"), args.get("last")
        )
        body, headers = page(result)
        return {"items": [dump(d) for d in body["items"]]}, headers
