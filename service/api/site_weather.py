"""A weather site's consumption as base load per day plus volume per degree day (docs/planning.md §11.6)."""

from zoneinfo import ZoneInfo

from flask import current_app
from flask.views import MethodView

from service import weather
from service.api.blueprint import Blueprint
from service.api.schemas.problem import ProblemSchema
from service.api.schemas.weather import WeatherFitArgsSchema, WeatherFitSchema
from service.api.sites import site_or_404
from service.auth import allow
from service.errors import PROBLEM_JSON, Problem
from service.persistence.models import utcnow
from service.request_db import get_session

PREFIX = "/sites"
blp = Blueprint("site_weather", __name__, description="Weather-driven consumption of a site")
FIT_FIELDS = (
    "base_load_per_day",
    "base_load_low",
    "base_load_high",
    "volume_per_degree_day",
    "volume_per_degree_day_low",
    "volume_per_degree_day_high",
    "k_factor",
    "sigma_per_sqrt_day",
)


def _answer(site, days: int, result: weather.WeatherFit) -> dict:
    estimate = result.estimate
    fit = None if estimate is None else estimate.degree_day_fit
    out = {
        "site": site.code,
        "weather_region": site.weather_region,
        "base_temperature": site.base_temperature,
        "days": days,
        "window_start": result.requested_start,
        "window_end": result.requested_end,
        "weather_first_day": result.weather_first_day,
        "weather_last_day": result.weather_last_day,
        "missing_weather_days": result.missing_days,
        "n_intervals": 0 if estimate is None else estimate.n_intervals,
        "confidence": 0.95 if estimate is None else estimate.confidence,
        "flat_rate_per_day": None if estimate is None else estimate.rate_per_day,
        "flat_sigma_per_sqrt_day": None if estimate is None else estimate.sigma_per_sqrt_day,
        "variance_explained": None if estimate is None else weather.variance_explained(estimate),
        "intervals": [] if estimate is None else estimate.intervals,
        "rejected": [] if estimate is None else estimate.rejected,
        "message": "" if fit is not None else _why_not(result),
    }
    out |= {name: None if fit is None else getattr(fit, name) for name in FIT_FIELDS}
    return out


def _why_not(result: weather.WeatherFit) -> str:
    if result.weather_first_day is None or result.weather_last_day is None:  # both or neither
        return "No observed temperature in the window; post the region's days with POST /api/v1/weather/{region}."
    n = 0 if result.estimate is None else result.estimate.n_intervals
    if n < 2:
        return (
            f"{n} reading interval(s) between {result.weather_first_day.isoformat()} and "
            f"{result.weather_last_day.isoformat()}, the days with weather; the fit needs at least two."
        )
    return "The intervals' degree days are proportional to their lengths (no weather signal to separate)."


@blp.route("/<string:code>/consumption/weather")
class SiteWeatherFit(MethodView):
    @allow("viewer")
    @blp.arguments(WeatherFitArgsSchema, location="query")
    @blp.response(200, WeatherFitSchema)
    @blp.alt_response(
        409, description="The site has no weather_region", schema=ProblemSchema, content_type=PROBLEM_JSON
    )
    def get(self, args, code):
        """Fit the site's consumption to the weather: base load per day + volume per degree day

        Weighted least squares on the intervals between the site's readings in the last `days`
        (ending at its latest reading) that the region's observed temperatures cover without a gap:
        `c = b·Δ + v·DD` with weights 1/Δ, degree days `max(0, base_temperature − mean)`. Reports
        `b`, `v` with confidence intervals, the K-factor `1/v` (degree days per unit of quantity), the
        residual spread against the flat rate's, and the intervals used. 409 `no-weather-region` for
        a site without `weather_region`.
        """
        site = site_or_404(code)
        if site.weather_region is None:
            raise Problem(
                409,
                f"Site {site.code!r} has no weather_region; PATCH it with one to fit its consumption to the weather.",
                kind="no-weather-region",
            )
        zone = ZoneInfo(current_app.config["ULLAGE_SETTINGS"].timezone)
        result = weather.fit(get_session(), site, args["days"], zone, utcnow())
        return _answer(site, args["days"], result)
