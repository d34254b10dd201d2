"""Plans on the truck's working calendar (issue 13): the joint calculation, recorded plans, the
weekly trips and their cache.

Public holidays are those of the installed ``holidays`` package (the reference the service uses);
the one date checked by hand is 25 December 2026, Christmas Day, a Friday and a bank holiday in
every part of the United Kingdom (gov.uk "UK bank holidays", recalled from memory).
All dates are fixed in the requests, so the tests do not depend on the day they run.
"""

from __future__ import annotations

import datetime as dt
from collections import Counter

import holidays
import pytest
from contract import JOINT_FIELDS, JOINT_SITE_FIELDS, UNCONSTRAINED_CALENDAR
from sqlalchemy import func, select

from service.persistence import plans as plan_store
from service.persistence import repository as repo
from service.persistence.models import Plan
from service.routes import NO_DEPOT

JOINT = "/api/v1/calculations/joint"
CHRISTMAS = dt.date(2026, 12, 25)
START = dt.date(2026, 12, 21)  # the Monday of Christmas week
STATUSES = {"optimal", "feasible", "infeasible", "time_limit"}


def site(code: str, **extra):
    return {
        "code": code,
        "demand_per_day": 400.0,
        "holding_cost": 0.002,
        "stop_cost": 25.0,
        "tank_capacity": 12000.0,
        "safe_fill": 0.9,
        "safety_stock": 800.0,
    } | extra


def joint_body(n: int = 4, **extra):
    sites = [site(f"S{i}", demand_per_day=250.0 + 200 * i) for i in range(n)]
    return {"dispatch_cost": 150.0, "truck_capacity": 30000.0, "max_stops": 6, "sites": sites} | extra


def check_drivable(body, working_days, closed, trips_per_day):
    """Rule 1 of issue 13 on the listed trips: working days only, never a closed date, at most
    trips_per_day a date, trips numbered 1, 2, … within their date, a site once a date."""
    start = dt.date.fromisoformat(body["start_date"])
    per_date = Counter()
    for trip in body["trips"]:
        date = dt.date.fromisoformat(trip["date"])
        assert date == start + dt.timedelta(days=trip["day"])
        assert date.isoweekday() in working_days, trip
        assert date not in closed, trip
        per_date[date] += 1
        assert trip["trip"] == per_date[date], trip
    assert max(per_date.values()) <= trips_per_day
    seen = Counter((t["date"], s["code"]) for t in body["trips"] for s in t["stops"])
    assert max(seen.values()) == 1


# --- the joint calculation -------------------------------------------------------------------------


def test_joint_with_the_default_calendar_plans_monday_to_friday_one_trip(client, auth, db_session):
    response = client.post(JOINT, json=joint_body(start_date=START.isoformat()), headers=auth("dispatcher"))
    assert response.status_code == 200, response.get_json()
    body = response.get_json()
    assert JOINT_FIELDS <= set(body), JOINT_FIELDS - set(body)
    assert "extra_trips" not in body
    assert body["status"] in {"optimal", "feasible"} and body["success"] is True
    assert body["needed"] is None
    assert body["start_date"] == START.isoformat()
    assert body["repeat_days"] % 7 == 0  # not every day works: whole weeks
    for plan_site in body["sites"]:
        assert set(plan_site) == JOINT_SITE_FIELDS
        assert plan_site["offset_days"] == plan_site["delivery_days"][0]
        assert plan_site["cycle_days"] == pytest.approx(plan_site["period_days"] / len(plan_site["delivery_days"]))
    for trip in body["trips"]:
        assert set(trip) == {"day", "date", "trip", "load", "stops"}
    check_drivable(body, {1, 2, 3, 4, 5}, set(), 1)
    assert db_session.scalar(select(func.count()).select_from(Plan)) == 0


def test_joint_never_plans_a_trip_on_a_holiday_of_the_region(client, auth):
    body = joint_body(
        5, start_date=START.isoformat(), holiday_region="GB", working_days=[1, 2, 3, 4, 5, 6], trips_per_day=2
    )
    response = client.post(JOINT, json=body, headers=auth("dispatcher"))
    assert response.status_code == 200, response.get_json()
    result = response.get_json()
    assert result["status"] in {"optimal", "feasible"}
    last = START + dt.timedelta(days=result["repeat_days"])
    closed = set(holidays.country_holidays("GB", years=range(START.year, last.year + 1)))
    assert CHRISTMAS in closed and CHRISTMAS.isoweekday() == 5  # a working weekday otherwise
    check_drivable(result, {1, 2, 3, 4, 5, 6}, closed, 2)
    dates = {t["date"] for t in result["trips"]}
    assert CHRISTMAS.isoformat() not in dates and "2026-12-26" not in dates
    # The same network without the region does deliver on those dates' weekdays (Friday, Saturday).
    response = client.post(JOINT, json=body | {"holiday_region": None}, headers=auth("dispatcher"))
    weekdays = {dt.date.fromisoformat(t["date"]).isoweekday() for t in response.get_json()["trips"]}
    assert {5, 6} & weekdays


