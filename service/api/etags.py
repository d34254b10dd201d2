"""Strong ETags from a row's ``version`` (RFC 9110 §8.8.3, §13.1).

``If-Match`` uses the strong comparison: a mismatch is 412, a missing header on a change is 428
(RFC 6585 §3). ``If-Match: *`` is refused with 428 too: RFC 9110 §13.1.1 lets it match any current
version, so two clients sending it overwrite each other's changes (a lost update, which this
service promises never to allow); a change must name the ETag it was based on.
``If-None-Match`` on a read answers 304. A tag sent without its double quotes is a 400 that says so
(not a 412 "changed since you read it", which sent people to read again and fail again).
"""

from __future__ import annotations

import hashlib
import re

from flask import Response, request

from service.api.http_headers import QUOTED_TAGS
from service.errors import Problem


def version_etag(kind: str, code: str, version: int) -> str:
    """A strong entity tag for one version of one resource."""
    digest = hashlib.sha256(f"{kind}/{code}/{version}".encode()).hexdigest()[:20]
    return f'"{digest}"'


def content_etag(body: bytes) -> str:
    """A strong entity tag for a computed representation."""
    return '"' + hashlib.sha256(body).hexdigest()[:32] + '"'


_TAG_LIST = re.compile(QUOTED_TAGS)
_TAG = re.compile(r'(W/)?"[^"]*"')


def _tags(header: str, name: str) -> list[str]:
    """The tags of an If-Match / If-None-Match value, checked against the documented form
    (:data:`~service.api.http_headers.QUOTED_TAGS`, or ``*``). A tag written without its quotes
    (``abc`` instead of ``"abc"``) would otherwise never match and read as "changed": 400 saying so.
    ``*`` in an If-Match list is returned for :func:`require_if_match` to refuse with 428."""
    tags = [part.strip(" \t") for part in header.split(",") if part.strip(" \t")]
    if tags == ["*"] or (name == "If-Match" and "*" in tags) or _TAG_LIST.fullmatch(header):
        return tags
    if "*" in tags:
        detail = f"{name}: * stands alone, not in a list of entity tags."
    else:
        bare = next((tag for tag in tags if not _TAG.fullmatch(tag)), tags[0])
        example = bare.removeprefix("W/").strip('"')
        detail = (
            f"{name} must carry the ETag in double quotes, exactly as the ETag header sent it: "
            f'{name}: "{example}" (it is written without quotes here, so it cannot be compared).'
        )
    raise Problem(
        400,
        detail,
        kind="bad-etag",
        errors=[{"pointer": f"#/header/{name}", "detail": 'Entity tags are quoted and comma-separated, e.g. "abc".'}],
    )


#: OpenAPI parameter for the changes that need ``If-Match`` (documented as required: 428 without it).
IF_MATCH_PARAMETER = {
    "in": "header",
    "name": "If-Match",
    "required": True,
    # Quoted tags only: `*` is refused with 428 (require_if_match), a tag without quotes with 400.
    "schema": {"type": "string", "pattern": QUOTED_TAGS},
    "description": "The ETag of your last GET of this resource, in double quotes (412 when it moved on; "
    "`*` is refused with 428, a tag without its quotes with 400).",
}


def require_if_match(etag: str) -> None:
    """Refuse a change unless ``If-Match`` carries the current tag."""
    header = request.headers.get("If-Match")
    if header is None:
        raise Problem(
            428, "Send If-Match with the ETag from your last GET of this resource.", kind="precondition-required"
        )
    tags = _tags(header, "If-Match")
    if "*" in tags:
        raise Problem(
            428,
            "If-Match: * is not enough here: send the current ETag from your last GET of this resource, "
            "so that a change made since then is not overwritten.",
            kind="precondition-required",
        )
    if etag in tags:
        return
    raise Problem(
        412,
        "The resource has changed since you read it; GET it again and retry.",
        kind="precondition-failed",
        headers={"ETag": etag},
    )


def not_modified(etag: str) -> Response | None:
    """A 304 when ``If-None-Match`` names ``etag`` (weak comparison, as RFC 9110 says)."""
    header = request.headers.get("If-None-Match")
    if header is None:
        return None
    tags = [t.removeprefix("W/") for t in _tags(header, "If-None-Match")]
    if "*" in tags or etag in tags:
        response = Response(status=304)
        response.headers["ETag"] = etag
        return response
    return None
