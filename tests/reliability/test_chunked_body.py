"""A body sent in chunks (``Transfer-Encoding: chunked``, no ``Content-Length``) over the size
limit is refused with 413 by the service under gunicorn, with the project's config.

gunicorn decodes the chunks and sets ``wsgi.input_terminated``; werkzeug then stops reading at the
limit without an error, so before the guard a larger body reached the view cut short (400 "not
valid JSON").
"""

from __future__ import annotations

import json
from collections.abc import Iterator

import requests
from sqlalchemy import create_engine, func, select

from service.persistence.models import Truck

from .helpers import add_tokens, bearer, migrate, start_gunicorn

LIMIT = 1 << 20  # ULLAGE_MAX_BODY_BYTES, the default
TRUCK = {"code": "T1", "name": "Truck one", "dispatch_cost": 150.0, "capacity": 18000.0}


def pieces(body: bytes, size: int = 1 << 14) -> Iterator[bytes]:
    """A generator body: requests sends it with ``Transfer-Encoding: chunked``."""
    for start in range(0, len(body), size):
        yield body[start : start + size]


def test_chunked_bodies_over_the_limit_are_413_under_gunicorn(tmp_path):
    url = f"sqlite:///{tmp_path / 'chunked.db'}"
    migrate(url)
    tokens = add_tokens(url)
    server = start_gunicorn(url, tmp_path, workers=1, threads=2)
    try:
        headers = bearer(tokens["admin"], **{"Content-Type": "application/json"})
        big = json.dumps(TRUCK | {"name": "x" * LIMIT}).encode()
        response = requests.post(server.url("/api/v1/trucks"), data=pieces(big), headers=headers, timeout=30)
        assert response.request.headers.get("Transfer-Encoding") == "chunked"
        assert "Content-Length" not in response.request.headers
        assert response.status_code == 413, response.text
        assert response.headers["Content-Type"] == "application/problem+json"
        assert "1 048 576 bytes" in response.json()["detail"]
        small = json.dumps(TRUCK).encode()
        created = requests.post(server.url("/api/v1/trucks"), data=pieces(small, 7), headers=headers, timeout=30)
        assert created.status_code == 201, created.text
    finally:
        assert server.stop() == 0
    engine = create_engine(url)
    try:
        with engine.connect() as conn:
            assert conn.scalar(select(func.count()).select_from(Truck)) == 1
    finally:
        engine.dispose()
