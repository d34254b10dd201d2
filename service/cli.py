"""The ``ullage`` command: database, tokens, demo data, serving."""

from __future__ import annotations

import argparse
import os
import sys
from collections.abc import Iterator, Sequence
from contextlib import contextmanager
from pathlib import Path

from alembic import command
from sqlalchemy.orm import Session

from service.config import load_settings
from service.health import alembic_config
from service.persistence import repository as repo
from service.persistence import tokens
from service.persistence.db import make_engine
from service.persistence.models import ROLES, Site, Truck, utcnow


@contextmanager
def _session() -> Iterator[Session]:
    """A session on its own engine, closed with its connections when the command is done."""
    engine = make_engine(load_settings().database_url)
    try:
        with Session(engine, expire_on_commit=False) as session:
            yield session
    finally:
        engine.dispose()


def db_upgrade(args: argparse.Namespace) -> int:
    command.upgrade(alembic_config(load_settings().database_url), args.revision)
    print(f"database at {args.revision}")
    return 0


def db_downgrade(args: argparse.Namespace) -> int:
    command.downgrade(alembic_config(load_settings().database_url), args.revision)
    print(f"database at {args.revision}")
    return 0


def db_backup(args: argparse.Namespace) -> int:
    from service import backup  # noqa: PLC0415 - keeps `ullage --help` light

    try:
        print(backup.backup(load_settings().database_url, Path(args.path), force=args.force))
    except backup.BackupError as exc:
        print(f"backup failed: {exc}", file=sys.stderr)
        return 1
    return 0


def db_restore(args: argparse.Namespace) -> int:
    from service import backup  # noqa: PLC0415

    try:
        print(backup.restore(Path(args.path), load_settings().database_url, force=args.force))
    except backup.BackupError as exc:
        print(f"restore refused: {exc}", file=sys.stderr)
        return 1
    return 0


def token_create(args: argparse.Namespace) -> int:
    from service.auth import new_token, token_hash  # noqa: PLC0415 - keeps `ullage --help` light

    with _session() as session:
        if args.if_none and tokens.active_exists(session, args.role):
            print(
                f"an active {args.role} token exists already, so none was created (tokens are shown once, "
                f"when created). Yours: `ullage token list`; another: `ullage token create NAME --role "
                f"{args.role}`; revoke one: `ullage token revoke NAME`.",
                file=sys.stderr,
            )
            return 0
        if tokens.named(session, args.name):
            print(f"a token named {args.name!r} exists; choose another name or revoke it", file=sys.stderr)
            return 1
        token = new_token()
        repo.add_token(session, args.name, args.role, token_hash(token))
        session.commit()
    print(f"created {args.role} token {args.name!r}; it is shown once, here:")
    print(token)
    return 0


def token_revoke(args: argparse.Namespace) -> int:
    with _session() as session:
        try:
            repo.revoke_token(session, args.name)
        except repo.NotFound as exc:
            print(exc, file=sys.stderr)
            return 1
        session.commit()
    print(f"revoked {args.name!r}")
    return 0


def token_list(_args: argparse.Namespace) -> int:
    with _session() as session:
        for token in tokens.all_by_name(session):
            state = "revoked" if token.revoked_at else "active"
            print(f"{token.name}\t{token.role}\t{state}\tcreated {token.created_at:%Y-%m-%dT%H:%MZ}")
    return 0


def demo(args: argparse.Namespace) -> int:
    from service.demo import SAMPLE_DATA, load_demo, load_history  # noqa: PLC0415

    with _session() as session:
        if repo.count_rows(session, Truck) or repo.count_rows(session, Site):
            print("the database already holds trucks or sites; the demo loads only into an empty one")
            return 0 if args.if_empty else 1
        trucks, sites = load_demo(session, Path(args.directory or SAMPLE_DATA), load_settings().quantity_unit)
        history = load_history(session, utcnow()) if args.directory is None else None
        session.commit()
    print(f"loaded the demo network: {trucks} trucks, {sites} sites")
    if history is not None:
        print("and its invented history: {} days of temperatures, {} readings, {} deliveries".format(*history))
    return 0


def _persistent_secret() -> str:
    """ULLAGE_SECRET_KEY, or a key kept in ./var/secret_key so every worker signs cookies alike."""
    path = Path("var") / "secret_key"
    if not path.exists():
        import secrets  # noqa: PLC0415

        path.parent.mkdir(parents=True, exist_ok=True)
        path.touch(mode=0o600)
        path.write_text(secrets.token_urlsafe(32))
    return path.read_text().strip()


