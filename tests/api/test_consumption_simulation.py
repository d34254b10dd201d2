"""The acceptance simulation of issue 15: 8 weeks of the demo network driven through the API.

Every tank is simulated hour by hour outside the service. Each Monday at 05:00 UTC (before the trucks'
06:00 shift start) every tank is read (``POST /readings``, one bulk upload); the week's trips are
fetched (``GET /trucks/{code}/trips?week=``) and every stop is delivered as returned at 06:00 of its
date, never above the tank (``POST /deliveries``, one bulk upload). Consumption in a week is the
stored demand times a factor drawn uniformly from [0.8, 1.2] per tank and week (demand ±20 %), and
one site (``HV-GAR-03``) uses 1.4× its stored demand. The 8 weeks end before today (readings and
deliveries may not be in the future).

Checked: the ``consumption_changed`` notice names the 1.4× site within two weeks of data (the drift
test of docs/planning.md §11.4 at α = 0.01 with the fleet's pooled σ), and the other sites at most at
the binomial 0.1 % quantile of α over all their weekly looks; after ``apply-estimate`` and a new plan
that site spends 0 hours below zero and 0 hours below its safety stock over the remaining weeks; the
other sites spend under 0.5 % of their hours below their safety stock (issue 15 measured 2.1 % before
deliveries were recorded and projected to the shift start).
"""

from __future__ import annotations

import datetime as dt
from collections import defaultdict

import numpy as np
from scipy import stats

WEEKS = 8
HEAVY = "HV-GAR-03"
HEAVY_FACTOR = 1.4
SERVICE_LEVEL = 0.99
ALPHA = 0.01  # service.planning.consumption.DEFAULT_ALPHA


def _iso_week(day: dt.date) -> str:
    iso = day.isocalendar()
    return f"{iso.year}-W{iso.week:02d}"


def _sites(client, auth) -> dict[str, dict]:
    items = client.get("/api/v1/sites?limit=200", headers=auth("viewer")).get_json()["items"]
    return {s["code"]: s for s in items}


def _plan(client, auth, truck: str, start: dt.date) -> None:
    response = client.post(
        f"/api/v1/trucks/{truck}/plans", json={"start_date": start.isoformat()}, headers=auth("dispatcher")
    )
    assert response.status_code == 201, response.get_json()
    plan_id = response.get_json()["id"]
    assert client.post(f"/api/v1/plans/{plan_id}/activate", headers=auth("dispatcher")).status_code == 200


