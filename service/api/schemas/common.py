"""Pieces shared by the resource schemas."""

import marshmallow as ma

from service.api.fields import STORABLE_PATTERN, storable

CODE_PATTERN = r"^[A-Za-z0-9._-]{1,40}$"
code_field_validate = ma.validate.Regexp(CODE_PATTERN, error="Use 1–40 of A–Z, a–z, 0–9, '.', '_' or '-'.")
name_validate = ma.validate.Length(min=1, max=200)

#: The smallest positive value accepted where a quantity must be > 0 (a real minimum, so the
#: OpenAPI document states the same rule the server applies; conventions B.3).
POSITIVE_MIN = 1e-6
#: A generous ceiling for any amount (quantities, money); keeps every computed figure finite.
AMOUNT_MAX = 1e12


def positive() -> ma.validate.Range:
    return ma.validate.Range(min=POSITIVE_MIN, max=AMOUNT_MAX)


def nonnegative() -> ma.validate.Range:
    return ma.validate.Range(min=0, max=AMOUNT_MAX)


class StrictSchema(ma.Schema):
    """Unknown fields are refused (marshmallow's default RAISE, stated explicitly), and every string
    field refuses text that cannot be stored (NUL, lone surrogates: ``fields.storable``)."""

    class Meta:
        unknown = ma.RAISE

    def on_bind_field(self, field_name: str, field_obj: ma.fields.Field) -> None:
        if isinstance(field_obj, ma.fields.String):
            if not any(isinstance(v, ma.validate.Regexp) for v in field_obj.validators):
                # Documented as a pattern; a field with a pattern of its own states its characters.
                field_obj.metadata = {"pattern": STORABLE_PATTERN, **field_obj.metadata}
            field_obj.validators = [*field_obj.validators, storable]
