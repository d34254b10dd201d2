"""Staggering checks S1–S6 (derived in docs/planning.md §8) and extra trips when no offsets fit."""

import itertools

import numpy as np
import pytest

from service.planning import SiteInput, TruckInput, plan_joint
from service.planning.staggering import site_weights, stagger


def _per_trip(multiples, residues, values, trips):
    """``Σ_i values_i [t ≡ r_i mod m_i]`` for base trips ``t = 0 … trips - 1``."""
    t = np.arange(trips)
    return sum(np.where(t % m == r, v, 0.0) for m, r, v in zip(multiples, residues, values, strict=True))


def _loads(m, Q):
    m, Q = np.asarray(m), np.asarray(Q, float)
    r = stagger(m, site_weights(Q, np.inf, None))
    return r, _per_trip(m, r, Q, int(np.lcm.reduce(m)))


def _best_peak(m, Q):
    m, Q = np.asarray(m), np.asarray(Q, float)
    return min(
        _per_trip(m, np.array(r), Q, int(np.lcm.reduce(m))).max() for r in itertools.product(*[range(x) for x in m])
    )


def test_s1_s3_coprime_multiples_always_coincide():
    # S3: J2 (SPP) m = [1,1,4,3], Q = [6550.9126, 952.1675, 426.5711, 685.5606]: best peak = unstaggered 8615.2118 (DERIVED, CRT)
    m, Q = [1, 1, 4, 3], [6550.9126, 952.1675, 426.5711, 685.5606]
    _, loads = _loads(m, Q)
    assert loads.max() == pytest.approx(8615.2118, abs=1e-9)
    assert _best_peak(m, Q) == pytest.approx(8615.2118, abs=1e-9)
    # S1: average trip load A = Σ Q_i / m_i
    assert loads.mean() == pytest.approx(sum(q / x for q, x in zip(Q, m, strict=True)), rel=1e-12)


def test_s4_nested_example_reaches_the_best_staggered_peak():
    # S4: J6 m = [1,2,4,1,2], Q = [704.6088, 295.4811, 181.8345, 500.0449, 409.1277] (DERIVED, brute force):
    # unstaggered 2091.0969, best staggered 1681.9693 with loads [1681.9693, 1613.7813, 1500.1348, 1613.7813]
    m, Q = [1, 2, 4, 1, 2], [704.6088, 295.4811, 181.8345, 500.0449, 409.1277]
    _, loads = _loads(m, Q)
    assert sum(Q) == pytest.approx(2091.0969, abs=5e-4)  # Q printed to 4 dp
    assert loads.max() == pytest.approx(1681.9693, abs=1e-9)
    assert sorted(loads) == pytest.approx(sorted([1681.9693, 1613.7813, 1500.1348, 1613.7813]), abs=5e-4)
    assert _best_peak(m, Q) == pytest.approx(1681.9693, abs=1e-9)
    # S1/S2: A = 1602.4167 bounds every peak from below (J6: A = T Σ d)
    assert loads.mean() == pytest.approx(1602.4167, abs=1e-4)


@pytest.mark.parametrize("Q, best", [([3, 1, 1, 1], 3), ([2, 2, 1, 1], 3)])
def test_s5_equal_multiples(Q, best):
    # S5: M = 2 equal cycles is PARTITION; these two have optimum 3 (DERIVED)
    _, loads = _loads([2] * len(Q), Q)
    assert loads.max() == best == _best_peak([2] * len(Q), Q)


@pytest.mark.parametrize("seed", range(40))
def test_s6_greedy_bound_on_nested_multiples(seed):
    # S6 (DERIVED, not published): nested greedy peak ≤ A + max Q_i ≤ 2 OPT; S2: OPT ≥ max(A, max Q_i)
    rng = np.random.default_rng(seed)
    n = int(rng.integers(2, 7))
    m = 2 ** rng.integers(0, 3, n)
    m[0] = 1
    Q = rng.uniform(1, 100, n)
    _, loads = _loads(m, Q)
    A = float((Q / m).sum())
    opt = _best_peak(m, Q)
    assert max(A, Q.max()) <= opt + 1e-9
    assert opt <= loads.max() + 1e-9
    assert loads.max() <= A + Q.max() + 1e-9


def _site(code, demand, usable, stop_cost=10.0, holding=0.0):
    return SiteInput(code, demand, holding, stop_cost, usable, safe_fill=1.0)


def test_staggering_avoids_extra_trips_when_offsets_fit():
    # A is daily; B and C every 2 days. On the same day they would need 700 > 500; staggered each day carries 400.
    sites = [_site("A", 100, 100), _site("B", 150, 300), _site("C", 150, 300)]
    result = plan_joint(sites, TruckInput(50.0, capacity=500.0), method="integer")
    assert [s.cycle_days for s in result.sites] == [1, 2, 2]
    assert {s.offset_days for s in result.sites[1:]} == {0, 1}
    assert result.trips_per_repeat == result.repeat_days == 2
    assert result.peak_load == pytest.approx(400.0)
    assert result.cost_breakdown["dispatch"] == pytest.approx(50.0)


def test_every_trip_is_counted_when_nothing_fits():
    # three daily 600-unit deliveries, truck of 1000: no two share a trip, so 3 trips a day
    sites = [_site(c, 600, 600) for c in "ABC"]
    truck = TruckInput(80.0, capacity=1000.0)
    result = plan_joint(sites, truck)
    assert result.repeat_days == 1 and result.trips_per_repeat == 3
    assert [len(t.stops) for t in result.trips] == [1, 1, 1] and [t.trip for t in result.trips] == [1, 2, 3]
    assert all(t.day == 0 for t in result.trips)
    assert result.cost_breakdown["dispatch"] == pytest.approx(3 * 80.0)
    assert result.cost_per_day == pytest.approx(240.0 + 30.0)
    assert result.peak_load == pytest.approx(600.0)


def test_max_stops_respected_per_trip():
    sites = [_site(f"s{i}", 100, 100) for i in range(5)]
    result = plan_joint(sites, TruckInput(80.0, max_stops=2))
    assert sorted(len(t.stops) for t in result.trips) == [1, 2, 2]
    assert result.trips_per_repeat == 3
    assert sorted(s.code for t in result.trips for s in t.stops) == [f"s{i}" for i in range(5)]


def test_snake_split_of_an_over_full_day():
    # loads 700, 400, 300, 200 into trips of 1000: at least 2 trips; dealt heaviest first in snake order
    # (trip 1, 2, 2, 1) this gives {700, 200} and {400, 300}; stops listed in input order
    sites = [_site("a", 400, 400), _site("b", 700, 700), _site("c", 200, 200), _site("d", 300, 300)]
    result = plan_joint(sites, TruckInput(10.0, capacity=1000.0))
    assert [[s.code for s in t.stops] for t in result.trips] == [["b", "c"], ["a", "d"]]
    assert [t.load for t in result.trips] == [900.0, 700.0]


def test_unlimited_truck_still_levels_loads():
    sites = [_site("A", 100, 100)] + [_site(f"B{i}", 100, 400, stop_cost=500.0) for i in range(4)]
    result = plan_joint(sites, TruckInput(10.0), method="integer")
    assert [s.cycle_days for s in result.sites] == [1, 4, 4, 4, 4]
    assert sorted(s.offset_days for s in result.sites[1:]) == [0, 1, 2, 3]
    assert result.peak_load == pytest.approx(500.0)
