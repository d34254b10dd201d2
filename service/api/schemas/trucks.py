"""Truck schemas."""

import datetime as dt
import re

import marshmallow as ma

from service.api.fields import JsonBool, JsonFloat, JsonInt, Range
from service.api.pagination import PageArgsSchema
from service.api.schemas.calendar import CalendarSchema
from service.api.schemas.common import code_field_validate, name_validate, nonnegative, positive

#: ``HH:MM`` or ``HH:MM:SS`` on a 24-hour clock (ISO 8601 extended format, no fraction, no offset).
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
