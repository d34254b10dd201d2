"""The ``ullage`` command, through ``service.cli.main`` (and once as ``python -m service``)."""

from __future__ import annotations

import os
import subprocess
import sys
from pathlib import Path

import pytest
from sqlalchemy import create_engine, func, inspect, select

from service import cli, create_app
from service.auth import token_hash
from service.health import migration_head
from service.persistence.db import dispose
from service.persistence.models import Site, Token, Truck

ROOT = Path(__file__).resolve().parents[2]


@pytest.fixture
def env_db(monkeypatch, database_url):
    monkeypatch.setenv("DATABASE_URL", database_url)
    return database_url


def count(db_session, model) -> int:
    return db_session.scalar(select(func.count()).select_from(model))


def test_db_upgrade_builds_an_empty_sqlite_file(monkeypatch, tmp_path, capsys):
    path = tmp_path / "fresh" / "ullage.db"
    monkeypatch.setenv("DATABASE_URL", f"sqlite:///{path}")
    assert cli.main(["db", "upgrade"]) == 0
    assert "database at head" in capsys.readouterr().out
    engine = create_engine(f"sqlite:///{path}")
    try:
        assert {"trucks", "sites", "tokens", "plans", "alembic_version"} <= set(inspect(engine).get_table_names())
        with engine.connect() as conn:
            assert conn.exec_driver_sql("SELECT version_num FROM alembic_version").scalar_one() == migration_head()
    finally:
        engine.dispose()
    assert cli.main(["db", "upgrade"]) == 0  # again: nothing to do, still fine


def test_db_upgrade_on_a_migrated_database_is_a_no_op(env_db, capsys):
    assert cli.main(["db", "upgrade"]) == 0
    assert capsys.readouterr().out.strip() == "database at head"


def test_token_create_prints_the_token_alone_on_the_last_line_and_stores_the_hash(env_db, capsys, db_session):
    assert cli.main(["token", "create", "ops", "--role", "dispatcher"]) == 0
    captured = capsys.readouterr()
    lines = captured.out.rstrip("\n").split("\n")
    token = lines[-1]
    assert token == token.strip() and " " not in token and token.startswith("ull_")
    assert captured.out.count(token) == 1 and token not in captured.err
    row = db_session.scalars(select(Token).where(Token.name == "ops")).one()
    assert row.role == "dispatcher" and row.secret_hash == token_hash(token) and row.revoked_at is None


def test_duplicate_token_name_fails(env_db, capsys, db_session):
    assert cli.main(["token", "create", "ops", "--role", "viewer"]) == 0
    capsys.readouterr()
    assert cli.main(["token", "create", "ops", "--role", "admin"]) == 1
    captured = capsys.readouterr()
    assert "exists" in captured.err and captured.out == ""
    assert db_session.scalars(select(Token.role).where(Token.name == "ops")).all() == ["viewer"]


def test_unknown_role_is_refused(env_db, capsys):
    with pytest.raises(SystemExit) as exc:
        cli.main(["token", "create", "ops", "--role", "root"])
    assert exc.value.code == 2


def test_revoke_makes_the_token_fail_once_the_cache_entry_expires(env_db, capsys, client, expire_token_cache):
    assert cli.main(["token", "create", "soon-gone", "--role", "viewer"]) == 0
    token = capsys.readouterr().out.strip().splitlines()[-1]
    headers = {"Authorization": f"Bearer {token}"}
    assert client.get("/api/v1/settings", headers=headers).status_code == 200
    assert cli.main(["token", "revoke", "soon-gone"]) == 0
    assert "revoked" in capsys.readouterr().out
    expire_token_cache()
    assert client.get("/api/v1/settings", headers=headers).status_code == 401
    assert cli.main(["token", "revoke", "no-such-token"]) == 1
    assert "no-such-token" in capsys.readouterr().err


def test_demo_loads_into_an_empty_database_only(env_db, capsys, db_session):
    assert cli.main(["demo"]) == 0
    assert "2 trucks, 16 sites" in capsys.readouterr().out
    assert (count(db_session, Truck), count(db_session, Site)) == (2, 16)
    assert cli.main(["demo"]) == 1
    assert "empty" in capsys.readouterr().out
    assert cli.main(["demo", "--if-empty"]) == 0
    assert (count(db_session, Truck), count(db_session, Site)) == (2, 16)


