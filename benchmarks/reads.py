"""The hot path's single reads, measured: prints figures, it is not a test.

On a migrated demo database (SQLite file and, separately, a fresh PostgreSQL database
``ullage_reads`` on ``--pg-url``, dropped afterwards), per call:

* the trips change marker through an ORM session (checkout, BEGIN, SELECT, ROLLBACK; pre-ping on
  PostgreSQL), and through ``read_one`` on the autocommit engine;
* the token lookup through an ORM session and through ``read_one``;

and once, the CPU a gunicorn worker spends to start (``import service.app; create_app()`` in a
fresh interpreter), which ``max_requests`` amortises.

    .venv/bin/python benchmarks/reads.py [--calls 3000] [--db sqlite|postgresql|both]
"""

from __future__ import annotations

import argparse
import os
import resource
import subprocess
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
from sqlalchemy.orm import Session, sessionmaker  # noqa: E402

from service.auth import new_token, token_hash  # noqa: E402
from service.demo import SAMPLE_DATA, load_demo  # noqa: E402
from service.health import alembic_config  # noqa: E402
from service.persistence import repository as repo  # noqa: E402
from service.persistence.db import make_engine, make_read_engine, read_one  # noqa: E402
from service.persistence.plans import _CHANGE_STAMP  # noqa: E402
from service.persistence.tokens import TOKEN_BY_HASH  # noqa: E402


def per_call_us(fn: Callable[[], object], calls: int) -> float:
    """Best of three runs of ``calls`` calls, in microseconds per call (the machine drifts)."""
    for _ in range(min(calls, 100)):
        fn()
    best = float("inf")
    for _ in range(3):
        started = time.perf_counter()
        for _ in range(calls):
            fn()
        best = min(best, (time.perf_counter() - started) / calls * 1e6)
    return best


def prepare(url: str) -> str:
    command.upgrade(alembic_config(url), "head")
    engine = create_engine(url)
    with Session(engine) as session:
        load_demo(session, SAMPLE_DATA, "L")
        token = new_token()
        repo.add_token(session, "reads", "viewer", token_hash(token))
        session.commit()
    engine.dispose()
    return token_hash(token)


def measure(name: str, url: str, calls: int) -> list[tuple[str, str, float]]:
    digest = prepare(url)
    main, read = make_engine(url), make_read_engine(url)
    sessions = sessionmaker(main)
    marker_statement = _CHANGE_STAMP

    def session_read(statement, params):  # noqa: ANN001, ANN202
        def run() -> None:
            with sessions() as session:
                session.execute(statement, params).one_or_none()

        return run

    rows = [
        (name, "marker, ORM session", per_call_us(session_read(marker_statement, {}), calls)),
        (name, "marker, read_one", per_call_us(lambda: read_one(read, marker_statement, {}), calls)),
        (name, "token, ORM session", per_call_us(session_read(TOKEN_BY_HASH, {"secret_hash": digest}), calls)),
        (name, "token, read_one", per_call_us(lambda: read_one(read, TOKEN_BY_HASH, {"secret_hash": digest}), calls)),
    ]
    main.dispose()
    read.dispose()
    return rows


def worker_start_cpu_s(url: str) -> float:
    """CPU seconds of a fresh interpreter that imports the app and builds it (a worker's start)."""
    before = resource.getrusage(resource.RUSAGE_CHILDREN)
    subprocess.run(
        [sys.executable, "-c", "import service.app as a; a.create_app()"],
        cwd=ROOT,
        env={**os.environ, "DATABASE_URL": url},
        check=True,
    )
    after = resource.getrusage(resource.RUSAGE_CHILDREN)
    return (after.ru_utime - before.ru_utime) + (after.ru_stime - before.ru_stime)


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--calls", type=int, default=3000)
    parser.add_argument("--db", choices=("sqlite", "postgresql", "both"), default="both")
    parser.add_argument(
        "--pg-url",
        default=os.environ.get("BENCH_POSTGRES_URL", "postgresql+psycopg://postgres@127.0.0.1:5432/postgres"),
    )
    args = parser.parse_args(argv)
    rows: list[tuple[str, str, float]] = []
    with tempfile.TemporaryDirectory(prefix="ullage-reads-") as directory:
        sqlite_url = f"sqlite:///{directory}/reads.db"
        if args.db in ("sqlite", "both"):
            rows += measure("sqlite", sqlite_url, args.calls)
        if args.db in ("postgresql", "both"):
            with bench_postgres(args.pg_url, "ullage_reads") as url:
                rows += measure("postgresql", url, args.calls)
        start = worker_start_cpu_s(sqlite_url)
    print(f"\nUllage single reads: best of 3 × {args.calls} calls, demo network\n")
    print(f"| {'db':<10} | {'read':<28} | {'µs per call':>11} |")
    print(f"|{'-' * 12}|{'-' * 30}|{'-' * 13}|")
    for database, label, us in rows:
        print(f"| {database:<10} | {label:<28} | {us:>11.1f} |")
    print(f"\nworker start (import service.app + create_app): {start:.2f} s of CPU")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
