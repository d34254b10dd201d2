"""Bulk uploads of readings and deliveries: a JSON array or CSV, checked row by row, all or nothing.

Rows are validated with the same schema and the same checks as one reading or delivery (no future
time, no level above the tank, a site and truck that exist). One bad row answers 422 naming every
bad cell and nothing is written. Pointers: ``#/<i>/<field>`` into a JSON array (from 0), and
``#/rows/<n>/<field>`` in CSV with rows numbered as a spreadsheet does (the header is row 1).
CSV cells are text: number cells are read as plain ASCII decimals, empty cells are left out.
"""

from __future__ import annotations

import csv
import io
import json
from collections.abc import Callable
from typing import Any

import marshmallow as ma
from flask import request

from service.errors import Problem, flatten_messages
from service.sites_csv import PLAIN_NUMBER

MAX_ROWS = 5000


def _csv_rows(body: bytes, number_fields: tuple[str, ...]) -> list[tuple[str, dict[str, Any] | str]]:
    """``(pointer prefix, row or error)`` for each CSV record."""
    try:
        text = body.decode("utf-8-sig")
    except UnicodeDecodeError as exc:
        raise Problem(422, "The CSV must be UTF-8.", kind="validation") from exc
    try:
        reader = csv.reader(io.StringIO(text))
        header = [h.strip() for h in next(reader, [])]
        out: list[tuple[str, dict[str, Any] | str]] = []
        for number, cells in enumerate(reader, start=2):
            if not cells:
                continue
            if len(out) >= MAX_ROWS:
                raise Problem(413, f"At most {MAX_ROWS} rows per upload.", kind="too-many-rows")
            where = f"#/rows/{number}"
            if len(cells) > len(header):
                out.append((where, f"Row {number} has more cells than the header."))
                continue
            row: dict[str, Any] = {}
            for name, cell in zip(header, cells, strict=False):
                value = cell if name == "note" else cell.strip()
                if value == "":
                    continue
                if name in number_fields:
                    row[name] = float(value) if PLAIN_NUMBER.fullmatch(value) else value
                else:
                    row[name] = value
            out.append((where, row))
        return out
    except csv.Error as exc:
        raise Problem(
            422, f"The CSV cannot be read: {exc}.", kind="validation", errors=[{"pointer": "#", "detail": str(exc)}]
        ) from exc


def _json_rows(body: bytes) -> list[tuple[str, dict[str, Any] | str]]:
    try:
        data = json.loads(body)
    except (ValueError, RecursionError) as exc:
        raise Problem(400, "The body is not valid JSON.", kind="invalid-json") from exc
    if not isinstance(data, list):
        raise Problem(
            422,
            "Send a JSON array of rows.",
            kind="validation",
            errors=[{"pointer": "#", "detail": "Not an array."}],
        )
    if len(data) > MAX_ROWS:  # the document's maxItems: a validation failure of the body
        raise Problem(
            422,
            f"At most {MAX_ROWS} rows per upload.",
            kind="validation",
            errors=[{"pointer": "#", "detail": f"More than {MAX_ROWS} rows."}],
        )
    return [(f"#/{i}", row if isinstance(row, dict) else "Not an object.") for i, row in enumerate(data)]


def raw_rows(number_fields: tuple[str, ...]) -> list[tuple[str, dict[str, Any] | str]]:
    """The request body's rows as ``(pointer, row or error)``, not yet validated."""
    body = request.get_data()
    return _csv_rows(body, number_fields) if request.mimetype == "text/csv" else _json_rows(body)


def named(rows: list[tuple[str, dict[str, Any] | str]], field: str) -> set[str]:
    """The codes the rows name in ``field`` (to read their sites or trucks once)."""
    return {r[field].strip() for _w, r in rows if isinstance(r, dict) and isinstance(r.get(field), str)}


def load_rows(
    rows: list[tuple[str, dict[str, Any] | str]],
    schema: ma.Schema,
    check: Callable[[dict[str, Any]], list[tuple[str, str]]],
) -> list[dict[str, Any]]:
    """Each row loaded by ``schema`` and passed through ``check`` (answers ``(field, detail)``
    problems); raises one 422 naming every bad cell, or answers every row."""
    if not rows:
        raise Problem(422, "No rows.", kind="validation", errors=[{"pointer": "#", "detail": "No rows."}])
    loaded: list[tuple[str, dict[str, Any]]] = []
    errors: list[dict[str, str]] = []
    bad: list[str] = []
    for where, raw in rows:
        if isinstance(raw, str):
            errors.append({"pointer": where, "detail": raw})
            bad.append(where)
            continue
        try:
            row = schema.load(raw)
        except ma.ValidationError as exc:
            errors += [
                {"pointer": where + e["pointer"][1:], "detail": e["detail"]}
                for e in flatten_messages(exc.normalized_messages())
            ]
            bad.append(where)
            continue
        problems = check(row)
        errors += [{"pointer": f"{where}/{field}", "detail": detail} for field, detail in problems]
        if problems:
            bad.append(where)
        loaded.append((where, row))
    if errors:
        raise Problem(
            422,
            f"Nothing was recorded: {len(bad)} row(s) with problems, the first at {bad[0]}.",
            kind="validation",
            errors=errors[:500],
        )
    return [row for _where, row in loaded]
