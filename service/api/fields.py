"""Strict input fields, and the ranges every input shares.

Numbers: plain marshmallow coerces ``"5"`` to 5 and truncates ``12.7`` to 12 for integers
(``tests/api/test_bad_inputs.py`` sends both); these fields refuse both.

Ranges stated once, here, so that no input reaches the database or the date arithmetic that
either cannot hold (each used to answer 500, or 503 "not available" from PostgreSQL):

* ids: :data:`ID_MAX`, the largest value of their column type (:class:`IdConverter` in paths,
  :class:`IdKey` in queries);
* text: :func:`storable`, applied to every string field of a ``StrictSchema``, and to every path
  and query value by ``service.api.blueprint.guard_text``;
* dates: :data:`FIRST_DATE` … :data:`LAST_DATE` (:class:`BoundedDate`, :class:`BoundedAwareDateTime`,
  :data:`WEEK_PATTERN`).
"""

from __future__ import annotations

import datetime as dt
import math
import numbers
import re
from typing import Any

import marshmallow as ma
from werkzeug.routing import IntegerConverter

#: Ids are ``integer`` columns: 4 bytes on PostgreSQL, so none is above 2^31 − 1, and PostgreSQL
#: refuses a larger parameter ("integer out of range") instead of finding nothing.
ID_MAX = 2**31 - 1
_ID_RANGE = f"Must be an id between 1 and {ID_MAX}."

#: What no text column can hold: U+0000 (PostgreSQL's text types refuse NUL) and the surrogate
#: code points U+D800–U+DFFF (not characters: UTF-8, which both databases store, cannot encode one
#: alone; JSON can still spell them as ``"\ud800"``).
UNSTORABLE = re.compile("[\x00\ud800-\udfff]")
#: The rule as a JSON Schema pattern for the OpenAPI document of free-text fields: NUL only. JSON
#: Schema patterns are ECMA-262 regexes over UTF-16 code units, where a surrogate range would also
#: refuse every character outside the Basic Multilingual Plane (stored as a surrogate pair), and
#: some validators cannot compile one; lone surrogates are refused by the server all the same.
STORABLE_PATTERN = r"^[^\u0000]*$"

#: Every date the service accepts. Far enough from Python's ``date.min``/``date.max`` that the
#: date arithmetic behind an answer (trips windows, the readings look-back, cycles of up to
#: 3 660 days after a plan's start) cannot overflow; wide enough for any real plan or reading.
FIRST_DATE = dt.date(1970, 1, 1)
LAST_DATE = dt.date(2200, 12, 31)
DATE_RANGE = f"between {FIRST_DATE.isoformat()} and {LAST_DATE.isoformat()}"
#: ISO 8601 weeks of the years FIRST_DATE.year to LAST_DATE.year (1970-W01 to 2200-W52; the
#: pattern states the same years, so the OpenAPI document shows them).
WEEK_PATTERN = r"^(19[7-9][0-9]|20[0-9]{2}|21[0-9]{2}|2200)-W(0[1-9]|[1-4][0-9]|5[0-3])$"
WEEK_RANGE = f"from {FIRST_DATE.year}-W01 to {LAST_DATE.year}-W52"


def readable(number: float) -> str:
    """A limit as people write it: ``0.000001``, ``0.01``, ``1``, ``1 000 000 000 000`` (not ``1e-06``
    or ``1000000000000.0``); thousands are grouped with spaces, as README.md writes them."""
    text = f"{number:.12f}".rstrip("0").rstrip(".") if number != int(number) else str(int(number))
    whole, dot, fraction = text.partition(".")
    sign = "-" if whole.startswith("-") else ""
    digits = whole.lstrip("-")
    grouped = f"{int(digits):,}".replace(",", " ") if len(digits) > 4 else digits
    return sign + grouped + dot + fraction


class Range(ma.validate.Range):
    """marshmallow's Range, with its limits written by :func:`readable` in the message."""

    # Formatted twice: marshmallow fills in the operator words first (none here), then the limits.
    message_min = "Must be {{min}} or more."
    message_max = "Must be {{max}} or less."
    message_all = "Must be between {{min}} and {{max}}."

    def _format_error(self, value: Any, message: str) -> str:
        low = None if self.min is None else readable(self.min)
        high = None if self.max is None else readable(self.max)
        return (self.error or message).format(input=value, min=low, max=high)


def unstorable(text: str) -> str | None:
    """The first character of ``text`` that cannot be stored, described for a person; ``None`` if none."""
    match = UNSTORABLE.search(text)
    if match is None:
        return None
    code = ord(match[0])
    return "a NUL character (U+0000)" if code == 0 else f"a lone surrogate (U+{code:04X})"


def storable(value: str) -> None:
    """A marshmallow validator: text that :func:`unstorable` passes."""
    character = unstorable(value)
    if character is not None:
        raise ma.ValidationError(cannot_store(character))


