"""Lets a benchmark of the pure planning core import ``service.planning`` from this checkout.

``service/__init__.py`` imports the web app, which the pure core (``service/planning``: numpy, scipy
and the standard library) does not need. :func:`make_importable` puts the repository root first on
``sys.path`` and, when ``import service`` fails (e.g. Flask missing), registers a bare ``service``
package in its place, so ``service.planning`` still imports. Benchmarks run as scripts
(``.venv/bin/python benchmarks/planning.py``), so this directory is on the path.
"""

from __future__ import annotations

import importlib.util
import pathlib
import sys
import types

ROOT = pathlib.Path(__file__).resolve().parents[1]


def make_importable() -> None:
    """Import ``service`` from ``ROOT``, or stand a bare package in for it."""
    sys.path.insert(0, str(ROOT))
    try:  # service/__init__.py imports the web app; the pure core does not need it
        import service  # noqa: F401, PLC0415
    except ImportError:
        for name in [m for m in sys.modules if m == "service" or m.startswith("service.")]:
            del sys.modules[name]
        parent = types.ModuleType("service")
        parent.__path__ = [str(ROOT / "service")]
        parent.__spec__ = importlib.util.spec_from_loader("service", loader=None, is_package=True)
        sys.modules["service"] = parent
