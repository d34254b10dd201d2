"""The status page shows what the current limits changed (issue 14 §1), on SQLite and PostgreSQL.

Same network as tests/api/test_trips_limits.py: S1 and S2 every 13 days from today, 6 500 and 3 900;
after activation S1's tank shrinks to 3 000 (room 0.9 × 3 000 − 500 = 2 200) and S2 is made inactive.
"""

from __future__ import annotations

import datetime as dt

import pytest
from contract import UNCONSTRAINED_CALENDAR
from status_helpers import Page, record_plan, sign_in, today, words

from service.web import formatting


def quantity(value: float) -> str:
    """As the page prints it, with its spaces collapsed like the parsed text's."""
    return " ".join(formatting.quantity(value, "L").split())


def patch(client, auth, path: str, body: dict) -> None:
    etag = client.get(path, headers=auth("admin")).headers["ETag"]
    assert client.patch(path, json=body, headers=auth("admin", **{"If-Match": etag})).status_code == 200


@pytest.fixture
def changed(app, client, auth, tokens):
    truck = {"code": "T", "name": "Truck", "dispatch_cost": 300.0, "capacity": 10000.0, **UNCONSTRAINED_CALENDAR}
    assert client.post("/api/v1/trucks", json=truck, headers=auth("admin")).status_code == 201
    for code, demand in (("S1", 500.0), ("S2", 300.0)):
        site = {
            "code": code,
            "name": f"Site {code}",
            "truck": "T",
            "demand_per_day": demand,
            "holding_cost": 0.0005,
            "stop_cost": 50.0,
            "tank_capacity": 8000.0,
            "safety_stock": 500.0,
        }
        assert client.post("/api/v1/sites", json=site, headers=auth("admin")).status_code == 201
    # The plan of issue 14 (every 13 days; the planner now finds a cheaper 12-day one).
    record_plan(client, auth, "T", today(app), method="power_of_two", base_days=13)
    patch(client, auth, "/api/v1/sites/S1", {"tank_capacity": 3000.0})
    patch(client, auth, "/api/v1/sites/S2", {"active": False})
    assert sign_in(client, tokens["viewer"]).status_code == 303
    return client


def test_the_week_shows_the_cut_quantity_and_why(app, changed):
    response = changed.get("/status")
    assert response.status_code == 200
    page = Page(response.get_data(as_text=True))
    [trips] = page.find("table", class_="trips")
    text = words(trips)
    assert "Site S1" in text and "Site S2" not in text  # the inactive site has no stop
    assert quantity(2200.0) in text and quantity(6500.0) in text  # delivered, and "(planned …)"
    notes = [words(e) for e in page.find("span", class_="kind-limits_changed")]
    assert notes and all("tank_capacity changed from 8000 to 3000 L" in n for n in notes)
    assert all("quantity cut from 6500 to 2200 L" in n for n in notes)
    # The warnings card: one line per site, labelled, S1's cut and S2's removal; the stale plan names why.
    warnings = [words(e) for e in page.find("li", class_="kind-limits_changed")]
    assert len(warnings) == 2
    assert all(w.startswith("⚠ Limits changed:") for w in warnings)
    [s1] = [w for w in warnings if "S1" in w]
    assert "tank_capacity changed from 8000 to 3000 L" in s1
    # One line for all of S1's cut stops the page covers (the week, and the charts' 28 days from Monday).
    monday = today(app) - dt.timedelta(days=today(app).weekday())
    others = sum(today(app) + dt.timedelta(days=k) <= monday + dt.timedelta(days=27) for k in (13, 26))
    assert f"The same change affects {others} more stop" in s1
    assert any("S2" in w and "active changed from true to false" in w for w in warnings)
    [stale] = [words(e) for e in page.find("li", class_="kind-plan_stale")]
    assert "tank_capacity changed from 8000 to 3000 L" in stale and "S2: no longer active" in stale


def test_the_inactive_sites_page_says_it_gets_no_stop(app, changed):
    response = changed.get("/status/sites/S2")
    assert response.status_code == 200
    page = Page(response.get_data(as_text=True))
    [warning] = [words(e) for e in page.find("li", class_="kind-limits_changed")]
    assert "active changed from true to false" in warning and "gets no stop" in warning
    assert "No planned deliveries" in page.text


def test_the_sites_page_shows_the_current_safe_fill_level(app, changed):
    response = changed.get("/status/sites/S1")
    page = Page(response.get_data(as_text=True))
    assert f"Tank capacity {quantity(3000.0)}" in page.text
    assert f"Safe fill level {quantity(2700.0)}" in page.text
    [warning] = [words(e) for e in page.find("li", class_="kind-limits_changed")]
    assert "quantity cut from 6500 to 2200 L" in warning
