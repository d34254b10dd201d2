"""Depot and product schemas (the fleet level, issue 16)."""

import marshmallow as ma

from service.api.fields import JsonFloat, Range
from service.api.pagination import PageArgsSchema
from service.api.schemas.common import StrictSchema, code_field_validate, name_validate


class DepotSchema(StrictSchema):
    code = ma.fields.String(required=True, validate=code_field_validate)
    name = ma.fields.String(required=True, validate=name_validate)
    latitude = JsonFloat(
        required=True, validate=Range(min=-90, max=90), metadata={"description": "WGS 84 latitude, degrees"}
    )
    longitude = JsonFloat(
        required=True, validate=Range(min=-180, max=180), metadata={"description": "WGS 84 longitude, degrees"}
    )
    version = ma.fields.Integer(dump_only=True)
    created_at = ma.fields.DateTime(dump_only=True)
    updated_at = ma.fields.DateTime(dump_only=True)


class DepotPatchSchema(DepotSchema):
    class Meta:
        exclude = ("code",)


class DepotListSchema(ma.Schema):
    items = ma.fields.List(ma.fields.Nested(DepotSchema))


class ProductSchema(StrictSchema):
    code = ma.fields.String(required=True, validate=code_field_validate)
    name = ma.fields.String(required=True, validate=name_validate)
    safe_fill = JsonFloat(
        required=True,
        validate=Range(min=0.01, max=1.0),
        metadata={
            "description": "Default fraction of a tank of this product that may be filled, (0, 1]; "
            "e.g. LPG 0.80–0.85 (OSHA 1910.110), liquid fuels 0.90–0.95 (IFC 5704.2.9.7.5, 40 CFR "
            "280.20(c)); local codes and licensed practice decide"
        },
    )
    created_at = ma.fields.DateTime(dump_only=True)


class ProductListSchema(ma.Schema):
    items = ma.fields.List(ma.fields.Nested(ProductSchema))


class FleetQueryArgsSchema(PageArgsSchema):
    pass
