"""``GET /api/v1/settings``: the service's quantity unit, currency and time zone."""

import marshmallow as ma
from flask import current_app
from flask.views import MethodView

from service.api.blueprint import Blueprint
from service.auth import allow
from service.idempotency import TTL

PREFIX = "/settings"
blp = Blueprint("settings", __name__, description="Units, currency and time zone of this service")


class SettingsSchema(ma.Schema):
    quantity_unit = ma.fields.String(metadata={"description": "Label of the one quantity unit, e.g. L, gal, m3"})
    currency = ma.fields.String(metadata={"description": "ISO 4217 code of the one currency"})
    timezone = ma.fields.String(metadata={"description": "IANA time zone that decides delivery days"})
    max_sites_per_calculation = ma.fields.Integer(
        metadata={"description": "Most sites one planning call takes (ULLAGE_MAX_PLAN_SITES)"}
    )
    max_trips_days = ma.fields.Integer(metadata={"description": "Longest trips window (ULLAGE_MAX_TRIPS_DAYS)"})
    planning_seconds = ma.fields.Float(metadata={"description": "Planning time budget (ULLAGE_PLAN_SECONDS)"})
    idempotency_key_hours = ma.fields.Integer(
        metadata={"description": "How long an Idempotency-Key and its stored answer are kept"}
    )


@blp.route("")
class Settings(MethodView):
    @allow("viewer")
    @blp.response(200, SettingsSchema)
    def get(self):
        """Units, currency and time zone

        The one quantity unit and currency every quantity and amount of the API is in, the time zone
        that decides delivery days, and the service's limits.
        """
        settings = current_app.config["ULLAGE_SETTINGS"]
        return {
            "quantity_unit": settings.quantity_unit,
            "currency": settings.currency,
            "timezone": settings.timezone,
            "max_sites_per_calculation": settings.max_plan_sites,
            "max_trips_days": settings.max_trips_days,
            "planning_seconds": settings.plan_seconds,
            "idempotency_key_hours": int(TTL.total_seconds() // 3600),
        }
