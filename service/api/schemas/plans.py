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
    Range,
)
from service.api.pagination import PageArgsSchema
from service.api.schemas.calculations import STATUS_DESCRIPTION, STATUSES, JointFieldsSchema, TripSchema
from service.api.schemas.common import AMOUNT_MAX, StrictSchema
from service.planning.joint import METHODS


class PlanRequestSchema(StrictSchema):
    method = ma.fields.String(load_default="best", validate=ma.validate.OneOf(METHODS))
    base_days = JsonInt(load_default=None, allow_none=True, validate=Range(min=1, max=3660))
    start_date = BoundedDate(
        load_default=None,
        allow_none=True,
        metadata={
            "description": "Day 0 of the plan's calendar (default: today in the service time zone), "
            f"{DATE_RANGE}; the plan uses the truck's stored calendar from this day"
        },
    )


class RouteLegSchema(ma.Schema):
    from_ = ma.fields.String(data_key="from", metadata={"description": "Depot code or site code the leg starts at"})
    to = ma.fields.String(metadata={"description": "Site code or depot code the leg ends at"})
    km = ma.fields.Float(metadata={"description": "Road distance: great-circle distance × circuity (1.3), km"})


class RouteSchema(ma.Schema):
    depot = ma.fields.String(metadata={"description": "Code of the truck's depot: the route starts and ends there"})
    stops = ma.fields.List(ma.fields.String(), metadata={"description": "Site codes in driving order"})
    legs = ma.fields.List(
        ma.fields.Nested(RouteLegSchema),
        metadata={"description": "Depot → first stop, …, last stop → depot (one more leg than stops)"},
    )
    km = ma.fields.Float(metadata={"description": "Route length: the sum of the legs, km"})
    exact = ma.fields.Boolean(
        metadata={"description": "The order is the proven shortest (exact dynamic programme, up to 12 stops)"}
    )


class PlanTripSchema(TripSchema):
    route = ma.fields.Nested(
        RouteSchema,
        allow_none=True,
        metadata={
            "description": "The stops in driving order from and back to the truck's current depot, from the "
            "sites' current coordinates; null when not routable (`route_note` says why)"
        },
    )
    route_note = ma.fields.String(
        allow_none=True, metadata={"description": "Why the trip is not routed (null when `route` is set)"}
    )


class PlanSchema(JointFieldsSchema):
    id = ma.fields.Integer()
    truck = ma.fields.String(metadata={"description": "Code of the truck the plan is for"})
    status = ma.fields.String(
        validate=ma.validate.OneOf(["proposed", "active", "superseded"]),
        metadata={
            "description": "proposed (recorded, not followed yet), active (the truck's one plan the trips "
            "follow), superseded (was active; may be activated again)"
        },
    )
    planning_status = ma.fields.String(
        validate=ma.validate.OneOf([s for s in STATUSES if s != "infeasible"]),
        metadata={
            "description": "The joint result's status (an infeasible result is never recorded): " + STATUS_DESCRIPTION
        },
    )
    stale = ma.fields.Boolean(
        metadata={"description": "True when a truck or site input changed since the plan was computed"}
    )
    changed_sites = ma.fields.List(
        ma.fields.String(), metadata={"description": "Codes of the sites whose inputs changed since the plan"}
    )
    start_date = ma.fields.Date(metadata={"description": "Day 0 of the plan's calendar (its first possible trip)"})
    created_at = ma.fields.DateTime()
    created_by = ma.fields.String(metadata={"description": "Name of the token that recorded the plan"})
    inputs = ma.fields.Dict(
        metadata={
            "description": "Snapshot of the truck's (with its calendar) and every site's parameters with versions"
        }
    )
    inputs_digest = ma.fields.String(metadata={"description": "SHA-256 of the canonical JSON of inputs"})
    trips = ma.fields.List(ma.fields.Nested(PlanTripSchema))


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


NOTICE_KINDS = (
    "run_out_risk",
    "empty_risk",
    "consumption_changed",
    "limits_changed",
    "plan_stale",
    "no_recent_reading",
    "calendar",
    "compartments",
)


class NoticeSchema(ma.Schema):
    kind = ma.fields.String(
        validate=ma.validate.OneOf(NOTICE_KINDS),
        metadata={
            "description": "run_out_risk: the tank is projected below its safety stock on `date`; "
            "empty_risk: the tank is projected empty on `date`; consumption_changed: the readings and "
            "deliveries show, at the stated false-alarm rate, that the stored demand_per_day is wrong (the "
            "message gives the estimate and its interval; see GET /sites/{code}/consumption); "
            "limits_changed: a site or truck limit changed since the plan (tank_capacity, safe_fill, "
            "safety_stock, capacity, max_stops, active) and cut this stop's quantity, dropped a stop or "
            "took a site out; the message names the field and both values; plan_stale: the plan's "
            "inputs changed (the message names which fields of which sites or truck); "
            "no_recent_reading: the site's quantities are not corrected by a recent reading; "
            "calendar: deliveries fall on a date the truck does not work (a closed date, a holiday of its "
            "holiday_region, or a weekday it no longer works) and no earlier working day has room for "
            "them within the truck's and the tanks' limits; the message names the date and the sites; "
            "compartments: loading one product per compartment of the truck splits a date's stops into "
            "more trips than its trips_per_day; the message names the date and the sites"
        },
    )
    message = ma.fields.String(metadata={"description": "The notice for a person: the site, the date, what to do"})
    site = ma.fields.String(allow_none=True, metadata={"description": "Code of the site concerned, if one"})
    date = ma.fields.Date(
        allow_none=True,
        metadata={
            "description": "For run_out_risk: the first day the projected level falls below the site's "
            "safety stock (the safety-stock crossing, not the day the tank runs empty); for empty_risk, the day it runs empty; for limits_changed, "
            "the delivery day concerned; otherwise null"
        },
    )


