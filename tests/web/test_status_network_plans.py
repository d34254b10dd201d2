"""The overview's "Network plans" section (issue 16): jobs in every state, on SQLite and PostgreSQL.

Jobs are written through the persistence functions the worker uses (``persistence/network_jobs.py``),
so each state is set exactly; the page must show a ``<progress>`` element whose value is the job's
progress and the same figure as text, the estimate ``elapsed × (1 − p) / p`` (docs/fleet.md §10),
a done job's cost per day and gap, and a failed job's error.
"""

from __future__ import annotations

import datetime as dt
import re

import pytest
from status_helpers import Page, words

from service import network_inputs
from service.persistence import network_jobs as jobs
from service.persistence.models import utcnow

#: A done job's result: the parts of the core's NetworkResult the page reads (values invented).
RESULT = {"status": "feasible", "cost_per_day": 1234.5, "gap": 0.25, "unserved": [{"code": "X", "reason": "r"}]}


def _job(db, by="test-dispatcher"):
    inputs = network_inputs.snapshot(db)
    inputs["time_budget_seconds"] = 30.0
    job = jobs.add_job(db, created_by=by, start_date=dt.date(2026, 1, 5), inputs=inputs)
    db.commit()
    return job.id


def _claimed(db, job_id, worker, at):
    assert jobs.claim_next(db, worker, now=at) == job_id
    db.commit()


def _row(page: Page, job_id: int):
    rows = [r for r in page.find("tr") if words(r).startswith(f"#{job_id} ")]
    assert len(rows) == 1, [words(r) for r in page.find("tr")]
    return words(rows[0])


def _seconds(text: str) -> int:
    """``1 min 05 s`` → 65 (the page's durations)."""
    m = re.fullmatch(r"(?:(\d+) min )?(\d+) s", text)
    assert m, text
    return int(m.group(1) or 0) * 60 + int(m.group(2))


@pytest.fixture
def states(demo, db_session):
    """Six jobs of the demo network, each claimed before the next is added (a claim takes the oldest
    queued job): the oldest (not listed), failed, done, stale, running, queued."""
    now = utcnow()
    ids = {"oldest": _job(db_session)}
    _claimed(db_session, ids["oldest"], "w-old", now - dt.timedelta(minutes=10))
    assert jobs.finish(db_session, ids["oldest"], "w-old", error="An older failure.")
    ids["failed"] = _job(db_session)
    _claimed(db_session, ids["failed"], "w-failed", now - dt.timedelta(minutes=9))
    assert jobs.finish(db_session, ids["failed"], "w-failed", error="The planner refused the inputs: test error.")
    ids["done"] = _job(db_session, by="test-admin")
    _claimed(db_session, ids["done"], "w-done", now - dt.timedelta(minutes=8))
    finished = now - dt.timedelta(minutes=8) + dt.timedelta(seconds=75)
    assert jobs.finish(db_session, ids["done"], "w-done", result=RESULT, now=finished)
    ids["stale"] = _job(db_session)
    _claimed(db_session, ids["stale"], "w-stale", now - dt.timedelta(minutes=5))  # no heartbeat since
    assert jobs.write_progress(db_session, ids["stale"], "w-stale", 0.1)
    ids["running"] = _job(db_session)
    _claimed(db_session, ids["running"], "w-running", now - dt.timedelta(seconds=30))
    assert jobs.write_progress(db_session, ids["running"], "w-running", 0.25)
    assert jobs.beat(db_session, ids["running"], "w-running")
    ids["queued"] = _job(db_session)
    db_session.commit()
    return ids


def test_the_latest_five_jobs_are_listed_newest_first(browser_client, states):
    page = Page(browser_client.get("/status").get_data(as_text=True))
    section = page.find("section", class_="network-plans")
    assert len(section) == 1
    listed = [words(r).split()[0] for r in page.find("tr", class_="job")]
    expected = ["queued", "running", "stale", "done", "failed"]
    assert listed == [f"#{states[k]}" for k in expected]
    assert f"#{states['oldest']} " not in words(section[0])
    # The demo: 4 trucks, 16 sites, named in each row.
    assert "4 trucks (HV-R1, HV-R2, HV-R3, HV-R4), 16 sites" in _row(page, states["queued"])
    assert "by test-dispatcher" in _row(page, states["queued"])


def test_queued_and_running_jobs_show_a_labelled_progress_bar(browser_client, states):
    page = Page(browser_client.get("/status").get_data(as_text=True))
    for key, value in (("queued", 0.0), ("running", 0.25), ("stale", 0.1)):
        bar_id = f"network-plan-{states[key]}-progress"
        (bar,) = page.find("progress", id=bar_id)
        assert float(bar.attrs["value"] or "nan") == value and bar.attrs["max"] == "1"
        assert words(bar) == f"{int(value * 100)} %"  # the text alternative inside the element
        (label,) = page.find("label", for_=bar_id)
        assert words(label) == f"Progress of network plan {states[key]}"
        assert f"{int(value * 100)} %" in _row(page, states[key])
    assert "waiting for a worker" in _row(page, states["queued"])
    running = _row(page, states["running"])
    m = re.search(r"running for (.+?); about (.+?) left", running)
    assert m, running
    elapsed, left = _seconds(m.group(1)), _seconds(m.group(2))
    assert 30 <= elapsed < 90
    # left = elapsed × (1 − p) / p with p = 0.25: three times the elapsed time (each rounded to 1 s).
    assert abs(left - 3 * elapsed) <= 3
    assert "No word from its worker" not in running
    assert "No word from its worker for 5 min" in _row(page, states["stale"])  # lease 60 s, heartbeat 5 min old


def test_done_and_failed_jobs_show_their_outcome(browser_client, states):
    page = Page(browser_client.get("/status").get_data(as_text=True))
    done = _row(page, states["done"])  # words() folds the no-break spaces of the figures
    assert "cost 1 234.50 EUR per day · gap to the lower bound 25.0 % · 1 site not served" in done
    assert "took 1 min 15 s · not activated" in done
    assert not page.find("progress", id=f"network-plan-{states['done']}-progress")
    failed = _row(page, states["failed"])
    assert "The planner refused the inputs: test error." in failed
    assert not page.find("progress", id=f"network-plan-{states['failed']}-progress")


def test_no_section_without_network_plans(browser_client, demo):
    page = Page(browser_client.get("/status").get_data(as_text=True))
    assert not page.find("section", class_="network-plans") and not page.find("progress")


def test_recent_reads_counts_inside_the_database(states, db_session):
    rows = {row["id"]: row for row in jobs.recent(db_session, 10)}
    assert len(rows) == 6
    done = rows[states["done"]]
    assert (done["cost_per_day"], done["gap"], done["unserved"], done["result_status"]) == (1234.5, 0.25, 1, "feasible")
    assert done["site_count"] == 16 and done["trucks"] == ["HV-R1", "HV-R2", "HV-R3", "HV-R4"]
    assert rows[states["queued"]]["cost_per_day"] is None and rows[states["queued"]]["unserved"] is None
