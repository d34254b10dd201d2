"""Concurrency on both databases, through gunicorn (3 workers × 4 threads) on a free loopback port.

Several OS processes at once: two create plans with Idempotency-Keys (each key sent twice, the
second time at once), two edit the same site with If-Match (GET, PATCH stop_cost + 1, retry on
412), one activates plans and one records readings. Then:

* 0 × 5xx and 0 "database is locked" (responses and the server log);
* 0 lost updates: final version == 1 + 200-PATCHes, final stop_cost == initial + 200-PATCHes;
* 0 duplicated or partial plans: plans == distinct keys; plan_sites rows == sites in its inputs;
* every plan's recorded site version is one the site really had, with the stop_cost that version
  had (logged from the PATCH responses), and ≤ the final version.
"""

from __future__ import annotations

import datetime as dt
import json
import multiprocessing
import os
import time
import uuid

import pytest
import requests
from sqlalchemy import create_engine, text

from .helpers import add_tokens, bearer, fresh_pg_database, load_demo_network, migrate, start_gunicorn

# The demo truck with the fewest sites (two) and one of them: plans come quickly, many run at once.
TRUCK, SITE, READ_SITE = "HV-R3", "HV-HTG-16", "HV-GAR-03"
KEYS_PER_CREATOR = 15
EDITS_PER_EDITOR = 20
RUN_LIMIT_S = 60


def _creator(base: str, token: str, name: str) -> list[tuple[str, int, int | None, str]]:
    """POST plans, each key twice; retry 409 'still running' until the first answer arrives."""
    out = []
    session = requests.Session()
    deadline = time.monotonic() + RUN_LIMIT_S
    for i in range(KEYS_PER_CREATOR):
        key = f"{name}-{i}-{uuid.uuid4().hex[:6]}"
        for _attempt in range(2):
            while True:
                response = session.post(
                    f"{base}/api/v1/trucks/{TRUCK}/plans",
                    json={},
                    timeout=30,
                    headers=bearer(token, **{"Idempotency-Key": key}),
                )
                body = response.json()
                out.append((key, response.status_code, body.get("id"), response.text[:300]))
                if response.status_code != 409 or time.monotonic() > deadline:
                    break
                time.sleep(0.05)
    return out


def _editor(base: str, token: str, viewer: str) -> list[tuple[int, int | None, float | None, str]]:
    """GET then PATCH stop_cost + 1 with If-Match; on 412 read again. Returns (status, version, stop_cost)."""
    out = []
    session = requests.Session()
    deadline = time.monotonic() + RUN_LIMIT_S
    done = 0
    while done < EDITS_PER_EDITOR and time.monotonic() < deadline:
        current = session.get(f"{base}/api/v1/sites/{SITE}", headers=bearer(viewer), timeout=30)
        out.append((current.status_code, None, None, "GET"))
        if current.status_code != 200:
            continue
        body = current.json()
        response = session.patch(
            f"{base}/api/v1/sites/{SITE}",
            json={"stop_cost": body["stop_cost"] + 1},
            timeout=30,
            headers=bearer(token, **{"If-Match": current.headers["ETag"]}),
        )
        if response.status_code == 200:
            changed = response.json()
            out.append((200, changed["version"], changed["stop_cost"], "PATCH"))
            done += 1
        else:
            out.append((response.status_code, None, None, response.text[:300]))
    return out


def _activator(base: str, token: str, viewer: str) -> list[tuple[int, str]]:
    out = []
    session = requests.Session()
    deadline = time.monotonic() + RUN_LIMIT_S
    for _ in range(25):
        if time.monotonic() > deadline:
            break
        listing = session.get(f"{base}/api/v1/trucks/{TRUCK}/plans?limit=5", headers=bearer(viewer), timeout=30)
        out.append((listing.status_code, listing.text[:200] if listing.status_code >= 500 else "list"))
        items = listing.json().get("items", []) if listing.status_code == 200 else []
        if items:
            response = session.post(
                f"{base}/api/v1/plans/{items[-1]['id']}/activate", headers=bearer(token), timeout=30
            )
            out.append((response.status_code, response.text[:300]))
        time.sleep(0.02)
    return out


def _reader(base: str, token: str, viewer: str) -> list[tuple[int, str]]:
    out = []
    session = requests.Session()
    for i in range(30):
        at = (dt.datetime.now(dt.UTC) - dt.timedelta(minutes=30 - i)).isoformat()
        response = session.post(
            f"{base}/api/v1/sites/{READ_SITE}/readings",
            json={"level": 1000 + i, "measured_at": at},
            headers=bearer(token),
            timeout=30,
        )
        out.append((response.status_code, response.text[:300]))
        listing = session.get(f"{base}/api/v1/sites/{READ_SITE}/readings", headers=bearer(viewer), timeout=30)
        out.append((listing.status_code, "list"))
    return out


def _run(job):  # noqa: ANN001 - (function name, args), in a spawned process
    name, args = job
    return name, globals()[name](*args)


