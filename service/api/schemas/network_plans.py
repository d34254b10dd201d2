"""Schemas of network plans (issue 16): the request, the job resource and its result."""

import marshmallow as ma

from service.api.fields import DATE_RANGE, BoundedDate, JsonFloat
from service.api.schemas.calculations import STATUS_DESCRIPTION, SitePlanSchema
from service.api.schemas.common import StrictSchema
from service.api.schemas.plans import IdPageArgsSchema

JOB_STATUSES = ("queued", "running", "done", "failed")
MAX_TRUCKS = 1000


class NetworkPlanRequestSchema(StrictSchema):
    start_date = BoundedDate(
        load_default=None,
        allow_none=True,
        metadata={
            "description": f"Day 0 of every truck's plan (default: today in the service time zone), {DATE_RANGE}"
        },
    )
    trucks = ma.fields.List(
        ma.fields.String(validate=ma.validate.Length(min=1, max=80)),
        load_default=None,
        allow_none=True,
        validate=ma.validate.Length(min=1, max=MAX_TRUCKS),
        metadata={
            "description": "Codes of the active trucks to plan together, with the active sites now on them "
            "(default: every active truck and every active site)"
        },
    )
    time_budget_seconds = JsonFloat(
        load_default=None,
        allow_none=True,
        validate=ma.validate.Range(min=1, max=3600),
        metadata={
            "description": "Computing time for the job (default and largest: ULLAGE_NETWORK_PLAN_SECONDS, 280 s); "
            "when it runs out every truck not yet planned gets one quick plan and the status is time_limit"
        },
    )


class RouteStopSchema(ma.Schema):
    code = ma.fields.String(metadata={"description": "Site code"})
    quantity = ma.fields.Float()
    compartments = ma.fields.List(
        ma.fields.List(ma.fields.Float()),
        metadata={"description": "[compartment number (from 1), quantity] pieces of this stop's load"},
    )
    leg_km = ma.fields.Float(metadata={"description": "Road distance from the previous stop (or the depot)"})


class RoutedTripSchema(ma.Schema):
    day = ma.fields.Integer(metadata={"description": "Days since start_date"})
    date = ma.fields.Date()
    trip = ma.fields.Integer(metadata={"description": "1-based index within the date"})
    # The JSON field is named load: marshmallow's metaclass takes it out of the class, Schema.load stays.
    load = ma.fields.Float()  # type: ignore[assignment]
    stops = ma.fields.List(
        ma.fields.Nested(RouteStopSchema), metadata={"description": "In driving order from the truck's depot"}
    )
    return_km = ma.fields.Float(metadata={"description": "Last stop back to the depot"})
    distance_km = ma.fields.Float(metadata={"description": "The whole route"})
    cost = ma.fields.Float(metadata={"description": "dispatch_cost + cost_per_km × distance_km + the stops' costs"})
    duration_hours = ma.fields.Float(
        allow_none=True,
        metadata={
            "description": "Driving (distance_km / average_speed_kmh) plus stop_minutes per stop plus load_minutes, in "
            "hours; null when the truck has no average_speed_kmh"
        },
    )


class NetworkBreakdownSchema(ma.Schema):
    dispatch = ma.fields.Float()
    distance = ma.fields.Float()
    stops = ma.fields.Float()
    holding = ma.fields.Float()


class UtilisationSchema(ma.Schema):
    trips_per_open_day = ma.fields.Float()
    trip_share = ma.fields.Float(
        allow_none=True, metadata={"description": "Trips over open days × trips_per_day (null: no trip limit)"}
    )
    load_share = ma.fields.Float(metadata={"description": "Load over trips × capacity"})