def test_eight_weeks_learn_the_heavy_site_and_keep_the_others_above_safety_stock(client, auth, demo):
    rng = np.random.default_rng(15)
    today = dt.datetime.now(dt.UTC).date()
    first_monday = today - dt.timedelta(days=today.weekday() + 7 * (WEEKS + 1))
    for code in _sites(client, auth):
        # Every site sizes its deliveries for a 99 % cycle service level once its σ is learned.
        etag = client.get(f"/api/v1/sites/{code}", headers=auth("admin")).headers["ETag"]
        change = {"service_level": SERVICE_LEVEL}
        assert (
            client.patch(f"/api/v1/sites/{code}", json=change, headers=auth("admin", **{"If-Match": etag})).status_code
            == 200
        )
    sites = _sites(client, auth)
    trucks = sorted({s["truck"] for s in sites.values()})
    for truck in trucks:
        _plan(client, auth, truck, first_monday)
    true_rate = {c: s["demand_per_day"] * (HEAVY_FACTOR if c == HEAVY else 1.0) for c, s in sites.items()}
    # Start between the safety stock and the safe fill (a deterministic draw).
    level = {
        c: s["safety_stock"] + rng.uniform(0.4, 0.8) * (s["safe_fill"] * s["tank_capacity"] - s["safety_stock"])
        for c, s in sites.items()
    }
    hours_below_ss: dict[str, list[int]] = defaultdict(lambda: [0] * WEEKS)
    hours_empty: dict[str, list[int]] = defaultdict(lambda: [0] * WEEKS)
    flagged: dict[str, list[int]] = defaultdict(list)  # site -> weeks its consumption_changed was shown
    replanned_week = None
    for week in range(WEEKS):
        monday = first_monday + dt.timedelta(days=7 * week)
        read_at = dt.datetime.combine(monday, dt.time(5), tzinfo=dt.UTC)
        rows = [{"site": c, "level": round(level[c], 3), "measured_at": read_at.isoformat()} for c in sorted(sites)]
        assert client.post("/api/v1/readings", json=rows, headers=auth("dispatcher")).status_code == 201
        stops: dict[dt.datetime, dict[str, float]] = defaultdict(dict)
        for truck in trucks:
            body = client.get(
                f"/api/v1/trucks/{truck}/trips?week={_iso_week(monday)}", headers=auth("viewer")
            ).get_json()
            shown = {w["site"] for w in body["warnings"] if w["kind"] == "consumption_changed"}
            for code in shown:
                flagged[code].append(week)
            if HEAVY in shown and replanned_week is None and sites[HEAVY]["truck"] == truck:
                etag = client.get(f"/api/v1/sites/{HEAVY}", headers=auth("admin")).headers["ETag"]
                applied = client.post(
                    f"/api/v1/sites/{HEAVY}/apply-estimate", json={}, headers=auth("admin", **{"If-Match": etag})
                )
                assert applied.status_code == 200, applied.get_json()
                _plan(client, auth, truck, monday)
                replanned_week = week
                body = client.get(
                    f"/api/v1/trucks/{truck}/trips?week={_iso_week(monday)}", headers=auth("viewer")
                ).get_json()
            for trip in body["trips"]:
                when = dt.datetime.combine(dt.date.fromisoformat(trip["date"]), dt.time(6), tzinfo=dt.UTC)
                for stop in trip["stops"]:
                    if stop["quantity"] > 0:
                        stops[when][stop["site"]] = stops[when].get(stop["site"], 0.0) + stop["quantity"]
        # The week, hour by hour: consumption at the week's rate, deliveries at 06:00 of their date.
        factor = {c: rng.uniform(0.8, 1.2) for c in sorted(sites)}
        delivered = []
        for hour in range(7 * 24):
            now = read_at + dt.timedelta(hours=hour)
            for code, quantity in stops.get(now, {}).items():
                room = sites[code]["tank_capacity"] - level[code]
                amount = min(quantity, room)
                if amount > 0:
                    level[code] += amount
                    delivered.append({"site": code, "quantity": round(amount, 3), "delivered_at": now.isoformat()})
            for code in sites:
                level[code] = max(0.0, level[code] - true_rate[code] * factor[code] / 24)
                hours_below_ss[code][week] += level[code] < sites[code]["safety_stock"] - 1e-9
                hours_empty[code][week] += level[code] <= 1e-9
        if delivered:
            assert client.post("/api/v1/deliveries", json=delivered, headers=auth("dispatcher")).status_code == 201

    # The heavy site is named within two weeks of data (weeks 1 and 2 bring its first two intervals).
    assert flagged[HEAVY] and flagged[HEAVY][0] <= 2, dict(flagged)
    assert replanned_week is not None
    after = range(replanned_week + 1, WEEKS)
    assert sum(hours_empty[HEAVY][w] for w in after) == 0, hours_empty[HEAVY]
    assert sum(hours_below_ss[HEAVY][w] for w in after) == 0, hours_below_ss[HEAVY]
    # Other sites: flagged at most at the binomial 0.1 % quantile of α over their weekly looks
    # (scipy.stats.binom; each look with at least one interval is one test at α).
    others = [c for c in sites if c != HEAVY]
    looks = len(others) * (WEEKS - 1)
    false_alarms = sum(len(flagged[c]) for c in others)
    assert false_alarms <= stats.binom.ppf(0.999, looks, ALPHA), dict(flagged)
    # Hours below the safety stock of the ordinary sites, over all 8 weeks.
    share = sum(sum(hours_below_ss[c]) for c in others) / (len(others) * WEEKS * 7 * 24)
    print(f"ordinary sites below safety stock: {share:.4%} of hours; heavy site flagged in week {flagged[HEAVY][0]}")
    assert share < 0.005
