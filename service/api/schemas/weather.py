"""Weather schemas: posted daily temperatures and a site's degree-day fit."""

import marshmallow as ma

from service.api.fields import BoundedDate, JsonFloat, Range
from service.api.pagination import PageArgsSchema
from service.api.schemas.common import StrictSchema

#: Plausible air temperatures (°C): the records are −89.2 °C (Vostok) and 56.7 °C (Death Valley).
TEMPERATURE = Range(min=-90, max=60)
SOURCES = ("observed", "forecast")
#: The longest window of the degree-day fit (days): two heating seasons.
MAX_FIT_DAYS = 730


def _temperature(description: str) -> JsonFloat:
    return JsonFloat(validate=TEMPERATURE, metadata={"description": description})


class WeatherDayInSchema(StrictSchema):
    """One day: ``mean_temperature``, or ``min_temperature`` and ``max_temperature`` (mean = their average)."""

    day = BoundedDate(required=True, metadata={"description": "Calendar day (service time zone)"})
    mean_temperature = _temperature("Daily mean temperature, °C")
    min_temperature = _temperature("Daily minimum, °C (with max_temperature instead of mean_temperature)")
    max_temperature = _temperature("Daily maximum, °C (with min_temperature instead of mean_temperature)")
    source = ma.fields.String(
        validate=ma.validate.OneOf(SOURCES),
        metadata={"description": "observed or forecast; default: forecast for days after today, else observed"},
    )

    @ma.validates_schema
    def _one_mean(self, data: dict, **_kwargs: object) -> None:
        given = {k for k in ("mean_temperature", "min_temperature", "max_temperature") if k in data}
        if given == {"mean_temperature"}:
            return
        if given == {"min_temperature", "max_temperature"}:
            if data["min_temperature"] > data["max_temperature"]:
                raise ma.ValidationError("Must not be above max_temperature.", field_name="min_temperature")
            return
        raise ma.ValidationError(
            "Give mean_temperature, or min_temperature and max_temperature (not both ways).",
            field_name="mean_temperature",
        )


class WeatherDaySchema(ma.Schema):
    day = ma.fields.Date()
    mean_temperature = ma.fields.Float(metadata={"description": "°C"})
    source = ma.fields.String(metadata={"enum": list(SOURCES)})
    created_at = ma.fields.DateTime()
    created_by = ma.fields.String()


class WeatherListSchema(ma.Schema):
    items = ma.fields.List(ma.fields.Nested(WeatherDaySchema))


class WeatherQueryArgsSchema(PageArgsSchema):
    """Keyset pages by day, optionally within ``from`` … ``to`` (inclusive)."""

    after = BoundedDate(metadata={"description": "The last day of the previous page"})
    first = BoundedDate(data_key="from", metadata={"description": "First day (inclusive)"})
    last = BoundedDate(data_key="to", metadata={"description": "Last day (inclusive)"})

    @ma.validates_schema
    def _ordered(self, data: dict, **_kwargs: object) -> None:
        if "first" in data and "last" in data and data["first"] > data["last"]:
            raise ma.ValidationError("Must not be after 'to'.", field_name="from")


class WeatherPostResultSchema(ma.Schema):
    region = ma.fields.String()
    days = ma.fields.Integer(metadata={"description": "Days in the body"})
    created = ma.fields.Integer(metadata={"description": "Days not stored before"})
    replaced = ma.fields.Integer(metadata={"description": "Days that replaced a stored value"})


class WeatherFitArgsSchema(StrictSchema):
    days = ma.fields.Integer(
        load_default=90,
        strict=False,
        validate=Range(min=2, max=MAX_FIT_DAYS),
        metadata={"description": "Data window in days, ending at the latest reading"},
    )


class FitIntervalSchema(ma.Schema):
    start = ma.fields.DateTime()
    end = ma.fields.DateTime()
    elapsed_days = ma.fields.Float()
    consumption = ma.fields.Float()
    degree_days = ma.fields.Float(allow_none=True)


class RejectedLevelSchema(ma.Schema):
    time = ma.fields.DateTime()
    level = ma.fields.Float()
    reason = ma.fields.String()


def _number(description: str) -> ma.fields.Float:
    return ma.fields.Float(allow_none=True, metadata={"description": description})


class WeatherFitSchema(ma.Schema):
    """A site's consumption fitted as base load per day plus volume per degree day."""

    site = ma.fields.String()
    weather_region = ma.fields.String()
    base_temperature = ma.fields.Float(metadata={"description": "°C"})
    days = ma.fields.Integer()
    window_start = ma.fields.DateTime(metadata={"description": "Requested window: latest reading − days"})
    window_end = ma.fields.DateTime(metadata={"description": "Requested window: the latest reading"})
    weather_first_day = ma.fields.Date(allow_none=True, metadata={"description": "First day of the weather used"})
    weather_last_day = ma.fields.Date(allow_none=True, metadata={"description": "Last day of the weather used"})
    missing_weather_days = ma.fields.Integer(
        metadata={"description": "Days of the window without an observed temperature"}
    )
    n_intervals = ma.fields.Integer()
    confidence = ma.fields.Float()
    base_load_per_day = _number("b: quantity used per day whatever the weather")
    base_load_low = _number("Lower end of b's confidence interval")
    base_load_high = _number("Upper end of b's confidence interval")
    volume_per_degree_day = _number("v: quantity used per degree day (°C·day)")
    volume_per_degree_day_low = _number("Lower end of v's confidence interval")
    volume_per_degree_day_high = _number("Upper end of v's confidence interval")
    k_factor = _number("Degree days per unit of quantity, 1 / v (the dealers' K-factor)")
    sigma_per_sqrt_day = _number("Residual standard deviation per √day of the degree-day model")
    flat_rate_per_day = _number("The flat rate Σc / ΣΔ over the same intervals, for comparison")
    flat_sigma_per_sqrt_day = _number("Residual standard deviation per √day of the flat rate")
    variance_explained = _number("1 − RSS(degree days) / RSS(flat rate), weights 1/Δ")
    intervals = ma.fields.List(ma.fields.Nested(FitIntervalSchema))
    rejected = ma.fields.List(ma.fields.Nested(RejectedLevelSchema))
    message = ma.fields.String(metadata={"description": "Why there is no fit, else empty"})
