"""A flask-smorest Blueprint that refuses unknown query parameters, plus request guards.

webargs excludes unknown query parameters by default, so ``?wek=2026-W01`` would be ignored
silently (flask-smorest#211). Here they are refused with 422 — also on routes without query
arguments — and a body of the wrong media type is refused with 415. On every route, a body over
the size limit is refused with 413 (also when sent in chunks, without ``Content-Length``) and a
query parameter given twice with 422 (webargs, like Flask's ``args.get``, would take the first).
A JSON body the parser cannot hold (nested too deeply, a number with thousands of digits) is a
400, and path or query values that no text column can hold are refused before they reach the
database.
"""

from __future__ import annotations

import io
import sys
from typing import Any

import marshmallow as ma
from flask import current_app, request
from flask_smorest import Blueprint as SmorestBlueprint
from webargs.flaskparser import FlaskParser
from webargs.multidictproxy import MultiDictProxy
from werkzeug.http import parse_set_header

from service.api.fields import cannot_store, unstorable
from service.auth import handler_for
from service.errors import Problem

JSON = "application/json"


QUERY_LOCATIONS = frozenset({"query", "querystring"})


class StrictParser(FlaskParser):
    DEFAULT_UNKNOWN_BY_LOCATION = {
        **FlaskParser.DEFAULT_UNKNOWN_BY_LOCATION,
        "query": ma.RAISE,
        "querystring": ma.RAISE,
    }

    def load_json(self, req: Any, schema: Any) -> Any:
        """As webargs', but JSON that Python's parser cannot hold is a 400 problem too, not a 500.

        webargs turns only ``JSONDecodeError`` into a 400. ``json.loads`` also raises
        ``RecursionError`` for arrays or objects nested about 1 000 deep, and ``ValueError`` for
        an integer longer than ``sys.get_int_max_str_digits()`` (4 300 digits by default).
        """
        try:
            return super().load_json(req, schema)
        except RecursionError as exc:
            raise _invalid_json("The request body nests arrays or objects too deeply.") from exc
        except ValueError as exc:  # not a JSONDecodeError: webargs answered those above
            limit = sys.get_int_max_str_digits()
            raise _invalid_json(f"A number in the request body has more than {limit} digits.") from exc


def _invalid_json(detail: str) -> Problem:
    return Problem(400, detail, kind="invalid-json", errors=[{"pointer": "#", "detail": detail}])


class Blueprint(SmorestBlueprint):
    ARGUMENTS_PARSER = StrictParser()

    def __init__(self, *args: Any, **kwargs: Any) -> None:
        super().__init__(*args, **kwargs)
        self._prepare_doc_cbks.append(self._prepare_header_parameters_doc)

    @staticmethod
    def header_parameters(*parameters: dict[str, Any]) -> Any:
        """Declare request headers (OpenAPI parameter objects ``in: header``) of a view.

        They are added to the parameters flask-smorest documents from ``@blp.arguments``;
        ``@blp.doc(parameters=...)`` would replace that list instead.
        """

        def mark(view: Any) -> Any:
            view._apidoc = {**getattr(view, "_apidoc", {})}
            view._apidoc["header_parameters"] = [*view._apidoc.get("header_parameters", []), *parameters]
            return view

        return mark

    @staticmethod
    def _prepare_header_parameters_doc(doc: dict[str, Any], doc_info: dict[str, Any], **_kwargs: Any) -> dict:
        extra = doc_info.get("header_parameters")
        if extra:
            doc.setdefault("parameters", []).extend(dict(p) for p in extra)
        return doc

    def arguments(self, schema: Any, *args: Any, **kwargs: Any) -> Any:
        """As flask-smorest's, but a schema class is instantiated once, here.

        webargs builds a new instance of a schema class on every request; marshmallow 4 schemas
        keep no per-load state, so one instance serves all.
        """
        return super().arguments(schema() if isinstance(schema, type) else schema, *args, **kwargs)


def accepts_body(*media_types: str):  # type: ignore[no-untyped-def]
    """Declare the raw body media type(s) of a view that reads ``request.data`` itself."""

    def mark(view):  # type: ignore[no-untyped-def]
        view._ullage_body = media_types[0] if len(media_types) == 1 else media_types
        return view

    return mark


def _locations(handler: Any) -> set[str]:
    params = getattr(handler, "_apidoc", {}).get("arguments", {}).get("parameters", [])
    return {p["in"] for p in params if isinstance(p, dict) and "in" in p}


def _expectations(endpoint: str, method: str) -> tuple[set[str], tuple[str, ...] | None, frozenset[str]] | None:
    """(the handler's argument locations, its body media type, its list-valued query parameters),
    remembered per app; ``None`` when there is no handler."""
    known: dict[tuple[str, str], Any] = current_app.extensions.setdefault("ullage.route_guards", {})
    key = (endpoint, method)
    if key not in known:
        handler = handler_for(current_app, endpoint, method)
        if handler is None:
            known[key] = None
        else:
            locations = _locations(handler)
            known[key] = (
                locations,
                getattr(handler, "_ullage_body", None) or ((JSON,) if "json" in locations else None),
                _list_valued_query(handler),
            )
    return known[key]


