"""Per-token request counters of the rate limits (service.bounded). Functions never commit."""

from __future__ import annotations

from collections.abc import Callable

from sqlalchemy import case
from sqlalchemy.dialects import postgresql, sqlite
from sqlalchemy.dialects.postgresql import insert as postgresql_insert
from sqlalchemy.dialects.sqlite import insert as sqlite_insert
from sqlalchemy.orm import Session

from service.persistence.models import RequestQuota

INSERTS: dict[str, Callable[..., postgresql.Insert | sqlite.Insert]] = {
    "sqlite": sqlite_insert,
    "postgresql": postgresql_insert,
}


def hit(session: Session, token_id: int, bucket: str, window_start: int) -> int:
    """Count one request of ``token_id`` in ``bucket`` for the window starting at ``window_start``.

    Returns the window's count including this request. One atomic statement on both databases
    (``INSERT … ON CONFLICT DO UPDATE … RETURNING``; SQLite ≥ 3.35): a row from an earlier
    window starts again at 1, so each token keeps one row per bucket.
    """
    insert = INSERTS[session.get_bind().dialect.name]
    statement = insert(RequestQuota).values(token_id=token_id, bucket=bucket, window_start=window_start, hits=1)
    upsert = statement.on_conflict_do_update(
        index_elements=[RequestQuota.token_id, RequestQuota.bucket],
        set_={
            "hits": case(
                (RequestQuota.window_start == statement.excluded.window_start, RequestQuota.hits + 1), else_=1
            ),
            "window_start": statement.excluded.window_start,
        },
    ).returning(RequestQuota.hits)
    return session.execute(upsert).scalar_one()
