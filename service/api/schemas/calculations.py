"""Schemas of the stateless calculations and of the joint result (shared with recorded plans)."""

import marshmallow as ma

from service.api.fields import JsonFloat, JsonInt, Range
from service.api.schemas.common import AMOUNT_MAX, StrictSchema, code_field_validate, nonnegative, positive
from service.config import MAX_PLAN_SITES

#: The schema's ceiling; the service's own limit is ULLAGE_MAX_PLAN_SITES (service.bounded).
MAX_SITES = MAX_PLAN_SITES
METHODS = ("power_of_two", "integer", "best")


class SiteParamsSchema(StrictSchema):
    demand_per_day = JsonFloat(required=True, validate=positive())
    holding_cost = JsonFloat(required=True, validate=nonnegative())
    stop_cost = JsonFloat(required=True, validate=nonnegative())
    tank_capacity = JsonFloat(required=True, validate=positive())
    safe_fill = JsonFloat(load_default=0.9, validate=Range(min=0.01, max=1.0))
    safety_stock = JsonFloat(load_default=0.0, validate=Range(min=0, max=AMOUNT_MAX))


class CycleRequestSchema(SiteParamsSchema):
    dispatch_cost = JsonFloat(required=True, validate=nonnegative())
    truck_capacity = JsonFloat(load_default=None, allow_none=True, validate=positive())


class CycleResultSchema(ma.Schema):
    cycle_days_continuous = ma.fields.Float()
    cost_per_day_continuous = ma.fields.Float()
    cycle_days = ma.fields.Integer()
    quantity = ma.fields.Float()
    cost_per_day = ma.fields.Float()
    binding = ma.fields.String(allow_none=True, validate=ma.validate.OneOf(["tank", "truck"]))


class JointSiteSchema(SiteParamsSchema):
    code = ma.fields.String(required=True, validate=code_field_validate)


class JointRequestSchema(StrictSchema):
    dispatch_cost = JsonFloat(required=True, validate=nonnegative())
    truck_capacity = JsonFloat(load_default=None, allow_none=True, validate=positive())
    max_stops = JsonInt(load_default=None, allow_none=True, validate=Range(min=1, max=1000))
    method = ma.fields.String(load_default="best", validate=ma.validate.OneOf(METHODS))
    base_days = JsonInt(load_default=None, allow_none=True, validate=Range(min=1, max=3660))
    sites = ma.fields.List(
        ma.fields.Nested(JointSiteSchema), required=True, validate=ma.validate.Length(min=1, max=MAX_SITES)
    )


class BreakdownSchema(ma.Schema):
    dispatch = ma.fields.Float()
    stops = ma.fields.Float()
    holding = ma.fields.Float()


class SitePlanSchema(ma.Schema):
    code = ma.fields.String()
    cycle_days = ma.fields.Integer()
    offset_days = ma.fields.Integer()
    quantity = ma.fields.Float()
    cost_per_day = ma.fields.Float()
    binding = ma.fields.String(allow_none=True)


class StopSchema(ma.Schema):
    code = ma.fields.String()
    quantity = ma.fields.Float()


class TripSchema(ma.Schema):
    day = ma.fields.Integer()
    load = ma.fields.Float()
    stops = ma.fields.List(ma.fields.Nested(StopSchema))


class JointFieldsSchema(ma.Schema):
    """The fields of a joint result (also at the top level of a recorded plan)."""

    method = ma.fields.String(validate=ma.validate.OneOf(["power_of_two", "integer"]))
    base_days = ma.fields.Integer(allow_none=True)
    dispatch_interval_days = ma.fields.Integer()
    repeat_days = ma.fields.Integer()
    trips_per_repeat = ma.fields.Integer()
    cost_per_day = ma.fields.Float()
    cost_breakdown = ma.fields.Nested(BreakdownSchema)
    lower_bound_per_day = ma.fields.Float()
    gap = ma.fields.Float()
    peak_load = ma.fields.Float()
    extra_trips = ma.fields.Integer()
    trips_truncated = ma.fields.Boolean()
    sites = ma.fields.List(ma.fields.Nested(SitePlanSchema))
    trips = ma.fields.List(ma.fields.Nested(TripSchema))
    warnings = ma.fields.List(ma.fields.String())


class JointResultSchema(JointFieldsSchema):
    status = ma.fields.String(metadata={"description": "optimal, or why no policy is returned"})
    success = ma.fields.Boolean()
    message = ma.fields.String()
