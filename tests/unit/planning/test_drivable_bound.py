"""The drivable lower bound: reference formula, exhaustive search, strong duality, properties."""

import itertools
import math
import os

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy.optimize import minimize

from service.planning.drivable_bound import drivable_lower_bound, whole_day_caps
from service.planning.inputs import SiteInput, TruckInput, validate
from service.planning.relaxation import _relaxation, relaxation_of

from .drivable_bruteforce import cheapest_plan

SETTINGS = settings(max_examples=int(os.environ.get("PLANNING_EXAMPLES", "40")), deadline=None)
MON_FRI = range(5)


def _sites(rng, n, max_days=40.0):
    d = rng.uniform(50, 5000, n)
    cap = np.exp(rng.uniform(np.log(1.5), np.log(max_days), n))
    return [
        SiteInput(
            f"s{i}",
            float(d[i]),
            float(rng.uniform(1e-4, 5e-3)),
            float(rng.uniform(0, 60)),
            float(d[i] * cap[i]),
            safe_fill=1.0,
        )
        for i in range(n)
    ]


def _random_truck(rng, sites, capacity=True, stops=True):
    D = sum(s.demand_per_day for s in sites)
    W = float(rng.uniform(1.0, 3.0) * max(D, max(s.demand_per_day for s in sites) * 1.5)) if capacity else None
    return TruckInput(float(rng.uniform(10, 400)), capacity=W, max_stops=int(rng.integers(1, 4)) if stops else None)


def _arrays(sites, truck):
    K = truck.dispatch_cost
    k = np.array([s.stop_cost for s in sites])
    H = np.array([s.holding_cost * s.demand_per_day / 2 for s in sites])
    d = np.array([s.demand_per_day for s in sites])
    tank_days = np.array([(s.tank_capacity * s.safe_fill - s.safety_stock) / s.demand_per_day for s in sites])
    return K, k, H, d, tank_days


# --- no limits: today's bound ------------------------------------------------------------------


@pytest.mark.parametrize("seed", range(8))
def test_without_limits_it_is_todays_bound_on_whole_day_caps(seed):
    rng = np.random.default_rng(seed)
    sites = _sites(rng, int(rng.integers(1, 30)))
    problem = validate(sites, TruckInput(float(rng.uniform(0, 400))))
    result = drivable_lower_bound(problem)
    K, k, H = problem.dispatch_cost, problem.stop_cost, problem.H
    assert result.weights == (1.0, 0.0, 0.0)
    assert result.value == pytest.approx(_relaxation(K, k, H, np.floor(problem.cap_days), 1.0).value, rel=1e-12)
    assert result.value >= relaxation_of(problem).value * (1 - 1e-12)
    assert sum(result.parts.values()) == pytest.approx(result.value, rel=1e-12)


def test_without_limits_and_whole_day_tanks_it_equals_todays_bound():
    rng = np.random.default_rng(7)
    d = rng.uniform(50, 5000, 12)
    sites = [
        SiteInput(f"s{i}", float(d[i]), float(rng.uniform(1e-4, 5e-3)), float(rng.uniform(0, 60)), float(d[i] * u), 1.0)
        for i, u in enumerate(rng.integers(1, 30, 12))
    ]
    problem = validate(sites, TruckInput(150.0))
    assert drivable_lower_bound(problem).value == pytest.approx(relaxation_of(problem).value, rel=1e-12)


# --- at least the reference formula at the three vertices ---------------------------------------


def _reference_vertex_bounds(sites, truck, grid=3000):
    """The reference bound ``LB`` at ``α = 1``, ``β = 1``, ``γ = 1`` (docs/planning.md, "The plain
    bound"), with its own caps ``min(⌊tank / d⌋, W / d)`` and its inner minimum taken
    by brute force on a fine geometric grid of ``T0`` and of each ``T_i`` (an upper estimate of the
    true minimum, close to it)."""
    K, k, H, d, tank_days = _arrays(sites, truck)
    W = truck.capacity if truck.capacity is not None else math.inf
    S = truck.max_stops
    caps = np.minimum(np.floor(tank_days + 1e-9), W / d)
    values = []
    for alpha, beta, gamma in ((1, 0, 0), (0, 1, 0), (0, 0, 1)):
        if (beta and not math.isfinite(W)) or (gamma and S is None):
            continue
        per_stop = K * gamma / S if S else 0.0
        T = np.unique(np.concatenate([np.geomspace(1.0, caps.max(), grid), caps]))
        site_cost = (k[:, None] + per_stop) / T[None, :] + H[:, None] * T[None, :]
        site_cost[T[None, :] > caps[:, None]] = np.inf
        # best T_i >= T0 for every T0 on the grid: suffix minimum
        best_from = np.minimum.accumulate(site_cost[:, ::-1], axis=1)[:, ::-1]
        inner = K * alpha / T + best_from.sum(axis=0)
        inner[T > caps.min()] = np.inf
        values.append(K * beta * float(d.sum()) / W + float(inner.min()))
    return values