def test_joint_closed_dates_are_never_trip_dates(client, auth):
    closed = [START + dt.timedelta(days=k) for k in (1, 2, 8)]
    body = joint_body(3, start_date=START.isoformat(), closed_dates=[d.isoformat() for d in closed])
    response = client.post(JOINT, json=body, headers=auth("dispatcher"))
    assert response.status_code == 200, response.get_json()
    check_drivable(response.get_json(), {1, 2, 3, 4, 5}, set(closed), 1)


def test_joint_start_date_defaults_to_today_in_the_service_time_zone(app, client, auth):
    from service import schedule  # noqa: PLC0415

    response = client.post(JOINT, json=joint_body(2, **UNCONSTRAINED_CALENDAR), headers=auth("dispatcher"))
    assert response.status_code == 200
    assert response.get_json()["start_date"] == schedule.today(app.config["ULLAGE_SETTINGS"]).isoformat()


def test_a_tank_of_two_days_on_monday_to_friday_is_infeasible_naming_the_site(client, auth):
    # 0.9 × 2 500 − 250 = 2 000 L usable at 1 000 L a day: two days, and Friday to Monday is three.
    body = joint_body(3, start_date=START.isoformat())
    body["sites"].append(site("SHORT", demand_per_day=1000.0, tank_capacity=2500.0, safety_stock=250.0))
    response = client.post(JOINT, json=body, headers=auth("dispatcher"))
    assert response.status_code == 200, response.get_json()
    result = response.get_json()
    assert result["status"] == "infeasible" and result["success"] is False
    assert "SHORT" in result["message"]
    assert result["needed"]["remove_sites"] == ["SHORT"]
    assert set(result["needed"]) == {"trips_per_day", "remove_sites"}
    assert result["trips"] == [] and result["sites"] == []
    assert JOINT_FIELDS <= set(result)
    # Working every day, the same tank is fine.
    response = client.post(JOINT, json=body | UNCONSTRAINED_CALENDAR, headers=auth("dispatcher"))
    assert response.get_json()["status"] in {"optimal", "feasible"}


# --- recorded plans ----------------------------------------------------------------------------


def truck(code: str = "T1", **extra):
    return {"code": code, "name": f"Truck {code}", "dispatch_cost": 150.0, "capacity": 30000.0, "max_stops": 6} | extra


def add_network(client, auth, truck_body, sites):
    assert client.post("/api/v1/trucks", json=truck_body, headers=auth("admin")).status_code == 201
    for body in sites:
        body = {"name": f"Site {body['code']}", "truck": truck_body["code"]} | body
        response = client.post("/api/v1/sites", json=body, headers=auth("admin"))
        assert response.status_code == 201, response.get_json()


def patch_truck(client, auth, code, **changes):
    etag = client.get(f"/api/v1/trucks/{code}", headers=auth("admin")).headers["ETag"]
    response = client.patch(f"/api/v1/trucks/{code}", json=changes, headers=auth("admin", **{"If-Match": etag}))
    assert response.status_code == 200, response.get_json()


def record(client, auth, code="T1", start=START):
    return client.post(
        f"/api/v1/trucks/{code}/plans", json={"start_date": start.isoformat()}, headers=auth("dispatcher")
    )


def test_a_recorded_plan_uses_the_stored_calendar_and_records_it(client, auth):
    add_network(
        client, auth, truck(holiday_region="GB"), [site(f"S{i}", demand_per_day=300.0 + 150 * i) for i in range(4)]
    )
    response = record(client, auth)
    assert response.status_code == 201, response.get_json()
    plan = response.get_json()
    assert plan["status"] == "proposed" and plan["planning_status"] in {"optimal", "feasible"}
    assert plan["start_date"] == START.isoformat()
    assert JOINT_FIELDS <= set(plan)
    recorded = plan["inputs"]["truck"]
    assert recorded["working_days"] == [1, 2, 3, 4, 5] and recorded["trips_per_day"] == 1
    assert recorded["closed_dates"] == [] and recorded["holiday_region"] == "GB"
    closed = set(holidays.country_holidays("GB", years=range(2026, 2040)))
    check_drivable(plan, {1, 2, 3, 4, 5}, closed, 1)
    assert CHRISTMAS.isoformat() not in {t["date"] for t in plan["trips"]}