class TruckPlanSchema(ma.Schema):
    truck = ma.fields.String()
    depot = ma.fields.String()
    source = ma.fields.String(
        validate=ma.validate.OneOf(["joint", "direct", "cyclic"]),
        metadata={"description": "Which candidate won (docs/fleet.md §6): joint, direct shipping or cyclic search"},
    )
    status = ma.fields.String(metadata={"description": STATUS_DESCRIPTION})
    sites = ma.fields.List(ma.fields.Nested(SitePlanSchema))
    trips = ma.fields.List(
        ma.fields.Nested(RoutedTripSchema), metadata={"description": "Routed trips of the first 63 days at most"}
    )
    repeat_days = ma.fields.Integer()
    cost_per_day = ma.fields.Float()
    cost_breakdown = ma.fields.Nested(NetworkBreakdownSchema)
    utilisation = ma.fields.Nested(UtilisationSchema)
    trips_truncated = ma.fields.Boolean()
    warnings = ma.fields.List(ma.fields.String())


class UnservedSchema(ma.Schema):
    code = ma.fields.String()
    reason = ma.fields.String()


class NetworkResultSchema(ma.Schema):
    status = ma.fields.String(metadata={"description": "optimal, feasible, or time_limit (the budget cut the search)"})
    success = ma.fields.Boolean(metadata={"description": "false only when no site is served"})
    message = ma.fields.String()
    assignment = ma.fields.Dict(
        keys=ma.fields.String(), values=ma.fields.String(), metadata={"description": "Site code → truck code"}
    )
    trucks = ma.fields.List(ma.fields.Nested(TruckPlanSchema))
    cost_per_day = ma.fields.Float()
    cost_breakdown = ma.fields.Nested(NetworkBreakdownSchema)
    lower_bound_per_day = ma.fields.Float(
        metadata={"description": "Bounds every plan of the served sites under any assignment (docs/fleet.md §7)"}
    )
    gap = ma.fields.Float(metadata={"description": "cost_per_day / lower_bound_per_day − 1"})
    unserved = ma.fields.List(ma.fields.Nested(UnservedSchema))
    elapsed_seconds = ma.fields.Float()
    warnings = ma.fields.List(ma.fields.String())


class NetworkPlanSchema(ma.Schema):
    id = ma.fields.Integer()
    status = ma.fields.String(validate=ma.validate.OneOf(JOB_STATUSES))
    progress = ma.fields.Float(metadata={"description": "Fraction done, 0–1"})
    elapsed_seconds = ma.fields.Float(allow_none=True, metadata={"description": "Since started (null while queued)"})
    estimated_seconds_left = ma.fields.Float(
        allow_none=True,
        metadata={"description": "elapsed × (1 − progress) / progress while running (null until progress > 0)"},
    )
    created_at = ma.fields.DateTime()
    created_by = ma.fields.String()
    started_at = ma.fields.DateTime(allow_none=True)
    finished_at = ma.fields.DateTime(allow_none=True)
    start_date = ma.fields.Date()
    time_budget_seconds = ma.fields.Float()
    trucks = ma.fields.List(ma.fields.String(), metadata={"description": "Codes of the trucks planned together"})
    site_count = ma.fields.Integer(metadata={"description": "Active sites of those trucks in the snapshot"})
    attempts = ma.fields.Integer()
    inputs_digest = ma.fields.String(metadata={"description": "SHA-256 of the canonical JSON of the input snapshot"})
    error = ma.fields.String(allow_none=True, metadata={"description": "Why the job failed (null otherwise)"})
    activated_at = ma.fields.DateTime(allow_none=True)
    activated_by = ma.fields.String(allow_none=True)
    result = ma.fields.Nested(NetworkResultSchema, allow_none=True, metadata={"description": "When done"})


class NetworkActivationSchema(NetworkPlanSchema):
    plans = ma.fields.List(
        ma.fields.Integer(),
        metadata={"description": "Ids of the truck plans recorded and activated (GET /api/v1/plans/{id})"},
    )


class NetworkPlanListSchema(ma.Schema):
    items = ma.fields.List(ma.fields.Nested(NetworkPlanSchema))


class NetworkPlanQueryArgsSchema(IdPageArgsSchema):
    pass
