"""Problem ``type``: one scheme for every kind, each kind documented in README.md (issue 18)."""

from __future__ import annotations

import ast
import re
from pathlib import Path

from service.errors import PROBLEM_BASE, PROBLEM_TYPES, STATUS_KINDS

ROOT = Path(__file__).resolve().parents[2]


def _kinds_raised_in_source() -> set[str]:
    """Every literal ``kind=`` given to ``Problem(...)`` or ``problem_response(...)`` in service/."""
    kinds: set[str] = set()
    for path in (ROOT / "service").rglob("*.py"):
        for node in ast.walk(ast.parse(path.read_text(), str(path))):
            if not isinstance(node, ast.Call):
                continue
            name = getattr(node.func, "id", getattr(node.func, "attr", None))
            if name not in {"Problem", "problem_response"}:
                continue
            for keyword in node.keywords:
                if keyword.arg == "kind" and isinstance(keyword.value, ast.Constant):
                    kinds.add(keyword.value.value)
    return kinds


def _readme_kinds() -> set[str]:
    text = (ROOT / "README.md").read_text()
    section = text.split("## Problem types", 1)[1].split("\n## ", 1)[0]
    return set(re.findall(r"^\| `([a-z-]+)` \|", section, re.MULTILINE))


def test_every_kind_the_service_raises_is_in_the_table():
    raised = _kinds_raised_in_source()
    assert len(raised) > 20  # the walk finds the service's checks (a broken walk would find none)
    assert raised - PROBLEM_TYPES.keys() == set()
    assert set(STATUS_KINDS.values()) - PROBLEM_TYPES.keys() == set()


def test_every_kind_is_documented_in_the_readme():
    assert _readme_kinds() == set(PROBLEM_TYPES)


def test_schema_errors_use_the_project_scheme(client, auth):
    """422 from schema validation (webargs) used to be about:blank; now it is a project URI like the rest."""
    response = client.post("/api/v1/trucks", json={"code": "T1"}, headers=auth("admin"))
    assert response.status_code == 422
    assert response.get_json()["type"] == PROBLEM_BASE + "validation"


def test_every_answer_uses_the_scheme(client, auth):
    answers = [
        client.get("/api/v1/no-such-route", headers=auth("viewer")),  # werkzeug 404
        client.delete("/api/v1/settings", headers=auth("admin")),  # 405
        client.post("/api/v1/trucks", data="{", headers=auth("admin", **{"Content-Type": "application/json"})),
        client.get("/api/v1/trucks"),  # 401
        client.get("/api/v1/trucks/NOPE", headers=auth("viewer")),  # the service's own 404
    ]
    types = [r.get_json()["type"] for r in answers]
    assert [r.status_code for r in answers] == [404, 405, 400, 401, 404]
    assert types == [
        PROBLEM_BASE + "not-found",
        PROBLEM_BASE + "method-not-allowed",
        PROBLEM_BASE + "invalid-json",
        PROBLEM_BASE + "unauthenticated",
        PROBLEM_BASE + "not-found",
    ]
    assert all(t.removeprefix(PROBLEM_BASE) in PROBLEM_TYPES for t in types)
