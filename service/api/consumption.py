"""A site's consumption learned from its readings and deliveries; writing the estimate into the site."""

from __future__ import annotations

from flask.views import MethodView

from service import consumption
from service.api import http_headers as hh
from service.api import usable_stock
from service.api.blueprint import Blueprint
from service.api.etags import IF_MATCH_PARAMETER, require_if_match
from service.api.schemas.deliveries import ApplyEstimateSchema, ConsumptionArgsSchema, ConsumptionSchema
from service.api.schemas.problem import ProblemSchema
from service.api.schemas.sites import SiteSchema
from service.api.sites import dump, etag, site_or_404, truck_to_check, unit
from service.auth import allow
from service.errors import PROBLEM_JSON, Problem
from service.persistence import plans as plan_store
from service.persistence import repository as repo
from service.request_db import get_session, read_engine

PREFIX = "/sites"
PROBLEM = {"schema": ProblemSchema, "content_type": PROBLEM_JSON}
blp = Blueprint("consumption", __name__, description="Consumption learned from readings and deliveries")


@blp.route("/<string:code>/consumption")
class SiteConsumption(MethodView):
    @allow("viewer")
    @blp.arguments(ConsumptionArgsSchema, location="query")
    @blp.response(200, ConsumptionSchema)
    def get(self, args, code):
        """The site's consumption estimated from its readings and recorded deliveries

        Over the last `days` days (default 90): consumption of each interval between two kept gauge
        levels is level before − level after + delivered in between; the rate is Σ consumption / Σ
        elapsed days, with its standard deviation per √day and a confidence interval (a drifted random
        walk; docs/planning.md §11). Readings rejected as outliers are listed with their reason. `drift`
        tests the stored `demand_per_day` at the false-alarm rate `alpha`. With a `service_level` the
        answer suggests a safety stock z·σ·√(T + L) and the fill rate it implies.
        """
        site = site_or_404(code)
        stamp = plan_store.change_stamp(read_engine())
        return consumption.answer(consumption.site_consumption(get_session(), site, args["days"], stamp))


@blp.route("/<string:code>/apply-estimate")
class ApplyEstimate(MethodView):
    @allow("admin")
    @blp.arguments(ApplyEstimateSchema, required=False)
    @blp.response(200, SiteSchema, headers=hh.TAGGED)
    @blp.alt_response(412, description="ETag does not match; the current one is sent", headers=hh.TAGGED, **PROBLEM)
    @blp.alt_response(
        422,
        description="Too little data for an estimate (type .../no-estimate), or the result breaks a site rule",
        **PROBLEM,
    )
    @blp.alt_response(428, description="If-Match missing", **PROBLEM)
    @blp.header_parameters(IF_MATCH_PARAMETER)
    def post(self, body, code):
        """Write the estimated rate into demand_per_day (and, if asked, the suggested safety stock)

        Admin only, with the site's If-Match. Uses the last 90 days of data, as the consumption answer
        does by default. The site's version moves on, so plans computed with the old value turn stale.
        With `safety_stock: true` the suggested safety stock is written too (needs `service_level`).
        """
        session = get_session()
        truck = truck_to_check(code, {})
        site = site_or_404(code, for_update=True)
        require_if_match(etag(site))
        result = consumption.site_consumption(session, site, consumption.DEFAULT_DAYS)
        rate = result.estimate.rate_per_day
        if not rate or rate <= 0:
            raise Problem(
                422,
                f"Too little data to estimate the consumption of {site.code}: {result.estimate.n_intervals} "
                "usable interval(s) between readings; record readings and deliveries first.",
                kind="no-estimate",
            )
        changes = {"demand_per_day": rate}
        if body["safety_stock"]:
            if result.suggested_safety_stock is None:
                raise Problem(
                    422,
                    "No suggested safety stock: set the site's service_level (and have two or more intervals).",
                    kind="no-estimate",
                )
            changes["safety_stock"] = result.suggested_safety_stock
        merged = usable_stock.values(site) | changes
        if merged["safety_stock"] >= site.safe_fill * site.tank_capacity:
            raise Problem(
                422,
                "The suggested safety stock is not below safe_fill × tank_capacity.",
                kind="validation",
                errors=[{"pointer": "#/safety_stock", "detail": "Not below safe_fill × tank_capacity."}],
            )
        usable_stock.check_site(site.code, merged, truck.code, truck.capacity, unit(), changes.keys())
        repo.apply_changes(site, changes, repo.SITE_FIELDS)
        session.commit()
        return dump(site, truck.code), {"ETag": etag(site)}