def cannot_store(character: str) -> str:
    return f"Contains {character}, which cannot be stored."


class JsonFloat(ma.fields.Float):
    """A finite JSON number."""

    default_error_messages = {"invalid": "Not a number (send a JSON number, not a string or boolean)."}

    def __init__(self, **kwargs: Any) -> None:
        kwargs.setdefault("allow_nan", False)
        super().__init__(**kwargs)

    def _deserialize(self, value: Any, attr: str | None, data: Any, **kwargs: Any) -> float:
        if isinstance(value, bool) or not isinstance(value, numbers.Real):
            raise self.make_error("invalid")
        if isinstance(value, int) and abs(value) > 1e300:
            raise self.make_error("too_large")
        result = float(value)
        if not math.isfinite(result):
            raise self.make_error("special")
        return result


class JsonInt(ma.fields.Integer):
    """A JSON integer; an integral float such as ``12.0`` is accepted (JSON Schema allows it)."""

    default_error_messages = {"invalid": "Not a whole number (send a JSON integer, not a string, boolean or fraction)."}

    def _deserialize(self, value: Any, attr: str | None, data: Any, **kwargs: Any) -> int:
        if isinstance(value, bool) or not isinstance(value, numbers.Real):
            raise self.make_error("invalid")
        if isinstance(value, float):
            if not math.isfinite(value) or not value.is_integer():
                raise self.make_error("invalid")
            value = int(value)
        # |value| > 2^53, and int(value), spelled with what typeshed's numbers.Real declares (<, <=, trunc)
        if value < -(2**53) or not value <= 2**53:
            raise self.make_error("invalid")
        return int(math.trunc(value))


class JsonBool(ma.fields.Boolean):
    """A JSON ``true``/``false``; marshmallow's Boolean would also take 0, 1, "yes", "on" (found by fuzzing)."""

    default_error_messages = {"invalid": "Not a boolean (send JSON true or false)."}

    def _deserialize(self, value: Any, attr: str | None, data: Any, **kwargs: Any) -> bool:
        if not isinstance(value, bool):
            raise self.make_error("invalid")
        return value


class IdKey(ma.fields.Integer):
    """An id in a query string (a page key): ASCII digits, 1 to :data:`ID_MAX`."""

    default_error_messages = {
        "invalid": "Not an id (send digits only, e.g. the id from the Link header).",
        "range": _ID_RANGE,
    }

    def __init__(self, **kwargs: Any) -> None:
        super().__init__(validate=ma.validate.Range(min=1, max=ID_MAX, error=_ID_RANGE), **kwargs)

    def _deserialize(self, value: Any, attr: str | None, data: Any, **kwargs: Any) -> int:
        # int() alone would also take " 12", "1_2" and non-ASCII digits.
        if not isinstance(value, str) or not value.isascii() or not value.isdigit():
            raise self.make_error("invalid")
        if len(value.lstrip("0")) > len(str(ID_MAX)):  # no need to convert thousands of digits
            raise self.make_error("range")
        return super()._deserialize(value, attr, data, **kwargs)


class IdConverter(IntegerConverter):
    """``<id:name>`` in a route: a row id, 1 to :data:`ID_MAX`; any other matches no route (404).

    flask-smorest documents its ``min`` and ``max`` (it maps converters by class, subclasses too).
    """

    def __init__(self, url_map: Any) -> None:
        super().__init__(url_map, min=1, max=ID_MAX)


class BoundedDate(ma.fields.Date):
    """An ISO 8601 date between :data:`FIRST_DATE` and :data:`LAST_DATE`."""

    default_error_messages = {"range": f"Use a date {DATE_RANGE}."}

    def _deserialize(self, value: Any, attr: str | None, data: Any, **kwargs: Any) -> dt.date:
        result = super()._deserialize(value, attr, data, **kwargs)
        if not FIRST_DATE <= result <= LAST_DATE:
            raise self.make_error("range")
        return result


class BoundedAwareDateTime(ma.fields.AwareDateTime):
    """An ISO 8601 date-time with a UTC offset whose date, as written, lies in the date range.

    The date is checked before any conversion to UTC, which itself overflows near year 1 or 9999
    (``0001-01-01T00:00:00+14:00``).
    """

    default_error_messages = {
        "range": f"Use a date {DATE_RANGE}.",
        "invalid": "Not a valid date and time: write ISO 8601 with a UTC offset, e.g. 2026-12-07T06:30:00+00:00.",
        "invalid_awareness": "The time has no UTC offset: add a UTC offset such as +00:00 "
        "(e.g. 2026-12-07T06:30:00+00:00).",
    }

    def _deserialize(self, value: Any, attr: str | None, data: Any, **kwargs: Any) -> dt.datetime:
        result = super()._deserialize(value, attr, data, **kwargs)
        if not FIRST_DATE <= result.date() <= LAST_DATE:
            raise self.make_error("range")
        return result
