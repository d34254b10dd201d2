"""The network plan job end to end on SQLite (prints figures; not a test).

Run: ``.venv/bin/python benchmarks/network_jobs.py [small|large]``. Loads the invented network of
``tests/unit/planning/fleet/networks.py`` (``small``: 300 sites / 4 trucks / 2 depots, ``large``:
10 000 / 60 / 6) into a fresh SQLite database (trucks working every day, up to 24 trips a day, as the core benchmark
``benchmarks/fleet.py`` with no trip limit), then: ``POST /api/v1/network-plans`` (the snapshot),
the worker's ``run_once`` (claim, the child process's computation, progress writes, the result row),
and ``GET`` of the done job. A thread reads the job's row every 0.1 s meanwhile and reports the
longest interval between two changes of ``progress`` it saw. Printed: each step's wall time, the
result's JSON size, the time from the claim to the first change of ``progress`` (the child's start),
and the longest interval between two changes after it with the fractions at its ends.
"""

from __future__ import annotations

import pathlib
import sys
import tempfile
import threading
import time

ROOT = pathlib.Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

SIZES = {"small": (300, 4, 2), "large": (10_000, 60, 6)}


def load(url: str, size: str) -> None:
    from sqlalchemy import create_engine
    from sqlalchemy.orm import Session

    from service.persistence.models import Depot, Product, Site, Truck
    from tests.unit.planning.fleet.networks import fleet

    sites, trucks, depots, products, _ = fleet(*SIZES[size], seed=1)
    engine = create_engine(url)
    with Session(engine) as s:
        s.add_all(Depot(code=d.code, name=d.code, latitude=d.location.latitude, longitude=d.location.longitude) for d in depots)
        s.add_all(Product(code=p.code, name=p.code, safe_fill=p.safe_fill) for p in products)
        s.flush()
        rows = []
        for t in trucks:
            rows.append(Truck(
                code=t.code, name=t.code, dispatch_cost=t.dispatch_cost, capacity=t.capacity, max_stops=t.max_stops,
                working_days=[1, 2, 3, 4, 5, 6, 7], trips_per_day=24, closed_dates=[], depot=t.depot,
                cost_per_km=t.cost_per_km, compartments=list(t.compartments), products=list(t.products),
            ))  # fmt: skip
        s.add_all(rows)
        s.flush()
        by_depot = {}
        for row in rows:
            by_depot.setdefault(row.depot, row)
        for i, f in enumerate(sites):
            x = f.site
            home = depots[i % len(depots)].code
            s.add(Site(
                code=x.code, name=x.code, truck_id=by_depot[home].id, demand_per_day=x.demand_per_day,
                holding_cost=x.holding_cost, stop_cost=x.stop_cost, tank_capacity=x.tank_capacity, safe_fill=x.safe_fill,
                safety_stock=x.safety_stock, latitude=f.location.latitude, longitude=f.location.longitude, product=f.product,
            ))  # fmt: skip
        s.commit()
    engine.dispose()


def main(size: str) -> None:
    from alembic import command
    from sqlalchemy import create_engine, text

    from service import create_app
    from service.auth import new_token, token_hash
    from service.health import alembic_config
    from service.network_worker import Worker
    from service.persistence.db import make_engine
    from service.persistence.repository import add_token

    folder = tempfile.mkdtemp()
    url = f"sqlite:///{folder}/bench.db"
    command.upgrade(alembic_config(url), "head")
    load(url, size)
    token = new_token()
    from sqlalchemy.orm import Session

    engine = make_engine(url)
    with Session(engine) as s:
        add_token(s, "bench", "admin", token_hash(token))
        s.commit()
    app = create_app({"DATABASE_URL": url, "ULLAGE_PLANNING_PER_MINUTE": 0})
    client, headers = app.test_client(), {"Authorization": f"Bearer {token}"}
    began = time.perf_counter()
    response = client.post("/api/v1/network-plans", json={"start_date": "2026-01-05"}, headers=headers)
    posted = time.perf_counter() - began
    assert response.status_code == 202, response.get_json()
    job_id = response.get_json()["id"]
    changes: list[tuple[float, float]] = []
    stop = threading.Event()

    def watch() -> None:
        observer = create_engine(url)
        last = None
        while not stop.is_set():
            with observer.connect() as conn:
                value = conn.execute(text("SELECT progress FROM network_plan_jobs WHERE id = :i"), {"i": job_id}).scalar()
            if value != last:
                changes.append((time.perf_counter(), value))
                last = value
            stop.wait(0.1)
        observer.dispose()

    watcher = threading.Thread(target=watch)
    watcher.start()
    worker = Worker(app.config["ULLAGE_SETTINGS"], name="bench")
    began = time.perf_counter()
    worker.run_once()
    ran = time.perf_counter() - began
    stop.set()
    watcher.join()
    began = time.perf_counter()
    done = client.get(f"/api/v1/network-plans/{job_id}", headers=headers)
    read = time.perf_counter() - began
    body = done.get_json()
    gaps = [(b - a, f"{p:.3f} → {q:.3f}") for (a, p), (b, q) in zip(changes, changes[1:], strict=False)]
    # The first change comes once the child has started (the pool's fork server, on its first use,
    # starts a fresh interpreter) and converted the snapshot; the core's cadence is the rest.
    first, longest = (gaps[0][0] if gaps else 0.0), max(gaps[1:], default=(0.0, "none"))
    n, m, g = SIZES[size]
    if body["status"] != "done":  # e.g. killed at its budget on a busy machine (the child runs at niceness 19)
        print(f"| {n} / {m} / {g} | run {ran:.1f} s | status {body['status']} | {body['error']} |", flush=True)
        return
    print(
        f"| {n} / {m} / {g} | POST {posted:.2f} s | run {ran:.1f} s | GET {read:.2f} s | {len(done.data) / 1e6:.1f} MB "
        f"| status {body['status']} | first progress {first:.1f} s after the claim, then at most {longest[0]:.1f} s apart ({longest[1]}) | "
        f"cost {body['result']['cost_per_day']:,.0f} | unserved {len(body['result']['unserved'])} |",
        flush=True,
    )
    worker.close()
    engine.dispose()


if __name__ == "__main__":
    main(sys.argv[1] if len(sys.argv) > 1 else "small")
