"""The body of ``POST /api/v1/weather/{region}``: a JSON array or CSV of days, checked all or nothing.

Each row is validated with ``WeatherDayInSchema`` (JSON and CSV alike). Errors point at the row:
``#/<index>/<field>`` in a JSON array (0-based), ``#/rows/<row>/<column>`` in CSV (rows as a
spreadsheet numbers them: the header is row 1). A day may appear once per body. ``source``
defaults to ``forecast`` for a day after today (service time zone), else ``observed``; an
``observed`` day after today is refused.
"""

from __future__ import annotations

import csv
import datetime as dt
import io
import json
import re
from typing import Any

from marshmallow import ValidationError

from service.api.schemas.weather import WeatherDayInSchema
from service.errors import Problem, flatten_messages

MAX_ROWS = 5000
COLUMNS = ("day", "mean_temperature", "min_temperature", "max_temperature", "source")
FORMAT = (
    "A JSON array of objects, or UTF-8 CSV with a header row, each day with `day` (ISO 8601 date) and "
    "either `mean_temperature` or `min_temperature` and `max_temperature` (°C; the mean is their "
    "average), optionally `source` (`observed` or `forecast`). At most "
    f"{MAX_ROWS} days; a day appears once. All or nothing: one bad row answers 422 and stores nothing."
)
CSV_EXAMPLE = "day,mean_temperature\r\n2026-01-05,3.5\r\n2026-01-06,1.0\r\n"
_PLAIN_NUMBER = re.compile(r"[+-]?([0-9]+\.?[0-9]*|\.[0-9]+)([eE][+-]?[0-9]+)?")
_SCHEMA = WeatherDayInSchema()


def _json_rows(body: bytes) -> list[tuple[tuple[Any, ...], Any]]:
    try:
        data = json.loads(body)
    except (ValueError, RecursionError) as exc:
        detail = "The request body is not valid JSON."
        raise Problem(400, detail, kind="invalid-json", errors=[{"pointer": "#", "detail": detail}]) from exc
    if not isinstance(data, list):
        raise Problem(
            422, "Send a JSON array of days.", kind="validation", errors=[{"pointer": "#", "detail": "Not an array."}]
        )
    return [((i,), row) for i, row in enumerate(data)]


def _cell(value: str) -> Any:
    value = value.strip()
    return float(value) if _PLAIN_NUMBER.fullmatch(value) else value


def _csv_rows(body: bytes) -> list[tuple[tuple[Any, ...], Any]]:
    try:
        text = body.decode("utf-8-sig")
        reader = csv.reader(io.StringIO(text))
        header = [h.strip() for h in next(reader, [])]
        unknown = [h for h in header if h not in COLUMNS]
        if unknown or "day" not in header:
            named = {h: ["Unknown column."] for h in unknown} | ({} if "day" in header else {"day": ["Missing column."]})
            errors = flatten_messages(named, ("header",))
            raise Problem(
                422,
                f"The CSV header is not valid: name the columns {', '.join(COLUMNS)}.",
                kind="validation",
                errors=errors,
            )
        rows: list[tuple[tuple[Any, ...], Any]] = []
        for number, cells in enumerate(reader, start=2):
            if not cells:
                continue
            if len(cells) > len(header):
                rows.append((("rows", number), None))
                continue
            rows.append((("rows", number), {h: _cell(c) for h, c in zip(header, cells, strict=False) if c.strip()}))
        return rows
    except (UnicodeDecodeError, csv.Error) as exc:
        raise Problem(
            422, f"The CSV cannot be read: {exc}.", kind="validation", errors=[{"pointer": "#", "detail": str(exc)}]
        ) from exc


def parse(body: bytes, media_type: str, today: dt.date) -> list[tuple[dt.date, float, str]]:
    """``(day, mean_temperature, source)`` of every row, or a 422 Problem naming each bad row."""
    rows = _csv_rows(body) if media_type == "text/csv" else _json_rows(body)
    if len(rows) > MAX_ROWS:
        raise Problem(413, f"At most {MAX_ROWS} days per request.", kind="too-many-rows")
    if not rows:
        raise Problem(422, "The body has no days.", kind="validation", errors=[{"pointer": "#", "detail": "No days."}])
    out: list[tuple[dt.date, float, str]] = []
    errors: list[dict[str, str]] = []
    seen: set[dt.date] = set()
    for path, raw in rows:
        if not isinstance(raw, dict):
            detail = "Not a day: give an object (JSON) or a row no longer than the header (CSV)."
            errors += flatten_messages([detail], path)
            continue
        try:
            data = _SCHEMA.load(raw)
        except ValidationError as exc:
            errors += flatten_messages(exc.normalized_messages(), path)
            continue
        day = data["day"]
        mean = data.get("mean_temperature")
        if mean is None:
            mean = (data["min_temperature"] + data["max_temperature"]) / 2  # the degree-day convention
        source = data.get("source") or ("forecast" if day > today else "observed")
        if day in seen:
            errors += flatten_messages({"day": [f"{day.isoformat()} appears twice."]}, path)
        elif source == "observed" and day > today:
            errors += flatten_messages({"source": ["An observed day cannot be after today."]}, path)
        else:
            seen.add(day)
            out.append((day, mean, source))
    if errors:
        raise Problem(
            422, f"Nothing was stored: {len(errors)} error(s) in the days sent.", kind="validation", errors=errors
        )
    return out
