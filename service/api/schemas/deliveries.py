"""Schemas of recorded deliveries, the bulk uploads, the consumption answer and apply-estimate."""

import marshmallow as ma

from service.api.fields import DATE_RANGE, BoundedAwareDateTime, JsonBool, JsonFloat, Range
from service.api.schemas.common import AMOUNT_MAX, StrictSchema, code_field_validate, positive
from service.persistence.models import NOTE_LENGTH

TIME_DESCRIPTION = f"ISO 8601 with a UTC offset; not in the future; its date {DATE_RANGE}"


class DeliveryRequestSchema(StrictSchema):
    quantity = JsonFloat(required=True, validate=positive(), metadata={"description": "Quantity delivered"})
    delivered_at = BoundedAwareDateTime(required=True, format="iso", metadata={"description": TIME_DESCRIPTION})
    truck = ma.fields.String(
        load_default=None,
        allow_none=True,
        validate=code_field_validate,
        metadata={"description": "Code of the truck that delivered (optional)"},
    )
    level_before = JsonFloat(
        load_default=None,
        allow_none=True,
        validate=Range(min=0, max=AMOUNT_MAX),
        metadata={"description": "Gauge level just before the delivery (optional; at most tank_capacity)"},
    )
    level_after = JsonFloat(
        load_default=None,
        allow_none=True,
        validate=Range(min=0, max=AMOUNT_MAX),
        metadata={"description": "Gauge level just after the delivery (optional; at most tank_capacity)"},
    )
    note = ma.fields.String(load_default=None, allow_none=True, validate=ma.validate.Length(max=NOTE_LENGTH))


class DeliverySchema(ma.Schema):
    id = ma.fields.Integer()
    site = ma.fields.String(metadata={"description": "Code of the site"})
    truck = ma.fields.String(allow_none=True, metadata={"description": "Code of the truck, if recorded"})
    quantity = ma.fields.Float()
    delivered_at = ma.fields.DateTime(metadata={"description": "When it was delivered, in UTC"})
    level_before = ma.fields.Float(allow_none=True)
    level_after = ma.fields.Float(allow_none=True)
    note = ma.fields.String(allow_none=True)
    created_at = ma.fields.DateTime(metadata={"description": "When it was recorded, in UTC"})
    created_by = ma.fields.String(metadata={"description": "Name of the token that recorded it"})


class DeliveryListSchema(ma.Schema):
    items = ma.fields.List(ma.fields.Nested(DeliverySchema))


class BulkDeliverySchema(DeliveryRequestSchema):
    """One row of ``POST /deliveries``: a delivery plus the code of its site."""

    site = ma.fields.String(required=True, validate=code_field_validate)


class BulkReadingSchema(StrictSchema):
    """One row of ``POST /readings``."""

    site = ma.fields.String(required=True, validate=code_field_validate)
    level = JsonFloat(required=True, validate=Range(min=0, max=AMOUNT_MAX))
    measured_at = BoundedAwareDateTime(required=True, format="iso", metadata={"description": TIME_DESCRIPTION})


class BulkResultSchema(ma.Schema):
    created = ma.fields.Integer(metadata={"description": "Rows recorded (all of them: all or nothing)"})


class ConsumptionArgsSchema(StrictSchema):
    days = ma.fields.Integer(
        load_default=90,
        strict=False,
        validate=Range(min=1, max=3660),
        metadata={"description": "Data window in days back from the latest reading or delivery (default 90)"},
    )


class ApplyEstimateSchema(StrictSchema):
    safety_stock = JsonBool(
        load_default=False,
        metadata={"description": "Also write the suggested safety stock (needs the site's service_level)"},
    )


class IntervalSchema(ma.Schema):
    start = ma.fields.String()
    end = ma.fields.String()
    elapsed_days = ma.fields.Float()
    start_level = ma.fields.Float()
    end_level = ma.fields.Float()
    delivered = ma.fields.Float()
    consumption = ma.fields.Float()
    residual = ma.fields.Float(allow_none=True)


class RejectedSchema(ma.Schema):
    time = ma.fields.String()
    level = ma.fields.Float()
    source = ma.fields.String(metadata={"description": "reading, level_before or level_after"})
    reason = ma.fields.String(metadata={"description": "above_capacity, below_zero, unexplained_rise, ..."})


class DriftSchema(ma.Schema):
    drifted = ma.fields.Boolean(metadata={"description": "The data show the stored demand_per_day is wrong"})
    direction = ma.fields.String(allow_none=True, metadata={"description": "higher or lower, when drifted"})
    alpha = ma.fields.Float(metadata={"description": "False-alarm probability of the test"})
    statistic = ma.fields.Float(allow_none=True)
    p_value = ma.fields.Float(allow_none=True)
    rate_low = ma.fields.Float(allow_none=True, metadata={"description": "Low end of the 1 − alpha interval"})
    rate_high = ma.fields.Float(allow_none=True, metadata={"description": "High end of the 1 − alpha interval"})
    sigma_source = ma.fields.String(allow_none=True, metadata={"description": "own, given or pooled"})
    message = ma.fields.String()


class ConsumptionSchema(ma.Schema):
    site = ma.fields.String()
    demand_per_day = ma.fields.Float(metadata={"description": "The stored demand per day"})
    days = ma.fields.Float()
    window_start = ma.fields.String(allow_none=True)
    window_end = ma.fields.String(allow_none=True)
    rate_per_day = ma.fields.Float(allow_none=True, metadata={"description": "Σ consumption / Σ elapsed days"})
    sigma_per_sqrt_day = ma.fields.Float(allow_none=True, metadata={"description": "Standard deviation per √day"})
    rate_low = ma.fields.Float(allow_none=True)
    rate_high = ma.fields.Float(allow_none=True)
    confidence = ma.fields.Float()
    n_intervals = ma.fields.Integer()
    elapsed_days = ma.fields.Float()
    intervals = ma.fields.List(ma.fields.Nested(IntervalSchema))
    excluded_intervals = ma.fields.List(ma.fields.Dict())
    rejected = ma.fields.List(ma.fields.Nested(RejectedSchema))
    drift = ma.fields.Nested(DriftSchema)
    service_level = ma.fields.Float(allow_none=True)
    cycle_days = ma.fields.Float(allow_none=True, metadata={"description": "T of z·σ·√(T + L)"})
    lead_time_days = ma.fields.Float()
    suggested_safety_stock = ma.fields.Float(
        allow_none=True, metadata={"description": "z·σ·√(T + L) for the site's service_level; null without one"}
    )
    fill_rate = ma.fields.Float(allow_none=True, metadata={"description": "Fill rate the suggested stock implies"})
