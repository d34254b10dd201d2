"""The drivable bound with a weekly calendar: the weekday-gap lemma, exhaustive search, duality."""

import copy
import dataclasses
import itertools
import math
import os

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy.optimize import minimize

from service.planning.drivable_bound import (
    CYCLE_DAYS,
    _pieces,
    _psi,
    drivable_lower_bound,
    weekday_gap_lines,
    whole_day_caps,
    whole_day_gap_lines,
)
from service.planning.inputs import SiteInput, TruckInput, validate

from .test_drivable_bound import _exact, _sites, _small_instance

CALENDARS = [(1, 2, 3, 4, 5), (1, 3, 5), (2, 3, 4, 5, 6), (1, 2, 3, 4, 5, 6), (1, 4)]


def _longest_closed(weekdays):
    """Longest gap between consecutive working weekdays (ISO numbers), wrapping the week."""
    days = sorted(weekdays)
    return max((b - a) % 7 or 7 for a, b in zip(days, days[1:] + days[:1], strict=True))


# --- the lemma: Σ g² / R ≥ ψ(n / R) for every pattern of any number of weeks --------------------


def _least_squares_by_count(weekdays, cap, R):
    """Least ``Σ g²`` over every set of ``n`` working days of an ``R``-day cycle with cyclic gaps ``≤ cap``,
    for each ``n`` (``inf`` when none): exhaustive by dynamic programming over the next delivery day, from
    every first delivery in the first week (a shift by whole weeks keeps the weekdays)."""
    best = np.full(R + 1, np.inf)
    for first in [t for t in range(7) if t % 7 in weekdays]:
        # path[t][c]: least Σ g² from `first` to a delivery on day t with c deliveries so far
        path = np.full((first + R, R + 1), np.inf)
        path[first, 1] = 0.0
        for t in range(first, first + R):
            if t % 7 not in weekdays:
                continue
            for g in range(1, cap + 1):
                nxt = t + g
                if nxt < first + R and nxt % 7 in weekdays:
                    path[nxt, 1:] = np.minimum(path[nxt, 1:], path[t, :-1] + g * g)
                elif nxt == first + R:  # closes the cycle
                    best = np.minimum(best, path[t] + g * g)
    return best


@pytest.mark.parametrize("calendar", [(1, 2, 3, 4, 5), (1, 3, 5), (2, 3, 4, 5, 6)])
def test_least_squares_search_matches_listing_every_subset(calendar):
    # the dynamic programme above against listing every subset of working days (periods of 1 and 2 weeks)
    weekdays = tuple(day - 1 for day in calendar)
    for cap, R in itertools.product((3, 4, 6), (7, 14)):
        listed = np.full(R + 1, np.inf)
        open_days = [t for t in range(R) if t % 7 in weekdays]
        for n in range(1, len(open_days) + 1):
            for days in itertools.combinations(open_days, n):
                gaps = np.diff(np.array(days + (days[0] + R,)))
                if gaps.max() <= cap:
                    listed[n] = min(listed[n], float(np.sum(gaps**2)))
        assert np.array_equal(listed, _least_squares_by_count(weekdays, cap, R))


@pytest.mark.parametrize("calendar", CALENDARS)
@pytest.mark.parametrize("cap", [3, 4, 6, 9])
def test_every_multi_week_pattern_is_above_the_weekday_lines(calendar, cap):
    # exhaustive over every set of working days in a period of 1 to 4 weeks whose cyclic gaps are ≤ cap
    weekdays = tuple(day - 1 for day in calendar)
    lines = weekday_gap_lines(weekdays, cap)
    if cap < _longest_closed(calendar):
        assert lines is None
        assert all(np.isinf(_least_squares_by_count(weekdays, cap, 7 * w)).all() for w in (1, 2, 3, 4))
        return
    tightest = math.inf
    for R in (7, 14, 21, 28):
        least = _least_squares_by_count(weekdays, cap, R)
        n = np.flatnonzero(np.isfinite(least))
        assert len(n) > 0
        assert n.min() / R >= lines.lowest * (1 - 1e-12)
        lower = _psi(lines, n / R)
        assert np.all(least[n] / R >= lower * (1 - 1e-12))
        tightest = min(tightest, float(np.min(least[n] / R - lower)))
    assert tightest == pytest.approx(0.0, abs=1e-9)  # the lines touch a real pattern


