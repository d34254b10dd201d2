"""Dispatcher status page (server-rendered HTML)."""

from flask import Flask


def init_app(app: Flask) -> None:
    """Registered once the status page exists."""
