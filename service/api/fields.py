"""Strict JSON number fields: no strings for numbers, no booleans, no NaN/Infinity, no truncation.

Plain marshmallow coerces ``"5"`` to 5 and truncates ``12.7`` to 12 for integers
(measured, conventions-and-reliability.md B.3); these fields refuse both.
"""

from __future__ import annotations

import math
import numbers
from typing import Any

import marshmallow as ma


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
        if abs(value) > 2**53:
            raise self.make_error("invalid")
        return int(value)


class JsonBool(ma.fields.Boolean):
    """A JSON ``true``/``false``; marshmallow's Boolean would also take 0, 1, "yes", "on" (found by fuzzing)."""

    default_error_messages = {"invalid": "Not a boolean (send JSON true or false)."}

    def _deserialize(self, value: Any, attr: str | None, data: Any, **kwargs: Any) -> bool:
        if not isinstance(value, bool):
            raise self.make_error("invalid")
        return value