def test_weekday_lines_hand_values():
    # Monday–Friday, cap 3 (Friday to Monday is 3 days): every working day gives gaps 1,1,1,1,3,
    # Σ g² / R = 13/7; weekly (one gap of 7) gives 7 = 1/f; worked by hand
    lines = weekday_gap_lines((0, 1, 2, 3, 4), 3)
    assert float(_psi(lines, np.array([5 / 7]))[0]) == pytest.approx(13 / 7, rel=1e-12)
    # three a week, Mon/Wed/Fri: gaps 2, 2, 3 → 17/7, the least with 3 a week (by hand)
    assert float(_psi(lines, np.array([3 / 7]))[0]) == pytest.approx(17 / 7, rel=1e-12)
    assert float(_psi(weekday_gap_lines((0, 1, 2, 3, 4), 7), np.array([1 / 7]))[0]) == pytest.approx(7.0)
    # Monday–Friday cannot serve a tank of 2 days (Friday to Monday is 3)
    assert weekday_gap_lines((0, 1, 2, 3, 4), 2) is None


@pytest.mark.parametrize("calendar", CALENDARS)
def test_pieces_are_the_weekday_bound(calendar):
    # the piecewise form the scan uses (P + Q f + B/f between edges) equals max(1/f, lines) everywhere
    weekdays = tuple(day - 1 for day in calendar)
    top = len(weekdays) / 7
    for cap in range(_longest_closed(calendar), CYCLE_DAYS + 1, 3):
        lines = weekday_gap_lines(weekdays, cap)
        edges, P, Q, B = _pieces(lines, top)
        f = np.linspace(1e-3, top, 5001)
        piece = np.clip(np.searchsorted(edges, f, side="right") - 1, 0, len(P) - 1)
        assert edges[0] == 0.0 and edges[-1] == top and np.all(np.diff(edges) > 0)
        np.testing.assert_allclose(P[piece] + Q[piece] * f + B[piece] / f, _psi(lines, f), rtol=1e-12)


# --- the bound: valid against exhaustive search, tight for one site, above the plain bound ------


def _calendar_instance(rng, calendar):
    sites, truck = _small_instance(rng, int(rng.integers(1, 4)), shortest=_longest_closed(calendar))
    if truck.capacity is not None:
        truck = TruckInput(
            truck.dispatch_cost, max(truck.capacity, 3 * max(s.tank_capacity for s in sites)), truck.max_stops
        )
    return sites, truck


@pytest.mark.parametrize("seed", range(12))
def test_calendar_bound_valid_against_exhaustive_search(seed):
    rng = np.random.default_rng(500 + seed)
    calendar = CALENDARS[seed % len(CALENDARS)]
    sites, truck = _calendar_instance(rng, calendar)
    problem = validate(sites, truck)
    bound = drivable_lower_bound(problem, working_days=calendar).value
    exact = _exact(sites, truck, [7, 14], [day - 1 for day in calendar])
    assert math.isfinite(exact)
    assert bound <= exact * (1 + 1e-9)
    assert bound >= drivable_lower_bound(problem).value * (1 - 1e-12)


@pytest.mark.parametrize("seed", range(6))
def test_calendar_bound_is_exact_for_one_site(seed):
    # one site, no load or stop limit: the bound minimises (K + k) f + H ψ(f), attained at a corner of
    # ψ, which is a real weekday cycle (≤ 5 gaps of ≤ 5 days: ≤ 25 days), so it equals the optimum of
    # the exhaustive search over 1–4 weeks
    rng = np.random.default_rng(600 + seed)
    d = float(rng.uniform(100, 1000))
    site = SiteInput(
        "a", d, float(rng.uniform(0.01, 0.3)), float(rng.uniform(0, 80)), d * float(rng.uniform(3, 5.9)), 1.0
    )
    truck = TruckInput(float(rng.uniform(10, 400)))
    bound = drivable_lower_bound(validate([site], truck), working_days=(1, 2, 3, 4, 5)).value
    assert bound == pytest.approx(_exact([site], truck, [7, 14, 21, 28], range(5)), rel=1e-9)


def test_calendar_infeasible_is_infinite():
    # a tank of 2 days cannot last Friday to Monday
    site = SiteInput("a", 100.0, 0.01, 10.0, 250.0, 1.0)
    result = drivable_lower_bound(validate([site], TruckInput(50.0)), working_days=(1, 2, 3, 4, 5))
    assert result.value == math.inf
    assert _exact([site], TruckInput(50.0), [7, 14], range(5)) == math.inf


