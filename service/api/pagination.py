"""Keyset pagination: ``?limit=&after=``, ``{"items": [...]}`` and an RFC 8288 ``Link`` header."""

from __future__ import annotations

from typing import Any

import marshmallow as ma
from flask import request, url_for

from service.api.fields import Range
from service.api.schemas.common import StrictSchema
from service.persistence.pages import Page

MAX_LIMIT = 200
DEFAULT_LIMIT = 50


class PageArgsSchema(StrictSchema):
    """``limit`` (1–200, default 50) and ``after`` (the last key of the previous page)."""

    limit = ma.fields.Integer(
        load_default=DEFAULT_LIMIT, validate=Range(min=1, max=MAX_LIMIT), strict=False
    )
    after: ma.fields.Field = ma.fields.String(validate=ma.validate.Length(min=1, max=80))  # subclasses retype it


def link_headers(result: Page) -> dict[str, str]:
    """The response headers of a page: ``Link: <…>; rel="next"`` while more remain (RFC 8288)."""
    if result.next_after is None:
        return {}
    query: dict[str, Any] = {k: v for k, v in request.args.items() if k != "after"}
    query["after"] = str(result.next_after)
    assert request.endpoint is not None  # a routed request
    link = url_for(request.endpoint, **(request.view_args or {}), **query)
    return {"Link": f'<{link}>; rel="next"'}


def page(result: Page) -> tuple[dict[str, Any], dict[str, str]]:
    """``({"items": rows}, headers)``: a list view's answer for flask-smorest."""
    return {"items": result.rows}, link_headers(result)
