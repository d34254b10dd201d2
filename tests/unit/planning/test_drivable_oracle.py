"""The independent checks themselves: the reference bound against published values and a second
method, the exact reference against brute force, and ``check_plan`` against broken plans."""

from __future__ import annotations

import copy
import datetime as dt
from dataclasses import replace
from types import SimpleNamespace as NS

import pytest

from service.planning import SiteInput, TruckInput

from .drivable_exact import as_result, brute_force_optimum, exact_optimum
from .drivable_networks import network
from .drivable_oracle import check_plan, convex_solve, reference_bound

MONDAY = dt.date(2026, 12, 7)
WEEKDAYS = (1, 2, 3, 4, 5)
BIG = 1e12  # a tank that never binds


def test_reference_bound_single_site_is_the_whole_day_capped_eoq():
    # C2, derived from the capped EOQ cost (Harris 1913; docs/planning.md §2): d = 1200, h = 0.002, K + k = 350, safe cap
    # 20 000 L: T* = 17.08 > ⌊U⌋ = 16, so the bound with whole-day caps is 350/16 + 1.2·16 = 41.075.
    site = SiteInput("depot", 1200.0, 0.002, 50.0, 20_000.0, safe_fill=1.0)
    bound = reference_bound([site], TruckInput(300.0))
    assert bound.value == pytest.approx(41.075, rel=1e-9)
    assert bound.primal == pytest.approx(41.075, rel=1e-9)


def test_reference_bound_uncapped_is_the_jrp_relaxation():
    # J3: stockpyl instance scmo_jrp_ex (data PUBLISHED in stockpyl; LB DERIVED, Roundy 1985 relaxation):
    # K = 600, k = (120, 840, 300), h = (160, 20, 50), d = 1: LB = 836.5081086 at T0 = 3 (≥ 1 day, no caps).
    sites = [SiteInput(f"j{i}", 1.0, h, k, BIG) for i, (k, h) in enumerate([(120, 160), (840, 20), (300, 50)])]
    bound = reference_bound(sites, TruckInput(600.0))
    assert bound.value == pytest.approx(836.5081086, rel=1e-9)
    assert bound.primal == pytest.approx(836.5081086, rel=1e-8)


def test_load_cut_counts_the_whole_volume():
    # docs/planning.md, "Why it is valid", step 3: N ≥ D R / W. Six daily sites (⌊U⌋ = 1) of 18 000 L/day in all on a
    # 9 000 L truck, no stop or holding cost: at least two trips a day, 2 × 100 per day.
    sites = [
        SiteInput(f"d{i}", q, 0.0, 0.0, 1.5 * q, safe_fill=1.0) for i, q in enumerate([4e3, 4e3, 3e3, 3e3, 2e3, 2e3])
    ]
    bound = reference_bound(sites, TruckInput(100.0, capacity=9000.0))
    assert bound.value == pytest.approx(200.0, rel=1e-9)
    assert bound.weights[1] == pytest.approx(1.0)


@pytest.mark.parametrize("seed", range(8))
def test_the_two_forms_of_the_reference_bound_agree(seed):
    # Strong duality (Boyd & Vandenberghe 2004, §5.2; docs/planning.md "Maximising the multipliers"): the Lagrangian maximum over the weights equals
    # the direct convex solve; the first is a valid bound for any weights, the second a feasible point.
    net = network(1000 + seed, n=[5, 9, 14, 30][seed % 4], classified=False)
    bound = reference_bound(net.sites, net.truck)
    assert bound.value <= bound.primal * (1 + 1e-9)
    assert bound.primal == pytest.approx(bound.value, rel=1e-6)
    without, _ = convex_solve(net.sites, net.truck, cuts=False)
    assert bound.value >= without * (1 - 1e-6)  # the cuts only add


# --- the exact reference ------------------------------------------------------------------------


def _small(seed: int, n: int, working=WEEKDAYS, tau=2):
    """A small instance with short caps (2–5 days on Mon–Fri after the weekend's 3) and a tight truck."""
    import numpy as np

    rng = np.random.default_rng(seed)
    sites = []
    for i in range(n):
        d = float(rng.uniform(500, 3000))
        days = rng.uniform(3.2, 6.0) if len(working) < 7 else rng.uniform(1.2, 4.0)
        sites.append(SiteInput(f"x{i}", d, float(rng.uniform(0.002, 0.02)), float(rng.uniform(5, 40)), d * days, 1.0))
    W = 1.2 * max(s.tank_capacity for s in sites)
    truck = TruckInput(
        float(rng.uniform(80, 300)),
        capacity=W,
        max_stops=int(rng.integers(1, 3)),
        working_days=working,
        trips_per_day=tau,
    )
    return sites, truck


@pytest.mark.parametrize("seed", range(4))
def test_exact_reference_agrees_with_brute_force(seed):
    sites, truck = _small(seed, 3)
    exact = exact_optimum(sites, truck, MONDAY, 7)
    brute = brute_force_optimum(sites, truck, MONDAY, 7)
    assert (exact is None) == (brute is None)
    if exact is not None:
        assert exact.cost_per_day == pytest.approx(brute, rel=1e-9)
        check_plan(as_result(sites, truck, MONDAY, 7, exact), sites, truck)


