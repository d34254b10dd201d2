"""requirements.lock agrees with pyproject.toml, and the venv the tests run in is the locked one.

A dependency added to pyproject.toml without `make lock` fails here, before CI or the Docker image
(which installs the wheel with the lock as constraints) would quietly take an unlocked version.
"""

from __future__ import annotations

import tomllib
from importlib import metadata
from pathlib import Path

import pytest
from packaging.requirements import Requirement
from packaging.utils import canonicalize_name

ROOT = Path(__file__).resolve().parents[2]


def locked() -> dict[str, str]:
    """Package name → pinned version, for the pins whose environment marker holds here."""
    pins: dict[str, str] = {}
    for line in (ROOT / "requirements.lock").read_text().splitlines():
        if not line.strip() or line.lstrip().startswith(("#", "-")):
            continue
        requirement = Requirement(line)
        if requirement.marker is None or requirement.marker.evaluate():
            (spec,) = requirement.specifier
            assert spec.operator == "==", line
            pins[canonicalize_name(requirement.name)] = spec.version
    return pins


def declared() -> list[Requirement]:
    project = tomllib.loads((ROOT / "pyproject.toml").read_text())["project"]
    return [Requirement(r) for r in [*project["dependencies"], *project["optional-dependencies"]["test"]]]


@pytest.mark.parametrize("requirement", declared(), ids=str)
def test_every_declared_dependency_is_locked_within_its_bounds(requirement):
    pins = locked()
    name = canonicalize_name(requirement.name)
    assert name in pins, f"{requirement} is not in requirements.lock: run `make lock`"
    assert requirement.specifier.contains(pins[name], prereleases=True), (
        f"requirements.lock pins {name}=={pins[name]}, outside {requirement}: run `make lock`"
    )
    for extra in requirement.extras:  # psycopg[binary] → psycopg-binary
        assert canonicalize_name(f"{requirement.name}-{extra}") in pins, f"{requirement}: its extra is not locked"


def test_the_test_venv_has_the_locked_versions():
    pins = locked()
    names = [canonicalize_name(r.name) for r in declared()]
    installed = {name: metadata.version(name) for name in names}
    assert installed == {name: pins[name] for name in names}, "re-create the venv: make .venv/.installed"
