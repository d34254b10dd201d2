"""Contracts the issues spell out, shared by the tests that check them."""

from service.auth import PUBLIC, SESSION

#: Fields of every joint result (issue 4 §1), also at the top level of a recorded plan.
JOINT_FIELDS = {
    "method",
    "base_days",
    "dispatch_interval_days",
    "repeat_days",
    "cost_per_day",
    "cost_breakdown",
    "lower_bound_per_day",
    "gap",
    "peak_load",
    "trips_truncated",
    "sites",
    "trips",
    "warnings",
    # issue 13: the working calendar
    "start_date",
    "status",
    "needed",
}

#: Fields of each site of a joint result (issue 4 §1; issue 13 added the pattern: period, days, longest gap).
JOINT_SITE_FIELDS = {
    "code",
    "cycle_days",
    "offset_days",
    "quantity",
    "cost_per_day",
    "binding",
    "period_days",
    "delivery_days",
    "longest_gap_days",
}

#: A truck calendar that constrains nothing (issue 13): every day, up to 24 trips a day, no closed
#: dates. For tests about something else than the calendar; the API's defaults are Monday to
#: Friday with one trip a day.
UNCONSTRAINED_CALENDAR = {"working_days": [1, 2, 3, 4, 5, 6, 7], "trips_per_day": 24}

#: (method, rule) → least role, per issues 2, 4, 5, 6 and 16.
ROUTE_ROLES = {
    ("GET", "/livez"): PUBLIC,
    ("GET", "/readyz"): PUBLIC,
    ("GET", "/metrics"): "viewer",
    ("GET", "/api/v1/openapi.json"): "viewer",
    ("GET", "/api/v1/settings"): "viewer",
    ("GET", "/api/v1/trucks"): "viewer",
    ("POST", "/api/v1/trucks"): "admin",
    ("GET", "/api/v1/trucks/<string:code>"): "viewer",
    ("PATCH", "/api/v1/trucks/<string:code>"): "admin",
    ("DELETE", "/api/v1/trucks/<string:code>"): "admin",
    ("GET", "/api/v1/depots"): "viewer",
    ("POST", "/api/v1/depots"): "admin",
    ("GET", "/api/v1/depots/<string:code>"): "viewer",
    ("PATCH", "/api/v1/depots/<string:code>"): "admin",
    ("GET", "/api/v1/products"): "viewer",
    ("POST", "/api/v1/products"): "admin",
    ("GET", "/api/v1/products/<string:code>"): "viewer",
    ("GET", "/api/v1/sites"): "viewer",
    ("POST", "/api/v1/sites"): "admin",
    ("GET", "/api/v1/sites/<string:code>"): "viewer",
    ("PATCH", "/api/v1/sites/<string:code>"): "admin",
    ("DELETE", "/api/v1/sites/<string:code>"): "admin",
    ("POST", "/api/v1/sites/import"): "admin",
    ("GET", "/api/v1/sites/export"): "viewer",
    ("POST", "/api/v1/calculations/cycle"): "dispatcher",
    ("POST", "/api/v1/calculations/joint"): "dispatcher",
    ("POST", "/api/v1/trucks/<string:code>/plans"): "dispatcher",
    ("GET", "/api/v1/trucks/<string:code>/plans"): "viewer",
    ("GET", "/api/v1/plans/<id:plan_id>"): "viewer",
    ("POST", "/api/v1/plans/<id:plan_id>/activate"): "dispatcher",
    ("GET", "/api/v1/network-plans"): "viewer",
    ("POST", "/api/v1/network-plans"): "dispatcher",
    ("GET", "/api/v1/network-plans/<id:job_id>"): "viewer",
    ("POST", "/api/v1/network-plans/<id:job_id>/activate"): "dispatcher",
    ("GET", "/api/v1/trucks/<string:code>/trips"): "viewer",
    ("GET", "/api/v1/sites/<string:code>/readings"): "viewer",
    ("POST", "/api/v1/sites/<string:code>/readings"): "dispatcher",
    # issue 15: deliveries, bulk uploads, consumption
    ("GET", "/api/v1/sites/<string:code>/deliveries"): "viewer",
    ("POST", "/api/v1/sites/<string:code>/deliveries"): "dispatcher",
    ("POST", "/api/v1/deliveries"): "dispatcher",
    ("POST", "/api/v1/readings"): "dispatcher",
    ("GET", "/api/v1/sites/<string:code>/consumption"): "viewer",
    ("POST", "/api/v1/sites/<string:code>/apply-estimate"): "admin",
    ("GET", "/api/v1/sites/<string:code>/consumption/weather"): "viewer",
    ("GET", "/api/v1/weather/<string:region>"): "viewer",
    ("POST", "/api/v1/weather/<string:region>"): "admin",
    # The status page signs people in with its own cookie session (issue 5); bearer roles do not apply.
    ("GET", "/status"): SESSION,
    ("GET", "/status/sites/<code>"): SESSION,
    ("GET", "/status/lowest"): SESSION,
    ("GET", "/status/load-sheet"): SESSION,
    ("GET", "/status/sign-in"): SESSION,
    ("POST", "/status/sign-in"): SESSION,
    ("GET", "/status/sign-out"): SESSION,
    ("POST", "/status/sign-out"): SESSION,
    ("GET", "/status/static/<path:filename>"): SESSION,
    ("GET", "/status/<path:rest>"): SESSION,
    ("POST", "/status/<path:rest>"): SESSION,
}
