"""``ullage db backup`` and ``ullage db restore``: copies that lose nothing acknowledged.

Copying a live SQLite file by itself is not a backup: in WAL mode the newest commits live in
``-wal`` until a checkpoint (a file copy during plan writes lost 3 of 45 acknowledged plans). So:

* **SQLite**, both ways: SQLite's online backup API (:meth:`sqlite3.Connection.backup`, in one
  step), which reads one consistent snapshot through the WAL while writers go on, and writes the
  destination under its own lock. A backup file is a self-contained database (rollback journal,
  ``PRAGMA integrity_check`` ok) written next to ``PATH`` and renamed onto it.
* **PostgreSQL**: ``pg_dump --format=custom`` (one consistent snapshot; the password goes in
  ``PGPASSWORD``, never on the command line) and ``pg_restore --clean --if-exists --no-owner
  --no-privileges --single-transaction``. Without the client tools the exact command is printed
  and the command fails.

A restore replaces everything in the target, and refuses a target whose schema (Alembic revision)
is newer than the backup's unless ``--force`` (PostgreSQL: the target is first migrated down to
the backup's revision), and any revision this release does not know.
"""

from __future__ import annotations

import os
import shlex
import shutil
import sqlite3
import subprocess
from pathlib import Path

from alembic import command
from alembic.script import ScriptDirectory
from sqlalchemy import create_engine
from sqlalchemy.engine import URL, make_url

from service.health import alembic_config
from service.persistence import schema
from service.persistence.db import SQLITE_BUSY_TIMEOUT_MS


class BackupError(Exception):
    """A backup or restore that cannot (or must not) go ahead; the message says why and what to do."""


def is_sqlite(url: str) -> bool:
    return make_url(url).get_backend_name() == "sqlite"


def _sqlite_file(url: str) -> Path:
    database = make_url(url).database
    if not database or database == ":memory:":
        raise BackupError("DATABASE_URL names an in-memory SQLite database; there is nothing to back up or restore")
    return Path(database)


def _revisions() -> list[str]:
    """This release's Alembic revisions, oldest first."""
    return [r.revision for r in reversed(list(ScriptDirectory.from_config(alembic_config()).walk_revisions()))]


def check_revisions(backup: str | None, target: str | None, force: bool) -> None:
    """Refuse a restore that would put an unknown schema in place or take a newer one back."""
    known = _revisions()
    if backup is None:
        raise BackupError("the file holds no Ullage schema (no alembic_version); is it an Ullage backup?")
    if backup not in known:
        raise BackupError(
            f"the backup is at revision {backup}, which this release of Ullage does not know; "
            "restore it with the release that made it"
        )
    if target is not None and target not in known:
        raise BackupError(
            f"the target database is at revision {target}, which this release of Ullage does not know; "
            "restore with the release that made it"
        )
    if target is not None and known.index(target) > known.index(backup) and not force:
        raise BackupError(
            f"the target database is at revision {target}, newer than the backup's {backup}: restoring would "
            "take its schema back. Add --force to restore anyway, then run `ullage db upgrade`"
        )


# ------------------------------------------------------------------ SQLite


def sqlite_backup(url: str, path: Path, *, force: bool = False) -> str:
    """Back the SQLite database of ``url`` up into ``path``; returns a one-line summary."""
    source_path = _sqlite_file(url)
    if not source_path.exists():
        raise BackupError(f"there is no database at {source_path}")
    if path.exists() and not force:
        raise BackupError(f"{path} exists; choose a new file or add --force to replace it")
    partial = path.with_name(f".{path.name}.partial-{os.getpid()}")
    partial.unlink(missing_ok=True)
    # Read-write although it only reads: a read-only connection could not remove the -wal and -shm
    # files it creates when it is the last one, and files left by another user can lock the service out.
    source = sqlite3.connect(source_path, timeout=SQLITE_BUSY_TIMEOUT_MS / 1000)
    try:
        copy = sqlite3.connect(partial)
        try:
            source.backup(copy)  # all pages in one step: one consistent snapshot
            schema.sqlite_journal_mode(copy, "DELETE")  # one self-contained file, no -wal beside it
            verdict = schema.sqlite_integrity(copy)
            if verdict != "ok":
                raise BackupError(f"the copy failed its integrity check ({verdict}); nothing was written to {path}")
            revision = schema.sqlite_revision(copy)
            plans = schema.sqlite_plan_count(copy)
        finally:
            copy.close()
        os.replace(partial, path)
    finally:
        source.close()
        partial.unlink(missing_ok=True)
    return f"backed up {source_path} to {path}: revision {revision}, {plans} plans, {path.stat().st_size} bytes"


