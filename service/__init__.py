"""Ullage: delivery planning for bulk-liquid tanks served by one truck.

``service.create_app`` is loaded on first use, so importing the pure planning core
(``service.planning``) never loads Flask or SQLAlchemy.
"""

from typing import Any

__all__ = ["create_app"]


def __getattr__(name: str) -> Any:
    if name == "create_app":
        from service.app import create_app  # noqa: PLC0415

        return create_app
    raise AttributeError(f"module 'service' has no attribute {name!r}")
