"""One truck's bad data never breaks the status page for the others (issue 14 §3, dates).

A plan stored before the date range existed (the attack used a start of 9999-12-20; the API now
refuses such dates with 422) made the date arithmetic of its truck's week overflow, and
``GET /status`` answered 500 for everyone. The overview now shows that truck's error line and
renders every other truck.
"""

from __future__ import annotations

import datetime as dt
import logging

from sqlalchemy import update
from status_helpers import LOW_SITE, PLANNED_TRUCK, UNPLANNED_TRUCK, Page, add_reading, record_plan, today

from service.api.fields import FIRST_DATE, LAST_DATE
from service.persistence.models import Plan


def test_a_truck_whose_week_cannot_be_computed_does_not_break_the_page(
    app, browser_client, client, auth, demo, db_session, caplog
):
    plan_id = record_plan(client, auth, PLANNED_TRUCK, today(app))
    add_reading(client, auth, LOW_SITE, 100.0)
    record_plan(client, auth, UNPLANNED_TRUCK, today(app))
    # As if recorded before the API refused such dates (the column takes any date). On the last
    # day there is: the delivery of a site with a reading is projected to the next one, past it.
    db_session.execute(update(Plan).where(Plan.id == plan_id).values(start_date=dt.date.max))
    db_session.commit()
    caplog.set_level(logging.ERROR, logger="ullage")

    response = browser_client.get("/status")

    assert response.status_code == 200, response.get_data(as_text=True)[:500]
    page = Page(response.get_data(as_text=True))
    panels = {
        " ".join(section.text).split()[0]: " ".join(" ".join(section.text).split())
        for section in page.by_class("truck")
    }
    assert set(panels) >= {PLANNED_TRUCK, UNPLANNED_TRUCK}
    assert "cannot be shown" in panels[PLANNED_TRUCK]
    assert "Active plan" not in panels[PLANNED_TRUCK]
    assert "Active plan" in panels[UNPLANNED_TRUCK] and "cannot be shown" not in panels[UNPLANNED_TRUCK]
    assert f"{PLANNED_TRUCK}'s week cannot be shown" in " ".join(
        " ".join(e.text) for e in page.by_class("warnings-card")
    )
    assert f"truck {PLANNED_TRUCK} cannot be shown" in caplog.text  # the cause goes to the log


def test_status_weeks_follow_the_date_range(browser_client, demo):
    first, last = FIRST_DATE.year, LAST_DATE.year
    for week in (f"{first}-W01", f"{last}-W52"):
        assert browser_client.get(f"/status?week={week}").status_code == 200, week
    for week in (f"{first - 1}-W52", f"{last + 1}-W01"):
        refused = browser_client.get(f"/status?week={week}")
        assert refused.status_code == 400, week
        assert f"from {first}-W01 to {last}-W52" in refused.get_data(as_text=True)
