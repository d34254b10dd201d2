"""The status overview is a heavy read (issue 14 §2): its week is cached per change stamp, and a
token may compute at most ULLAGE_HEAVY_READS_PER_MINUTE weeks a minute (429 with Retry-After)."""

from __future__ import annotations

import time

import pytest
from status_helpers import PLANNED_TRUCK, Page, add_reading, record_plan, sign_in, today

from service import bounded, create_app
from service.persistence.db import dispose


@pytest.fixture
def limited(database_url, tokens, monkeypatch):
    """A signed-in client of an app allowing one heavy read per minute; the clock mid-window."""
    start = (time.time() // bounded.WINDOW_SECONDS + 1) * bounded.WINDOW_SECONDS + 10
    monkeypatch.setattr(bounded, "_clock", lambda: start)
    app = create_app({"DATABASE_URL": database_url, "TESTING": True, "ULLAGE_HEAVY_READS_PER_MINUTE": "1"})
    client = app.test_client()
    assert sign_in(client, tokens["viewer"]).status_code == 303
    yield app, client
    dispose(app)


def test_a_reload_is_served_from_the_cache_and_another_week_is_limited(limited, auth, demo):
    app, client = limited
    record_plan(client, auth, PLANNED_TRUCK, today(app))
    first = client.get("/status")
    assert first.status_code == 200
    again = client.get("/status")  # nothing changed: the cached week, not counted
    assert again.status_code == 200 and again.get_data() == first.get_data()
    other = client.get("/status?week=2030-W10")
    assert other.status_code == 429
    assert other.headers["Retry-After"] == "50"
    assert "At most 1 heavy reads" in Page(other.get_data(as_text=True)).text


def test_a_change_is_shown_at_once(limited, auth, demo, monkeypatch):
    app, client = limited
    monkeypatch.setattr(bounded, "_clock", lambda: 0.0 + 10)  # a fresh window for each load below
    record_plan(client, auth, PLANNED_TRUCK, today(app))
    before = client.get("/status").get_data(as_text=True)
    monkeypatch.setattr(bounded, "_clock", lambda: 60.0 + 10)
    add_reading(client, auth, "HV-GAR-02", 100.0)
    after = client.get("/status").get_data(as_text=True)
    assert after != before  # the reading moved the change stamp: not the cached week
    assert "Run-out risk" in Page(after).text and "Run-out risk" not in Page(before).text


def test_lowest_first_is_cached_per_change_stamp_and_a_load_sheet_is_a_heavy_read(limited, auth, demo):
    app, client = limited
    record_plan(client, auth, PLANNED_TRUCK, today(app))
    assert client.get("/status/lowest").status_code == 200
    assert client.get("/status/lowest").status_code == 200  # the next deliveries come from the cache
    refused = client.get("/status/load-sheet")
    assert refused.status_code == 429
    assert refused.headers["Retry-After"] == "50"
