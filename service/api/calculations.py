"""Stateless what-if calculations: one site alone with the truck, and the sites of one truck.

Nothing is stored. The numbers are the planning core's (docs/planning.md). The joint schedule is
bounded work (service.bounded): a size limit, a per-token limit, and the computation in the
process pool under the planning budget. The single-site cycle is a closed formula and runs here.
"""

from flask import Response, current_app
from flask.views import MethodView

from service import bounded, schedule, working_calendar
from service.api import http_headers as hh
from service.api.blueprint import Blueprint
from service.api.schemas.calculations import (
    CycleRequestSchema,
    CycleResultSchema,
    JointRequestSchema,
    JointResultSchema,
)
from service.api.schemas.problem import ProblemSchema
from service.auth import allow
from service.errors import PROBLEM_JSON, Problem
from service.planning import PlanningInputError, SiteInput, TruckInput, plan_joint, single_site_cycle

PREFIX = "/calculations"
blp = Blueprint("calculations", __name__, description="What-if calculations (nothing is stored)")

#: Core field → request field, where the API names differ.
API_FIELD = {"capacity": "truck_capacity"}
SINGLE_CODE = "site"
SITE_KEYS = ("demand_per_day", "holding_cost", "stop_cost", "tank_capacity", "safe_fill", "safety_stock")
PROBLEM = {"schema": ProblemSchema, "content_type": PROBLEM_JSON}


def input_problem(error: PlanningInputError, *, single: bool = False, body: dict | None = None) -> Problem:
    """A 422 whose pointer names the request field (and site index) the core refused."""
    field = API_FIELD.get(error.field, error.field)
    pointer = f"#/sites/{error.index}/{field}" if error.index is not None and not single else f"#/{field}"
    if field == "tank_capacity" and body is not None and body.get("truck_capacity") is not None:
        # The core names the tank when the usable stock, capped by the truck, is under one day;
        # when the truck alone cannot carry one day of demand, the truck is the field to fix.
        site = body if single else (body["sites"][error.index] if error.index is not None else None)
        if site is not None and body["truck_capacity"] < site["demand_per_day"]:
            pointer = "#/truck_capacity"
    detail = str(error).replace(f"site `{SINGLE_CODE}`: ", "") if single else str(error)
    return Problem(422, detail, kind="planning-input", errors=[{"pointer": pointer, "detail": detail}])


@blp.route("/cycle")
class CycleCalculation(MethodView):
    @allow("dispatcher")
    @blp.arguments(CycleRequestSchema)
    @blp.response(200, CycleResultSchema)
    def post(self, body):
        """Cheapest whole-day delivery cycle of one site alone with the truck

        Nothing is stored. Returns the continuous optimum, the best whole-day cycle, its quantity and
        cost per day, and which limit binds (the tank's safe fill or the truck's capacity).
        """
        site = SiteInput(code=SINGLE_CODE, **{k: body[k] for k in SITE_KEYS})
        truck = TruckInput(dispatch_cost=body["dispatch_cost"], capacity=body["truck_capacity"])
        try:
            return single_site_cycle(site, truck).to_dict()
        except PlanningInputError as exc:
            raise input_problem(exc, single=True, body=body) from exc


@blp.route("/joint")
class JointCalculation(MethodView):
    @allow("dispatcher")
    @bounded.admitted
    @bounded.sites_limited
    @bounded.planning_limited
    @blp.arguments(JointRequestSchema)
    @blp.response(200, JointResultSchema)
    @blp.alt_response(422, description="Invalid body, or more sites than ULLAGE_MAX_PLAN_SITES", **PROBLEM)
    @blp.alt_response(
        429, description="Too many planning requests of this token", headers=hh.RETRY, **PROBLEM
    )
    @blp.alt_response(
        503, description="Planning busy, or stopped at the planning time limit", headers=hh.RETRY, **PROBLEM
    )
    def post(self, body):
        """Joint schedule of the sites of one truck on its working calendar, with the lower bound and the gap

        Nothing is stored. Computed in a planning process within the time limit; the answer holds
        each site's cycle and offset, the trips of one repeat, the cost per day and a lower bound on
        the cost of any schedule (`gap` is how far above it the schedule may be). Every trip is on a
        working day, never on a closed date or a holiday of `holiday_region`, at most `trips_per_day`
        a day. No drivable plan: 200 with status infeasible, success false, and `needed`.
        """
        sites = [SiteInput(code=s["code"], **{k: s[k] for k in SITE_KEYS}) for s in body["sites"]]
        start = body["start_date"] or schedule.today(current_app.config["ULLAGE_SETTINGS"])
        truck = working_calendar.plan_truck(
            body["dispatch_cost"],
            body["truck_capacity"],
            body["max_stops"],
            working_calendar.Calendar.of(body),
            start,
        )
        options = {
            "method": body["method"],
            "base_days": body["base_days"],
            "start_date": start,
            **bounded.planner_options(plan_joint),
        }
        try:
            # In a pool child, encoded there: the body of 100 000 listed stops is megabytes.
            result = bounded.run(bounded.joint_json, plan_joint, sites, truck, options)
        except PlanningInputError as exc:
            raise input_problem(exc, body=body) from exc
        return Response(result, mimetype="application/json")