def test_exact_reference_packs_the_six_daily_sites_into_two_trips():
    # The case: 4 000/4 000/3 000/3 000/2 000/2 000 L a day on 9 000 L fits in two trips
    # (4 + 3 + 2 twice); first-fit decreasing needs three.
    sites = [
        SiteInput(f"d{i}", q, 0.0, 0.0, 1.5 * q, safe_fill=1.0) for i, q in enumerate([4e3, 4e3, 3e3, 3e3, 2e3, 2e3])
    ]
    truck = TruckInput(100.0, capacity=9000.0)
    exact = exact_optimum(sites, truck, MONDAY, 1)
    assert exact.cost_per_day == pytest.approx(200.0, rel=1e-9)
    check_plan(as_result(sites, truck, MONDAY, 1, exact), sites, truck)


# --- check_plan catches broken plans -------------------------------------------------------------


@pytest.fixture(scope="module")
def good():
    sites, truck = _small(7, 3)
    exact = exact_optimum(sites, truck, MONDAY, 7)
    result = as_result(sites, truck, MONDAY, 7, exact)
    check_plan(result, sites, truck)
    return sites, truck, result


def _with_trips(result, trips):
    broken = copy.deepcopy(result)
    broken.trips = tuple(trips)
    return broken


def _moved(trip, days):
    return NS(**{**vars(trip), "day": trip.day + days, "date": trip.date + dt.timedelta(days=days)})


def test_a_trip_on_a_saturday_is_caught(good):
    sites, truck, result = good
    friday = [t for t in result.trips if t.date.isoweekday() == 5 or t.date.isoweekday() == 1]
    trip = friday[0]
    shifted = _moved(trip, 5 if trip.date.isoweekday() == 1 else 1)  # Monday → Saturday, Friday → Saturday
    with pytest.raises(AssertionError, match="not a working day"):
        check_plan(_with_trips(result, [shifted if t is trip else t for t in result.trips]), sites, truck)


def test_a_trip_on_a_closed_date_is_caught(good):
    sites, truck, result = good
    closed = replace(truck, closed_dates=(result.trips[0].date,))
    with pytest.raises(AssertionError, match="closed date"):
        check_plan(result, sites, closed)


def test_an_overloaded_trip_is_caught(good):
    sites, truck, result = good
    heaviest = max(result.trips, key=lambda t: t.load)
    with pytest.raises(AssertionError, match="above capacity"):
        check_plan(result, sites, replace(truck, capacity=heaviest.load * (1 - 1e-6)))


def test_too_many_stops_is_caught(good):
    sites, truck, result = good
    most = max(len(t.stops) for t in result.trips)
    with pytest.raises(AssertionError, match="above max_stops"):
        check_plan(result, sites, replace(truck, max_stops=most - 1))


def test_too_many_trips_on_a_date_is_caught():
    sites = [SiteInput(f"d{i}", q, 0.0, 0.0, 1.5 * q, safe_fill=1.0) for i, q in enumerate([4e3, 4e3, 3e3])]
    truck = TruckInput(100.0, capacity=9000.0, trips_per_day=2)
    result = as_result(sites, truck, MONDAY, 1, exact_optimum(sites, truck, MONDAY, 1))
    check_plan(result, sites, truck)
    with pytest.raises(AssertionError, match="trips_per_day 1"):
        check_plan(result, sites, replace(truck, trips_per_day=1))


def test_a_wrong_quantity_is_caught(good):
    sites, truck, result = good
    trip = result.trips[0]
    stops = (NS(code=trip.stops[0].code, quantity=trip.stops[0].quantity * 0.99),) + tuple(trip.stops[1:])
    changed = NS(**{**vars(trip), "stops": stops, "load": sum(s.quantity for s in stops)})
    with pytest.raises(AssertionError, match="demand ×"):
        check_plan(_with_trips(result, [changed] + list(result.trips[1:])), sites, truck)


def test_a_gap_above_the_cap_is_caught(good):
    sites, truck, result = good
    tank = [replace(s, tank_capacity=s.tank_capacity / 3) for s in sites]  # caps of one day at most
    with pytest.raises(AssertionError, match="whole-day cap"):
        check_plan(result, tank, truck)


def test_a_wrong_cost_is_caught(good):
    sites, truck, result = good
    broken = copy.deepcopy(result)
    broken.cost_per_day *= 1 + 1e-6
    with pytest.raises(AssertionError, match="cost_per_day"):
        check_plan(broken, sites, truck)


def test_a_site_twice_on_a_date_is_caught(good):
    sites, truck, result = good
    trip = result.trips[0]
    twin = NS(**{**vars(trip), "trip": max(t.trip for t in result.trips if t.day == trip.day) + 1})
    with pytest.raises(AssertionError, match="more than one stop|trips_per_day"):
        check_plan(_with_trips(result, list(result.trips) + [twin]), sites, replace(truck, trips_per_day=None))


def test_a_repeat_period_that_is_not_whole_weeks_is_caught(good):
    sites, truck, result = good
    broken = copy.deepcopy(result)
    broken.repeat_days = 8
    with pytest.raises(AssertionError, match="whole number of weeks"):
        check_plan(broken, sites, truck)


def test_an_infeasible_answer_needs_its_needed(good):
    sites, truck, _ = good
    answer = NS(status=NS(name="INFEASIBLE"), success=False, message="x", needed=None, trips=(), cost_per_day=0.0)
    with pytest.raises(AssertionError, match="needed"):
        check_plan(answer, sites, truck)
    answer.needed = {"trips_per_day": None, "remove_sites": []}
    with pytest.raises(AssertionError, match="neither"):
        check_plan(answer, sites, truck)
    answer.needed = {"trips_per_day": 3, "remove_sites": []}
    check_plan(answer, sites, truck)
