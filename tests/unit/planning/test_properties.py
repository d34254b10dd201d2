"""Property tests: bound, quantities, calendar, cost recomputed from trips, cost scaling."""

import math
import os
from collections import defaultdict

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from service.planning import SiteInput, TruckInput, lower_bound, plan_joint, trips_between

SETTINGS = settings(max_examples=int(os.environ.get("PLANNING_EXAMPLES", "100")), deadline=None)


@st.composite
def problems(draw):
    n = draw(st.integers(1, 5))
    demand = [draw(st.floats(10, 1000)) for _ in range(n)]
    capacity = draw(st.none() | st.floats(1.001, 20.0).map(lambda x: x * max(demand)))
    sites = [
        SiteInput(
            f"site-{i}",
            demand[i],
            draw(st.floats(0, 0.02)),
            draw(st.floats(0, 100)),
            demand[i] * draw(st.floats(1.001, 25.0)) / 0.9 + draw(st.floats(0, 50)),
            safe_fill=0.9,
            safety_stock=0.0,
        )
        for i in range(n)
    ]
    truck = TruckInput(draw(st.floats(0, 500)), capacity=capacity, max_stops=draw(st.none() | st.integers(1, 4)))
    return sites, truck, draw(st.sampled_from(["power_of_two", "integer", "best"]))


def _usable(site, truck):
    tank = site.tank_capacity * site.safe_fill - site.safety_stock
    return tank if truck.capacity is None else min(tank, truck.capacity)


@SETTINGS
@given(problems())
def test_policy_properties(problem):
    sites, truck, method = problem
    result = plan_joint(sites, truck, method=method)
    assert result.success
    assert result.cost_per_day >= result.lower_bound_per_day * (1 - 1e-12)
    assert result.lower_bound_per_day == lower_bound(sites, truck)
    assert math.isclose(sum(result.cost_breakdown.values()), result.cost_per_day, rel_tol=1e-12)
    by_code = {s.code: s for s in sites}
    T0 = result.dispatch_interval_days
    assert min(p.cycle_days for p in result.sites) == T0
    for plan in result.sites:
        assert plan.quantity <= _usable(by_code[plan.code], truck) * (1 + 1e-9)
        assert plan.cycle_days % T0 == 0 and plan.offset_days % T0 == 0 and 0 <= plan.offset_days < plan.cycle_days
        assert result.repeat_days % plan.cycle_days == 0
    listed = result.trips[-1].day + 1 if result.trips_truncated else result.repeat_days
    days = defaultdict(list)
    for trip in result.trips:
        assert truck.capacity is None or trip.load <= truck.capacity * (1 + 1e-9)
        assert truck.max_stops is None or len(trip.stops) <= truck.max_stops
        assert trip.load == pytest.approx(sum(s.quantity for s in trip.stops), rel=1e-12)
        for stop in trip.stops:
            days[stop.code].append(trip.day)
    for plan in result.sites:  # each site delivered every T_i days, once per delivery day
        assert days[plan.code] == list(range(plan.offset_days, listed, plan.cycle_days))
    if not result.trips_truncated:  # the cost recomputed from the calendar
        R = result.repeat_days
        dispatch = truck.dispatch_cost * len(result.trips) / R
        stops = holding = 0.0
        for trip in result.trips:
            for stop in trip.stops:
                site = by_code[stop.code]
                stops += site.stop_cost / R
                holding += site.holding_cost * stop.quantity**2 / (2 * site.demand_per_day) / R
        assert len(result.trips) == result.trips_per_repeat == R // T0 + result.extra_trips
        assert dispatch + stops + holding == pytest.approx(result.cost_per_day, rel=1e-9)
        day_loads = defaultdict(float)
        for trip in result.trips:
            day_loads[trip.day] += trip.load
        assert result.peak_load == pytest.approx(max(day_loads.values()), rel=1e-12)
    window = trips_between(result, truck, 0, min(listed, 400) - 1)
    assert window == [t for t in result.trips if t.day < min(listed, 400)]
    shifted = trips_between(result, truck, result.repeat_days, result.repeat_days + 30)
    start = trips_between(result, truck, 0, 30)
    assert [(t.day - result.repeat_days, t.load, t.stops) for t in shifted] == [(t.day, t.load, t.stops) for t in start]


@SETTINGS
@given(problems(), st.integers(-6, 6))
def test_scaling_costs_scales_cost_and_bound_and_keeps_the_policy(problem, exponent):
    sites, truck, method = problem
    c = 2.0**exponent  # a power of two scales every float exactly
    scaled_sites = [
        SiteInput(
            s.code, s.demand_per_day, s.holding_cost * c, s.stop_cost * c, s.tank_capacity, s.safe_fill, s.safety_stock
        )
        for s in sites
    ]
    scaled_truck = TruckInput(truck.dispatch_cost * c, truck.capacity, truck.max_stops)
    a = plan_joint(sites, truck, method=method)
    b = plan_joint(scaled_sites, scaled_truck, method=method)
    assert b.cost_per_day == pytest.approx(c * a.cost_per_day, rel=1e-12)
    assert b.lower_bound_per_day == pytest.approx(c * a.lower_bound_per_day, rel=1e-12)
    assert [(s.cycle_days, s.offset_days) for s in b.sites] == [(s.cycle_days, s.offset_days) for s in a.sites]
    assert (b.method, b.base_days, b.dispatch_interval_days) == (a.method, a.base_days, a.dispatch_interval_days)
