"""docker/: no Docker engine here, so the files are checked as text and the entrypoint is run as is."""

from __future__ import annotations

import fnmatch
import json
import os
import re
import shlex
import signal
import socket
import subprocess
import sys
import time
from pathlib import Path

import pytest
import requests
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


def stages() -> list[list[tuple[str, str]]]:
    """The Dockerfile's build stages, each a list of its instructions starting with its FROM."""
    found: list[list[tuple[str, str]]] = []
    for kind, args in instructions():
        if kind == "FROM":
            found.append([])
        found[-1].append((kind, args))
    return found


def image_environment() -> dict[str, str]:
    """The ENV of the final stage (``KEY=value`` pairs, as this Dockerfile writes them)."""
    env: dict[str, str] = {}
    for kind, args in stages()[-1]:
        if kind == "ENV":
            env.update(pair.split("=", 1) for pair in shlex.split(args))
    return env


def docker_ignored(path: str) -> bool:
    """Whether .dockerignore keeps ``path`` out of the build context (Docker's rules: the last
    matching pattern wins, ``!`` re-includes, a pattern that matches a parent matches its files)."""
    ignored = False
    patterns = [line.strip() for line in (ROOT / ".dockerignore").read_text().splitlines()]
    parts = Path(path).parts
    for pattern in (p for p in patterns if p and not p.startswith("#")):
        negate, pattern = pattern.startswith("!"), pattern.lstrip("!")
        candidates = ["/".join(parts[: i + 1]) for i in range(len(parts))]
        if pattern.startswith("**/"):
            hit = any(fnmatch.fnmatchcase(part, pattern[3:]) for part in parts)
        else:
            hit = any(fnmatch.fnmatchcase(c, pattern) and c.count("/") == pattern.count("/") for c in candidates)
        if hit:
            ignored = not negate
    return ignored


def seconds(duration: str) -> float:
    match = re.fullmatch(r"(?:(\d+)m)?(?:(\d+)s)?", duration)
    assert match and duration, duration
    return int(match.group(1) or 0) * 60 + int(match.group(2) or 0)


def test_dockerfile_builds_the_wheel_then_installs_only_it_with_the_lock():
    build, final = stages()
    assert build[0] == ("FROM", "python:3.11-slim AS build")
    assert any(kind == "RUN" and "pip wheel --no-deps --wheel-dir /dist ." in args for kind, args in build)
    assert final[0] == ("FROM", "python:3.11-slim")
    copies = [args for kind, args in final if kind == "COPY"]
    assert "--from=build /dist/ /tmp/dist/" in copies
    assert not any("service" in args.split()[0] for args in copies)  # no source tree in the image
    install = next(args for kind, args in final if kind == "RUN" and "pip install" in args)
    assert "--constraint /tmp/requirements.lock /tmp/dist/*.whl" in install
    assert all("PYTHONPATH" not in args for stage in stages() for kind, args in stage if kind == "ENV")


def test_dockerfile_is_slim_non_root_and_exec_form():
    steps = stages()[-1]
    users = [args for kind, args in steps if kind == "USER"]
    assert users and users[-1].split(":")[0] not in ("root", "0")
    kinds = [kind for kind, _ in steps]
    assert kinds.index("USER") < kinds.index("CMD")
    assert json.loads(dict(steps)["CMD"]) == ["ullage", "serve"]  # exec form is a JSON array
    assert json.loads(dict(steps)["ENTRYPOINT"]) == ["/usr/local/bin/ullage-entrypoint"]
    env = image_environment()
    assert env["ULLAGE_HOST"] == "0.0.0.0" and env["ULLAGE_PORT"] == "8000"
    assert env["ULLAGE_METRICS_DIR"].startswith("/app/var/")  # under the WORKDIR the user owns
    assert ("WORKDIR", "/app") in steps


def test_dockerignore_keeps_what_the_dockerfile_copies_and_nothing_else():
    sources = [
        args.split()[0]
        for stage in stages()
        for kind, args in stage
        if kind == "COPY" and not args.startswith("--from")
    ]
    assert sources, "the Dockerfile copies nothing from the context"
    for source in sources:
        assert (ROOT / source).exists(), source
        assert not docker_ignored(source.rstrip("/")), source
    assert not docker_ignored("service/migrations/env.py")
    for kept_out in (
        ".venv/bin/python",
        ".git/HEAD",
        "var/ullage.db",
        "tests/conftest.py",
        "service/__pycache__/x.pyc",
    ):
        assert docker_ignored(kept_out), kept_out


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
    assert "urllib" in probe and "/livez" in probe and "curl" not in probe  # liveness, as README says
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


