"""Consumption learned from readings and deliveries (issue 15): GET /sites/{code}/consumption and
POST /sites/{code}/apply-estimate."""

from __future__ import annotations

import datetime as dt
import math

import numpy as np
import pytest
from scipy import stats

from tests.api.one_truck import post_network

A0_RATE = 280.0  # the stored demand is 200: A0 uses 1.4× it
NOISE = [0.05, -0.08, 0.03, -0.02, 0.07, -0.04, 0.01, -0.06]  # relative weekly noise, fixed


@pytest.fixture
def network(client, auth):
    post_network(client, auth, [200.0] * 4)


def record_history(client, auth, code: str, rate: float, weeks: int = 8, shift: int = 0) -> None:
    """Weekly readings (Mondays at 08:00, newest yesterday or earlier) and a delivery topping the tank
    to 9 000 after every reading that finds it below 3 500, in one bulk upload each."""
    start = dt.datetime.now(dt.UTC).replace(microsecond=0) - dt.timedelta(days=7 * weeks + 1)
    level, readings, deliveries = 9000.0, [], []
    for week in range(weeks + 1):
        at = start + dt.timedelta(days=7 * week)
        if week:
            level -= rate * 7 * (1 + NOISE[(week + shift) % len(NOISE)])
        readings.append({"site": code, "level": round(level, 1), "measured_at": at.isoformat()})
        if level < 3500:
            deliveries.append(
                {"site": code, "quantity": 9000 - level, "delivered_at": (at + dt.timedelta(hours=2)).isoformat()}
            )
            level = 9000.0
    assert client.post("/api/v1/readings", json=readings, headers=auth("dispatcher")).status_code == 201
    assert client.post("/api/v1/deliveries", json=deliveries, headers=auth("dispatcher")).status_code == 201


def test_consumption_rate_drift_and_apply_estimate(client, auth, network):
    record_history(client, auth, "A0", A0_RATE)
    for i in (1, 2, 3):
        record_history(client, auth, f"A{i}", 200.0, shift=i)
    answer = client.get("/api/v1/sites/A0/consumption", headers=auth("viewer")).get_json()
    assert answer["n_intervals"] == 8 and len(answer["intervals"]) == 8
    # Rate = Σ consumption / Σ elapsed days (docs/planning.md §11.2, the ratio estimator); recomputed
    # here with numpy from the intervals the answer lists.
    consumption = np.array([i["consumption"] for i in answer["intervals"]])
    days = np.array([i["elapsed_days"] for i in answer["intervals"]])
    assert answer["rate_per_day"] == pytest.approx(consumption.sum() / days.sum(), rel=1e-12)
    assert answer["rate_per_day"] == pytest.approx(A0_RATE * (1 + np.mean(NOISE)), rel=1e-6)
    assert answer["rate_low"] < answer["rate_per_day"] < answer["rate_high"]
    assert answer["drift"]["drifted"] is True and answer["drift"]["direction"] == "higher"
    assert answer["suggested_safety_stock"] is None  # no service_level yet
    ordinary = client.get("/api/v1/sites/A1/consumption", headers=auth("viewer")).get_json()
    assert ordinary["drift"]["drifted"] is False
    # apply-estimate: admin, If-Match.
    etag = client.get("/api/v1/sites/A0", headers=auth("admin")).headers["ETag"]
    url = "/api/v1/sites/A0/apply-estimate"
    assert client.post(url, json={}, headers=auth("dispatcher", **{"If-Match": etag})).status_code == 403
    assert client.post(url, json={}, headers=auth("admin")).status_code == 428
    assert client.post(url, json={}, headers=auth("admin", **{"If-Match": '"x"'})).status_code == 412
    response = client.post(url, json={}, headers=auth("admin", **{"If-Match": etag}))
    assert response.status_code == 200, response.get_json()
    assert response.get_json()["demand_per_day"] == pytest.approx(answer["rate_per_day"])
    assert response.headers["ETag"] != etag
    after = client.get("/api/v1/sites/A0/consumption", headers=auth("viewer")).get_json()
    assert after["drift"]["drifted"] is False  # the stored demand now is the estimate


