"""HTTP API under ``/api/v1``: flask-smorest blueprints, marshmallow 4 schemas, problem+json errors."""

from __future__ import annotations

import http

from flask import Flask
from flask_smorest import Api as SmorestApi
from flask_smorest.utils import prepare_response

from service.api import http_headers
from service.api.fields import IdConverter
from service.api.schemas.problem import ProblemSchema
from service.errors import PROBLEM_JSON, handle_http_exception

API_PREFIX = "/api/v1"


class Api(SmorestApi):
    """flask-smorest's Api with RFC 9457 errors, documented as ``application/problem+json``."""

    ERROR_SCHEMA = ProblemSchema

    def handle_http_exception(self, error):  # type: ignore[no-untyped-def,override]
        return handle_http_exception(error)

    def _register_responses(self) -> None:
        for status in http.HTTPStatus:
            response: dict[str, object] = {"description": status.phrase}
            if status >= 400:
                response["schema"] = self.ERROR_SCHEMA
                prepare_response(response, self.spec, PROBLEM_JSON)
            else:
                prepare_response(response, self.spec, self.DEFAULT_RESPONSE_CONTENT_TYPE)
            self.spec.components.response(status.name, response, lazy=True)
        response = {
            "description": 'Error (RFC 9457 problem details); `type` names its kind (README, "Problem types")',
            "schema": self.ERROR_SCHEMA,
            # Any route may meet a database outage (503) or full storage (507), both with Retry-After.
            "headers": {"Retry-After": http_headers.RETRY_AFTER},
        }
        prepare_response(response, self.spec, PROBLEM_JSON)
        self.spec.components.response("DEFAULT_ERROR", response, lazy=True)


def init_app(app: Flask) -> Api:
    """Create the Api and register every blueprint."""
    from service.api import (  # noqa: PLC0415
        calculations,
        consumption,
        deliveries,
        depots,
        network_plans,
        plans,
        products,
        readings,
        settings,
        site_weather,
        sites,
        trucks,
        weather,
    )
    from service.api.schemas.weather import WeatherDayInSchema  # noqa: PLC0415

    app.config.update(
        API_TITLE="Ullage",
        API_VERSION="1",
        OPENAPI_VERSION="3.1.0",
        OPENAPI_URL_PREFIX=API_PREFIX,
        OPENAPI_JSON_PATH="openapi.json",
        API_SPEC_OPTIONS={
            "info": {"description": _DESCRIPTION},
            "components": {
                "securitySchemes": {"bearer": {"type": "http", "scheme": "bearer"}},
            },
            "security": [{"bearer": []}],
        },
    )
    app.url_map.converters["id"] = IdConverter  # plan ids in paths: 1 to fields.ID_MAX
    api = Api(app)
    for module in (
        settings,
        depots,
        products,
        trucks,
        sites,
        calculations,
        plans,
        network_plans,
        readings,
        deliveries,
        consumption,
        weather,
        site_weather,
    ):
        api.register_blueprint(module.blp, url_prefix=API_PREFIX + module.PREFIX)
    api.spec.components.schema("WeatherDayIn", schema=WeatherDayInSchema)  # the raw body of POST /weather/{region}
    return api


_DESCRIPTION = """\
Delivery planning for bulk-liquid tanks served by one truck: whole-day delivery cycles, joint
schedules with a lower bound, recorded plans and the weekly trips for dispatch software.

All quantities are in the service's one quantity unit and all money in its one currency
(`GET /api/v1/settings`). Every error is RFC 9457 `application/problem+json`.

**Idempotency** (`POST /api/v1/trucks/{code}/plans`): send `Idempotency-Key: "<1-255 visible
characters>"` (an sf-string per the IETF httpapi draft; bare keys are accepted too). Keys are scoped
to the calling token and kept for 24 hours. Repeating a key with the same body returns the first
response (with the response header `Ullage-Replayed: true`) and records nothing new; the same key with a different
body is refused with 422; a repeat while the first request is still running gets 409.

**Caution.** Ullage is a planning aid. Safe fill levels, overfill prevention and the handling of
flammable or hazardous liquids are governed by local codes and licensed practice; a quantity shown
here never overrides the tank's gauge, its overfill protection or the driver's checks.
"""