def test_changing_the_working_days_makes_the_plan_stale_naming_the_field(client, auth):
    add_network(client, auth, truck(), [site("S0"), site("S1", demand_per_day=700.0)])
    plan = record(client, auth).get_json()
    assert client.post(f"/api/v1/plans/{plan['id']}/activate", headers=auth("dispatcher")).status_code == 200
    before = client.get("/api/v1/trucks/T1/trips?week=2026-W52", headers=auth("viewer"))
    assert before.status_code == 200
    assert not [w for w in before.get_json()["warnings"] if w["kind"] == "plan_stale"]
    patch_truck(client, auth, "T1", working_days=[1, 2, 3, 4])
    got = client.get(f"/api/v1/plans/{plan['id']}", headers=auth("viewer")).get_json()
    assert got["stale"] is True and got["changed_sites"] == []
    after = client.get("/api/v1/trucks/T1/trips?week=2026-W52", headers=auth("viewer"))
    assert after.headers["ETag"] != before.headers["ETag"]  # the cache saw the truck's calendar change
    stale = [w for w in after.get_json()["warnings"] if w["kind"] == "plan_stale"]
    assert len(stale) == 1 and "working_days changed from [1, 2, 3, 4, 5] to [1, 2, 3, 4]" in stale[0]["message"]
    # The truck no longer works Fridays: no trip is listed on a Friday.
    assert all(dt.date.fromisoformat(t["date"]).isoweekday() != 5 for t in after.get_json()["trips"])


def test_an_infeasible_plan_is_not_recorded(client, auth, db_session):
    short = site("SHORT", demand_per_day=1000.0, tank_capacity=2500.0, safety_stock=250.0)
    add_network(client, auth, truck(), [site("S0"), short])
    response = record(client, auth)
    assert response.status_code == 422
    assert response.mimetype == "application/problem+json"
    problem = response.get_json()
    assert problem["type"].endswith("/infeasible")
    assert "SHORT" in problem["detail"]
    assert problem["needed"]["remove_sites"] == ["SHORT"]
    assert db_session.scalar(select(func.count()).select_from(Plan)) == 0
    # Working Saturdays and Sundays too, the same network is recorded.
    patch_truck(client, auth, "T1", **UNCONSTRAINED_CALENDAR)
    assert record(client, auth).status_code == 201


# --- weekly trips ------------------------------------------------------------------------------


def test_weekly_trips_skip_closed_dates_and_say_when_no_move_keeps_the_rules(client, auth):
    # 0.9 × 4 000 − 600 = 3 000 L at 1 000 L a day: three days, just enough for Friday to Monday.
    add_network(client, auth, truck(), [site("TIGHT", demand_per_day=1000.0, tank_capacity=4000.0, safety_stock=600.0)])
    plan = record(client, auth, start=dt.date(2027, 1, 4)).get_json()
    assert client.post(f"/api/v1/plans/{plan['id']}/activate", headers=auth("dispatcher")).status_code == 200
    week = "2027-W03"  # 18 to 24 January 2027
    before = client.get(f"/api/v1/trucks/T1/trips?week={week}", headers=auth("viewer"))
    assert before.status_code == 200 and before.get_json()["trips"]
    for trip in before.get_json()["trips"]:
        assert trip["trip"] == 1
    assert not [w for w in before.get_json()["warnings"] if w["kind"] == "calendar"]
    # The depot closes Wednesday to Friday: the tank cannot last from Tuesday to Monday.
    closed = ["2027-01-20", "2027-01-21", "2027-01-22"]
    patch_truck(client, auth, "T1", closed_dates=closed)
    after = client.get(f"/api/v1/trucks/T1/trips?week={week}", headers=auth("viewer"))
    assert after.status_code == 200
    assert after.headers["ETag"] != before.headers["ETag"]
    body = after.get_json()
    assert not {t["date"] for t in body["trips"]} & set(closed)
    notices = [w for w in body["warnings"] if w["kind"] == "calendar"]
    assert notices, body["warnings"]
    for notice in notices:
        assert notice["date"] in closed and notice["date"] in notice["message"]
        assert notice["site"] == "TIGHT" and "TIGHT" in notice["message"]
    # The closed dates are not an input of the plan's pattern: the plan is stale only by its version.
    stale = [w for w in body["warnings"] if w["kind"] == "plan_stale"]
    assert stale and "closed_dates" in stale[0]["message"]