def _list_valued_query(handler: Any) -> frozenset[str]:
    """The query parameters of ``handler`` that may be given more than once (webargs' list fields)."""
    params = getattr(handler, "_apidoc", {}).get("arguments", {}).get("parameters", [])
    schemas = [p["schema"] for p in params if isinstance(p, dict) and p.get("in") in QUERY_LOCATIONS]
    return frozenset(key for schema in schemas for key in MultiDictProxy({}, schema).multiple_keys)


def refuse_oversized_body() -> None:
    """413 for a body over ``request.max_content_length``, whether or not it states its length.

    A chunked body (``Transfer-Encoding: chunked``, no ``Content-Length``) is read here, at most one
    byte past the limit, and handed on from memory. werkzeug's own limit on such a stream stops
    reading at the limit without an error (``LimitedStream.readall``), so a larger body arrived cut
    short: a JSON body answered 400 "not valid JSON", and a CSV could have been imported cut at the
    limit. Without ``wsgi.input_terminated`` (a server that does not decode chunks) werkzeug reads no
    body at all, and there is nothing to check.
    """
    limit = request.max_content_length
    if limit is None:
        return
    length = request.content_length
    encoding = request.environ.get("HTTP_TRANSFER_ENCODING")
    if length is None and encoding and "chunked" in parse_set_header(encoding):
        if "wsgi.input_terminated" not in request.environ:
            return
        stream, body = request.environ["wsgi.input"], bytearray()
        while len(body) <= limit:
            chunk = stream.read(min(1 << 16, limit + 1 - len(body)))
            if not chunk:
                break
            body += chunk
        request.environ["wsgi.input"] = io.BytesIO(bytes(body))
        length = len(body)
    if length is not None and length > limit:
        most = f"{limit:,}".replace(",", " ")
        raise Problem(
            413, f"The request body is larger than {most} bytes, the most this route accepts.", kind="too-large"
        )


def refuse_repeated_query_parameters(list_valued: frozenset[str] = frozenset()) -> None:
    """422 for a query parameter given more than once (``?week=2026-W50&week=2026-W51``): which one
    was meant is a guess, and a silent first-one-wins answer would look right. Parameters whose
    schema field is a list (none so far) may repeat."""
    if not request.query_string:
        return
    repeated = sorted(k for k, values in request.args.lists() if len(values) > 1 and k not in list_valued)
    if repeated:
        raise Problem(
            422,
            "Give each query parameter once: "
            + ", ".join(f"{k} appears {len(request.args.getlist(k))} times" for k in repeated)
            + ".",
            kind="validation",
            errors=[{"pointer": f"#/query/{k}", "detail": "Given more than once."} for k in repeated],
        )


def guard_text() -> None:
    """``before_request`` for every route: path and query values no text column can hold.

    A path value is a code or an id, and no stored one contains such a character: 404. A query
    value or name: 422 naming it. (Bodies are checked by their schemas, ``StrictSchema``.)
    """
    for value in (request.view_args or {}).values():
        character = unstorable(value) if isinstance(value, str) else None
        if character is not None:
            raise Problem(404, f"There is nothing at this path: it contains {character}.", kind="not-found")
    errors = [
        {"pointer": f"#/query/{name}", "detail": cannot_store(character)}
        for name, values in request.args.lists()
        for character in {unstorable(text) for text in (name, *values)}
        if character is not None
    ]
    if errors:
        first = errors[0]
        raise Problem(
            422, f"The query is not valid: {first['pointer']}: {first['detail']}", kind="validation", errors=errors
        )


def guard_request() -> None:
    """``before_request``: body size and repeated query parameters on every route; on API routes
    also the body's media type and unexpected query parameters."""
    if request.endpoint is None:
        return
    api = request.path.startswith("/api/")
    if api:
        settings = current_app.config["ULLAGE_SETTINGS"]
        large = request.endpoint == "calculations.JointCalculation"
        request.max_content_length = settings.max_calculation_bytes if large else settings.max_body_bytes
    refuse_oversized_body()
    expectations = _expectations(request.endpoint, request.method) if api else None
    if expectations is None:
        refuse_repeated_query_parameters()
        return
    locations, expected, list_valued = expectations
    if request.args and "query" not in locations:
        names = ", ".join(sorted(request.args))
        raise Problem(
            422,
            f"Unknown query parameter(s): {names}.",
            kind="validation",
            errors=[{"pointer": f"#/query/{n}", "detail": "Unknown field."} for n in sorted(request.args)],
        )
    refuse_repeated_query_parameters(list_valued)
    if expected == (JSON,) and request.method == "PATCH" and not request.content_length and not request.data:
        raise Problem(
            422,
            "Send the changes as a JSON object.",
            kind="validation",
            errors=[{"pointer": "#", "detail": "Missing request body."}],
        )
    accepted = expected or ()
    if expected and request.method in {"POST", "PUT", "PATCH"} and request.mimetype not in accepted:
        if request.mimetype or request.content_length:
            raise Problem(415, f"Send the body as {' or '.join(accepted)}.", kind="unsupported-media-type")