@pytest.mark.parametrize("seed", range(10))
def test_never_below_the_reference_vertices(seed):
    rng = np.random.default_rng(100 + seed)
    sites = _sites(rng, int(rng.integers(1, 4)))
    truck = _random_truck(rng, sites, capacity=bool(seed % 3), stops=seed % 3 != 1)
    bound = drivable_lower_bound(validate(sites, truck)).value
    for vertex in _reference_vertex_bounds(sites, truck):
        # grid minimum is above the true vertex value by at most ~1e-5 relative (grid step 0.1 %)
        assert bound >= vertex * (1 - 1e-5)


# --- valid: at most the exact optimum found by exhaustive search --------------------------------


def _small_instance(rng, n, shortest=1):
    """At most 3 sites whose tanks last ``shortest`` to ``shortest + 3`` whole days."""
    d = rng.uniform(100, 1000, n)
    u = rng.integers(shortest, shortest + 4, n)
    sites = [
        SiteInput(
            f"s{i}",
            float(d[i]),
            float(rng.uniform(0.01, 0.2)),
            float(rng.uniform(0, 80)),
            float(d[i] * (u[i] + rng.uniform(0, 0.99))),
            safe_fill=1.0,
        )
        for i in range(n)
    ]
    W = float(rng.uniform(1.0, 2.5) * d.max() * u.max()) if rng.random() < 0.8 else None
    S = int(rng.integers(1, n + 1)) if rng.random() < 0.7 else None
    return sites, TruckInput(float(rng.uniform(20, 400)), capacity=W, max_stops=S)


def _exact(sites, truck, periods, weekdays=range(7), trips_per_day=None):
    K, k, H, d, tank_days = _arrays(sites, truck)
    caps = [int(math.floor(u + 1e-9)) for u in tank_days]
    W = truck.capacity if truck.capacity is not None else math.inf
    return cheapest_plan(
        K, k, H, d, caps, periods, weekdays, capacity=W, max_stops=truck.max_stops, trips_per_day=trips_per_day
    )


def test_exhaustive_search_single_site_is_the_whole_day_eoq():
    # one site, no limits: the best plan delivers every T days, cost (K + k)/T + H T
    # (Harris 1913 economic order quantity, restricted to whole days and T ≤ 4 here)
    sites = [SiteInput("a", 100.0, 0.1, 20.0, 450.0, safe_fill=1.0)]
    truck = TruckInput(60.0)
    expected = min((60.0 + 20.0) / T + 5.0 * T for T in range(1, 5))
    assert _exact(sites, truck, range(1, 13)) == pytest.approx(expected, rel=1e-12)


def test_exhaustive_search_agrees_with_listing_every_day_subset():
    # independent cross-check of the state-graph search: list every subset of delivery days of a
    # period of 6 days for two sites and every split of a day's stops into trips
    rng = np.random.default_rng(3)
    sites, truck = _small_instance(rng, 2)
    truck = TruckInput(truck.dispatch_cost, capacity=float(sites[0].demand_per_day * 3.1), max_stops=1)
    K, k, H, d, tank_days = _arrays(sites, truck)
    caps = np.floor(tank_days + 1e-9)
    R = 6
    best = math.inf
    patterns = []
    for i in range(2):
        options = []
        for r in range(1, R + 1):
            for days in itertools.combinations(range(R), r):
                gaps = np.diff(list(days) + [days[0] + R])
                if gaps.max() <= caps[i]:
                    options.append(dict(zip(days, gaps, strict=True)))
        patterns.append(options)
    for gap_a, gap_b in itertools.product(*patterns):
        cost = sum(k[0] + H[0] * g * g for g in gap_a.values()) + sum(k[1] + H[1] * g * g for g in gap_b.values())
        for t in range(R):
            loads = [d[0] * gap_a[t]] if t in gap_a else []
            loads += [d[1] * gap_b[t]] if t in gap_b else []
            if any(q > truck.capacity for q in loads):
                cost = math.inf
            cost += K * len(loads)  # one stop per trip
        best = min(best, cost / R)
    assert _exact(sites, truck, [R]) == pytest.approx(best, rel=1e-12)


@pytest.mark.parametrize("seed", range(12))
def test_valid_against_exhaustive_search_seven_days(seed):
    rng = np.random.default_rng(200 + seed)
    sites, truck = _small_instance(rng, int(rng.integers(1, 4)))
    bound = drivable_lower_bound(validate(sites, truck)).value
    exact = _exact(sites, truck, range(1, 13))
    assert bound <= exact * (1 + 1e-9)


