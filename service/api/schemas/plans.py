"""Schemas of recorded plans, the weekly trips and tank readings."""

import marshmallow as ma

from service.api.fields import (
    DATE_RANGE,
    WEEK_PATTERN,
    WEEK_RANGE,
    BoundedAwareDateTime,
    BoundedDate,
    IdKey,
    JsonFloat,
    JsonInt,
)
from service.api.pagination import PageArgsSchema
from service.api.schemas.calculations import STATUS_DESCRIPTION, STATUSES, JointFieldsSchema
from service.api.schemas.common import AMOUNT_MAX, StrictSchema

PLAN_METHODS = ("power_of_two", "integer", "best")


class PlanRequestSchema(StrictSchema):
    method = ma.fields.String(load_default="best", validate=ma.validate.OneOf(PLAN_METHODS))
    base_days = JsonInt(load_default=None, allow_none=True, validate=ma.validate.Range(min=1, max=3660))
    start_date = BoundedDate(
        load_default=None,
        allow_none=True,
        metadata={
            "description": "Day 0 of the plan's calendar (default: today in the service time zone), "
            f"{DATE_RANGE}; the plan uses the truck's stored calendar from this day"
        },
    )


class PlanSchema(JointFieldsSchema):
    id = ma.fields.Integer()
    truck = ma.fields.String()
    status = ma.fields.String(validate=ma.validate.OneOf(["proposed", "active", "superseded"]))
    planning_status = ma.fields.String(
        validate=ma.validate.OneOf([s for s in STATUSES if s != "infeasible"]),
        metadata={"description": "The joint result's status (an infeasible result is never recorded): " + STATUS_DESCRIPTION},
    )
    stale = ma.fields.Boolean()
    changed_sites = ma.fields.List(ma.fields.String())
    start_date = ma.fields.Date()
    created_at = ma.fields.DateTime()
    created_by = ma.fields.String()
    inputs = ma.fields.Dict(
        metadata={
            "description": "Snapshot of the truck's (with its calendar) and every site's parameters with versions"
        }
    )
    inputs_digest = ma.fields.String(metadata={"description": "SHA-256 of the canonical JSON of inputs"})


class PlanListSchema(ma.Schema):
    items = ma.fields.List(ma.fields.Nested(PlanSchema))


class IdPageArgsSchema(PageArgsSchema):
    """Pages keyed by a numeric id: ``after`` is that id."""

    after = IdKey(metadata={"description": "The id of the last item of the previous page (Link header)"})


class PlanQueryArgsSchema(IdPageArgsSchema):
    pass


class TripsQueryArgsSchema(StrictSchema):
    week = ma.fields.String(
        metadata={"description": f"ISO 8601 week, e.g. 2026-W50 (Monday to Sunday), {WEEK_RANGE}"},
        validate=ma.validate.Regexp(WEEK_PATTERN, error=f"Use an ISO 8601 week such as 2026-W50, {WEEK_RANGE}."),
    )
    from_ = BoundedDate(data_key="from", metadata={"description": f"First day, {DATE_RANGE}"})
    to = BoundedDate(metadata={"description": f"Last day, {DATE_RANGE}"})


NOTICE_KINDS = ("run_out_risk", "limits_changed", "plan_stale", "no_recent_reading", "calendar")


class NoticeSchema(ma.Schema):
    kind = ma.fields.String(
        validate=ma.validate.OneOf(NOTICE_KINDS),
        metadata={
            "description": "run_out_risk: the tank is projected below its safety stock on `date`; "
            "limits_changed: a site or truck limit changed since the plan (tank_capacity, safe_fill, "
            "safety_stock, capacity, max_stops, active) and cut this stop's quantity, dropped a stop or "
            "took a site out; the message names the field and both values; plan_stale: the plan's "
            "inputs changed (the message names which fields of which sites or truck); "
            "no_recent_reading: the site's quantities are not corrected by a recent reading; "
            "calendar: deliveries fall on a date the truck does not work (a closed date, a holiday of its "
            "holiday_region, or a weekday it no longer works) and no earlier working day has room for "
            "them within the truck's and the tanks' limits; the message names the date and the sites"
        },
    )
    message = ma.fields.String()
    site = ma.fields.String(allow_none=True)
    date = ma.fields.Date(allow_none=True)


class DatedStopSchema(ma.Schema):
    site = ma.fields.String()
    planned_quantity = ma.fields.Float()
    quantity = ma.fields.Float(metadata={"description": "What to load and deliver, corrected by the latest reading"})
    projected_level_before = ma.fields.Float(allow_none=True)
    warnings = ma.fields.List(ma.fields.Nested(NoticeSchema))


class DatedTripSchema(ma.Schema):
    date = ma.fields.Date()
    trip = ma.fields.Integer(metadata={"description": "1-based index of the trip within its date"})
    load = ma.fields.Float()
    stops = ma.fields.List(ma.fields.Nested(DatedStopSchema))


class TripsSchema(ma.Schema):
    truck = ma.fields.String()
    plan_id = ma.fields.Integer()
    from_ = ma.fields.Date(data_key="from")
    to = ma.fields.Date()
    trips = ma.fields.List(ma.fields.Nested(DatedTripSchema))
    warnings = ma.fields.List(ma.fields.Nested(NoticeSchema))


class ReadingRequestSchema(StrictSchema):
    level = JsonFloat(required=True, validate=ma.validate.Range(min=0, max=AMOUNT_MAX))
    measured_at = BoundedAwareDateTime(
        required=True,
        format="iso",
        metadata={"description": f"ISO 8601 with a UTC offset; not in the future; its date {DATE_RANGE}"},
    )


class ReadingSchema(ma.Schema):
    id = ma.fields.Integer()
    site = ma.fields.String()
    level = ma.fields.Float()
    measured_at = ma.fields.DateTime()
    created_at = ma.fields.DateTime()
    created_by = ma.fields.String()


class ReadingListSchema(ma.Schema):
    items = ma.fields.List(ma.fields.Nested(ReadingSchema))
