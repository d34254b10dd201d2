"""Fixtures shared by the integration tests."""

from __future__ import annotations

import pytest

from service.persistence.db import make_read_engine


@pytest.fixture
def read_engine(database_url):
    """The autocommit engine of ``db.read_one`` on the test database."""
    engine = make_read_engine(database_url)
    yield engine
    engine.dispose()
