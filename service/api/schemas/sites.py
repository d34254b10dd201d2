"""Site schemas."""

import marshmallow as ma

from service.api.fields import JsonBool, JsonFloat, Range
from service.api.pagination import PageArgsSchema
from service.api.schemas.common import (
    AMOUNT_MAX,
    StrictSchema,
    code_field_validate,
    name_validate,
    nonnegative,
    positive,
)

#: Codes that would shadow the fixed routes /api/v1/sites/import and /api/v1/sites/export.
RESERVED_SITE_CODES = ("import", "export")


#: A new site's safe fill when neither the site nor its product gives one (liquid fuels 0.90–0.95;
#: docs/fleet.md §1).
DEFAULT_SAFE_FILL = 0.9


class SiteSchema(StrictSchema):
    code = ma.fields.String(
        required=True,
        validate=[
            code_field_validate,
            ma.validate.NoneOf(RESERVED_SITE_CODES, error="'import' and 'export' are reserved route names."),
        ],
    )
    name = ma.fields.String(required=True, validate=name_validate)
    truck = ma.fields.String(
        required=True, validate=code_field_validate, metadata={"description": "Code of the truck that serves the site"}
    )
    demand_per_day = JsonFloat(required=True, validate=positive(), metadata={"description": "Quantity used per day"})
    holding_cost = JsonFloat(
        required=True, validate=nonnegative(), metadata={"description": "Currency per quantity unit per day"}
    )
    stop_cost = JsonFloat(required=True, validate=nonnegative(), metadata={"description": "Currency per delivery"})
    tank_capacity = JsonFloat(required=True, validate=positive(), metadata={"description": "Nominal tank size"})
    safe_fill = JsonFloat(
        validate=Range(min=0.01, max=1.0),
        metadata={
            "description": "Fraction of the tank that may be filled, (0, 1]. Not sent on create: the "
            f"product's safe_fill, else {DEFAULT_SAFE_FILL}; a PATCH of `product` alone keeps the stored value"
        },
    )
    safety_stock = JsonFloat(
        load_default=0.0,
        validate=Range(min=0, max=AMOUNT_MAX),
        metadata={"description": "Stock kept in reserve; below safe_fill × tank_capacity"},
    )
    active = JsonBool(load_default=True)
    latitude = JsonFloat(load_default=None, allow_none=True, validate=Range(min=-90, max=90))
    longitude = JsonFloat(load_default=None, allow_none=True, validate=Range(min=-180, max=180))
    service_level = JsonFloat(
        load_default=None,
        allow_none=True,
        validate=Range(min=0.5, max=0.9999),
        metadata={
            "description": "Cycle service level (probability of no stock-out below the safety stock in a "
            "cycle) the consumption answer sizes suggested_safety_stock for, e.g. 0.98; null: not sized"
        },
    )
    lead_time_days = JsonFloat(
        load_default=1.0,
        validate=Range(min=0, max=365),
        metadata={"description": "Days from deciding a delivery to making it (L in z·σ·√(T + L)); default 1"},
    )
    weather_region = ma.fields.String(
        load_default=None,
        allow_none=True,
        validate=code_field_validate,
        metadata={"description": "Weather region whose posted temperatures drive the site's demand (heating)"},
    )
    base_temperature = JsonFloat(
        load_default=15.5,
        validate=Range(min=-50, max=50),
        metadata={"description": "Base of the site's heating degree days, °C (15.5 UK; 18 NL, CA; 18.3 = 65 °F US)"},
    )
    product = ma.fields.String(
        load_default=None,
        allow_none=True,
        validate=code_field_validate,
        metadata={"description": "Code of the product the tank holds (GET /api/v1/products); null: not said"},
    )
    version = ma.fields.Integer(dump_only=True)
    created_at = ma.fields.DateTime(dump_only=True)
    updated_at = ma.fields.DateTime(dump_only=True)

    @ma.validates_schema
    def _safety_stock_below_safe_fill(self, data: dict, **_kwargs: object) -> None:
        if {"safety_stock", "safe_fill", "tank_capacity"} <= data.keys():
            check_safety_stock(data)


def check_safety_stock(data: dict) -> None:
    """``safety_stock`` must stay below ``safe_fill × tank_capacity``."""
    limit = data["safe_fill"] * data["tank_capacity"]
    if data["safety_stock"] >= limit:
        raise ma.ValidationError(f"Must be below safe_fill × tank_capacity = {limit:g}.", field_name="safety_stock")


class SitePatchSchema(SiteSchema):
    """Every field optional; defaults are not applied (a PATCH changes only what it names)."""

    class Meta:
        exclude = ("code",)


class SiteListSchema(ma.Schema):
    items = ma.fields.List(ma.fields.Nested(SiteSchema))


class SiteQueryArgsSchema(PageArgsSchema):
    truck = ma.fields.String(validate=code_field_validate)


class ImportArgsSchema(ma.Schema):
    dry_run = ma.fields.Boolean(load_default=False)


class ImportResultSchema(ma.Schema):
    dry_run = ma.fields.Boolean()
    created = ma.fields.Integer()
    updated = ma.fields.Integer()
    rows = ma.fields.Integer()