def test_suggested_safety_stock_is_z_sigma_root_t_plus_l(client, auth, network):
    for i in range(4):
        record_history(client, auth, f"A{i}", 200.0, shift=i)
    etag = client.get("/api/v1/sites/A1", headers=auth("admin")).headers["ETag"]
    change = {"service_level": 0.95, "lead_time_days": 2}
    assert client.patch("/api/v1/sites/A1", json=change, headers=auth("admin", **{"If-Match": etag})).status_code == 200
    response = client.get("/api/v1/sites/A1/consumption?days=120", headers=auth("viewer"))
    assert response.status_code == 200, response.get_json()
    answer = response.get_json()
    # Periodic review, SS = k σ √(T + L), k = Φ⁻¹(CSL) (Axsäter, Inventory Control, ch. 5 — from memory;
    # k from scipy.stats.norm); T without an active plan = (safe_fill × capacity − safety stock) / demand.
    t = (0.9 * 10000 - 500) / 200
    assert answer["cycle_days"] == pytest.approx(t)
    sigma = answer["sigma_per_sqrt_day"]
    expected = stats.norm.ppf(0.95) * sigma * math.sqrt(t + 2)
    assert answer["suggested_safety_stock"] == pytest.approx(expected, rel=1e-9)
    # Fill rate 1 − σ√(T+L)·G(k)/(μT), G(k) = φ(k) − k(1 − Φ(k)) (same source), via scipy.
    k = stats.norm.ppf(0.95)
    loss = stats.norm.pdf(k) - k * stats.norm.sf(k)
    fill = 1 - sigma * math.sqrt(t + 2) * loss / (answer["rate_per_day"] * t)
    assert answer["fill_rate"] == pytest.approx(fill, rel=1e-9)
    etag = client.get("/api/v1/sites/A1", headers=auth("admin")).headers["ETag"]
    response = client.post(
        "/api/v1/sites/A1/apply-estimate", json={"safety_stock": True}, headers=auth("admin", **{"If-Match": etag})
    )
    assert response.status_code == 200
    assert response.get_json()["safety_stock"] == pytest.approx(answer["suggested_safety_stock"])


def test_unexplained_rise_is_rejected_with_its_reason(client, auth, network):
    now = dt.datetime.now(dt.UTC).replace(microsecond=0)
    levels = [9000, 7600, 9500, 4800, 3400]  # 9 500 two weeks in: a rise no delivery explains
    rows = [
        {"site": "A2", "level": level, "measured_at": (now - dt.timedelta(days=7 * (5 - w))).isoformat()}
        for w, level in enumerate(levels)
    ]
    assert client.post("/api/v1/readings", json=rows, headers=auth("dispatcher")).status_code == 201
    answer = client.get("/api/v1/sites/A2/consumption", headers=auth("viewer")).get_json()
    assert [r["level"] for r in answer["rejected"]] == [9500]
    assert answer["rejected"][0]["reason"] and answer["rejected"][0]["source"] == "reading"
    assert answer["rate_per_day"] == pytest.approx((9000 - 3400) / 28)  # the chain telescopes


def test_no_estimate_without_data(client, auth, network):
    answer = client.get("/api/v1/sites/A3/consumption", headers=auth("viewer")).get_json()
    assert answer["rate_per_day"] is None and answer["intervals"] == []
    etag = client.get("/api/v1/sites/A3", headers=auth("admin")).headers["ETag"]
    response = client.post("/api/v1/sites/A3/apply-estimate", json={}, headers=auth("admin", **{"If-Match": etag}))
    assert response.status_code == 422 and response.get_json()["type"].endswith("/no-estimate")
    assert client.get("/api/v1/sites/NOPE/consumption", headers=auth("viewer")).status_code == 404
    assert client.get("/api/v1/sites/A3/consumption?days=0", headers=auth("viewer")).status_code == 422


def test_each_sites_drift_pools_sigma_over_exactly_its_others(client, auth, network, db_session):
    from service import consumption
    from service.persistence import deliveries as store
    from service.persistence import repository as repo
    from service.planning.consumption import consumption_drift, pooled_relative_sigma

    record_history(client, auth, "A0", A0_RATE)
    for i in (1, 2, 3):
        record_history(client, auth, f"A{i}", 200.0 * (1 + 0.1 * i), shift=i)
    sites = store.truck_sites(db_session, repo.truck_by_code(db_session, "T1").id)
    now = dt.datetime.now(dt.UTC)
    learned = consumption.for_sites(db_session, sites, 90, now)
    for site in sites:
        # The definition (docs/planning.md §11.4): ρ pooled over the other sites, recomputed directly.
        rho, df = pooled_relative_sigma([learned[s.id][0] for s in sites if s.id != site.id])
        direct = consumption_drift(
            learned[site.id][0], site.demand_per_day, sigma=rho * site.demand_per_day, sigma_df=df
        )
        assert learned[site.id][1].statistic == pytest.approx(direct.statistic, rel=1e-9)
        assert learned[site.id][1].p_value == pytest.approx(direct.p_value, rel=1e-9, abs=1e-15)
    # The API's answer, first (pool computed) and again (pool from the cache): the same drift test.
    answers = [client.get("/api/v1/sites/A0/consumption", headers=auth("viewer")).get_json() for _ in range(2)]
    assert answers[0]["drift"] == answers[1]["drift"]
    a0 = next(s for s in sites if s.code == "A0")
    assert answers[0]["drift"]["statistic"] == pytest.approx(learned[a0.id][1].statistic, rel=1e-6)
