"""Pieces shared by the resource schemas."""

import re
from typing import Any

import marshmallow as ma

from service.api.fields import STORABLE_PATTERN, Range, storable

#: 1–40 of A–Z, a–z, 0–9, '.', '_', '-', and not dots only: a code is a URL path segment, and
#: clients remove ``.`` and ``..`` segments from paths (RFC 3986 §5.2.4), so such a site or truck
#: could not be reached; longer runs of dots are refused with them. ``$`` also matches before a
#: final newline in Python, so the validator matches the whole string (``fullmatch``); the pattern
#: is what the OpenAPI document states.
CODE_PATTERN = r"^(?!\.+$)[A-Za-z0-9._-]{1,40}$"
_CODE_ERROR = "Use 1–40 of A–Z, a–z, 0–9, '.', '_' or '-', and not only dots (a URL cannot reach '.' or '..')."


class _WholeCode(ma.validate.Regexp):
    regex: re.Pattern[str]  # compiled from a str pattern

    def __call__(self, value: Any) -> Any:  # any JSON value arrives; only a matching str passes
        if not isinstance(value, str) or self.regex.fullmatch(value) is None:
            raise ma.ValidationError(self._format_error(value))
        return value


code_field_validate = _WholeCode(CODE_PATTERN, error=_CODE_ERROR)
name_validate = ma.validate.Length(min=1, max=200)

#: The smallest positive value accepted where a quantity must be > 0 (a real minimum, so the
#: OpenAPI document states the same rule the server applies).
POSITIVE_MIN = 1e-6
#: A generous ceiling for any amount (quantities, money); keeps every computed figure finite.
AMOUNT_MAX = 1e12


def positive() -> Range:
    return Range(min=POSITIVE_MIN, max=AMOUNT_MAX)


def nonnegative() -> Range:
    return Range(min=0, max=AMOUNT_MAX)


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
