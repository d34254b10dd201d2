"""Truck schemas."""

import datetime as dt

import marshmallow as ma

from service.api.fields import JsonBool, JsonFloat, JsonInt, Range
from service.api.pagination import PageArgsSchema
from service.api.schemas.calendar import CalendarSchema
from service.api.schemas.common import code_field_validate, name_validate, nonnegative, positive


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
    shift_start = ma.fields.Time(
        load_default=dt.time(6, 0),
        format="iso",
        metadata={"description": "Local time of day deliveries are made (HH:MM or HH:MM:SS), default 06:00"},
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
