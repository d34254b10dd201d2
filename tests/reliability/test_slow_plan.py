"""A plan slower than the Idempotency-Key lease, retried by an impatient client, under gunicorn.

The attack of issue 14 §3 at a smaller scale: the client gives up after 1 s, the computation takes
5 s, the lease is 1.5 s; the client retries every half second with the same key. Before the
heartbeat, on PostgreSQL each retry after the lease took the claim over and started a computation
of its own, and the key was answered only long after the client stopped. Now: one computation,
every retry answered at once with 409 + ``Retry-After``, and the first retry after the plan is
recorded gets it. The server is ``slow_plan_app`` (the service with its planner slowed; it writes
one line per computation, whichever worker ran it).
"""

from __future__ import annotations

import os
import time
import uuid

import pytest
import requests

from .helpers import HERE, add_tokens, bearer, fresh_pg_database, load_demo_network, migrate, start_gunicorn
from .test_faults import PLANS, assert_no_partial_plans, is_problem

SLOW_SECONDS = 5.0
LEASE_SECONDS = 1.5
CLIENT_TIMEOUT = 1.0
#: From the end of the computation to its commit (a few inserts), with room for a busy machine.
COMMIT_MARGIN = 1.0


@pytest.fixture(params=["sqlite", "postgresql"])
def served_url(request, tmp_path):
    if request.param == "sqlite":
        url = f"sqlite:///{tmp_path / 'slow.db'}"
        migrate(url)
        load_demo_network(url)
        yield url
        return
    with fresh_pg_database(request.getfixturevalue("pg_migrated"), f"ullage_slow_{os.getpid()}") as url:
        migrate(url)
        load_demo_network(url)
        yield url


def test_an_impatient_client_gets_the_one_computation_on_its_first_retry_after_it(served_url, tmp_path):
    tokens = add_tokens(served_url)
    journal = tmp_path / "computations.log"
    server = start_gunicorn(
        served_url,
        tmp_path,
        workers=2,
        threads=4,
        app="slow_plan_app:create_app()",
        extra_env={
            "PYTHONPATH": str(HERE),
            "SLOW_PLAN_SECONDS": str(SLOW_SECONDS),
            "SLOW_PLAN_LEASE_SECONDS": str(LEASE_SECONDS),
            "SLOW_PLAN_LOG": str(journal),
        },
    )
    try:
        # One use of the token first: its "last used" note (a write, once a minute) would otherwise
        # wait behind the running plan's SQLite write lock and delay the first retries by 5 s.
        assert requests.get(server.url(PLANS), headers=bearer(tokens["dispatcher"]), timeout=10).status_code == 200
        headers = bearer(tokens["dispatcher"], **{"Idempotency-Key": f'"slow-{uuid.uuid4().hex[:8]}"'})
        attempts = []  # (sent at, wall clock; the response or None when the client gave up)
        deadline = time.monotonic() + SLOW_SECONDS + 30
        while time.monotonic() < deadline:
            sent = time.time()
            try:
                response = requests.post(server.url(PLANS), json={}, headers=headers, timeout=CLIENT_TIMEOUT)
            except requests.Timeout:
                response = None
            attempts.append((sent, response))
            if response is not None and response.status_code == 201:
                break
            time.sleep(0.5)

        runs = journal.read_text().splitlines() if journal.exists() else []
        assert len(runs) == 1, f"{len(runs)} computations for one key: {runs}"
        _pid, _started, ended = runs[0].split()
        (first_sent, first), *retries = attempts
        assert first is None, "the first request should have outlasted the client's patience"
        *waiting, (last_sent, last) = retries
        assert last is not None and last.status_code == 201, [r and r.status_code for _, r in attempts]
        assert last.headers.get("Ullage-Replayed") == "true"
        for sent, response in waiting:
            # Answered at once (no timeout), told to come back; never a second computation.
            assert response is not None, f"a retry sent {sent - first_sent:.1f} s in got no answer within 1 s"
            assert response.status_code == 409 and is_problem(response), response.text
            assert int(response.headers["Retry-After"]) >= 1
            assert sent < float(ended) + COMMIT_MARGIN, "a retry sent after the plan was recorded still got 409"
        assert len(waiting) >= 4
        assert len(assert_no_partial_plans(served_url)) == 1
        assert (
            requests.get(server.url(last.headers["Location"]), headers=bearer(tokens["viewer"]), timeout=10).json()
            == last.json()
        )
    finally:
        assert server.stop() == 0