def test_seven_working_days_is_the_plain_bound():
    rng = np.random.default_rng(9)
    sites = _sites(rng, 10)
    problem = validate(sites, TruckInput(200.0, capacity=30000.0, max_stops=4))
    assert drivable_lower_bound(problem, (7, 1, 2, 3, 4, 5, 6)) == drivable_lower_bound(problem)


def test_calendar_is_read_from_the_problem_when_not_given():
    # a problem that carries working_days (the planner's Problem) gets the calendar bound by default
    rng = np.random.default_rng(11)
    sites = [
        SiteInput(s.code, s.demand_per_day, s.holding_cost, s.stop_cost, s.tank_capacity * 4, 1.0)
        for s in _sites(rng, 6)
    ]
    problem = validate(sites, TruckInput(120.0, capacity=40000.0, max_stops=3))
    monday_to_friday = drivable_lower_bound(problem, working_days=(1, 2, 3, 4, 5))
    assert monday_to_friday.value > drivable_lower_bound(problem).value
    if "working_days" in {field.name for field in dataclasses.fields(problem)}:
        calendar_problem = dataclasses.replace(problem, working_days=(1, 2, 3, 4, 5))
    else:  # a Problem without the calendar field yet: the same arrays with the attribute added
        calendar_problem = copy.copy(problem)
        object.__setattr__(calendar_problem, "working_days", (1, 2, 3, 4, 5))
    assert drivable_lower_bound(calendar_problem) == monday_to_friday


# --- strong duality with the calendar --------------------------------------------------------------


def _primal_calendar(problem, calendar, room=None):
    """``min K t + Σ (k_i f_i + H_i z_i)`` s.t. ``t ≥ f0, D/W, Σ f_i / S``; ``z_i ≥ 1/f_i`` and every
    weekday line; ``max(1/u_i, lowest_i) ≤ f_i ≤ f0 ≤ m/7`` (frequencies); SLSQP, several starts."""
    K, k, H, n = problem.dispatch_cost, problem.stop_cost, problem.H, problem.n
    u = whole_day_caps(problem)
    weekdays = tuple(day - 1 for day in calendar)
    if len(weekdays) == 7:
        lines = [whole_day_gap_lines(int(min(c, 56))) for c in u]
    else:
        lines = [weekday_gap_lines(weekdays, int(min(c, 56))) for c in u]
    low = np.array([max(1 / c, g.lowest) for c, g in zip(u, lines, strict=True)])
    top = len(calendar) / 7
    load = float(problem.demand.sum()) / problem.capacity
    S = problem.max_stops

    def split(x):
        return x[0], x[1], x[2 : 2 + n], x[2 + n :]

    def objective(x):
        t, _, f, z = split(x)
        return K * t + float(np.sum(k * f + H * z))

    def constraints(x):
        t, f0, f, z = split(x)
        rows = [[t - f0, t - load], f0 - f, z - 1 / f]
        rows += [[z[i] - p - q * f[i] for p, q in zip(lines[i].p, lines[i].q, strict=True)] for i in range(n)]
        if S is not None:
            rows.append([t - np.sum(f) / S])
        if room is not None:
            rows.append([room - np.sum(f)])
        return np.concatenate([np.atleast_1d(np.asarray(r, dtype=float)) for r in rows])

    bounds = [(0, None), (low.max(), top)] + [(x, top) for x in low] + [(0, None)] * n
    best = math.inf
    for share in (0.0, 0.5, 1.0):
        f = low + share * (top - low)
        f0 = f.max()
        z = np.array([float(_psi(lines[i], f[i : i + 1])[0]) for i in range(n)]) + 1e-6
        t = max(f0, load, np.sum(f) / S if S else 0.0) + 1e-6
        res = minimize(
            objective,
            np.concatenate([[t, f0], f, z]),
            bounds=bounds,
            constraints=[{"type": "ineq", "fun": constraints}],
            method="SLSQP",
            options={"ftol": 1e-14, "maxiter": 2000},
        )
        if constraints(res.x).min() > -1e-7:  # a feasible point (SLSQP may stop on "positive directional
            best = min(best, res.fun)  # derivative" at the optimum of this nonsmooth-looking epigraph)
    return best