@pytest.mark.parametrize("seed", range(8))
def test_valid_against_exhaustive_search_monday_to_friday(seed):
    rng = np.random.default_rng(300 + seed)
    # tanks last at least 3 days (Friday to Monday) and every load fits: a Monday–Friday plan exists
    sites, truck = _small_instance(rng, int(rng.integers(1, 4)), shortest=3)
    if truck.capacity is not None:
        truck = TruckInput(
            truck.dispatch_cost, max(truck.capacity, 3 * max(s.tank_capacity for s in sites)), truck.max_stops
        )
    bound = drivable_lower_bound(validate(sites, truck), working_days=(1, 2, 3, 4, 5)).value
    exact = _exact(sites, truck, [7, 14], MON_FRI)
    assert math.isfinite(exact)
    assert bound <= exact * (1 + 1e-9)


@st.composite
def small_problems(draw):
    n = draw(st.integers(1, 3))
    d = [draw(st.floats(50, 1000)) for _ in range(n)]
    sites = [
        SiteInput(
            f"s{i}",
            d[i],
            draw(st.floats(0, 0.3)),
            draw(st.floats(0, 100)),
            d[i] * draw(st.floats(1.0, 4.99)),
            safe_fill=1.0,
        )
        for i in range(n)
    ]
    W = draw(st.none() | st.floats(1.0, 6.0).map(lambda x: x * max(d)))
    truck = TruckInput(draw(st.floats(0, 500)), capacity=W, max_stops=draw(st.none() | st.integers(1, 3)))
    return sites, truck


@SETTINGS
@given(small_problems())
def test_property_bound_at_most_exhaustive_optimum(problem):
    sites, truck = problem
    bound = drivable_lower_bound(validate(sites, truck)).value
    assert bound <= _exact(sites, truck, range(1, 13)) * (1 + 1e-9)
    if truck.capacity is None and truck.max_stops is None:
        assert bound >= relaxation_of(validate(sites, truck)).value * (1 - 1e-12)


# --- strong duality: the maximum over weights is the primal convex minimum ----------------------


def _primal(problem, room=None):
    """``min K max(1/T0, D/W, Σ 1/(S T_i)) + Σ (k_i/T_i + H_i T_i)`` over ``1 ≤ T0 ≤ T_i ≤ u_i`` (and
    ``Σ 1/T_i ≤ room`` when given) by SLSQP with an epigraph variable ``t`` (several starts; the
    smallest value found)."""
    K, k, H = problem.dispatch_cost, problem.stop_cost, problem.H
    u = whole_day_caps(problem)
    S = problem.max_stops
    load = float(problem.demand.sum()) / problem.capacity

    def f(x):
        return K * x[0] + np.sum(k / x[2:] + H * x[2:])

    def grad(x):
        return np.concatenate([[K, 0.0], -k / x[2:] ** 2 + H])

    cons = [
        {"type": "ineq", "fun": lambda x: x[2:] - x[1]},
        {"type": "ineq", "fun": lambda x: np.array([x[0] - 1.0 / x[1], x[0] - load])},
    ]
    if S is not None:
        cons.append({"type": "ineq", "fun": lambda x: np.array([x[0] - np.sum(1.0 / x[2:]) / S])})
    if room is not None:
        cons.append({"type": "ineq", "fun": lambda x: np.array([room - np.sum(1.0 / x[2:])])})
    bounds = [(0.0, None), (1.0, u.min())] + [(1.0, c) for c in u]
    best = math.inf
    for t0, longest in itertools.product((1.0, np.sqrt(u.min()), u.min()), (False, True)):
        T = u.copy() if longest else np.clip(np.sqrt(np.where(H > 0, k / np.where(H > 0, H, 1), np.inf)), t0, u)
        x0 = np.concatenate([[max(1.0 / t0, load, np.sum(1 / T) / (S or np.inf)) + 1e-3, t0], T])
        res = minimize(
            f, x0, jac=grad, bounds=bounds, constraints=cons, method="SLSQP", options={"ftol": 1e-15, "maxiter": 1000}
        )
        x = res.x
        x[1:] = np.clip(x[1:], 1.0, np.concatenate([[u.min()], u]))
        x[2:] = np.maximum(x[2:], x[1])
        t = max(1.0 / x[1], load, np.sum(1.0 / x[2:]) / S if S else 0.0)
        if room is not None and np.sum(1.0 / x[2:]) > room * (1 + 1e-9):
            continue
        best = min(best, K * t + float(np.sum(k / x[2:] + H * x[2:])))
    return best


