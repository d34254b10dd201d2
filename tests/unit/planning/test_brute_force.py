"""The exact whole-day methods against brute-force enumeration of all cycles (n ≤ 5)."""

import numpy as np
import pytest

from service.planning import SiteInput, Status, TruckInput, plan_joint

from .brute_force import class_costs, fixed_base, integer_multiples, powers_of_two


def _instance(seed):
    rng = np.random.default_rng(seed)
    n = int(rng.integers(1, 6))
    u_max = {1: 40, 2: 30, 3: 16, 4: 10, 5: 7}[n]
    d = rng.uniform(50, 2000, n)
    U = rng.uniform(1.0, u_max + 0.99, n)
    h = np.exp(rng.uniform(np.log(1e-4), np.log(2e-2), n))
    k = rng.uniform(0, 80, n)
    sites = [
        SiteInput(f"s{i}", float(d[i]), float(h[i]), float(k[i]), float(d[i] * U[i]), safe_fill=1.0) for i in range(n)
    ]
    K = float(rng.uniform(0, 300))
    return sites, TruckInput(K), K, k, h * d / 2, np.floor(U).astype(int)


# Whole-day brute force (DERIVED): every cycle vector; compare costs, not cycles (ties exist).
@pytest.mark.parametrize("seed", range(30))
def test_integer_method_is_exact(seed):
    sites, truck, K, k, H, u = _instance(seed)
    result = plan_joint(sites, truck, method="integer")
    assert result.cost_per_day == pytest.approx(class_costs(K, k, H, u, integer_multiples), rel=1e-12)


@pytest.mark.parametrize("seed", range(30))
def test_power_of_two_optimised_base_is_exact(seed):
    sites, truck, K, k, H, u = _instance(seed)
    result = plan_joint(sites, truck, method="power_of_two")
    assert result.cost_per_day == pytest.approx(class_costs(K, k, H, u, powers_of_two), rel=1e-12)
    assert result.base_days % 2 == 1


@pytest.mark.parametrize("seed", range(15))
@pytest.mark.parametrize("base", [1, 2, 3, 7])
def test_power_of_two_fixed_base_is_exact(seed, base):
    sites, truck, K, k, H, u = _instance(seed)
    result = plan_joint(sites, truck, method="power_of_two", base_days=base)
    if base > u.min():
        assert result.status == Status.INFEASIBLE and not result.success
        return
    assert result.cost_per_day == pytest.approx(class_costs(K, k, H, u, fixed_base(base)), rel=1e-12)
    assert all(s.cycle_days % base == 0 for s in result.sites)


@pytest.mark.parametrize("seed", range(15))
def test_best_is_the_cheaper_of_the_two(seed):
    sites, truck, *_ = _instance(seed)
    pot = plan_joint(sites, truck, method="power_of_two")
    integer = plan_joint(sites, truck, method="integer")
    best = plan_joint(sites, truck)
    assert best.cost_per_day == min(pot.cost_per_day, integer.cost_per_day)
    assert best.method == ("power_of_two" if pot.cost_per_day <= integer.cost_per_day else "integer")
    assert integer.cost_per_day <= pot.cost_per_day * (1 + 1e-12)  # nested power-of-two ⊂ integer multiples


def _larger_instance(seed):
    rng = np.random.default_rng(500 + seed)
    n = int(rng.integers(2, 30))
    d = rng.uniform(50, 2000, n)
    U = np.exp(rng.uniform(np.log(8), np.log(120), n))
    sites = [
        SiteInput(
            f"s{i}",
            float(d[i]),
            float(rng.uniform(1e-4, 3e-3)),
            float(rng.uniform(0, 200)),
            float(d[i] * U[i]),
            safe_fill=1.0,
        )
        for i in range(n)
    ]
    return sites, TruckInput(float(np.exp(rng.uniform(0, 9))))


@pytest.mark.parametrize("seed", range(10))
def test_optimised_base_search_equals_trying_every_base(seed):
    sites, truck = _larger_instance(seed)
    best = plan_joint(sites, truck, method="power_of_two")
    longest = min(int(s.tank_capacity // s.demand_per_day) for s in sites)
    every = [plan_joint(sites, truck, method="power_of_two", base_days=b).cost_per_day for b in range(1, longest + 1)]
    assert best.cost_per_day == pytest.approx(min(every), rel=1e-12)


@pytest.mark.parametrize("seed", range(10))
def test_integer_search_equals_trying_every_dispatch_interval(seed):
    from service.planning.integer_multiple import _class_cost, _multiples_for

    sites, truck = _larger_instance(seed)
    k = np.array([s.stop_cost for s in sites])
    H = np.array([s.holding_cost * s.demand_per_day / 2 for s in sites])
    u = np.array([int(s.tank_capacity // s.demand_per_day) for s in sites])
    every = [
        _class_cost(truck.dispatch_cost, k, H, float(T0), _multiples_for(k, H, float(T0), u // T0))
        for T0 in range(1, u.min() + 1)
    ]
    assert plan_joint(sites, truck, method="integer").cost_per_day == pytest.approx(min(every), rel=1e-12)