def hammer(url: str, tmp_path) -> None:
    load_demo_network(url)
    tokens = add_tokens(url)
    engine = create_engine(url)
    with engine.connect() as conn:
        initial_version, initial_cost = conn.execute(
            text("SELECT version, stop_cost FROM sites WHERE code = :c"), {"c": SITE}
        ).one()
    server = start_gunicorn(url, tmp_path, workers=3, threads=4)
    base = server.base
    jobs = [
        ("_creator", (base, tokens["dispatcher"], "a")),
        ("_creator", (base, tokens["dispatcher"], "b")),
        ("_editor", (base, tokens["admin"], tokens["viewer"])),
        ("_editor", (base, tokens["admin"], tokens["viewer"])),
        ("_activator", (base, tokens["dispatcher"], tokens["viewer"])),
        ("_reader", (base, tokens["dispatcher"], tokens["viewer"])),
    ]
    started = time.monotonic()
    try:
        with multiprocessing.get_context("spawn").Pool(len(jobs)) as pool:
            results = pool.map(_run, jobs, chunksize=1)
        elapsed = time.monotonic() - started
    finally:
        assert server.stop() == 0
    log = server.log()
    assert "database is locked" not in log
    assert "Traceback" not in log
    by_kind: dict[str, list] = {}
    for name, rows in results:
        by_kind.setdefault(name, []).extend(rows)
    everything = [row for rows in by_kind.values() for row in rows]
    statuses = [row[1] if isinstance(row[0], str) else row[0] for row in everything]
    assert not [s for s in statuses if s >= 500], [
        r for r in everything if (r[1] if isinstance(r[0], str) else r[0]) >= 500
    ][:5]
    assert not [r for r in everything if "database is locked" in json.dumps(r)]
    assert elapsed < RUN_LIMIT_S + 30

    # Plans: exactly one per key, whole; a repeat of a key replays the same plan.
    plan_of_key: dict[str, int] = {}
    for key, status, plan_id, body in by_kind["_creator"]:
        assert status in (201, 409), body
        if status == 201:
            assert plan_of_key.setdefault(key, plan_id) == plan_id, f"key {key} recorded twice"
    assert len(plan_of_key) == 2 * KEYS_PER_CREATOR

    # Site edits: none lost.
    patches = [r for r in by_kind["_editor"] if r[3] == "PATCH"]
    assert all(r[0] in (200, 412) for r in by_kind["_editor"]), [
        r for r in by_kind["_editor"] if r[0] not in (200, 412)
    ][:3]
    assert len(patches) == 2 * EDITS_PER_EDITOR
    cost_at = {initial_version: initial_cost}
    for _status, version, cost, _ in patches:
        assert version not in cost_at, f"version {version} was produced twice (a lost update)"
        cost_at[version] = cost
    with engine.connect() as conn:
        final_version, final_cost = conn.execute(
            text("SELECT version, stop_cost FROM sites WHERE code = :c"), {"c": SITE}
        ).one()
        assert final_version == initial_version + len(patches)
        assert final_cost == pytest.approx(initial_cost + len(patches))
        versions = {code: v for code, v in conn.execute(text("SELECT code, version FROM sites"))}
        plans = conn.execute(text("SELECT id, inputs, status FROM plans ORDER BY id")).all()
        assert sorted(p[0] for p in plans) == sorted(plan_of_key.values())
        for plan_id, inputs, _status in plans:
            inputs = json.loads(inputs) if isinstance(inputs, str) else inputs
            lines = conn.execute(
                text("SELECT count(*) FROM plan_sites WHERE plan_id = :p"), {"p": plan_id}
            ).scalar_one()
            assert lines == len(inputs["sites"]) > 0, f"plan {plan_id} is partial"
            for site in inputs["sites"]:
                if site["code"] == SITE:
                    assert site["version"] <= final_version
                    assert site["stop_cost"] == pytest.approx(cost_at[site["version"]]), (
                        f"plan {plan_id} recorded version {site['version']} with a stop_cost that version never had"
                    )
                else:
                    assert site["version"] == versions[site["code"]]
        assert conn.execute(text("SELECT count(*) FROM plans WHERE status = 'active'")).scalar_one() <= 1
        readings = conn.execute(text("SELECT count(*) FROM readings")).scalar_one()
    assert readings == sum(1 for status, kind in by_kind["_reader"] if status == 201 and kind != "list")
    assert all(status in (200, 201) for status, _ in by_kind["_reader"])
    assert all(status in (200,) for status, _ in by_kind["_activator"]), by_kind["_activator"][:3]
    engine.dispose()


def test_concurrency_sqlite(tmp_path):
    url = f"sqlite:///{tmp_path / 'race.db'}"
    migrate(url)
    hammer(url, tmp_path)


def test_concurrency_postgresql(tmp_path, pg_migrated):
    with fresh_pg_database(pg_migrated, f"ullage_race_{os.getpid()}") as url:
        migrate(url)
        hammer(url, tmp_path)