@pytest.mark.parametrize("seed", range(12))
def test_strong_duality_with_a_direct_convex_solve(seed):
    # Lagrangian duality for convex programs (Boyd & Vandenberghe 2004, §5.2-5.3): the constraints
    # t ≥ 1/T0, t ≥ D/W, t ≥ Σ 1/(S T_i) are convex and strictly feasible (Slater), so the best weights
    # close the gap to the primal minimum.
    rng = np.random.default_rng(400 + seed)
    sites = _sites(rng, int(rng.integers(1, 12)))
    truck = _random_truck(rng, sites, capacity=seed % 4 != 1, stops=seed % 4 != 2)
    problem = validate(sites, truck)
    reference = drivable_lower_bound(problem, gap_patterns=False)
    assert reference.value == pytest.approx(_primal(problem), rel=1e-6)
    assert drivable_lower_bound(problem).value >= reference.value * (1 - 1e-12)


# --- the stop room: at most trips_per_day × max_stops stops a day -----------------------------------


@pytest.mark.parametrize("seed", range(10))
def test_stop_room_valid_against_exhaustive_search(seed):
    # one trip a day of at most S stops: exhaustive search with trips_per_day = 1
    rng = np.random.default_rng(800 + seed)
    sites, truck = _small_instance(rng, 3)
    truck = TruckInput(truck.dispatch_cost, truck.capacity, int(rng.integers(1, 3)))
    problem = validate(sites, truck)
    bound = drivable_lower_bound(problem, trips_per_day=1)
    exact = _exact(sites, truck, range(1, 13), trips_per_day=1)
    assert bound.value <= exact * (1 + 1e-9)
    assert bound.value >= drivable_lower_bound(problem).value * (1 - 1e-12)
    if math.isinf(bound.value):
        assert math.isinf(exact)


def test_stop_room_binds_and_is_exact_here():
    # three sites that each want a delivery every day, one trip a day of 2 stops: at most 2 stops a day,
    # so the three cannot all be served daily (hand-built case; the optimum by exhaustive search)
    sites = [SiteInput(f"s{i}", 100.0, 0.5, 1.0, 100.0 * 3.5, 1.0) for i in range(3)]
    truck = TruckInput(10.0, capacity=None, max_stops=2)
    problem = validate(sites, truck)
    free = drivable_lower_bound(problem)
    roomy = drivable_lower_bound(problem, trips_per_day=1)
    exact = _exact(sites, truck, range(1, 13), trips_per_day=1)
    assert roomy.stop_price > 0
    assert free.value < roomy.value <= exact * (1 + 1e-9)
    assert roomy.value == pytest.approx(exact, rel=1e-9)  # gaps of 1 and 2 days, two stops a day


def test_no_room_for_the_stops_is_infinite():
    # every tank lasts one day, four sites, one trip a day of 3 stops: 4 stops a day do not fit
    sites = [SiteInput(f"s{i}", 100.0, 0.1, 1.0, 150.0, 1.0) for i in range(4)]
    truck = TruckInput(10.0, max_stops=3)
    assert drivable_lower_bound(validate(sites, truck), trips_per_day=1).value == math.inf
    assert _exact(sites, truck, range(1, 8), trips_per_day=1) == math.inf
    # two sites of 100 a day on a truck of 150 with one trip a day: 200 a day does not fit
    sites, truck = sites[:2], TruckInput(10.0, capacity=150.0)
    assert drivable_lower_bound(validate(sites, truck), trips_per_day=1).value == math.inf
    assert _exact(sites, truck, range(1, 8), trips_per_day=1) == math.inf
    assert math.isfinite(drivable_lower_bound(validate(sites, truck), trips_per_day=2).value)


@pytest.mark.parametrize("seed", range(8))
def test_stop_room_strong_duality_with_a_direct_convex_solve(seed):
    # Lagrangian duality for convex programs (Boyd & Vandenberghe 2004, §5.2-5.3), with the room
    # Σ 1/T_i ≤ τ S as one more convex constraint
    rng = np.random.default_rng(900 + seed)
    sites = _sites(rng, int(rng.integers(2, 12)))
    truck = _random_truck(rng, sites, capacity=seed % 2 == 0, stops=True)
    problem = validate(sites, truck)
    need = float(np.sum(1.0 / whole_day_caps(problem)))
    trips = max(1, int(np.ceil(need * float(rng.uniform(1.0, 2.0)) / truck.max_stops)))
    bound = drivable_lower_bound(problem, trips_per_day=trips, gap_patterns=False)
    assert bound.value == pytest.approx(_primal(problem, room=trips * truck.max_stops), rel=1e-6)