def test_a_plan_recorded_before_calendars_still_loads_and_lists_its_trips(client, auth, db_session):
    """A result stored before issue 13 (no dates, no patterns, extra_trips) is upgraded when read."""
    add_network(client, auth, truck(), [site("S0", demand_per_day=300.0)])
    truck_row = repo.truck_by_code(db_session, "T1")
    site_row = repo.site_by_code(db_session, "S0")
    old_inputs = {
        "truck": {"code": "T1", "dispatch_cost": 150.0, "capacity": 30000.0, "max_stops": 6, "version": 1},
        "sites": [
            {
                "code": "S0",
                "name": "Site S0",
                "version": 1,
                **{
                    k: site("S0", demand_per_day=300.0)[k]
                    for k in (
                        "demand_per_day",
                        "holding_cost",
                        "stop_cost",
                        "tank_capacity",
                        "safe_fill",
                        "safety_stock",
                    )
                },
            }
        ],
    }
    old_result = {
        "status": "optimal",
        "success": True,
        "message": "optimal integer policy",
        "method": "integer",
        "base_days": None,
        "dispatch_interval_days": 3,
        "repeat_days": 3,
        "trips_per_repeat": 1,
        "cost_per_day": 60.9,
        "cost_breakdown": {"dispatch": 50.0, "stops": 10.0, "holding": 0.9},
        "lower_bound_per_day": 60.0,
        "gap": 0.015,
        "peak_load": 900.0,
        "extra_trips": 0,
        "trips_truncated": False,
        "sites": [
            {"code": "S0", "cycle_days": 3, "offset_days": 0, "quantity": 900.0, "cost_per_day": 10.9, "binding": None}
        ],
        "trips": [{"day": 0, "load": 900.0, "stops": [{"code": "S0", "quantity": 900.0}]}],
        "warnings": [],
    }
    plan = plan_store.add_plan(
        db_session,
        truck_row,
        [site_row],
        method="integer",
        start_date=START,
        created_by="before-calendars",
        inputs=old_inputs,
        result=old_result,
    )
    db_session.commit()
    response = client.get(f"/api/v1/plans/{plan.id}", headers=auth("viewer"))
    assert response.status_code == 200
    body = response.get_json()
    assert JOINT_FIELDS <= set(body) and "extra_trips" not in body
    assert body["planning_status"] == "optimal" and body["needed"] is None and body["start_date"] == START.isoformat()
    assert body["sites"][0] == old_result["sites"][0] | {"period_days": 3, "delivery_days": [0], "longest_gap_days": 3}
    trip = {"day": 0, "date": START.isoformat(), "trip": 1, "load": 900.0, "stops": [{"code": "S0", "quantity": 900.0}]}
    # Issue 16: each listed trip also carries its route (none: this truck has no depot).
    assert body["trips"] == [trip | {"route": None, "route_note": NO_DEPOT}]
    assert body["stale"] is False
    assert client.post(f"/api/v1/plans/{plan.id}/activate", headers=auth("dispatcher")).status_code == 200
    trips = client.get("/api/v1/trucks/T1/trips?week=2026-W52", headers=auth("viewer")).get_json()["trips"]
    # Computed for every day, it keeps delivering every third day (weekends included).
    assert [t["date"] for t in trips] == ["2026-12-21", "2026-12-24", "2026-12-27"]
    assert all(t["trip"] == 1 and t["stops"][0]["planned_quantity"] == 900.0 for t in trips)


def test_corrected_quantities_last_until_the_sites_next_listed_delivery(client, auth):
    """Rule 2 of issue 13 on the weekly trips: from a reading, each delivery brings the tank to what
    it uses until its *own* next delivery, d·g + s − level (g the days to it: three from a Friday to
    a Monday), clamped to the room below the safe fill; never the mean gap. Checked by hand from the
    listed dates, so a Friday delivery that lasted only the mean gap would fail here."""
    d, capacity, safe_fill, safety = 1000.0, 4000.0, 0.9, 600.0
    add_network(
        client,
        auth,
        truck(),
        [site("TIGHT", demand_per_day=d, tank_capacity=capacity, safe_fill=safe_fill, safety_stock=safety)],
    )
    plan = record(client, auth, start=dt.date(2026, 11, 2)).get_json()
    assert client.post(f"/api/v1/plans/{plan['id']}/activate", headers=auth("dispatcher")).status_code == 200
    reading = {"level": 2500.0, "measured_at": "2026-11-10T06:00:00+00:00"}
    assert client.post("/api/v1/sites/TIGHT/readings", json=reading, headers=auth("dispatcher")).status_code == 201
    body = client.get("/api/v1/trucks/T1/trips?from=2026-11-11&to=2026-12-06", headers=auth("viewer")).get_json()
    stops = [(dt.date.fromisoformat(t["date"]), s) for t in body["trips"] for s in t["stops"]]
    dates = [date for date, _ in stops]
    gaps = {(b - a).days for a, b in zip(dates, dates[1:], strict=False)}
    assert 3 in gaps and len(gaps) > 1  # Friday to Monday, and shorter gaps in the week
    for (date, stop), following in zip(stops, dates[1:], strict=False):
        level = stop["projected_level_before"]
        g = (following - date).days
        expected = min(max(0.0, d * g + safety - level), safe_fill * capacity - level)
        assert stop["quantity"] == pytest.approx(expected), (date, g, stop)
    assert not [w for w in body["warnings"] if w["kind"] == "run_out_risk"], body["warnings"]
