"""Property tests: bound, quantities, calendar, cost recomputed from trips, cost scaling."""

import dataclasses
import datetime as dt
import math
import os

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from service.planning import SiteInput, TruckInput, lower_bound, plan_joint, trips_between

from .plan_checks import check_rules

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


@SETTINGS
@given(problems())
def test_policy_properties(problem):
    # the no-regression setting (all seven days, no trip limit) with and without load and stop limits
    sites, truck, method = problem
    result = plan_joint(sites, truck, method=method, start_date=dt.date(2026, 3, 2))
    assert result.success
    assert result.cost_per_day >= result.lower_bound_per_day * (1 - 1e-12)
    assert math.isclose(sum(result.cost_breakdown.values()), result.cost_per_day, rel_tol=1e-12)
    check_rules(result, sites, truck)
    for plan in result.sites:
        assert result.repeat_days % plan.period_days == 0
        assert plan.cycle_days == plan.period_days / len(plan.delivery_days)
        assert plan.offset_days == plan.delivery_days[0] and 0 <= plan.offset_days < plan.period_days
    if truck.capacity is None and truck.max_stops is None:  # rule 6: the classic class optimum
        assert result.lower_bound_per_day >= lower_bound(sites, truck) * (1 - 1e-12)
        assert result.status.name == "OPTIMAL"
        T0 = result.dispatch_interval_days
        assert min(p.cycle_days for p in result.sites) == T0
        for plan in result.sites:
            assert len(plan.delivery_days) == 1 and plan.cycle_days % T0 == 0 and plan.offset_days % T0 == 0
        if not result.trips_truncated:
            assert result.trips_per_repeat == result.repeat_days // T0
    listed = result.trips[-1].day + 1 if result.trips_truncated else result.repeat_days
    window = trips_between(result, truck, 0, min(listed, 400) - 1)
    assert window.trips == tuple(t for t in result.trips if t.day < min(listed, 400))
    shifted = trips_between(result, truck, result.repeat_days, result.repeat_days + 30).trips
    start = trips_between(result, truck, 0, 30).trips
    assert [(t.day - result.repeat_days, t.trip, t.load, t.stops) for t in shifted] == [
        (t.day, t.trip, t.load, t.stops) for t in start
    ]


@st.composite
def calendars(draw):
    sites, truck, _ = draw(problems())
    days = tuple(sorted(draw(st.sets(st.integers(1, 7), min_size=1, max_size=7))))
    trips = draw(st.none() | st.integers(1, 4))
    return sites, dataclasses.replace(truck, working_days=days, trips_per_day=trips), draw(st.integers(0, 6))


@SETTINGS
@given(calendars())
def test_working_calendars(problem):
    sites, truck, shift = problem
    start = dt.date(2026, 3, 2) + dt.timedelta(days=shift)
    result = plan_joint(sites, truck, start_date=start)
    if not result.success:
        assert result.status.name == "INFEASIBLE" and result.cost_per_day == 0.0 and result.trips == ()
        assert set(result.needed) == {"trips_per_day", "remove_sites"}
        if result.needed["remove_sites"]:
            assert all(f"`{c}`" in result.message for c in result.needed["remove_sites"])
        else:
            assert truck.trips_per_day is not None
            assert result.needed["trips_per_day"] is None or result.needed["trips_per_day"] > truck.trips_per_day
        return
    assert result.cost_per_day >= result.lower_bound_per_day * (1 - 1e-12)
    if len(truck.working_days) < 7:
        assert result.repeat_days % 7 == 0
    check_rules(result, sites, truck)


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
    a = plan_joint(sites, truck, method=method, start_date=dt.date(2026, 3, 2))
    b = plan_joint(scaled_sites, scaled_truck, method=method, start_date=dt.date(2026, 3, 2))
    assert b.cost_per_day == pytest.approx(c * a.cost_per_day, rel=1e-12)
    # the drivable bound maximises its weights numerically (Brent / SLSQP) over a kinked concave
    # function: scaled data may stop at another point of the same plateau (5e-7 relative seen), so
    # the scaled bound agrees to 1e-6, not to the last digit
    assert b.lower_bound_per_day == pytest.approx(c * a.lower_bound_per_day, rel=1e-6)
    assert [(s.period_days, s.delivery_days) for s in b.sites] == [(s.period_days, s.delivery_days) for s in a.sites]
    assert (b.method, b.base_days, b.dispatch_interval_days) == (a.method, a.base_days, a.dispatch_interval_days)
