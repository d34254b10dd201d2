"""Ullage: delivery planning for bulk-liquid tanks served by one truck."""

from service.app import create_app

__all__ = ["create_app"]
