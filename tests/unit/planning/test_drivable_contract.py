"""Issue 13's contract on every plan: rules 1–3 from the listed trips (``check_plan``), rule 4 against
the reference bound (docs/planning.md, "The plain bound"), rule 5's answer, rule 6 against brute force."""

from __future__ import annotations

import datetime as dt
import math
import os
from dataclasses import replace

import numpy as np
import pytest
from hypothesis import given, note, settings
from hypothesis import strategies as st

from service.planning import SiteInput, Status, TruckInput, plan_joint

from .brute_force import class_costs, integer_multiples, powers_of_two
from .drivable_networks import longest_closed_stretch, network
from .drivable_oracle import check_plan, check_window, reference_bound, whole_day_cap

SETTINGS = settings(max_examples=int(os.environ.get("PLANNING_EXAMPLES", "100")) // 2, deadline=None)
CALENDARS = ((1, 2, 3, 4, 5), (1, 2, 3, 4, 5, 6), (1, 2, 3, 4, 5, 6, 7), (1, 3, 5), (2, 3, 4, 6, 7), (6, 7))


@st.composite
def drivable_problems(draw):
    n = draw(st.integers(1, 6))
    demand = [draw(st.floats(10, 1000)) for _ in range(n)]
    working = draw(st.sampled_from(CALENDARS))
    start = draw(st.dates(dt.date(2026, 1, 1), dt.date(2027, 12, 31)))
    closed = tuple(sorted({start + dt.timedelta(days=t) for t in draw(st.lists(st.integers(0, 70), max_size=3))}))
    truck = TruckInput(
        draw(st.floats(0, 500)),
        capacity=draw(st.none() | st.floats(1.001, 20.0).map(lambda x: x * max(demand))),
        max_stops=draw(st.none() | st.integers(1, 4)),
        working_days=working,
        trips_per_day=draw(st.none() | st.integers(1, 3)),
        closed_dates=closed,
    )
    sites = []
    for i in range(n):
        stock = draw(st.sampled_from([0.0, 5.0]))
        usable = demand[i] * draw(st.floats(1.001, 25.0)) + draw(st.floats(0, 50))
        sites.append(
            SiteInput(
                f"site-{i}",
                demand[i],
                draw(st.floats(0, 0.02)),
                draw(st.floats(0, 100)),
                (usable + stock) / 0.9,
                safe_fill=0.9,
                safety_stock=stock,
            )
        )
    return sites, truck, start


def _weekly_stretch(working) -> int:
    return longest_closed_stretch(working, (), dt.date(2026, 1, 5), horizon=21)


def surely_infeasible(sites, truck) -> str | None:
    """Necessary conditions of a drivable plan (docs/planning.md, "Why it is valid", steps 2–3, over one week)."""
    if not all(whole_day_cap(s, truck) >= 1 for s in sites):
        return None  # an input error, not a plan
    stretch = _weekly_stretch(truck.working_days)
    short = [s.code for s in sites if whole_day_cap(s, truck) < stretch + 1]
    if short:
        return f"tanks {short} cannot last {stretch} closed days"
    offered = (truck.trips_per_day or math.inf) * len(truck.working_days) / 7
    if truck.capacity is not None and sum(s.demand_per_day for s in sites) / truck.capacity > offered * (1 + 1e-9):
        return "volume"
    visits = sum(1 / whole_day_cap(s, truck) for s in sites)
    if truck.max_stops is not None and visits / truck.max_stops > offered * (1 + 1e-9):
        return "stops"
    return None


def check_rule_4(result, sites, truck) -> None:
    bound = result.lower_bound_per_day
    assert bound <= result.cost_per_day * (1 + 1e-9), f"bound {bound} above the plan's cost {result.cost_per_day}"
    reference = reference_bound(sites, truck, primal=False).value
    assert bound >= reference * (1 - 1e-7) - 1e-9, f"bound {bound} below the reference bound {reference}"
    want_gap = result.cost_per_day / bound - 1 if bound > 0 else 0.0
    assert result.gap == pytest.approx(want_gap, rel=1e-9, abs=1e-12)


def check_needed(result, sites, truck, start) -> None:
    """Rule 5: taking off ``needed.remove_sites`` and running ``needed.trips_per_day`` (when a number) makes
    the plan feasible, and one trip a day fewer does not."""
    needed = result.needed
    rest = [s for s in sites if s.code not in needed["remove_sites"]]
    if not rest:
        return
    tpd = needed["trips_per_day"]
    fixed = truck if tpd is None else replace(truck, trips_per_day=tpd)
    answer = plan_joint(rest, fixed, start_date=start)
    assert answer.success, f"still infeasible with needed = {needed}: {answer.message}"
    if tpd is not None and tpd > 1:
        fewer = plan_joint(rest, replace(truck, trips_per_day=tpd - 1), start_date=start)
        assert not fewer.success, "needed trips_per_day is not the smallest"


@SETTINGS
@given(drivable_problems())
def test_every_plan_keeps_rules_1_to_5(problem):
    sites, truck, start = problem
    note(f"sites={sites!r}, truck={truck!r}, start={start!r}")
    result = plan_joint(sites, truck, start_date=start)
    assert result.start_date == start
    check_plan(result, sites, truck)
    reason = surely_infeasible(sites, truck)
    if reason is not None:
        assert not result.success, f"a plan where none exists ({reason})"
    if result.success:
        check_rule_4(result, sites, truck)
        check_window(result, sites, truck, result.repeat_days - 3, result.repeat_days + 20)
    else:
        check_needed(result, sites, truck, start)


@pytest.mark.parametrize("seed", range(6))
def test_realistic_networks_keep_the_rules(seed):
    net = network(500 + seed, n=[6, 12, 25, 40, 8, 18][seed])
    result = plan_joint(net.sites, net.truck, start_date=net.start_date)
    assert result.success, result.message  # the generator only makes feasible networks
    check_plan(result, net.sites, net.truck)
    check_rule_4(result, net.sites, net.truck)


def test_a_tank_shorter_than_the_weekend_is_infeasible():
    # Mon–Fri: Friday's delivery must last until Monday (3 days); this tank holds 2.5 days.
    sites = [SiteInput("a", 100.0, 0.01, 10.0, 1000.0), SiteInput("short", 400.0, 0.01, 10.0, 1000.0 / 0.9)]
    truck = TruckInput(100.0, working_days=(1, 2, 3, 4, 5), trips_per_day=1)
    result = plan_joint(sites, truck, start_date=dt.date(2026, 12, 7))
    check_plan(result, sites, truck)
    assert result.status == Status.INFEASIBLE and not result.success
    assert "short" in result.message
    assert result.needed == {"trips_per_day": None, "remove_sites": ["short"]}


def test_too_many_stops_for_one_trip_a_day_names_the_trips_needed():
    # Seven daily sites (⌊U⌋ = 1), two stops a trip, every day: 7 stops a day need 4 trips a day.
    sites = [SiteInput(f"d{i}", 100.0, 0.01, 5.0, 150.0, safe_fill=1.0) for i in range(7)]
    truck = TruckInput(100.0, max_stops=2, trips_per_day=1)
    result = plan_joint(sites, truck, start_date=dt.date(2026, 12, 7))
    check_plan(result, sites, truck)
    assert not result.success and result.needed["trips_per_day"] == 4
    check_needed(result, sites, truck, dt.date(2026, 12, 7))


def test_needed_covers_every_limit_that_binds():
    # Mon–Fri, one trip of one stop a day: site-1 (2 days of stock) cannot last the weekend, and the other
    # two (3 days) need Mon–Wed–Fri each, 6 stops a week for 5 trips. Taking off site-1 is not enough.
    sites = [SiteInput(f"site-{i}", 10.0, 0.0, 0.0, cap) for i, cap in enumerate([100 / 3, 200 / 9, 100 / 3])]
    truck = TruckInput(0.0, max_stops=1, working_days=(1, 2, 3, 4, 5), trips_per_day=1)
    start = dt.date(2026, 1, 1)
    result = plan_joint(sites, truck, start_date=start)
    check_plan(result, sites, truck)
    assert result.needed == {"trips_per_day": 2, "remove_sites": ["site-1"]}
    check_needed(result, sites, truck, start)


# --- rule 6: no regression ------------------------------------------------------------------------


def _unlimited(seed):
    rng = np.random.default_rng(seed)
    n = int(rng.integers(1, 4))
    d = rng.uniform(50, 2000, n)
    U = rng.uniform(1.0, {1: 40, 2: 30, 3: 16}[n] + 0.99, n)
    h = np.exp(rng.uniform(np.log(1e-4), np.log(2e-2), n))
    k = rng.uniform(0, 80, n)
    sites = [SiteInput(f"s{i}", float(d[i]), float(h[i]), float(k[i]), float(d[i] * U[i]), 1.0) for i in range(n)]
    return sites, float(rng.uniform(0, 300)), k, h * d / 2, np.floor(U).astype(int)


@pytest.mark.parametrize("seed", range(12))
def test_seven_days_without_limits_is_todays_class_optimum(seed):
    # Brute force over every whole-day cycle vector (tests/unit/planning/brute_force.py, DERIVED).
    sites, K, k, H, u = _unlimited(seed)
    truck = TruckInput(K)  # the core's defaults: all seven days, no trip limit, no closures
    start = dt.date(2026, 12, 7)
    for method, allowed in (("integer", integer_multiples), ("power_of_two", powers_of_two)):
        result = plan_joint(sites, truck, method=method, start_date=start)
        check_plan(result, sites, truck)
        assert result.cost_per_day == pytest.approx(class_costs(K, k, H, u, allowed), rel=1e-12)
    best = plan_joint(sites, truck, start_date=start)
    check_plan(best, sites, truck)
    assert best.cost_per_day == pytest.approx(class_costs(K, k, H, u, integer_multiples), rel=1e-12)
    assert best.status == Status.OPTIMAL
    assert best.lower_bound_per_day <= best.cost_per_day * (1 + 1e-12)


# --- no false "infeasible"; a drivable plan at the deadline; closed dates that no move can absorb --------


@pytest.mark.parametrize("seed", [48, 54])
def test_networks_with_a_witness_plan_are_planned(seed):
    # drivable_networks.witness_plan builds a drivable 28-day plan for every generated network, so an
    # infeasible answer is wrong (these two were answered infeasible before the weekly fallback plan).
    net = network(seed)
    result = plan_joint(net.sites, net.truck, start_date=net.start_date)
    assert result.success, result.message
    check_plan(result, net.sites, net.truck)
    check_rule_4(result, net.sites, net.truck)


def test_a_deadline_too_short_for_the_search_still_returns_a_drivable_plan():
    net = network(54)
    result = plan_joint(net.sites, net.truck, start_date=net.start_date, deadline_seconds=1e-6)
    assert result.status == Status.TIME_LIMIT and result.success
    check_plan(result, net.sites, net.truck)


def test_closed_wednesday_moves_both_sites_to_tuesday_within_the_truck():
    # Mon–Fri, one stop a trip, two trips a day, Wednesday 9 and Thursday 10 December 2026 closed; two
    # sites of 3 days of stock (10 L/day, tank 100/3 L at the default 0.9 safe fill) on Mon/Wed/Fri.
    # The nearest earlier working day with room is Tuesday (two trips): each brings 10 × 3 days to
    # Friday (rule 2 by hand), Monday's delivery only 10 × 1, and no trip falls on a closed date.
    sites = [SiteInput(f"s{i}", 10.0, 0.001, 1.0, 100 / 3) for i in range(2)]
    closed = (dt.date(2026, 12, 9), dt.date(2026, 12, 10))
    truck = TruckInput(0.0, max_stops=1, working_days=(1, 2, 3, 4, 5), trips_per_day=2, closed_dates=closed)
    start = dt.date(2026, 12, 7)
    result = plan_joint(sites, truck, start_date=start)
    assert result.success, result.message
    check_plan(result, sites, truck)  # rule 1 on the listing; rule 2 or a warning naming date and site
    assert not any(t.date in closed for t in result.trips)
    tuesday = [t for t in result.trips if t.date == dt.date(2026, 12, 8)]
    assert len(tuesday) == 2 and all(s.quantity == pytest.approx(30.0) for t in tuesday for s in t.stops)
    monday = [s.quantity for t in result.trips if t.date == start for s in t.stops]
    assert monday == [pytest.approx(10.0)] * 2
    assert result.warnings == ()
