"""Truck schemas."""

import datetime as dt
import re

import marshmallow as ma

from service.api.fields import JsonBool, JsonFloat, JsonInt, Range
from service.api.pagination import PageArgsSchema
from service.api.schemas.calendar import CalendarSchema, no_repeats
from service.api.schemas.common import POSITIVE_MIN, code_field_validate, name_validate, nonnegative, positive

#: ``HH:MM`` or ``HH:MM:SS`` on a 24-hour clock (ISO 8601 extended format, no fraction, no offset).
#: Compartments per truck: the exact loading search tries up to 2^C subsets (planning/fleet/compartments.py).
MAX_COMPARTMENTS = 12
MAX_PRODUCTS = 50
CLOCK_PATTERN = r"^([01][0-9]|2[0-3]):[0-5][0-9](:[0-5][0-9])?$"


class ClockTime(ma.fields.Time):
    """A local time of day written ``HH:MM`` or ``HH:MM:SS`` (nothing else, not even a fraction)."""

    default_error_messages = {"invalid": "Not a valid time: write HH:MM or HH:MM:SS, e.g. 06:00."}

    def _deserialize(self, value, attr, data, **kwargs):  # type: ignore[no-untyped-def]
        if not isinstance(value, str) or not re.fullmatch(CLOCK_PATTERN, value):
            raise self.make_error("invalid")
        return super()._deserialize(value, attr, data, **kwargs)


class TruckSchema(CalendarSchema):
    code = ma.fields.String(required=True, validate=code_field_validate)
    name = ma.fields.String(required=True, validate=name_validate)
    dispatch_cost = JsonFloat(
        required=True,
        validate=nonnegative(),
        metadata={"description": "Cost of one truck trip, in the service currency"},
    )
    capacity = JsonFloat(
        required=True, validate=positive(), metadata={"description": "Quantity one trip can carry, in the service unit"}
    )
    max_stops = JsonInt(load_default=None, allow_none=True, validate=Range(min=1, max=1000))
    shift_start = ClockTime(
        load_default=dt.time(6, 0),
        metadata={
            "description": "Local time of day deliveries are made (HH:MM or HH:MM:SS), default 06:00",
            "pattern": CLOCK_PATTERN,
        },
    )
    depot = ma.fields.String(
        load_default=None,
        allow_none=True,
        validate=code_field_validate,
        metadata={"description": "Code of the depot the truck starts and ends its trips at"},
    )
    cost_per_km = JsonFloat(
        load_default=0.0,
        validate=nonnegative(),
        metadata={"description": "Cost of one km of route, in the service currency; default 0"},
    )
    compartments = ma.fields.List(
        JsonFloat(validate=positive()),
        load_default=None,
        allow_none=True,
        validate=ma.validate.Length(min=1, max=MAX_COMPARTMENTS),
        metadata={
            "description": "Capacities of the compartments, one product per compartment; they sum to "
            "`capacity`. null: one undivided tank"
        },
    )
    products = ma.fields.List(
        ma.fields.String(validate=code_field_validate),
        load_default=None,
        allow_none=True,
        validate=[ma.validate.Length(min=1, max=MAX_PRODUCTS), no_repeats("product")],
        metadata={
            "description": "Codes of the products the truck may carry, each once; null: any",
            "uniqueItems": True,
        },
    )
    shift_hours = JsonFloat(
        load_default=None,
        allow_none=True,
        validate=Range(min=POSITIVE_MIN, max=24),
        metadata={
            "description": "Hours a day's trips may last in all (driving, stops and loading), (0, 24]; needs "
            "`average_speed_kmh`. null: the day is not limited"
        },
    )
    average_speed_kmh = JsonFloat(
        load_default=None,
        allow_none=True,
        validate=positive(),
        metadata={"description": "Mean road speed used to time trips, km/h, > 0; null: trips are not timed"},
    )
    stop_minutes = JsonFloat(
        load_default=None,
        allow_none=True,
        validate=nonnegative(),
        metadata={"description": "Minutes spent at each stop (>= 0); null counts as 0"},
    )
    load_minutes = JsonFloat(
        load_default=None,
        allow_none=True,
        validate=nonnegative(),
        metadata={"description": "Minutes of loading at the depot per trip (>= 0); null counts as 0"},
    )
    active = JsonBool(load_default=True)
    version = ma.fields.Integer(dump_only=True)
    created_at = ma.fields.DateTime(dump_only=True)
    updated_at = ma.fields.DateTime(dump_only=True)


class TruckPatchSchema(TruckSchema):
    class Meta:
        exclude = ("code",)


class TruckListSchema(ma.Schema):
    items = ma.fields.List(ma.fields.Nested(TruckSchema))


class TruckQueryArgsSchema(PageArgsSchema):
    pass