def serve(args: argparse.Namespace) -> int:
    # Fails here, before gunicorn starts, on any bad setting.
    settings = load_settings(ephemeral_secret=False)
    # gunicorn's processes read their settings from the environment (service.config), so what
    # `serve` decides for them is handed on there. (The metrics directory is gunicorn_conf's.)
    if not settings.secret_key:
        os.environ["ULLAGE_SECRET_KEY"] = _persistent_secret()
    # This interpreter's gunicorn, so `.venv/bin/ullage serve` works without the venv on PATH.
    argv = [
        sys.executable,
        "-m",
        "gunicorn",
        "--config",
        str(Path(__file__).resolve().parent / "gunicorn_conf.py"),
        "--bind",
        f"{args.host or settings.host}:{args.port or settings.port}",
        "service.app:create_app()",
    ]
    if args.workers:
        argv[3:3] = ["--workers", str(args.workers)]
    os.execv(argv[0], argv)
    return 0  # pragma: no cover - exec does not return


def worker(args: argparse.Namespace) -> int:
    """Run network plan jobs in this process until interrupted (or, with --once, the queued ones)."""
    from service import network_worker  # noqa: PLC0415 - the planning core loads only for this command

    settings = load_settings()
    if args.once:
        runner = network_worker.Worker(settings)
        try:
            while runner.run_once() is not None:
                pass
        finally:
            runner.close()
        return 0
    print(f"ullage worker: running network plan jobs of {settings.database_url.split('@')[-1]}", flush=True)
    try:
        network_worker.serve(settings)
    except KeyboardInterrupt:
        pass
    return 0


def build_parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(prog="ullage", description="Delivery planning for bulk-liquid tanks.")
    sub = parser.add_subparsers(dest="command", required=True)

    db = sub.add_parser("db", help="database schema").add_subparsers(dest="db_command", required=True)
    up = db.add_parser("upgrade", help="migrate to the newest schema (Alembic)")
    up.add_argument("revision", nargs="?", default="head")
    up.set_defaults(func=db_upgrade)
    down = db.add_parser("downgrade", help="migrate back (Alembic)")
    down.add_argument("revision")
    down.set_defaults(func=db_downgrade)
    bk = db.add_parser(
        "backup", help="copy the database to PATH while it runs (SQLite backup API; PostgreSQL: pg_dump -Fc)"
    )
    bk.add_argument("path")
    bk.add_argument("--force", action="store_true", help="replace PATH if it exists")
    bk.set_defaults(func=db_backup)
    rs = db.add_parser("restore", help="REPLACE everything in the database with the backup at PATH")
    rs.add_argument("path")
    rs.add_argument("--force", action="store_true", help="also when the database's schema is newer than the backup's")
    rs.set_defaults(func=db_restore)

    token = sub.add_parser("token", help="API tokens").add_subparsers(dest="token_command", required=True)
    create = token.add_parser("create", help="create a token; prints it once, alone on the last line")
    create.add_argument("name")
    create.add_argument("--role", required=True, choices=sorted(ROLES))
    create.add_argument(
        "--if-none",
        action="store_true",
        help="only when no active token of this role exists (otherwise say how to list, create or revoke one)",
    )
    create.set_defaults(func=token_create)
    revoke = token.add_parser("revoke", help="revoke a token by name")
    revoke.add_argument("name")
    revoke.set_defaults(func=token_revoke)
    token.add_parser("list", help="names, roles and states (never secrets)").set_defaults(func=token_list)

    dm = sub.add_parser("demo", help="load the invented demo network (service/sample_data/) into an empty database")
    dm.add_argument("--directory", help="a directory with trucks.csv and sites.csv instead of the demo network")
    dm.add_argument("--if-empty", action="store_true", help="exit 0 without loading when data exists")
    dm.set_defaults(func=demo)

    sv = sub.add_parser("serve", help="run gunicorn")
    sv.add_argument("--host", help="default: ULLAGE_HOST or 127.0.0.1")
    sv.add_argument("--port", type=int, help="default: ULLAGE_PORT or 8000")
    sv.add_argument("--workers", type=int, default=0, help="default: WEB_CONCURRENCY or 2")
    sv.set_defaults(func=serve)

    wk = sub.add_parser("worker", help="run network plan jobs (POST /network-plans) in this process")
    wk.add_argument("--once", action="store_true", help="run the queued jobs, then exit")
    wk.set_defaults(func=worker)
    return parser


def main(argv: Sequence[str] | None = None) -> int:
    args = build_parser().parse_args(argv)
    return int(args.func(args) or 0)