def sqlite_restore(path: Path, url: str, *, force: bool = False) -> str:
    """Replace the SQLite database of ``url`` with the backup ``path``; returns a summary."""
    target_path = _sqlite_file(url)
    if not path.is_file():
        raise BackupError(f"there is no backup file at {path}")
    source = sqlite3.connect(f"file:{path}?mode=ro", uri=True)
    try:
        try:
            verdict = schema.sqlite_integrity(source)
        except sqlite3.DatabaseError as exc:
            raise BackupError(f"{path} is not a SQLite database ({exc})") from exc
        if verdict != "ok":
            raise BackupError(f"{path} failed its integrity check ({verdict}); nothing was restored")
        backup_revision = schema.sqlite_revision(source)
        target_path.parent.mkdir(parents=True, exist_ok=True)
        target = sqlite3.connect(target_path, timeout=SQLITE_BUSY_TIMEOUT_MS / 1000)
        try:
            check_revisions(backup_revision, schema.sqlite_revision(target), force)
            source.backup(target)  # under the target's write lock; its other connections see the result
            schema.sqlite_journal_mode(target, "WAL")  # what the service runs (service.persistence.db)
            plans = schema.sqlite_plan_count(target)
        finally:
            target.close()
    finally:
        source.close()
    return f"restored {path} into {target_path}: revision {backup_revision}, {plans} plans" + _upgrade_hint(
        backup_revision
    )


def _upgrade_hint(revision: str | None) -> str:
    head = _revisions()[-1]
    return "" if revision == head else f"; run `ullage db upgrade` to bring it from {revision} to {head}"


# ------------------------------------------------------------------ PostgreSQL


def _libpq(url: str) -> tuple[str, dict[str, str]]:
    """A libpq URI for ``url`` without its password, and the environment that carries it."""
    parsed: URL = make_url(url)
    env = {"PGPASSWORD": parsed.password} if parsed.password else {}
    plain = URL.create("postgresql", parsed.username, None, parsed.host, parsed.port, parsed.database, parsed.query)
    return plain.render_as_string(hide_password=False), env


def _missing(argv: list[str], env: dict[str, str], what: str) -> BackupError:
    shown = ("PGPASSWORD=<the password in DATABASE_URL> " if env else "") + shlex.join(argv)
    return BackupError(
        f"{argv[0]} is not installed here (PostgreSQL client tools, the server's major version or newer). "
        f"Install them, or {what} with:\n  {shown}"
    )


def _run_tool(argv: list[str], env: dict[str, str]) -> subprocess.CompletedProcess[str]:
    tool = shutil.which(argv[0])
    if tool is None:
        raise _missing(argv, env, "run")
    done = subprocess.run([tool, *argv[1:]], env={**os.environ, **env}, capture_output=True, text=True, check=False)
    if done.returncode != 0:
        raise BackupError(f"{argv[0]} failed (exit {done.returncode}): {done.stderr.strip()}")
    return done


def pg_backup(url: str, path: Path, *, force: bool = False) -> str:
    uri, env = _libpq(url)
    if shutil.which("pg_dump") is None:
        raise _missing(["pg_dump", "--format=custom", f"--file={path}", f"--dbname={uri}"], env, "back up")
    if path.exists() and not force:
        raise BackupError(f"{path} exists; choose a new file or add --force to replace it")
    partial = path.with_name(f".{path.name}.partial-{os.getpid()}")
    try:
        _run_tool(["pg_dump", "--format=custom", f"--file={partial}", f"--dbname={uri}"], env)
        os.replace(partial, path)
    finally:
        partial.unlink(missing_ok=True)
    return f"backed up {make_url(url).database} to {path} (pg_dump custom format), {path.stat().st_size} bytes"


def _dump_revision(path: Path, env: dict[str, str]) -> str | None:
    """The Alembic revision recorded in a pg_dump archive (its alembic_version data)."""
    done = _run_tool(["pg_restore", "--data-only", "--table=alembic_version", "--file=-", str(path)], env)
    lines = done.stdout.splitlines()
    for index, line in enumerate(lines):
        if line.startswith("COPY ") and "alembic_version" in line:
            value = lines[index + 1] if index + 1 < len(lines) else "\\."
            return None if value == "\\." else value.strip()
    return None


def _pg_revision(url: str) -> str | None:
    engine = create_engine(url)
    try:
        with engine.connect() as connection:
            return schema.revision_if_any(connection)
    finally:
        engine.dispose()


def pg_restore(path: Path, url: str, *, force: bool = False) -> str:
    if not path.is_file():
        raise BackupError(f"there is no backup file at {path}")
    uri, env = _libpq(url)
    argv = [
        "pg_restore",
        "--clean",
        "--if-exists",
        "--no-owner",
        "--no-privileges",
        "--single-transaction",
        f"--dbname={uri}",
        str(path),
    ]
    if shutil.which("pg_restore") is None:
        raise _missing(argv, env, "restore")
    backup_revision = _dump_revision(path, env)
    target_revision = _pg_revision(url)
    check_revisions(backup_revision, target_revision, force)
    assert backup_revision is not None  # check_revisions refuses a file without one
    if target_revision is not None and target_revision != backup_revision and force:
        known = _revisions()
        if known.index(target_revision) > known.index(backup_revision):
            command.downgrade(alembic_config(url), backup_revision)  # drop what the backup does not have
    _run_tool(argv, env)
    return f"restored {path} into {make_url(url).database}: revision {backup_revision}" + _upgrade_hint(backup_revision)


def backup(url: str, path: Path, *, force: bool = False) -> str:
    return sqlite_backup(url, path, force=force) if is_sqlite(url) else pg_backup(url, path, force=force)


def restore(path: Path, url: str, *, force: bool = False) -> str:
    return sqlite_restore(path, url, force=force) if is_sqlite(url) else pg_restore(path, url, force=force)
