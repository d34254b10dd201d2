"""The HTTP headers clients rely on, as OpenAPI objects for the document (issue 18).

Response headers go into ``@blp.response(..., headers=...)`` / ``@blp.alt_response(..., headers=...)``;
request headers are declared with :meth:`service.api.blueprint.Blueprint.header_parameters`, which
adds them to the parameters flask-smorest builds (``@blp.doc(parameters=...)`` would replace those).
"""

from __future__ import annotations

from typing import Any

from service.idempotency import HEADER, REPLAYED_HEADER

_STRING = {"type": "string"}

ETAG = {
    "description": "Strong entity tag of this representation, in double quotes. Send it back in If-Match "
    "to change or delete exactly this version, or in If-None-Match to get 304 while it is current.",
    "schema": _STRING,
}
LOCATION = {"description": "Path of the created resource.", "schema": _STRING}
LINK = {
    "description": 'RFC 8288 link to the next page, `<…?after=…>; rel="next"`; absent on the last page.',
    "schema": _STRING,
}
RETRY_AFTER = {
    "description": "Seconds to wait before retrying (RFC 9110 §10.2.3).",
    "schema": {"type": "string", "pattern": "^[0-9]+$"},
}
REPLAYED = {
    "description": "`true` when this is the stored answer to an earlier request with the same Idempotency-Key "
    "(nothing was recorded this time); absent on a first answer.",
    "schema": {"type": "string", "enum": ["true"]},
}

#: Response headers by name, for ``headers=`` of a response.
CREATED = {"Location": LOCATION, "ETag": ETAG}
TAGGED = {"ETag": ETAG}
PAGED = {"Link": LINK}
RETRY = {"Retry-After": RETRY_AFTER}
PLAN_CREATED = {"Location": LOCATION, REPLAYED_HEADER: REPLAYED}

_ETAG = r'(W/)?"[!#-+\--~\u0080-\u00ff]*"'
_OWS = r"[ \t]*"
#: A list of quoted entity tags as RFC 9110 writes it (§8.8.3: ``"`` etagc* ``"``, optionally after
#: ``W/``; §5.6.1: comma-separated, empty elements allowed), in a syntax Python's ``re`` and JSON
#: Schema (ECMA-262) read alike. ``service.api.etags`` checks header values with this same pattern.
QUOTED_TAGS = rf"^{_OWS}(,{_OWS})*({_ETAG}{_OWS}(,{_OWS}({_ETAG}{_OWS})?)*)?$"

IF_NONE_MATCH = {
    "in": "header",
    "name": "If-None-Match",
    "required": False,
    "schema": {"type": "string", "pattern": rf"^{_OWS}\*{_OWS}$|{QUOTED_TAGS}"},
    "description": "The ETag of your last answer, in double quotes: 304 Not Modified while it is still current. "
    "A tag without its quotes is refused with 400.",
}
#: Optional If-Match (the plan activation): 412 when the plan's representation moved on since your GET.
IF_MATCH_OPTIONAL = {
    "in": "header",
    "name": "If-Match",
    "required": False,
    "schema": {"type": "string", "pattern": QUOTED_TAGS},
    "description": "Optional: the ETag of your last GET of the plan; 412 when the plan changed since "
    "(its status or staleness). A tag without its quotes is refused with 400.",
}

#: What the server accepts, in OpenAPI terms: 1–255 visible ASCII characters, bare or as an
#: sf-string ``"…"`` with ``\"`` and ``\\`` escapes (service.idempotency.parse_key).
IDEMPOTENCY_KEY_PATTERN = r'^([\x21\x23-\x5b\x5d-\x7e]{1,255}|"([\x21\x23-\x5b\x5d-\x7e]|\\["\\]){1,255}")$'


def idempotency_key(replay: str) -> dict[str, Any]:
    """The optional Idempotency-Key of a planning POST; ``replay`` says what a repeat answers."""
    return {
        "in": "header",
        "name": HEADER,
        "required": False,
        "schema": {"type": "string", "pattern": IDEMPOTENCY_KEY_PATTERN},
        "description": f"Optional. Same key + same body → {replay}, with `{REPLAYED_HEADER}: true`; kept 24 h per token.",
    }
