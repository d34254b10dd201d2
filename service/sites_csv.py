"""CSV import and export of sites, for the API and the demo loader alike (no HTTP here).

A refused import raises :class:`CsvRefused` (or :class:`TooManyRows`) with a ``detail`` and
``errors`` (``{pointer, detail}``); the API answers them as 422 (413) problems.

Import: UTF-8 (a BOM is accepted), a header row, at most :data:`MAX_ROWS` rows, cells separated by
``,`` (or ``;`` or tab, told from the header); every row is validated with the same schema as JSON,
every cell of it even when one cannot be read; all rows are written in one transaction or none is.
Errors name rows as a spreadsheet numbers them: the header is row 1.
A ``unit`` column may give a row's volumes in ``L``, ``gal`` (US gallon, exactly 3.785411784 L,
NIST Handbook 44 App. C) or ``m3`` (1000 L); they are converted to the service unit. Volumes are
``demand_per_day``, ``tank_capacity`` and ``safety_stock``; ``holding_cost`` is per volume unit and
is divided by the same factor. ``product`` (optional) names a stored product; a file without the column
leaves stored sites' products alone. A row without ``safe_fill`` gets its product's default safe fill
(else 0.9).

Export: a text cell that starts with ``= + - @``, tab or carriage return gets a leading ``'`` so a
spreadsheet does not read it as a formula (OWASP "CSV injection"); so does a cell that starts with
one or more ``'`` followed by one of those characters, so that the prefix can always be undone. The
import removes one ``'`` from a cell of the form ``'``…``'`` + formula character, and only from
such a cell: an export imports back to exactly the same text, and a name that really starts with
``'`` (``'t Hoekje``) is kept as written. Names are taken verbatim (no trimming of spaces); codes
and other cells are trimmed. Number cells are never altered on export, and on import they must be
plain ASCII decimal numbers: optional sign, digits, optional decimal point, optional exponent
(``1000``, ``-3.25``, ``2.5e3``); ``1_000``, ``١٠٠٠`` (Arabic-Indic digits), ``inf`` or ``nan``
are refused, although Python's ``float()`` reads them.
"""

from __future__ import annotations

import csv
import io
import math
import re
from typing import Any

from marshmallow import ValidationError
from sqlalchemy.orm import Session

from service.api import fleet_refs, usable_stock
from service.api.schemas.sites import SiteSchema, check_safety_stock
from service.persistence import fleet
from service.persistence import repository as repo
from service.planning.inputs import SITE_PARAMETERS

MAX_ROWS = 5000
LITRES_PER_UNIT = {"L": 1.0, "gal": 3.785411784, "m3": 1000.0}
VOLUME_FIELDS = ("demand_per_day", "tank_capacity", "safety_stock")
NUMBER_FIELDS = (*SITE_PARAMETERS, "latitude", "longitude", "service_level", "lead_time_days", "base_temperature")
TEXT_FIELDS = ("code", "name", "truck")
COLUMNS = (
    *TEXT_FIELDS,
    *SITE_PARAMETERS,
    "active",
    "latitude",
    "longitude",
    "service_level",
    "lead_time_days",
    "weather_region",
    "base_temperature",
    "product",
)
#: Optional columns an older file may lack; an import of such a file leaves these fields as they are.
NOT_IN_CSV = ("product",)
REQUIRED = ("code", "name", "truck", "demand_per_day", "holding_cost", "stop_cost", "tank_capacity")
#: The format, for the OpenAPI document (request body of the import, response of the export).
FORMAT = (
    "UTF-8 CSV with a header row. Columns (any order): "
    + ", ".join(f"`{c}`" for c in REQUIRED)
    + " (required); "
    + ", ".join(f"`{c}`" for c in (*COLUMNS, "unit") if c not in REQUIRED)
    + " (optional; the export writes every column but `unit`). Cells are separated by `,` (`;` or tab "
    "also read, told from the header). Numbers are plain ASCII decimals with a decimal point (`1000`, "
    "`-3.25`, `2.5e3`); `active` is true/false; `unit` is `L`, `gal` or `m3` (volumes converted to the "
    f"service unit). At most {MAX_ROWS} rows."
)
EXAMPLE = (
    ",".join(COLUMNS)
    + "\r\nHV-FARM-01,Example farm tank,HV-R1,95.0,0.0032,15.0,2500.0,0.9,200.0,true,52.1,5.3,0.98,1.0,,15.5,DSL\r\n"
)
#: A text cell the export prefixes with ``'``: any number of ``'``, then a character that starts
#: a formula (``= + - @``, tab, carriage return).
_NEEDS_PREFIX = re.compile(r"'*[=+\-@\t\r]")
#: A plain decimal number in ASCII (``[0-9]``, not ``\d``, which matches every script's digits).
PLAIN_NUMBER = re.compile(r"[+-]?([0-9]+\.?[0-9]*|\.[0-9]+)([eE][+-]?[0-9]+)?")


