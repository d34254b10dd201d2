"""The planning core imports no web, database or schema library."""

import pathlib
import subprocess
import sys

ROOT = pathlib.Path(__file__).resolve().parents[3]
FORBIDDEN = ("flask", "sqlalchemy", "marshmallow", "werkzeug")

# A fresh interpreter: importing the core (and its parent package) must load none of them.
PROGRAM = f"""
import sys
import service.planning
print(",".join(sorted(m for m in sys.modules if m.split(".")[0] in {FORBIDDEN!r})))
print(",".join(sorted(m for m in sys.modules if m.startswith("service.") and not m.startswith("service.planning"))))
"""


def test_planning_imports_no_web_database_or_schema_library():
    out = subprocess.run([sys.executable, "-c", PROGRAM], capture_output=True, text=True, check=True, cwd=ROOT)
    forbidden, other_service = out.stdout.splitlines()
    assert forbidden == ""
    assert other_service == ""


def test_planning_package_docstring_states_the_rule():
    import service.planning

    assert "only numpy, scipy and the standard library" in service.planning.__doc__
