"""Keyset pagination: ``?limit=&after=``, ``{"items": [...]}`` and an RFC 8288 ``Link`` header."""

from __future__ import annotations

from collections.abc import Sequence
from typing import Any

import marshmallow as ma
from flask import request, url_for
from sqlalchemy import Select
from sqlalchemy.orm import Session

from service.api.fields import Range
from service.api.schemas.common import StrictSchema

MAX_LIMIT = 200
DEFAULT_LIMIT = 50


class PageArgsSchema(StrictSchema):
    """``limit`` (1–200, default 50) and ``after`` (the last key of the previous page)."""

    limit = ma.fields.Integer(
        load_default=DEFAULT_LIMIT, validate=Range(min=1, max=MAX_LIMIT), strict=False
    )
    after = ma.fields.String(validate=ma.validate.Length(min=1, max=80))


def page(
    session: Session,
    statement: Select[Any],
    key: Any,
    args: dict[str, Any],
    *,
    descending: bool = False,
) -> tuple[Sequence[Any], dict[str, str]]:
    """Run one page of ``statement`` ordered by ``key``; returns the rows and the response headers.

    ``args["after"]`` comes from the query schema with the key's type (a code, or an id from
    ``IdKey``, which keeps it within the column's range).
    """
    limit = args["limit"]
    after = args.get("after")
    if after is not None:
        statement = statement.where(key < after if descending else key > after)
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