class CsvRefused(ValueError):
    """The import wrote nothing: ``detail`` says why, ``errors`` names the cells (``{pointer, detail}``)."""

    def __init__(self, detail: str, errors: list[dict[str, str]] | None = None) -> None:
        super().__init__(detail)
        self.detail = detail
        self.errors = errors or []


class TooManyRows(CsvRefused):
    """More than :data:`MAX_ROWS` rows."""


def _unit_factor(unit: str, service_unit: str) -> float:
    """How many service units one ``unit`` is."""
    if unit == service_unit:
        return 1.0
    if unit not in LITRES_PER_UNIT or service_unit not in LITRES_PER_UNIT:
        raise ValueError(f"Cannot convert {unit!r} to the service unit {service_unit!r}; use one of L, gal, m3.")
    return LITRES_PER_UNIT[unit] / LITRES_PER_UNIT[service_unit]


def _parse_row(raw: dict[str, str | None], service_unit: str) -> tuple[dict[str, Any], list[tuple[str, str]]]:
    data: dict[str, Any] = {}
    errors: list[tuple[str, str]] = []
    for name, cell in raw.items():
        value = (cell or "") if name == "name" else (cell or "").strip()
        if name == "unit" or value == "":
            continue
        if name in NUMBER_FIELDS:
            if not PLAIN_NUMBER.fullmatch(value):
                comma = " with a decimal point, not a comma" if PLAIN_NUMBER.fullmatch(value.replace(",", ".")) else ""
                errors.append(
                    (name, f"{value!r} is not a plain number: write digits 0-9{comma}, e.g. 1000, -3.25 or 2.5e3.")
                )
                continue
            number = float(value)
            if not math.isfinite(number):
                errors.append((name, "Must be a finite number."))
                continue
            data[name] = number
        elif name == "active":
            if value.lower() not in {"true", "false", "1", "0", "yes", "no"}:
                errors.append((name, "Use true or false."))
                continue
            data[name] = value.lower() in {"true", "1", "yes"}
        else:
            data[name] = _undefuse(value)
    unit = (raw.get("unit") or "").strip() or service_unit
    try:
        factor = _unit_factor(unit, service_unit)
    except ValueError as exc:
        errors.append(("unit", str(exc)))
        factor = 1.0
    for name in VOLUME_FIELDS:
        if isinstance(data.get(name), float):
            data[name] *= factor
    if isinstance(data.get("holding_cost"), float):
        data["holding_cost"] /= factor
    return data, errors


def import_sites(session: Session, body: bytes, *, dry_run: bool, service_unit: str) -> dict[str, Any]:
    """Validate every row, then create or update by ``code``; raise :class:`CsvRefused` naming bad rows."""
    try:
        return _import_sites(session, body, dry_run=dry_run, service_unit=service_unit)
    except csv.Error as exc:  # e.g. a bare CR inside a field: a 500 before (found by fuzzing)
        raise CsvRefused(f"The CSV cannot be read: {exc}.", [{"pointer": "#", "detail": str(exc)}]) from exc


