"""Pieces shared by the resource schemas."""

import marshmallow as ma

#: 1–40 of A–Z, a–z, 0–9, '.', '_', '-', and not dots only: a code is a URL path segment, and
#: clients remove ``.`` and ``..`` segments from paths (RFC 3986 §5.2.4), so such a site or truck
#: could not be reached; longer runs of dots are refused with them.
CODE_PATTERN = r"^(?!\.+$)[A-Za-z0-9._-]{1,40}$"
code_field_validate = ma.validate.Regexp(
    CODE_PATTERN,
    error="Use 1–40 of A–Z, a–z, 0–9, '.', '_' or '-', and not only dots (a URL cannot reach '.' or '..').",
)
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
    """Unknown fields are refused (marshmallow's default RAISE, stated explicitly)."""

    class Meta:
        unknown = ma.RAISE
