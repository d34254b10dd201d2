"""Weekly trips are never older than an acknowledged change, in any worker, under concurrent load.

Each worker caches trips answers by the change stamp, which every request reads after it arrived
(service.persistence.plans.change_stamp). Here gunicorn (2 workers × 4 threads) serves
a crowd of trips readers while the test records readings of one site with ever later times and
ever lower levels; right after each 201 it asks for the trips on a new connection (any worker).
Each answer must show the stop's projected level lower than the one before: a cached or shared
answer from before the reading would repeat the previous value.
"""

from __future__ import annotations

import datetime as dt
import itertools
import os
import threading

import requests

from .helpers import add_tokens, bearer, fresh_pg_database, load_demo_network, migrate, start_gunicorn

TRUCK = "HV-R1"
READINGS = 12
CROWD = 6


def _crowd(url: str, token: str, stop: threading.Event, statuses: list[int]) -> None:
    session = requests.Session()
    while not stop.is_set():
        statuses.append(session.get(url, headers=bearer(token), timeout=30).status_code)


def check_fresh_under_load(database_url: str, tmp_path) -> None:
    load_demo_network(database_url)
    tokens = add_tokens(database_url)
    server = start_gunicorn(database_url, tmp_path, workers=2, threads=4)
    try:
        base = server.base
        plan = requests.post(
            f"{base}/api/v1/trucks/{TRUCK}/plans",
            json={},
            headers=bearer(tokens["dispatcher"], **{"Idempotency-Key": "fresh-trips"}),
            timeout=60,
        )
        assert plan.status_code == 201, plan.text
        activated = requests.post(
            f"{base}/api/v1/plans/{plan.json()['id']}/activate", headers=bearer(tokens["dispatcher"]), timeout=30
        )
        assert activated.status_code == 200, activated.text
        today = dt.date.today()
        url = (
            f"{base}/api/v1/trucks/{TRUCK}/trips?from={today + dt.timedelta(days=1)}&to={today + dt.timedelta(days=28)}"
        )
        first = requests.get(url, headers=bearer(tokens["viewer"]), timeout=30).json()
        site = first["trips"][0]["stops"][0]["site"]
        capacity = requests.get(f"{base}/api/v1/sites/{site}", headers=bearer(tokens["viewer"]), timeout=30).json()[
            "tank_capacity"
        ]

        stop, statuses = threading.Event(), []
        crowd = [threading.Thread(target=_crowd, args=(url, tokens["viewer"], stop, statuses)) for _ in range(CROWD)]
        for thread in crowd:
            thread.start()
        seen = []
        try:
            start = dt.datetime.now(dt.UTC) - dt.timedelta(minutes=READINGS + 1)
            for i in range(READINGS):
                reading = {
                    "level": 0.5 * capacity - 10.0 * i,
                    "measured_at": (start + dt.timedelta(minutes=i)).isoformat(),
                }
                posted = requests.post(
                    f"{base}/api/v1/sites/{site}/readings",
                    json=reading,
                    headers=bearer(tokens["dispatcher"]),
                    timeout=30,
                )
                assert posted.status_code == 201, posted.text
                answer = requests.get(url, headers=bearer(tokens["viewer"]), timeout=30)  # a new connection
                assert answer.status_code == 200
                stops = [s for t in answer.json()["trips"] for s in t["stops"] if s["site"] == site]
                seen.append(stops[0]["projected_level_before"])
        finally:
            stop.set()
            for thread in crowd:
                thread.join(30)
        assert None not in seen
        assert all(later < earlier for earlier, later in itertools.pairwise(seen)), seen
        assert len(statuses) > READINGS and set(statuses) == {200}  # the crowd was there, and served
    finally:
        server.stop()


def test_trips_fresh_under_load_sqlite(tmp_path):
    url = f"sqlite:///{tmp_path / 'fresh.db'}"
    migrate(url)
    check_fresh_under_load(url, tmp_path)


def test_trips_fresh_under_load_postgresql(tmp_path, pg_migrated):
    with fresh_pg_database(pg_migrated, f"ullage_fresh_{os.getpid()}") as url:
        migrate(url)
        check_fresh_under_load(url, tmp_path)