def _separator(first_line: str) -> str:
    """``,``, or ``;`` / tab when the header is written with one of those instead.

    Many European spreadsheets save "CSV" with ``;`` between cells (the decimal comma takes ``,``);
    the header names the columns, so the separator that splits it into the most known column names
    is the one the file uses.
    """
    known = {*COLUMNS, "unit"}
    return max((",", ";", "\t"), key=lambda sep: len(known & {c.strip() for c in first_line.split(sep)}))


def _records(text: str) -> tuple[list[str], list[tuple[int, dict[str, str | None] | None]]]:
    """The header, and each record with its row number as a spreadsheet shows it (the header is
    row 1, the first record row 2, a blank line is a row too). A record with more cells than the
    header maps to ``None``."""
    reader = csv.reader(io.StringIO(text), delimiter=_separator(text.split("\n", 1)[0]))
    header = next(reader, [])
    records: list[tuple[int, dict[str, str | None] | None]] = []
    for row_number, cells in enumerate(reader, start=2):
        if not cells:
            continue
        if len(records) >= MAX_ROWS:
            raise TooManyRows(f"At most {MAX_ROWS} rows per import.")
        if len(cells) > len(header):
            records.append((row_number, None))
            continue
        records.append((row_number, {name: cells[i] if i < len(cells) else None for i, name in enumerate(header)}))
    return header, records


