"""Every README example marked ``<!-- readme-example: … -->`` runs as written against a live server
on a fresh database with the demo network (issue 18), on any day.

The blocks run in bash, in order, in a scratch directory holding a copy of ``service/sample_data/``
(the CSV example reads ``@service/sample_data/sites.csv`` and the export writes ``sites.csv``). The one change
made to them is the reader's own: the placeholder token ``ull_...`` becomes a real admin token.
The port comes from ``ULLAGE_PORT``, which the examples read. Every request the examples make is
recorded at the server, and each must have answered as the README says (2xx, the one 304).
"""

from __future__ import annotations

import re
import shutil
import subprocess
from pathlib import Path

import pytest
from live_server import serving

ROOT = Path(__file__).resolve().parents[2]
MARKER = re.compile(r"<!-- readme-example: ([a-z-]+) -->\n```sh\n(.*?)\n```", re.DOTALL)


def readme_examples() -> list[tuple[str, str]]:
    return MARKER.findall((ROOT / "README.md").read_text())


def _curl_count(script: str) -> int:
    """How many requests a block makes: one per ``curl`` command outside comments."""
    code = "\n".join(line.split("#", 1)[0] if line.lstrip().startswith("#") else line for line in script.splitlines())
    return len(re.findall(r"(^|[\s(])curl\s", code, re.MULTILINE))


def _recording(app, log: list[tuple[str, str, int]]):  # type: ignore[no-untyped-def]
    inner = app.wsgi_app

    def wsgi(environ, start_response):  # type: ignore[no-untyped-def]
        def start(status, headers, exc_info=None):  # type: ignore[no-untyped-def]
            log.append((environ["REQUEST_METHOD"], environ["PATH_INFO"], int(status.split()[0])))
            return start_response(status, headers, exc_info)

        return inner(environ, start)

    return wsgi


def test_the_readme_marks_its_runnable_examples():
    names = [name for name, _script in readme_examples()]
    assert names == ["admin", "plans", "deliveries", "fleet", "weather"]
    assert all("ull_..." not in script for name, script in readme_examples() if name != "admin")


def test_every_marked_readme_example_runs_as_written(app, tokens, demo, tmp_path):
    if shutil.which("curl") is None or shutil.which("bash") is None:
        pytest.fail("the README examples need bash and curl")
    shutil.copytree(ROOT / "service" / "sample_data", tmp_path / "service" / "sample_data")
    log: list[tuple[str, str, int]] = []
    app.wsgi_app = _recording(app, log)
    with serving(app) as base:
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
            assert len(made) == _curl_count(script), (name, made)
            refused = [entry for entry in made if entry[2] >= 400]
            assert refused == [], (name, refused, run.stdout[-3000:])
            if name == "plans":
                # The If-None-Match example answers 304, and prints it.
                assert made[-1][2] == 304 and run.stdout.rstrip().endswith("304")
                # The plan was recorded and activated (its id taken from Location, not assumed).
                activation = [e for e in made if e[1].endswith("/activate")]
                assert len(activation) == 1 and activation[0][2] == 200
                assert re.fullmatch(r"/api/v1/plans/[0-9]+/activate", activation[0][1])
    assert (tmp_path / "sites.csv").read_text().startswith("code,name,truck,")
