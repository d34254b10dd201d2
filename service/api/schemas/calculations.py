"""Schemas of the stateless calculations and of the joint result (shared with recorded plans)."""

import marshmallow as ma

from service.api.fields import DATE_RANGE, BoundedDate, JsonFloat, JsonInt, Range
from service.api.schemas.calendar import CalendarSchema
from service.api.schemas.common import AMOUNT_MAX, StrictSchema, code_field_validate, nonnegative, positive
from service.config import MAX_PLAN_SITES
from service.planning.joint import METHODS, POLICIES

#: The schema's ceiling; the service's own limit is ULLAGE_MAX_PLAN_SITES (service.bounded).
MAX_SITES = MAX_PLAN_SITES
#: Outcome of a joint computation (issue 13): ``optimal`` only where optimality is proven.
STATUSES = ("optimal", "feasible", "infeasible", "time_limit")
STATUS_DESCRIPTION = (
    "optimal: proven cheapest for the truck and its calendar; feasible: drivable, not proven cheapest; "
    "time_limit: the best drivable plan found within the planning budget (ULLAGE_PLAN_SECONDS); "
    "infeasible: no plan keeps every trip on a working day within the truck's limits and every tank "
    "between its safety stock and safe fill (success is false, `needed` says what would make it feasible)"
)


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


class JointRequestSchema(CalendarSchema):
    dispatch_cost = JsonFloat(required=True, validate=nonnegative())
    truck_capacity = JsonFloat(load_default=None, allow_none=True, validate=positive())
    max_stops = JsonInt(load_default=None, allow_none=True, validate=Range(min=1, max=1000))
    method = ma.fields.String(load_default="best", validate=ma.validate.OneOf(METHODS))
    base_days = JsonInt(load_default=None, allow_none=True, validate=Range(min=1, max=3660))
    start_date = BoundedDate(
        load_default=None,
        allow_none=True,
        metadata={"description": f"Day 0 of the plan's calendar (default: today in the service time zone), {DATE_RANGE}"},
    )
    sites = ma.fields.List(
        ma.fields.Nested(JointSiteSchema), required=True, validate=ma.validate.Length(min=1, max=MAX_SITES)
    )


class BreakdownSchema(ma.Schema):
    dispatch = ma.fields.Float()
    stops = ma.fields.Float()
    holding = ma.fields.Float()


class SitePlanSchema(ma.Schema):
    code = ma.fields.String()
    cycle_days = ma.fields.Float(
        metadata={"description": "Mean days between deliveries: period_days / len(delivery_days)"}
    )
    offset_days = ma.fields.Integer(metadata={"description": "First delivery day: delivery_days[0]"})
    quantity = ma.fields.Float(metadata={"description": "Mean delivery: demand_per_day × cycle_days"})
    cost_per_day = ma.fields.Float()
    binding = ma.fields.String(allow_none=True)
    period_days = ma.fields.Integer(metadata={"description": "Days after which the site's pattern repeats"})
    delivery_days = ma.fields.List(
        ma.fields.Integer(),
        metadata={
            "description": "The site is delivered on start_date + o + j × period_days for each o listed "
            "(0 ≤ o < period_days, sorted), before closed dates move a delivery"
        },
    )
    longest_gap_days = ma.fields.Integer(metadata={"description": "Longest gap between two deliveries, days"})


class NeededSchema(ma.Schema):
    trips_per_day = ma.fields.Integer(
        allow_none=True,
        metadata={"description": "The smallest trips_per_day that would make the plan feasible (null: none would)"},
    )
    remove_sites = ma.fields.List(
        ma.fields.String(), metadata={"description": "Sites to take off so that the rest can be planned ([] if none)"}
    )


class StopSchema(ma.Schema):
    code = ma.fields.String()
    quantity = ma.fields.Float()


class TripSchema(ma.Schema):
    day = ma.fields.Integer(metadata={"description": "Days since start_date"})
    date = ma.fields.Date(metadata={"description": "start_date + day (ISO 8601)"})
    trip = ma.fields.Integer(metadata={"description": "1-based index of the trip within its date"})
    # The JSON field is named load: marshmallow's metaclass takes it out of the class, Schema.load stays.
    load = ma.fields.Float()  # type: ignore[assignment]
    stops = ma.fields.List(ma.fields.Nested(StopSchema))


class JointFieldsSchema(ma.Schema):
    """The fields of a joint result (also at the top level of a recorded plan)."""

    method = ma.fields.String(validate=ma.validate.OneOf(POLICIES))
    base_days = ma.fields.Integer(allow_none=True)
    dispatch_interval_days = ma.fields.Integer()
    repeat_days = ma.fields.Integer()
    trips_per_repeat = ma.fields.Integer()
    cost_per_day = ma.fields.Float()
    cost_breakdown = ma.fields.Nested(BreakdownSchema)
    lower_bound_per_day = ma.fields.Float()
    gap = ma.fields.Float()
    peak_load = ma.fields.Float(metadata={"description": "Largest load of one trip"})
    trips_truncated = ma.fields.Boolean()
    sites = ma.fields.List(ma.fields.Nested(SitePlanSchema))
    trips = ma.fields.List(ma.fields.Nested(TripSchema))
    warnings = ma.fields.List(ma.fields.String())
    start_date = ma.fields.Date(metadata={"description": "Day 0 of the plan's calendar"})
    needed = ma.fields.Nested(
        NeededSchema, allow_none=True, metadata={"description": "When infeasible: what would make it feasible"}
    )


class JointResultSchema(JointFieldsSchema):
    status = ma.fields.String(validate=ma.validate.OneOf(STATUSES), metadata={"description": STATUS_DESCRIPTION})
    success = ma.fields.Boolean(metadata={"description": "false only when infeasible"})
    message = ma.fields.String()