def _import_sites(session: Session, body: bytes, *, dry_run: bool, service_unit: str) -> dict[str, Any]:
    try:
        text = body.decode("utf-8-sig")
    except UnicodeDecodeError as exc:
        raise CsvRefused("The CSV must be UTF-8.") from exc
    header, records = _records(text)
    unknown = [h for h in header if h not in (*COLUMNS, "unit")]
    missing = [h for h in REQUIRED if h not in header]
    if unknown or missing:
        errors: list[dict[str, str]] = [{"pointer": f"#/header/{h}", "detail": "Unknown column."} for h in unknown]
        errors += [{"pointer": f"#/header/{h}", "detail": "Missing column."} for h in missing]
        raise CsvRefused(
            "The CSV header is not valid: separate the cells with commas (or semicolons) and name the "
            f"columns {', '.join(COLUMNS)} and optionally unit.",
            errors,
        )
    # A re-import keeps what the CSV does not carry (files from before the product column).
    schema = SiteSchema(exclude=tuple(c for c in NOT_IN_CSV if c not in header))
    trucks = repo.trucks_by_code(session)
    safe_fills = fleet.product_safe_fills(session)
    rows: list[dict[str, Any]] = []
    numbers: list[int] = []
    errors = []
    seen: set[str] = set()
    for number, raw in records:
        if raw is None:
            errors.append({"pointer": f"#/rows/{number}", "detail": f"Row {number} has more cells than the header."})
            continue
        data, bad = _parse_row(raw, service_unit)
        problems = list(bad)
        # A cell that could not be read is left out and not required, so the row's other cells are
        # still checked: one bad cell does not hide the rest.
        try:
            loaded = schema.load(data, partial=tuple(col for col, _msg in bad))
        except ValidationError as exc:
            loaded = None
            for col, messages in exc.messages.items():  # type: ignore[union-attr]
                problems += [(col, msg) for msg in (messages if isinstance(messages, list) else [messages])]
        truck = data.get("truck")
        if isinstance(truck, str) and truck and truck not in trucks:
            problems.append(("truck", f"no truck with code {truck!r}."))
        product = data.get("product")
        if isinstance(product, str) and product and product not in safe_fills:
            problems.append(("product", f"no product with code {product!r}."))
        code = data.get("code")
        if isinstance(code, str) and code in seen:
            problems.append(("code", f"{code!r} appears twice."))
        if isinstance(code, str):
            seen.add(code)
        errors += [
            {"pointer": f"#/rows/{number}/{col}", "detail": f"Row {number}, {col}: {msg}"} for col, msg in problems
        ]
        if problems or loaded is None:
            continue
        rows.append(loaded)
        numbers.append(number)
    existing = repo.sites_by_code(session, seen)
    for data in rows:
        # No safe_fill cell: the product's default safe fill (the row's product, else the stored site's
        # when the file has no product column), else DEFAULT_SAFE_FILL — as a site created by the API.
        stored = existing.get(data["code"])
        product = data.get("product") if "product" in header else (stored.product if stored is not None else None)
        fleet_refs.fill_safe_fill(data, safe_fills.get(product) if product is not None else None)
    for number, data in zip(numbers, rows, strict=True):
        try:
            check_safety_stock(data)
        except ValidationError as exc:
            errors += [
                {"pointer": f"#/rows/{number}/{col}", "detail": f"Row {number}, {col}: {msg}"}
                for col, messages in exc.normalized_messages().items()
                for msg in (messages if isinstance(messages, list) else [messages])
            ]
    locked = repo.trucks_for_site_writes(session, (trucks[data["truck"]].id for data in rows))
    for number, data in zip(numbers, rows, strict=True):
        truck = locked[trucks[data["truck"]].id]
        short = usable_stock.shortfall(data, truck.code, truck.capacity, service_unit)
        if short is not None:
            col = usable_stock.pointer_field(short[0], data.keys())
            errors.append({"pointer": f"#/rows/{number}/{col}", "detail": f"Row {number}, {col}: {short[1]}"})
    if errors:
        errors.sort(key=lambda e: int(e["pointer"].split("/")[2]))
        bad_rows = sorted({int(e["pointer"].split("/")[2]) for e in errors})
        raise CsvRefused(
            f"Nothing was imported: {len(bad_rows)} bad row(s): {', '.join(map(str, bad_rows[:20]))}.", errors
        )
    if not rows:
        raise CsvRefused("The CSV has no rows.")
    created = updated = 0
    for data in rows:
        truck = trucks[data["truck"]]
        site = existing.get(data["code"])
        if site is None:
            repo.add_site(session, data, truck)
            created += 1
        elif repo.apply_changes(site, data | {"truck_id": truck.id}, (*repo.SITE_FIELDS, "truck_id")):
            updated += 1
    session.flush()
    return {"dry_run": dry_run, "created": created, "updated": updated, "rows": len(rows)}


def _defuse(value: str) -> str:
    """``'`` before a cell a spreadsheet would run as a formula, or that :func:`_undefuse` would
    otherwise shorten (``'`` … ``'`` then a formula character)."""
    return "'" + value if _NEEDS_PREFIX.match(value) else value


def _undefuse(value: str) -> str:
    """Undo :func:`_defuse`: every exported cell imports back to exactly the text it came from."""
    return value[1:] if value.startswith("'") and _NEEDS_PREFIX.match(value, 1) else value


def export_sites(session: Session) -> str:
    """All sites as CSV in the service unit, ordered by code."""
    out = io.StringIO()
    writer = csv.writer(out, lineterminator="\r\n")
    writer.writerow(COLUMNS)
    for site, truck_code in repo.sites_with_truck_codes(session):
        row: list[Any] = [_defuse(site.code), _defuse(site.name), _defuse(truck_code)]
        row += [repr(getattr(site, f)) for f in SITE_PARAMETERS]
        row += ["true" if site.active else "false"]
        row += [
            "" if getattr(site, f) is None else repr(getattr(site, f))
            for f in ("latitude", "longitude", "service_level")
        ]
        row += [repr(site.lead_time_days)]
        row += ["" if site.weather_region is None else _defuse(site.weather_region), repr(site.base_temperature)]
        row += ["" if site.product is None else _defuse(site.product)]
        writer.writerow(row)
    return out.getvalue()
