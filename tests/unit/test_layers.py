"""The persistence boundary: no SQL outside ``service/persistence`` (and the migration chain).

The check is the one docs/architecture.md gives as a grep, done on the syntax tree so that a
``session.get("csrf")`` of Flask's cookie session or a ``dict.update`` is not mistaken for SQL:
outside ``service/persistence`` no module imports a SQLAlchemy statement builder, and nothing
calls ``execute``/``scalars``/``scalar``/``query``/``exec_driver_sql``. The import-linter
contracts in pyproject.toml hold the rest (persistence imports no Flask, the API no SQLAlchemy).
"""

from __future__ import annotations

import ast
import pathlib

SERVICE = pathlib.Path(__file__).resolve().parents[2] / "service"
BUILDERS = {
    "select", "insert", "update", "delete", "text", "func", "exists", "bindparam", "and_", "or_", "case",
    "literal", "column", "table", "union", "Select",
}  # fmt: skip
# persistence holds the service's SQL; the Alembic chain (service/migrations) is schema DDL by nature;
# planning imports no SQLAlchemy at all (its import-linter contract), so a ``.query()`` there is a
# k-d tree's (scipy.spatial), not a statement.
SKIPPED = {"persistence", "migrations", "planning"}
RUNNERS = {"execute", "scalars", "scalar", "query", "exec_driver_sql", "executescript"}


def sql_outside_persistence(root: pathlib.Path = SERVICE) -> list[str]:
    found = []
    for path in sorted(root.rglob("*.py")):
        relative = path.relative_to(root.parent)
        if relative.parts[1] in SKIPPED:
            continue
        for node in ast.walk(ast.parse(path.read_text(), str(path))):
            if isinstance(node, ast.ImportFrom) and (node.module or "").startswith("sqlalchemy"):
                found += [f"{relative}:{node.lineno} imports {a.name}" for a in node.names if a.name in BUILDERS]
            elif isinstance(node, ast.Call) and isinstance(node.func, ast.Attribute) and node.func.attr in RUNNERS:
                found.append(f"{relative}:{node.lineno} calls .{node.func.attr}()")
    return found


def test_no_sql_outside_persistence():
    assert sql_outside_persistence() == []


def test_the_check_finds_sql(tmp_path):
    # The check itself: a view that builds and runs a statement is found.
    (tmp_path / "service" / "api").mkdir(parents=True)
    (tmp_path / "service" / "api" / "bad.py").write_text(
        "from sqlalchemy import select\n\ndef view(session, T):\n    return session.scalars(select(T))\n"
    )
    assert sql_outside_persistence(tmp_path / "service") == ["service/api/bad.py:1 imports select", "service/api/bad.py:4 calls .scalars()"]
