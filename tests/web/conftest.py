"""Fixtures of the status page tests: the demo network with an active plan, a signed-in client."""

from __future__ import annotations

import pytest
from status_helpers import LOW_SITE, PLANNED_TRUCK, add_reading, record_plan, sign_in, today


@pytest.fixture
def planned(app, client, auth, demo) -> int:
    """The demo network; HV-R1 has an active plan from today and readings; HV-R2 has no plan."""
    plan_id = record_plan(client, auth, PLANNED_TRUCK, today(app))
    add_reading(client, auth, LOW_SITE, 100.0)
    add_reading(client, auth, "HV-DEP-01", 30000.0)
    return plan_id


@pytest.fixture
def browser_client(client, tokens):
    """A test client signed in through the form with the viewer token."""
    response = sign_in(client, tokens["viewer"])
    assert response.status_code == 303, response.get_data(as_text=True)
    return client
