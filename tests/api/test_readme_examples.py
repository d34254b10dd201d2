"""Every README example marked ``<!-- readme-example: … -->`` runs as written against a live server
on a fresh database with the demo network (issue 18), on any day.

The blocks run in bash, in order, in a scratch directory holding a copy of ``service/sample_data/``
(the CSV example reads ``@service/sample_data/sites.csv`` and the export writes ``sites.csv``). The one change
made to them is the reader's own: the placeholder token ``ull_...`` becomes a real admin token.
The port comes from ``ULLAGE_PORT``, which the examples read. Every request the examples make is
recorded at the server, and each must have answered as the README says (2xx, the one 304). A curl
inside a shell loop (the network plan's poll) may run more than once; every other runs exactly once.
The network plan worker (``service/network_worker.py``) runs its loop in a thread beside the server,
as in a serving process, so the walkthrough's job is computed for real and polled until done.
"""

from __future__ import annotations

import re
import shutil
import subprocess
import threading
from collections.abc import Iterator
from contextlib import contextmanager
from pathlib import Path

import pytest
from live_server import serving

from service.network_worker import Worker

ROOT = Path(__file__).resolve().parents[2]
MARKER = re.compile(r"<!-- readme-example: ([a-z-]+) -->\n```sh\n(.*?)\n```", re.DOTALL)


def readme_examples() -> list[tuple[str, str]]:
    return MARKER.findall((ROOT / "README.md").read_text())


CURL = re.compile(r"(^|[\s(])curl\s")
LOOP_START = re.compile(r"^\s*(while|until|for)\b")
LOOP_END = re.compile(r"^\s*done\b")
HEREDOC = re.compile(r"<<-?\s*['\"]?(\w+)['\"]?")


def _curl_count(script: str) -> tuple[int, int]:
    """The ``curl`` commands of a block outside comments and here-documents: (run once, inside a loop)."""
    once = looped = 0
    in_loop = False
    heredoc: str | None = None
    for line in script.splitlines():
        if heredoc is not None:
            heredoc = None if line.strip() == heredoc else heredoc
            continue
        if line.lstrip().startswith("#"):
            continue
        opened = HEREDOC.search(line)
        heredoc = opened.group(1) if opened else None
        in_loop = in_loop or bool(LOOP_START.match(line))
        if in_loop:
            looped += len(CURL.findall(line))
        else:
            once += len(CURL.findall(line))
        in_loop = in_loop and not LOOP_END.match(line)
    return once, looped


def _recording(app, log: list[tuple[str, str, int]]):  # type: ignore[no-untyped-def]
    inner = app.wsgi_app

    def wsgi(environ, start_response):  # type: ignore[no-untyped-def]
        def start(status, headers, exc_info=None):  # type: ignore[no-untyped-def]
            log.append((environ["REQUEST_METHOD"], environ["PATH_INFO"], int(status.split()[0])))
            return start_response(status, headers, exc_info)

        return inner(environ, start)

    return wsgi


@contextmanager
def network_worker(app) -> Iterator[None]:  # type: ignore[no-untyped-def]
    """The network plan worker's loop in a thread on the app's database, stopped (after its job) at the end."""
    worker = Worker(app.config["ULLAGE_SETTINGS"], name="readme-worker")
    stop = threading.Event()
    thread = threading.Thread(target=worker.loop, args=(stop,), name="readme-network-worker", daemon=True)
    thread.start()
    try:
        yield
    finally:
        stop.set()
        thread.join(timeout=120)
        worker.close()


def test_the_readme_marks_its_runnable_examples():
    names = [name for name, _script in readme_examples()]
    assert names == ["admin", "plans", "deliveries", "fleet", "network", "weather"]
    assert all("ull_..." not in script for name, script in readme_examples() if name != "admin")


def test_every_marked_readme_example_runs_as_written(app, tokens, demo, tmp_path):
    if shutil.which("curl") is None or shutil.which("bash") is None:
        pytest.fail("the README examples need bash and curl")
    shutil.copytree(ROOT / "service" / "sample_data", tmp_path / "service" / "sample_data")
    log: list[tuple[str, str, int]] = []
    app.wsgi_app = _recording(app, log)
    with network_worker(app), serving(app) as base:
        port = base.rsplit(":", 1)[1]
        for name, script in readme_examples():
            before = len(log)
            written = script.replace("export TOKEN=ull_...", f"export TOKEN={tokens['admin']}")
            run = subprocess.run(
                ["bash", "-e", "-o", "pipefail", "-c", written],
                cwd=tmp_path,
                env={"PATH": "/usr/bin:/bin", "ULLAGE_PORT": port, "TOKEN": tokens["admin"], "HOME": str(tmp_path)},
                capture_output=True,
                text=True,
                timeout=300,
                check=False,
            )
            assert run.returncode == 0, (name, run.stdout[-2000:], run.stderr[-2000:])
            made = log[before:]
            once, looped = _curl_count(script)
            if looped:  # a loop's curl runs until its answer ends the loop: at least once
                assert len(made) >= once + looped, (name, made)
            else:
                assert len(made) == once, (name, made)
            refused = [entry for entry in made if entry[2] >= 400]
            assert refused == [], (name, refused, run.stdout[-3000:])
            if name == "plans":
                # The If-None-Match example answers 304, and prints it.
                assert made[-1][2] == 304 and run.stdout.rstrip().endswith("304")
                # The plan was recorded and activated (its id taken from Location, not assumed).
                activation = [e for e in made if e[1].endswith("/activate")]
                assert len(activation) == 1 and activation[0][2] == 200
                assert re.fullmatch(r"/api/v1/plans/[0-9]+/activate", activation[0][1])
            if name == "network":
                # 202 for the job; it is polled (only it is asked more than once) until done, then the
                # job named by Location is activated; the weekly call of one truck follows.
                posted = [e for e in made if e[:2] == ("POST", "/api/v1/network-plans")]
                assert [e[2] for e in posted] == [202] and "HTTP/1.1 202" in run.stdout
                polls = [e for e in made if e[0] == "GET" and re.fullmatch(r"/api/v1/network-plans/[0-9]+", e[1])]
                assert len(polls) >= 1 and len(made) - len(polls) == once
                assert "\ndone 1.0 0.0" in run.stdout and "\nunserved:" not in run.stdout
                job = polls[-1][1]
                assert [e[:2] for e in made[-2:]] == [
                    ("POST", f"{job}/activate"),
                    ("GET", "/api/v1/trucks/HV-W2/trips"),
                ]
    assert (tmp_path / "sites.csv").read_text().startswith("code,name,truck,")