def test_demo_network_is_served(env_db, capsys, client):
    assert cli.main(["demo"]) == 0
    assert cli.main(["token", "create", "reader", "--role", "viewer"]) == 0
    token = capsys.readouterr().out.strip().splitlines()[-1]
    sites = client.get("/api/v1/sites", headers={"Authorization": f"Bearer {token}"}).get_json()["items"]
    assert len(sites) == 16
    assert {s["truck"] for s in sites} == {"HV-R1", "HV-R2"}
    capacities = [s["tank_capacity"] for s in sites]
    assert min(capacities) < 1500 < 50000 < max(capacities)  # farm tanks to depots


def test_serve_execs_gunicorn_on_the_loopback_by_default(monkeypatch, tmp_path):
    monkeypatch.chdir(tmp_path)
    monkeypatch.setenv("ULLAGE_SECRET_KEY", "test-key")
    # serve() sets this for gunicorn; setting it here lets monkeypatch restore the test process.
    monkeypatch.setenv("PROMETHEUS_MULTIPROC_DIR", str(tmp_path / "prometheus"))
    monkeypatch.delenv("ULLAGE_HOST", raising=False)
    monkeypatch.delenv("ULLAGE_PORT", raising=False)
    seen = {}
    monkeypatch.setattr(os, "execv", lambda file, argv: seen.update(file=file, argv=argv))
    assert cli.main(["serve"]) == 0
    argv = seen["argv"]
    # this interpreter's gunicorn: works when the venv's bin/ is not on PATH (as in `make run`)
    assert seen["file"] == sys.executable and argv[:3] == [sys.executable, "-m", "gunicorn"]
    assert argv[argv.index("--bind") + 1] == "127.0.0.1:8000"
    assert argv[argv.index("--config") + 1].endswith("service/gunicorn_conf.py")
    assert argv[-1] == "service.app:create_app()"
    assert cli.main(["serve", "--port", "8123", "--workers", "3"]) == 0
    assert seen["argv"][seen["argv"].index("--bind") + 1] == "127.0.0.1:8123"
    assert seen["argv"][seen["argv"].index("--workers") + 1] == "3"


def test_python_dash_m_service_help():
    result = subprocess.run(
        [sys.executable, "-m", "service", "--help"], cwd=ROOT, capture_output=True, text=True, timeout=60, check=False
    )
    assert result.returncode == 0, result.stderr
    for command in ("db", "token", "demo", "serve"):
        assert command in result.stdout


def test_console_script_is_installed():
    script = Path(sys.executable).parent / "ullage"
    assert script.exists()
    result = subprocess.run([str(script), "token", "--help"], capture_output=True, text=True, timeout=60, check=False)
    assert result.returncode == 0 and "create" in result.stdout and "revoke" in result.stdout


def test_gunicorn_settings_are_importable_and_sane(monkeypatch):
    import importlib

    monkeypatch.delenv("WEB_CONCURRENCY", raising=False)
    conf = importlib.reload(importlib.import_module("service.gunicorn_conf"))
    assert conf.preload_app is False
    assert conf.graceful_timeout == 20 and conf.timeout >= conf.graceful_timeout
    assert conf.workers == 2 and conf.worker_class == "gthread"


@pytest.mark.parametrize(("setting", "expected"), [(None, False), ("", False), ("0", False), ("1", True)])
def test_a_listener_per_worker_only_when_asked_for(setting, expected):
    from service.gunicorn_conf import listener_per_worker

    assert listener_per_worker(setting) is expected


def test_a_listener_per_worker_setting_refuses_other_values():
    from service.gunicorn_conf import listener_per_worker

    with pytest.raises(ValueError, match="ULLAGE_REUSE_PORT"):
        listener_per_worker("yes")


def test_create_app_then_serve_does_not_need_the_cli(env_db):
    app = create_app({"TESTING": True})
    try:
        assert app.config["DATABASE_URL"] == env_db
    finally:
        dispose(app)
