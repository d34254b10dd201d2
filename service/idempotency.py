"""``Idempotency-Key`` for POSTs that record something (IETF httpapi idempotency-key draft).

Rules (also in the OpenAPI description and README):

* The key is an sf-string (``"…"``) or a bare token of 1–255 visible ASCII characters; anything
  else is 400. Keys are scoped to the calling token and kept for 24 hours.
* The fingerprint is SHA-256 over the method, the path and the canonical JSON body.
* A claim is recorded in its own short transaction before the work. The work's transaction ends
  by marking the claim done with the response, in the same commit as the plan — so a plan and
  its idempotency record are written together or not at all.
* Same key, same fingerprint, done → the first response again, with ``Idempotent-Replayed: true``.
  Same key, different fingerprint → 422. Same key while the first request still holds its claim
  → 409 with ``Retry-After``. A claim not finished within :data:`LEASE` (its worker died) may be
  taken over by a retry; the original can then no longer finish (its commit is refused), so a
  key never records twice.
"""

from __future__ import annotations

import datetime as dt
import hashlib
import json
import re
import secrets
from dataclasses import dataclass

from flask import Response, current_app
from sqlalchemy import delete, select, update
from sqlalchemy.exc import IntegrityError
from sqlalchemy.orm import Session

from service.auth import Caller
from service.errors import Problem
from service.persistence.db import write_intent
from service.persistence.models import IdempotencyRecord, utcnow

HEADER = "Idempotency-Key"
KEY = re.compile(r"^[\x21-\x7e]{1,255}$")
#: An RFC 8941 sf-string of visible characters: ``"…"`` with ``\"`` and ``\\`` the only escapes.
SF_STRING = re.compile(r'^"((?:[\x21\x23-\x5b\x5d-\x7e]|\\["\\])*)"$')
TTL = dt.timedelta(hours=24)
LEASE = dt.timedelta(seconds=15)


@dataclass(frozen=True)
class Claim:
    record_id: int
    claim: str


def parse_key(header: str | None) -> str | None:
    """The key from the header value (sf-string or bare); ``None`` when absent."""
    if header is None:
        return None
    value = header.strip()
    quoted = SF_STRING.match(value)
    if quoted:
        value = re.sub(r'\\(["\\])', r"\1", quoted[1])
    elif '"' in value or "\\" in value:
        value = ""  # a broken sf-string (unbalanced quote, bad escape) is not a bare key either
    if not KEY.match(value):
        raise Problem(
            400,
            'Idempotency-Key must be 1–255 visible ASCII characters, e.g. "8e03978e-40d5".',
            kind="bad-idempotency-key",
        )
    return value


def fingerprint(method: str, path: str, body: bytes) -> str:
    try:
        canonical = json.dumps(json.loads(body or b"{}"), sort_keys=True, separators=(",", ":")).encode()
    except ValueError:
        canonical = body
    return hashlib.sha256(method.encode() + b"\n" + path.encode() + b"\n" + canonical).hexdigest()


def _own_session() -> Session:
    write_intent.set(True)
    return current_app.extensions["ullage.sessionmaker"]()


def _replay(row: IdempotencyRecord) -> Response:
    response = Response(row.response_body, status=row.response_status, mimetype="application/json")
    if row.response_location:
        response.headers["Location"] = row.response_location
    response.headers["Idempotent-Replayed"] = "true"
    return response


def begin(caller: Caller, key: str, method: str, path: str, body: bytes) -> Claim | Response:
    """Claim ``key`` for this request, or answer from an earlier one."""
    print_ = fingerprint(method, path, body)
    now = utcnow()
    for _attempt in range(2):
        with _own_session() as session:
            session.execute(
                delete(IdempotencyRecord).where(
                    IdempotencyRecord.token_id == caller.token_id, IdempotencyRecord.created_at < now - TTL
                )
            )
            statement = select(IdempotencyRecord).where(
                IdempotencyRecord.token_id == caller.token_id, IdempotencyRecord.idempotency_key == key
            )
            if session.get_bind().dialect.name == "postgresql":
                statement = statement.with_for_update()
            row = session.scalars(statement).one_or_none()
            claim = secrets.token_hex(16)
            if row is None:
                row = IdempotencyRecord(
                    token_id=caller.token_id,
                    idempotency_key=key,
                    method=method,
                    path=path,
                    body_sha256=print_,
                    state="in_progress",
                    claim=claim,
                    claimed_at=now,
                    created_at=now,
                )
                session.add(row)
                try:
                    session.commit()
                except IntegrityError:
                    session.rollback()
                    continue  # a concurrent request inserted the key first: look again
                return Claim(row.id, claim)
            if row.body_sha256 != print_:
                raise Problem(
                    422,
                    "This Idempotency-Key was used with a different request; use a new key.",
                    kind="idempotency-key-reused",
                )
            if row.state == "done":
                return _replay(row)
            if now - row.claimed_at < LEASE:
                raise Problem(
                    409,
                    "A request with this Idempotency-Key is still being processed; retry shortly.",
                    kind="idempotency-in-progress",
                    headers={"Retry-After": "1"},
                )
            row.claim, row.claimed_at = claim, now
            session.commit()
            return Claim(row.id, claim)
    raise Problem(
        409,
        "A request with this Idempotency-Key is still being processed; retry shortly.",
        kind="idempotency-in-progress",
        headers={"Retry-After": "1"},
    )


def finish(session: Session, claim: Claim, response: Response) -> None:
    """Mark the claim done with ``response`` inside the work's transaction (before its commit)."""
    done = session.execute(
        update(IdempotencyRecord)
        .where(
            IdempotencyRecord.id == claim.record_id,
            IdempotencyRecord.claim == claim.claim,
            IdempotencyRecord.state == "in_progress",
        )
        .values(
            state="done",
            response_status=response.status_code,
            response_body=response.get_data(as_text=True),
            response_location=response.headers.get("Location"),
        )
    )
    if done.rowcount != 1:
        session.rollback()
        raise Problem(
            409,
            "Another attempt with this Idempotency-Key took over; retry to get its result.",
            kind="idempotency-in-progress",
            headers={"Retry-After": "1"},
        )


def abandon(claim: Claim) -> None:
    """Forget a claim whose request failed, so a corrected retry may use the key again."""
    with _own_session() as session:
        session.execute(
            delete(IdempotencyRecord).where(
                IdempotencyRecord.id == claim.record_id,
                IdempotencyRecord.claim == claim.claim,
                IdempotencyRecord.state == "in_progress",
            )
        )
        session.commit()
