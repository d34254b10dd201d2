"""``Idempotency-Key`` for POSTs that record something (IETF httpapi idempotency-key draft).

Rules (also in the OpenAPI description and README):

* The key is an sf-string (``"…"``) or a bare token of 1–255 visible ASCII characters; anything
  else is 400. Keys are scoped to the calling token and kept for 24 hours (:data:`TTL`).
* The fingerprint is SHA-256 over the method, the path and the canonical JSON body.
* A claim is recorded in its own short transaction before the work. The work's transaction ends
  by marking the claim done with the response, in the same commit as the plan — so a plan and
  its idempotency record are written together or not at all.
* Same key, same fingerprint, done → the first response again, with ``Ullage-Replayed: true``.
  Same key, different fingerprint → 422. Same key while the first request still runs → 409 with
  ``Retry-After`` (never a second computation); the first retry after it is done gets its response.
* A live attempt keeps its claim: :class:`Heartbeat` renews the claim's lease every third of
  :data:`LEASE` while the work runs. Only a claim whose lease ran out — its worker died, or could not
  reach the database for a whole lease — may be taken over by a retry; the original can then no
  longer finish (its commit is refused), so a key never records twice. (Before the heartbeat a
  plan that took longer than the lease was taken over by every retry: 15 copies of one computation
  ran for one key.) On SQLite the working request holds the database's single write lock from its
  first statement to its commit, so its renewals cannot land meanwhile; the lock itself is its
  proof of life: a retry that finds the lease run out answers 409 while the write lock is held
  (:func:`~service.persistence.db.sqlite_write_lock_held`, which does not wait), and a takeover,
  which must write, could not happen before the lock is free anyway.
* Looking a key up is a plain read; only a new key or a takeover writes. So a retry that gets its
  replay or its 409 never queues behind the writers (on SQLite, behind the running plan itself).
* Expired records are purged for every token, not only the caller's: at most once per
  :data:`PURGE_EVERY` per process, at most :data:`PURGE_BATCH` rows at a time, oldest first, in the
  transaction that records a new claim.
"""

from __future__ import annotations

import datetime as dt
import hashlib
import json
import logging
import re
import secrets
import threading
import time
from collections.abc import Callable
from dataclasses import dataclass

from flask import Response, current_app, request
from sqlalchemy.exc import DBAPIError, IntegrityError
from sqlalchemy.orm import Session, sessionmaker

from service.auth import Caller, current_caller
from service.errors import Problem
from service.persistence import idempotency_records as records
from service.persistence.db import sqlite_write_lock_held, write_intent
from service.persistence.models import IdempotencyRecord, utcnow
from service.request_db import get_session

HEADER = "Idempotency-Key"
#: Marks a replayed answer. Our own name: a response header only, never read from a request.
REPLAYED_HEADER = "Ullage-Replayed"
KEY = re.compile(r"^[\x21-\x7e]{1,255}$")
#: An RFC 8941 sf-string of visible characters: ``"…"`` with ``\"`` and ``\\`` the only escapes.
SF_STRING = re.compile(r'^"((?:[\x21\x23-\x5b\x5d-\x7e]|\\["\\])*)"$')
TTL = dt.timedelta(hours=24)
#: How long a claim stays valid without a renewal; :class:`Heartbeat` renews it every third of it.
LEASE = dt.timedelta(seconds=15)
#: Expired records are purged at most this often per process ...
PURGE_EVERY = dt.timedelta(minutes=5)
#: ... and at most this many at a time (a bounded transaction; a backlog goes in a few purges).
PURGE_BATCH = 1000

log = logging.getLogger("ullage.idempotency")
_clock = time.monotonic  # the purge's clock (tests move it instead of waiting)
_purge_lock = threading.Lock()
_last_purge = [float("-inf")]  # _clock() at this process's last purge


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
    response.headers[REPLAYED_HEADER] = "true"
    return response


def _in_progress() -> Problem:
    return Problem(
        409,
        "A request with this Idempotency-Key is still being processed; retry shortly.",
        kind="idempotency-in-progress",
        headers={"Retry-After": "1"},
    )


def _answer(row: IdempotencyRecord, print_: str, now: dt.datetime) -> Response | None:
    """What a live record answers: its replay, 422 or 409; ``None`` when its claim may be taken over."""
    if row.body_sha256 != print_:
        raise Problem(
            422,
            "This Idempotency-Key was used with a different request; use a new key.",
            kind="idempotency-key-reused",
        )
    if row.state == "done":
        return _replay(row)
    if now - row.claimed_at < LEASE:
        raise _in_progress()
    return None


def _lookup(caller: Caller, key: str, now: dt.datetime) -> IdempotencyRecord | None:
    """The caller's unexpired record of ``key``, read without a lock (SQLite: a deferred BEGIN)."""
    intent = write_intent.set(False)
    try:
        with current_app.extensions["ullage.sessionmaker"]() as session:
            return records.find_since(session, caller.token_id, key, now - TTL)
    finally:
        write_intent.reset(intent)