class DatedStopSchema(ma.Schema):
    site = ma.fields.String(metadata={"description": "Code of the site to deliver to"})
    sequence = ma.fields.Integer(
        allow_none=True,
        metadata={
            "description": "1-based position of the stop in driving order (the trip's `route`); null when the "
            "trip is not routed (`route_note` says why)"
        },
    )
    planned_quantity = ma.fields.Float(metadata={"description": "The quantity the recorded plan gave this stop"})
    quantity = ma.fields.Float(
        metadata={
            "description": "What to load and deliver, in the service unit: the plan's quantity corrected by "
            "the latest reading and trimmed to the current limits (room below the safe fill, truck space)"
        }
    )
    projected_level_before = ma.fields.Float(
        allow_none=True,
        metadata={
            "description": "The tank's projected level at the delivery time (the truck's shift_start of the "
            "delivery day in the service time zone), before this delivery: the latest reading minus demand_per_day for the "
            "elapsed time, plus earlier deliveries; null when the site has no usable reading"
        },
    )
    delivered_quantity = ma.fields.Float(
        allow_none=True,
        metadata={
            "description": "What was delivered, when a delivery of the site is recorded on this date (history, "
            "never recomputed; `quantity` is then the same); null otherwise"
        },
    )
    delivered_at = ma.fields.DateTime(
        allow_none=True, metadata={"description": "When the recorded delivery was made, in UTC; null otherwise"}
    )
    warnings = ma.fields.List(ma.fields.Nested(NoticeSchema), metadata={"description": "Notices about this stop"})
    compartments = ma.fields.List(
        ma.fields.List(ma.fields.Float()),
        metadata={
            "description": "[compartment number (from 1), quantity] pieces of this stop's `quantity` on a truck "
            "with compartments (one product per compartment; the trip's stops of one product share its "
            "compartments, as in a network plan's trips); empty when the quantity is 0; absent when the truck "
            "has no compartments"
        },
    )


class DatedTripSchema(ma.Schema):
    date = ma.fields.Date(metadata={"description": "Delivery day (service time zone)"})
    trip = ma.fields.Integer(metadata={"description": "1-based index of the trip within its date"})
    # The JSON field is named load: marshmallow's metaclass takes it out of the class, Schema.load stays.
    load = ma.fields.Float(  # type: ignore[assignment]
        metadata={"description": "Sum of the stops' quantity: what the truck carries out"}
    )
    stops = ma.fields.List(
        ma.fields.Nested(DatedStopSchema),
        metadata={"description": "The stops, in plan order (site code order); `sequence` gives the driving order"},
    )
    route = ma.fields.Nested(
        RouteSchema,
        allow_none=True,
        metadata={
            "description": "The stops in driving order from and back to the truck's depot with each leg's road "
            "distance; null when the truck has no depot or a stop or the depot lacks coordinates"
        },
    )
    route_note = ma.fields.String(
        allow_none=True, metadata={"description": "Why the trip is not routed (null when `route` is set)"}
    )


class TripsSchema(ma.Schema):
    truck = ma.fields.String(metadata={"description": "Code of the truck"})
    plan_id = ma.fields.Integer(metadata={"description": "Id of the active plan the trips come from"})
    from_ = ma.fields.Date(data_key="from", metadata={"description": "First day of the window"})
    to = ma.fields.Date(metadata={"description": "Last day of the window"})
    trips = ma.fields.List(ma.fields.Nested(DatedTripSchema), metadata={"description": "One item per delivery day"})
    warnings = ma.fields.List(
        ma.fields.Nested(NoticeSchema), metadata={"description": "Every notice of the window, stops' included"}
    )


class ReadingRequestSchema(StrictSchema):
    level = JsonFloat(required=True, validate=Range(min=0, max=AMOUNT_MAX))
    measured_at = BoundedAwareDateTime(
        required=True,
        format="iso",
        metadata={"description": f"ISO 8601 with a UTC offset; not in the future; its date {DATE_RANGE}"},
    )


class ReadingSchema(ma.Schema):
    id = ma.fields.Integer()
    site = ma.fields.String(metadata={"description": "Code of the site"})
    level = ma.fields.Float(metadata={"description": "Level in the tank, in the service unit"})
    measured_at = ma.fields.DateTime(metadata={"description": "When the level was measured, in UTC"})
    created_at = ma.fields.DateTime(metadata={"description": "When the reading was recorded, in UTC"})
    created_by = ma.fields.String(metadata={"description": "Name of the token that recorded it"})


class ReadingListSchema(ma.Schema):
    items = ma.fields.List(ma.fields.Nested(ReadingSchema))