def _counter(exposition: str, route: str) -> float:
    """ullage_http_requests_total summed over statuses for one GET route, from Prometheus text."""
    total = 0.0
    for line in exposition.splitlines():
        if line.startswith("ullage_http_requests_total{") and 'method="GET"' in line and f'route="{route}"' in line:
            total += float(line.rsplit(" ", 1)[1])
    return total


@pytest.mark.slow
def test_the_image_command_serves_json_logs_and_metrics_of_every_worker(tmp_path):
    """ENTRYPOINT + CMD with the image's ENV, outside Docker: the venv stands in for the installed
    wheel, tmp_path for the WORKDIR; only the paths and the port are the test's own."""
    with socket.socket() as sock:
        sock.bind(("127.0.0.1", 0))
        port = sock.getsockname()[1]
    steps = stages()[-1]
    env = {
        **image_environment(),
        "PATH": f"{Path(sys.executable).parent}:/usr/bin:/bin",
        "HOME": str(tmp_path),
        "DATABASE_URL": f"sqlite:///{tmp_path / 'image.db'}",
        "ULLAGE_SECRET_KEY": "image-test-secret",
        "ULLAGE_HOST": "127.0.0.1",
        "ULLAGE_PORT": str(port),
        "ULLAGE_METRICS_DIR": str(tmp_path / "prometheus"),
        "WEB_CONCURRENCY": "2",
        "ULLAGE_REUSE_PORT": "1",  # the kernel spreads the connections below over both workers
    }
    command = [*json.loads(dict(steps)["ENTRYPOINT"]), *json.loads(dict(steps)["CMD"])]
    assert command[0] == "/usr/local/bin/ullage-entrypoint"
    command[0] = str(DOCKER / "entrypoint")
    stderr = open(tmp_path / "stderr.log", "w+")  # noqa: SIM115 - the server's for its lifetime
    server = subprocess.Popen(command, cwd=tmp_path, env=env, stdout=subprocess.PIPE, stderr=stderr, text=True)
    try:
        probe = yaml.safe_load((DOCKER / "compose.yaml").read_text())["services"]["service"]["healthcheck"]["test"]
        probe_code = probe[3].replace("127.0.0.1:8000", f"127.0.0.1:{port}")
        deadline = time.monotonic() + 90
        while True:  # the compose healthcheck, as compose would run it
            healthy = subprocess.run([sys.executable, "-c", probe_code], capture_output=True, timeout=30, check=False)
            if healthy.returncode == 0 or time.monotonic() > deadline or server.poll() is not None:
                break
            time.sleep(0.5)
        assert healthy.returncode == 0, healthy.stderr
        token = (
            subprocess.run(
                ["ullage", "token", "create", "scraper", "--role", "viewer"],
                cwd=tmp_path,
                env=env,
                capture_output=True,
                text=True,
                timeout=60,
                check=True,
            )
            .stdout.strip()
            .splitlines()[-1]
        )
        for _ in range(60):  # a new connection each time
            assert requests.get(f"http://127.0.0.1:{port}/readyz", timeout=10).status_code == 200
        scrape = requests.get(
            f"http://127.0.0.1:{port}/metrics", headers={"Authorization": f"Bearer {token}"}, timeout=10
        )
        assert scrape.status_code == 200
        assert _counter(scrape.text, "/readyz") == 60  # every worker's requests, summed
        pids = {p.stem.rsplit("_", 1)[1] for p in (tmp_path / "prometheus").glob("counter_*.db")}
        assert len(pids) == 2, f"expected files of both workers, got {pids}"
    finally:
        server.send_signal(signal.SIGTERM)  # gunicorn itself: the entrypoint and `ullage serve` exec'd
        out = server.communicate(timeout=60)[0]
        stderr.close()
    assert server.returncode == 0
    assert out.splitlines()[0] == "database at head"
    lines = [line for line in (tmp_path / "stderr.log").read_text().splitlines() if line.strip()]
    records = [json.loads(line) for line in lines]  # every line gunicorn and the app wrote is JSON
    assert not [r for r in records if r["logger"] == "gunicorn.access"]  # the app's own line per request only
    gunicorn = [r for r in records if r["logger"] == "gunicorn.error"]
    assert any(r["message"].startswith("Listening at") for r in gunicorn)
    assert sum(r["message"].startswith("Booting worker") for r in gunicorn) >= 2
    assert any("Shutting down" in r["message"] for r in gunicorn)