def purge_expired(session: Session, now: dt.datetime) -> int:
    """Delete up to :data:`PURGE_BATCH` records older than :data:`TTL`, of any token, oldest first.

    Runs at most once per :data:`PURGE_EVERY` in this process (``0`` otherwise); never commits.
    """
    with _purge_lock:
        if _clock() - _last_purge[0] < PURGE_EVERY.total_seconds():
            return 0
        _last_purge[0] = _clock()
    return records.purge_before(session, now - TTL, PURGE_BATCH)


def begin(caller: Caller, key: str, method: str, path: str, body: bytes) -> Claim | Response:
    """Claim ``key`` for this request, or answer from an earlier one."""
    print_ = fingerprint(method, path, body)
    now = utcnow()
    seen = _lookup(caller, key, now)
    if seen is not None:
        answer = _answer(seen, print_, now)
        if answer is not None:
            return answer
        engine = current_app.extensions["ullage.engine"]
        if engine.dialect.name == "sqlite" and sqlite_write_lock_held(engine):
            raise _in_progress()  # the attempt holding the claim still holds the write lock: alive
    for _attempt in range(2):
        try:
            with _own_session() as session:
                return _claim(session, caller, key, method, path, print_, now)
        except IntegrityError:
            continue  # a concurrent request inserted the key first: look again
    raise _in_progress()


def _claim(
    session: Session, caller: Caller, key: str, method: str, path: str, print_: str, now: dt.datetime
) -> Claim | Response:
    """Purge (its own commit), then in one write transaction insert the claim, replay, refuse or take over."""
    if purge_expired(session, now):
        session.commit()
    row = records.find_for_claim(session, caller.token_id, key)
    if row is not None and row.created_at < now - TTL:
        records.drop(session, row)
        row = None
    claim = secrets.token_hex(16)
    if row is None:
        row = records.add(
            session,
            IdempotencyRecord(
                token_id=caller.token_id,
                idempotency_key=key,
                method=method,
                path=path,
                body_sha256=print_,
                state="in_progress",
                claim=claim,
                claimed_at=now,
                created_at=now,
            ),
        )
        session.commit()
        return Claim(row.id, claim)
    answer = _answer(row, print_, now)
    if answer is not None:
        return answer
    row.claim, row.claimed_at = claim, now
    session.commit()
    return Claim(row.id, claim)


class Heartbeat:
    """Renews a claim's lease from a background thread while its request works.

    Every ``LEASE / 3`` it sets ``claimed_at`` to now, in its own short transaction, where the claim
    is still this attempt's and still in progress; once it is not (done, or taken over) it stops.
    A failed renewal (database unreachable; on SQLite, the working request's own write lock) is
    tried again at the next beat: two may fail before the lease runs out. :meth:`stop` must come
    after the request's transaction has ended — a renewal may be waiting for that transaction's
    lock on the record.
    """

    def __init__(self, factory: sessionmaker[Session], claim: Claim) -> None:
        self._factory, self._claim = factory, claim
        self._interval = LEASE.total_seconds() / 3
        self._stopped = threading.Event()
        self._thread = threading.Thread(target=self._run, name=f"idempotency-heartbeat-{claim.record_id}", daemon=True)
        self._thread.start()

    @classmethod
    def start(cls, claim: Claim) -> Heartbeat:
        return cls(current_app.extensions["ullage.sessionmaker"], claim)

    def _run(self) -> None:
        while not self._stopped.wait(self._interval):
            try:
                if not self._renew():
                    return
            except DBAPIError as exc:
                if "database is locked" not in str(exc.orig):  # SQLite: held by the request itself
                    log.warning("idempotency lease not renewed: %s", type(exc.orig).__name__)

    def _renew(self) -> bool:
        with self._factory() as session:
            renewed = records.renew(session, self._claim.record_id, self._claim.claim, utcnow())
            session.commit()
        return renewed

    def stop(self) -> None:
        self._stopped.set()
        self._thread.join(timeout=LEASE.total_seconds())


def finish(session: Session, claim: Claim, response: Response) -> None:
    """Mark the claim done with ``response`` inside the work's transaction (before its commit)."""
    done = records.mark_done(
        session,
        claim.record_id,
        claim.claim,
        response.status_code,
        response.get_data(as_text=True),
        response.headers.get("Location"),
    )
    if not done:
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
        records.forget(session, claim.record_id, claim.claim)
        session.commit()


def run(work: Callable[[], Response]) -> Response:
    """Run ``work`` under the request's ``Idempotency-Key`` (if any) and commit once.

    ``work`` writes on the request's session and returns the response without committing; the
    claim is marked done in the same commit, so the record and its idempotency answer are written
    together or not at all. A repeat gets the first answer (:func:`begin`); a failure forgets the
    claim so a corrected retry may use the key again.
    """
    key = parse_key(request.headers.get(HEADER))
    claim = heartbeat = None
    if key is not None:
        outcome = begin(current_caller(), key, request.method, request.path, request.get_data())
        if isinstance(outcome, Response):
            return outcome
        claim, heartbeat = outcome, Heartbeat.start(outcome)
    session = get_session()
    try:
        response = work()
        if claim is not None:
            finish(session, claim, response)
        session.commit()
    except Exception:
        session.rollback()
        if claim is not None:
            abandon(claim)
        raise
    finally:
        if heartbeat is not None:
            heartbeat.stop()  # after the transaction: a renewal may wait for its lock
    return response
