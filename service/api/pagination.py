"""Keyset pagination: ``?limit=&after=``, ``{"items": [...]}`` and an RFC 8288 ``Link`` header."""

from __future__ import annotations

from collections.abc import Sequence
from typing import Any

import marshmallow as ma
from flask import request, url_for
from sqlalchemy import Select
from sqlalchemy.orm import Session

from service.errors import Problem

MAX_LIMIT = 200
DEFAULT_LIMIT = 50


class PageArgsSchema(ma.Schema):
    """``limit`` (1–200, default 50) and ``after`` (the last key of the previous page)."""

    limit = ma.fields.Integer(
        load_default=DEFAULT_LIMIT, validate=ma.validate.Range(min=1, max=MAX_LIMIT), strict=False
    )
    after = ma.fields.String(validate=ma.validate.Length(min=1, max=80))


def page(
    session: Session,
    statement: Select[Any],
    key: Any,
    args: dict[str, Any],
    *,
    descending: bool = False,
    key_type: type = str,
) -> tuple[Sequence[Any], dict[str, str]]:
    """Run one page of ``statement`` ordered by ``key``; returns the rows and the response headers."""
    limit = args["limit"]
    after = args.get("after")
    if after is not None:
        try:
            after_value = key_type(after)
        except ValueError as exc:
            raise Problem(
                422,
                "after must be the key of the last item of the previous page (from the Link header).",
                kind="validation",
                errors=[{"pointer": "#/query/after", "detail": "Not a valid key."}],
            ) from exc
        statement = statement.where(key < after_value if descending else key > after_value)
    statement = statement.order_by(key.desc() if descending else key).limit(limit + 1)
    rows = list(session.scalars(statement))
    headers: dict[str, str] = {}
    if len(rows) > limit:
        rows = rows[:limit]
        last = getattr(rows[-1], key.key)
        query = {k: v for k, v in request.args.items() if k != "after"}
        query["after"] = str(last)
        link = url_for(request.endpoint, **(request.view_args or {}), **query)
        headers["Link"] = f'<{link}>; rel="next"'
    return rows, headers
