"""docker/: no Docker engine here, so the files are checked as text and the entrypoint is run as is."""

from __future__ import annotations

import json
import os
import re
import subprocess
import sys
from pathlib import Path

import yaml
from sqlalchemy import create_engine, inspect

from service.health import migration_head

ROOT = Path(__file__).resolve().parents[2]
DOCKER = ROOT / "docker"


def instructions() -> list[tuple[str, str]]:
    """(INSTRUCTION, arguments) of the Dockerfile, continuation lines joined, comments dropped."""
    text = (DOCKER / "Dockerfile").read_text()
    logical, current = [], ""
    for line in text.splitlines():
        if line.strip().startswith("#") or not line.strip():
            continue
        current += line.rstrip("\\").strip() + " "
        if not line.rstrip().endswith("\\"):
            logical.append(current.strip())
            current = ""
    return [(entry.split(" ", 1)[0].upper(), entry.split(" ", 1)[1]) for entry in logical]


def seconds(duration: str) -> float:
    match = re.fullmatch(r"(?:(\d+)m)?(?:(\d+)s)?", duration)
    assert match and duration, duration
    return int(match.group(1) or 0) * 60 + int(match.group(2) or 0)


def test_dockerfile_is_slim_non_root_and_exec_form():
    steps = instructions()
    assert steps[0] == ("FROM", "python:3.11-slim")
    users = [args for kind, args in steps if kind == "USER"]
    assert users and users[-1].split(":")[0] not in ("root", "0")
    kinds = [kind for kind, _ in steps]
    assert kinds.index("USER") < kinds.index("CMD")
    cmd = json.loads(dict(steps)["CMD"])  # exec form is a JSON array
    assert cmd[0] == "gunicorn" and cmd[-1] == "service.app:create_app()"
    assert cmd[cmd.index("--config") + 1] == "service/gunicorn_conf.py"
    entrypoint = json.loads(dict(steps)["ENTRYPOINT"])
    assert entrypoint == ["/usr/local/bin/ullage-entrypoint"]
    copies = " ".join(args for kind, args in steps if kind == "COPY")
    for needed in ("migrations/", "sample_data/", "service/", "docker/entrypoint"):
        assert needed in copies
    assert any(kind == "RUN" and "pip install ." in args for kind, args in steps)


def test_compose_has_postgres_with_healthcheck_and_a_service_that_waits():
    compose = yaml.safe_load((DOCKER / "compose.yaml").read_text())
    db = compose["services"]["db"]
    assert db["image"].startswith("postgres:15")
    assert "pg_isready" in " ".join(db["healthcheck"]["test"])
    service = compose["services"]["service"]
    assert service["build"]["dockerfile"] == "docker/Dockerfile"
    assert service["environment"]["DATABASE_URL"].startswith("postgresql+psycopg://")
    assert service["depends_on"]["db"]["condition"] == "service_healthy"
    probe = " ".join(service["healthcheck"]["test"])
    assert "urllib" in probe and "/readyz" in probe and "curl" not in probe
    from service import gunicorn_conf

    assert seconds(service["stop_grace_period"]) >= gunicorn_conf.graceful_timeout


def test_compose_healthcheck_command_is_valid_python():
    service = yaml.safe_load((DOCKER / "compose.yaml").read_text())["services"]["service"]
    test = service["healthcheck"]["test"]
    assert test[:3] == ["CMD", "python", "-c"]
    compile(test[3], "<healthcheck>", "exec")


def _run_entrypoint(tmp_path: Path, url: str, *command: str) -> subprocess.CompletedProcess:
    env = {"PATH": f"{Path(sys.executable).parent}:/usr/bin:/bin", "DATABASE_URL": url, "HOME": str(tmp_path)}
    process = subprocess.Popen(
        ["sh", str(DOCKER / "entrypoint"), *command],
        cwd=ROOT,
        env=env,
        stdout=subprocess.PIPE,
        stderr=subprocess.PIPE,
        text=True,
    )
    out, err = process.communicate(timeout=120)
    return subprocess.CompletedProcess(process.args, process.returncode, out, err), process.pid


def test_entrypoint_migrates_then_execs_the_command(tmp_path):
    assert os.access(DOCKER / "entrypoint", os.X_OK)
    path = tmp_path / "entry.db"
    url = f"sqlite:///{path}"
    result, pid = _run_entrypoint(tmp_path, url, sys.executable, "-c", "import os; print('pid', os.getpid())")
    assert result.returncode == 0, result.stderr
    lines = result.stdout.strip().splitlines()
    assert lines[0] == "database at head"
    assert lines[-1] == f"pid {pid}"  # the command replaced the shell (exec), so it is PID 1 in a container
    engine = create_engine(url)
    try:
        assert "sites" in inspect(engine).get_table_names()
        with engine.connect() as conn:
            assert conn.exec_driver_sql("SELECT version_num FROM alembic_version").scalar_one() == migration_head()
    finally:
        engine.dispose()
    again, _ = _run_entrypoint(tmp_path, url, "true")
    assert again.returncode == 0


def test_entrypoint_stops_when_migration_fails(tmp_path):
    marker = tmp_path / "ran"
    result, _ = _run_entrypoint(tmp_path, "postgresql+psycopg://postgres@127.0.0.1:1/none", "touch", str(marker))
    assert result.returncode != 0
    assert not marker.exists()
