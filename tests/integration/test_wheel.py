"""The package runs from its wheel alone: built, installed in a fresh venv, migrated, demo loaded, served.

Nothing of the source tree is on the path: the commands run in a temporary directory, and the
fresh venv has no system site-packages. Its dependencies are installed at the locked versions
(requirements.lock as pip constraints, like docker/Dockerfile), from the package index.
"""

from __future__ import annotations

import os
import shutil
import socket
import subprocess
import sys
import time
from pathlib import Path

import pytest
import requests

ROOT = Path(__file__).resolve().parents[2]

pytestmark = pytest.mark.slow


def run(*argv: str | Path, cwd: Path, env: dict[str, str], timeout: float = 600) -> str:
    done = subprocess.run([str(a) for a in argv], cwd=cwd, env=env, capture_output=True, text=True, timeout=timeout)
    assert done.returncode == 0, f"{argv} exited {done.returncode}\n{done.stdout}\n{done.stderr}"
    return done.stdout


def free_port() -> int:
    with socket.socket() as sock:
        sock.bind(("127.0.0.1", 0))
        return sock.getsockname()[1]


@pytest.fixture(scope="module")
def installed(tmp_path_factory) -> Path:
    """A fresh venv with only the wheel and its locked dependencies; returns its bin directory."""
    base = tmp_path_factory.mktemp("wheel")
    env = {"PATH": "/usr/bin:/bin", "HOME": os.environ.get("HOME", str(base))}
    # What docker/Dockerfile's build stage copies, into a clean directory: a build in the work tree
    # would reuse its build/ directory, where files deleted from the source may linger.
    source = base / "src"
    source.mkdir()
    shutil.copy(ROOT / "pyproject.toml", source)
    shutil.copytree(ROOT / "service", source / "service", ignore=shutil.ignore_patterns("__pycache__", "*.pyc"))
    run(
        sys.executable,
        "-m",
        "pip",
        "wheel",
        "--quiet",
        "--no-deps",
        "--wheel-dir",
        base / "dist",
        source,
        cwd=base,
        env=env,
    )
    (wheel,) = (base / "dist").glob("ullage-*.whl")
    run(sys.executable, "-m", "venv", base / "venv", cwd=base, env=env)
    pip = base / "venv" / "bin" / "pip"
    run(pip, "install", "--quiet", "--constraint", ROOT / "requirements.lock", wheel, cwd=base, env=env)
    return base / "venv" / "bin"


def test_the_installed_package_is_the_wheel_with_its_data(installed, tmp_path):
    env = {"PATH": f"{installed}:/usr/bin:/bin", "HOME": str(tmp_path)}
    code = (
        "import service, pathlib; root = pathlib.Path(service.__file__).parent; print(root); "
        "print(*sorted(p.name for p in (root / 'migrations' / 'versions').glob('*.py'))); "
        "print((root / 'py.typed').is_file(), (root / 'sample_data' / 'sites.csv').is_file())"
    )
    where, versions, flags = run(installed / "python", "-c", code, cwd=tmp_path, env=env).splitlines()
    assert Path(where).is_relative_to(installed.parent / "lib")  # site-packages, not the source tree
    shipped = sorted(p.name for p in (ROOT / "service" / "migrations" / "versions").glob("*.py"))
    assert versions.split() == shipped
    assert flags == "True True"


def test_upgrade_demo_and_serve_from_the_wheel(installed, tmp_path):
    port = free_port()
    env = {
        "PATH": f"{installed}:/usr/bin:/bin",
        "HOME": str(tmp_path),
        "DATABASE_URL": f"sqlite:///{tmp_path / 'wheel.db'}",
        "WEB_CONCURRENCY": "1",
    }
    assert run(installed / "ullage", "db", "upgrade", cwd=tmp_path, env=env).strip() == "database at head"
    assert "16 sites" in run(installed / "ullage", "demo", cwd=tmp_path, env=env)
    token = run(installed / "ullage", "token", "create", "wheel", "--role", "viewer", cwd=tmp_path, env=env)
    token = token.strip().splitlines()[-1]
    server = subprocess.Popen(
        [installed / "ullage", "serve", "--port", str(port)],
        cwd=tmp_path,
        env=env,
        stdout=subprocess.PIPE,
        stderr=subprocess.STDOUT,
        text=True,
    )
    try:
        deadline = time.monotonic() + 90
        status = None
        while time.monotonic() < deadline and server.poll() is None:
            try:
                status = requests.get(f"http://127.0.0.1:{port}/readyz", timeout=10).status_code
            except (requests.ConnectionError, requests.Timeout):  # not listening yet, or the worker still starts
                status = None
            if status == 200:
                break
            time.sleep(0.5)
        assert status == 200, f"/readyz never answered 200 (last: {status})"
        sites = requests.get(
            f"http://127.0.0.1:{port}/api/v1/sites?limit=200", headers={"Authorization": f"Bearer {token}"}, timeout=5
        )
        assert sites.status_code == 200
        assert len(sites.json()["items"]) == 16  # service/sample_data/sites.csv has 16 rows
    finally:
        server.terminate()
        output = server.communicate(timeout=60)[0]
    assert server.returncode == 0, output