@pytest.mark.parametrize("seed", range(8))
def test_calendar_strong_duality_with_a_direct_convex_solve(seed):
    # Lagrangian duality for convex programs (Boyd & Vandenberghe 2004, §5.2-5.3), as in the plain bound;
    # here with the weekday lines as extra convex constraints
    rng = np.random.default_rng(700 + seed)
    calendar = CALENDARS[seed % len(CALENDARS)]
    sites = _sites(rng, int(rng.integers(1, 7)), max_days=30.0)
    sites = [
        SiteInput(s.code, s.demand_per_day, s.holding_cost, s.stop_cost, s.tank_capacity + 6 * s.demand_per_day, 1.0)
        for s in sites
    ]
    D = sum(s.demand_per_day for s in sites)
    truck = TruckInput(
        float(rng.uniform(10, 400)),
        capacity=float(rng.uniform(1.2, 3.0) * max(D * 7 / len(calendar), 8 * max(s.demand_per_day for s in sites)))
        if seed % 3
        else None,
        max_stops=int(rng.integers(1, 4)) if seed % 3 != 1 else None,
    )
    problem = validate(sites, truck)
    assert drivable_lower_bound(problem, calendar).value == pytest.approx(_primal_calendar(problem, calendar), rel=1e-6)


@st.composite
def calendar_problems(draw):
    calendar = draw(st.sampled_from(CALENDARS))
    closed = _longest_closed(calendar)
    n = draw(st.integers(1, 3 if closed <= 3 else 2))
    d = [draw(st.floats(50, 1000)) for _ in range(n)]
    sites = [
        SiteInput(
            f"s{i}",
            d[i],
            draw(st.floats(0, 0.3)),
            draw(st.floats(0, 100)),
            d[i] * draw(st.floats(closed, closed + 2.99)),
            1.0,
        )
        for i in range(n)
    ]
    largest = max(s.tank_capacity for s in sites)
    W = draw(st.none() | st.floats(1.0, 3.0).map(lambda x: x * largest))
    truck = TruckInput(draw(st.floats(0, 500)), capacity=W, max_stops=draw(st.none() | st.integers(1, 3)))
    return calendar, sites, truck, draw(st.sampled_from([None, 1, 2]))


@settings(max_examples=int(os.environ.get("PLANNING_EXAMPLES", "25")), deadline=None)
@given(calendar_problems())
def test_property_calendar_bound_at_most_exhaustive_optimum(problem):
    calendar, sites, truck, trips = problem
    problem = validate(sites, truck)
    bound = drivable_lower_bound(problem, working_days=calendar, trips_per_day=trips).value
    exact = _exact(sites, truck, [7, 14], [day - 1 for day in calendar], trips_per_day=trips)
    assert math.isfinite(exact) or trips is not None
    assert drivable_lower_bound(problem).value * (1 - 1e-9) <= bound <= exact * (1 + 1e-9)  # 1e-9: weight search


@pytest.mark.parametrize("seed", range(8))
def test_seven_day_whole_gap_bound_strong_duality(seed):
    # seven days with a limit: the whole-day gap lines; the same duality check (Boyd & Vandenberghe
    # 2004, §5.2-5.3), with the stop room of one or two trips a day on half of the instances
    rng = np.random.default_rng(1000 + seed)
    sites = _sites(rng, int(rng.integers(1, 7)), max_days=20.0)
    D = sum(s.demand_per_day for s in sites)
    truck = TruckInput(
        float(rng.uniform(10, 400)),
        capacity=float(rng.uniform(1.2, 3.0) * max(D, 2 * max(s.demand_per_day for s in sites))) if seed % 3 else None,
        max_stops=int(rng.integers(2, 5)),
    )
    problem = validate(sites, truck)
    trips = int(rng.integers(1, 3)) if seed % 2 else None
    room = trips * truck.max_stops if trips else None
    if room is not None and float(np.sum(1 / whole_day_caps(problem))) > room:
        room, trips = None, None
    bound = drivable_lower_bound(problem, trips_per_day=trips)
    assert bound.value == pytest.approx(_primal_calendar(problem, (1, 2, 3, 4, 5, 6, 7), room=room), rel=1e-6)
    assert bound.value >= drivable_lower_bound(problem, trips_per_day=trips, gap_patterns=False).value * (1 - 1e-12)


def test_whole_day_gap_lines_hand_values():
    # gaps of 2 and 3 days alternating: mean 2.5, Σ g² / R = (4 + 9) / 5 = 2.6 (by hand), above 1/f = 2.5
    assert float(_psi(whole_day_gap_lines(10), np.array([0.4]))[0]) == pytest.approx(2.6, rel=1e-12)
    # whole days: ψ(1/T) = T exactly
    assert np.allclose(_psi(whole_day_gap_lines(10), 1 / np.arange(1.0, 11.0)), np.arange(1.0, 11.0))
