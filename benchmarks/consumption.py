"""The consumption estimate's cost against the sites on one truck, measured: prints figures, it is not a test.

``GET /sites/{code}/consumption`` tests a site's drift with σ pooled over the other active sites of
its truck, so it reads and estimates them all; the trips replay and the status page estimate every
site of a truck at once. On a migrated SQLite file (and, with ``--pg-url``, a fresh PostgreSQL
database ``ullage_consumption``, dropped afterwards): one truck with N sites, each with a reading
and a delivery every week over the window (invented, seeded), then per call, best of three:

* ``site_consumption``: one site's answer without the pool cache (apply-estimate, or the first
  request after a change), and with it warm (``GET /sites/{code}/consumption`` until the next change);
* ``for_sites``: every site of the truck (the trips replay's and the status page's work).

    .venv/bin/python benchmarks/consumption.py [--sites 300 1000] [--days 90] [--pg-url URL]
"""

from __future__ import annotations

import argparse
import datetime as dt
import random
import sys
import tempfile
import time
from collections.abc import Callable
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(ROOT))

from alembic import command  # noqa: E402
from load import bench_postgres  # noqa: E402 - this directory is on the path when run as a script
from sqlalchemy import create_engine  # noqa: E402
from sqlalchemy.orm import Session  # noqa: E402

from service import consumption  # noqa: E402
from service.health import alembic_config  # noqa: E402
from service.persistence import deliveries as store  # noqa: E402
from service.persistence import repository as repo  # noqa: E402
from service.persistence.models import Delivery, Reading, utcnow  # noqa: E402


def fill(url: str, sites: int, days: int, seed: int = 15) -> None:
    """One truck, ``sites`` sites; weekly a reading, then a delivery back up to 8 000 L."""
    command.upgrade(alembic_config(url), "head")
    engine = create_engine(url)
    rng = random.Random(seed)
    now = utcnow()
    with Session(engine) as session:
        truck = repo.add_truck(session, {"code": "B1", "name": "Bench", "dispatch_cost": 100.0, "capacity": 30000.0})
        for i in range(sites):
            site = repo.add_site(
                session,
                {
                    "code": f"B{i:04d}",
                    "name": f"Bench {i}",
                    "demand_per_day": 500.0,
                    "holding_cost": 0.002,
                    "stop_cost": 20.0,
                    "tank_capacity": 10000.0,
                    "safe_fill": 0.9,
                    "safety_stock": 500.0,
                },
                truck,
            )
            rows: list[Reading | Delivery] = []
            level, at = 8000.0, now - dt.timedelta(days=days)
            while at < now - dt.timedelta(days=7):
                at += dt.timedelta(days=7, hours=rng.uniform(-6, 6))
                level = max(0.0, level - 7 * 500 * rng.uniform(0.8, 1.2))  # 500 L/day ± 20 %
                rows.append(Reading(site_id=site.id, level=level, measured_at=at, created_by="bench"))
                rows.append(
                    Delivery(
                        site_id=site.id,
                        quantity=8000 - level,
                        delivered_at=at + dt.timedelta(hours=1),
                        created_by="bench",
                    )
                )
                level = 8000.0
            session.add_all(rows)
        session.commit()
    engine.dispose()


def best_ms(fn: Callable[[], object]) -> float:
    best = float("inf")
    for _ in range(3):
        start = time.perf_counter()
        fn()
        best = min(best, time.perf_counter() - start)
    return best * 1000


def measure(url: str, days: int) -> tuple[float, float, float]:
    engine = create_engine(url)
    with Session(engine) as session:
        truck = repo.truck_by_code(session, "B1")
        sites = store.truck_sites(session, truck.id)
        one = best_ms(lambda: consumption.site_consumption(session, sites[0], days))
        consumption.site_consumption(session, sites[0], days, "bench")  # warms the pool cache
        cached = best_ms(lambda: consumption.site_consumption(session, sites[1], days, "bench"))
        every = best_ms(lambda: consumption.for_sites(session, sites, days))
    engine.dispose()
    return one, cached, every


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--sites", type=int, nargs="+", default=[300, 1000])
    parser.add_argument("--days", type=int, default=90)
    parser.add_argument("--pg-url", default=None)
    args = parser.parse_args(argv)
    print(f"{'database':<11}{'sites':>6}  {'one site (ms)':>14}  {'cached pool (ms)':>17}  {'every site (ms)':>16}")
    for n in args.sites:
        with tempfile.TemporaryDirectory() as tmp:
            url = f"sqlite:///{tmp}/bench.db"
            fill(url, n, args.days)
            one, cached, every = measure(url, args.days)
            print(f"{'sqlite':<11}{n:>6}  {one:>14.1f}  {cached:>17.1f}  {every:>16.1f}")
        if args.pg_url:
            with bench_postgres(args.pg_url, "ullage_consumption") as url:
                fill(url, n, args.days)
                one, cached, every = measure(url, args.days)
                print(f"{'postgresql':<11}{n:>6}  {one:>14.1f}  {cached:>17.1f}  {every:>16.1f}")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
