"""The minimal cases of issue 13 as regression tests (all seven days, trips_per_day unlimited, only the
limits named), each checked by ``check_plan``."""

from __future__ import annotations

import datetime as dt

import numpy as np
import pytest

from service.planning import SiteInput, Status, TruckInput, plan_joint

from .drivable_oracle import check_plan, whole_day_cap

START = dt.date(2026, 12, 21)  # a Monday; 25 December is its Friday


def test_three_sites_on_a_tight_truck_reach_one_trip_every_twelve_days():
    # 3 sites × 500 L/day on 19 000 L, K = 200, k = 20, h = 0.002 (H = 0.5): every 12 days in one trip
    # (18 000 L) costs (200 + 3·20)/12 + 3·0.5·12 = 39.667 per day (DERIVED); 13 days needs two trips.
    sites = [SiteInput(f"farm-{i}", 500.0, 0.002, 20.0, 30_000.0) for i in range(3)]
    truck = TruckInput(200.0, capacity=19_000.0)
    result = plan_joint(sites, truck, start_date=START)
    check_plan(result, sites, truck)
    assert result.cost_per_day <= (260 / 12 + 18) * (1 + 1e-9)


def test_one_stop_per_trip_costs_the_sum_of_the_single_site_optima():
    # With max_stops = 1 every trip serves one site, so the sites separate: each pays (K + k_i)/g + H_i g
    # per day over its gaps g, and a mix of gaps costs at least the best single gap (mediant inequality),
    # so the optimum is Σ_i min_{T ≤ ⌊U_i⌋} ((K + k_i)/T + H_i T) (DERIVED; the whole-day EOQ of Harris 1913).
    rng = np.random.default_rng(20)
    sites = [
        SiteInput(f"s{i}", float(d), float(h), float(k), float(d * u / 0.9))
        for i, (d, h, k, u) in enumerate(
            zip(
                rng.uniform(50, 2000, 20),
                rng.uniform(1e-4, 5e-3, 20),
                rng.uniform(5, 60, 20),
                rng.uniform(2, 40, 20),
                strict=True,
            )
        )
    ]
    truck = TruckInput(150.0, max_stops=1)
    result = plan_joint(sites, truck, start_date=START)
    check_plan(result, sites, truck)
    alone = 0.0
    for s in sites:
        T = np.arange(1, whole_day_cap(s, truck) + 1)
        alone += float(np.min((truck.dispatch_cost + s.stop_cost) / T + s.holding_cost * s.demand_per_day / 2 * T))
    assert result.cost_per_day == pytest.approx(alone, rel=1e-9)


def test_six_daily_sites_pack_into_two_trips_a_day():
    # 4 000/4 000/3 000/3 000/2 000/2 000 L a day on 9 000 L, tanks of 1.5 days: 4 + 3 + 2 twice, two trips
    # of 100 a day; the load cut K·D/W = 100 · 18 000/9 000 = 200 proves it optimal (docs/planning.md, "The plain bound").
    sites = [
        SiteInput(f"d{i}", q, 0.0, 0.0, 1.5 * q, safe_fill=1.0) for i, q in enumerate([4e3, 4e3, 3e3, 3e3, 2e3, 2e3])
    ]
    truck = TruckInput(100.0, capacity=9_000.0)
    result = plan_joint(sites, truck, start_date=START)
    check_plan(result, sites, truck)
    assert result.cost_per_day == pytest.approx(200.0, rel=1e-9)
    assert result.status == Status.OPTIMAL


def test_a_tank_of_exactly_one_day_is_one_whole_day():
    # 0.94 × 4 300 = 4 042 L usable for 4 042 L a day; in floating point 0.94 * 4300 = 4041.9999999999995.
    sites = [
        SiteInput("exact", 4042.0, 0.001, 10.0, 4300.0, safe_fill=0.94),
        SiteInput("other", 100.0, 0.001, 10.0, 2000.0),
    ]
    truck = TruckInput(120.0)
    result = plan_joint(sites, truck, start_date=START)
    check_plan(result, sites, truck)
    exact = next(p for p in result.sites if p.code == "exact")
    assert exact.delivery_days == tuple(range(exact.period_days))  # every day


def test_christmas_closes_the_truck():
    # Mon–Fri with 25 December closed: no trip on the 25th, the plan still keeps rules 1–2 around it.
    sites = [SiteInput(f"h{i}", 40.0 + 10 * i, 0.0008, 15.0, 2000.0, safe_fill=0.95) for i in range(5)]
    truck = TruckInput(
        200.0,
        capacity=20_000.0,
        max_stops=4,
        working_days=(1, 2, 3, 4, 5),
        trips_per_day=1,
        closed_dates=(dt.date(2026, 12, 25),),
    )
    result = plan_joint(sites, truck, start_date=START)
    check_plan(result, sites, truck)
    assert all(t.date != dt.date(2026, 12, 25) for t in result.trips)
