"""The capped relaxation: breakpoint scan vs a generic optimiser, and Roundy's bounds."""

import numpy as np
import pytest
from scipy.optimize import minimize

from service.planning import SiteInput, TruckInput, lower_bound, plan_joint
from service.planning.power_of_two import _power_of_two_continuous
from service.planning.relaxation import _relaxation

from .continuous_helpers import integer_optimum, power_of_two_optimised_base


def _random_instance(rng, n):
    d = rng.uniform(50, 5000, n)
    cap = np.exp(rng.uniform(np.log(1.5), np.log(40), n))
    sites = [
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
    return sites, TruckInput(float(rng.uniform(0, 400)))


def _scipy_relaxation(sites, truck):
    """``min K/T0 + Σ (k_i/T_i + H_i T_i)`` s.t. ``1 ≤ T0 ≤ T_i ≤ U_i`` by SLSQP (several starts)."""
    k = np.array([s.stop_cost for s in sites])
    H = np.array([s.holding_cost * s.demand_per_day / 2 for s in sites])
    U = np.array([s.tank_capacity * s.safe_fill / s.demand_per_day for s in sites])
    K = truck.dispatch_cost

    def f(x):
        return K / x[0] + np.sum(k / x[1:] + H * x[1:])

    def grad(x):
        return np.concatenate([[-K / x[0] ** 2], -k / x[1:] ** 2 + H])

    n = len(sites)
    cons = {"type": "ineq", "fun": lambda x: x[1:] - x[0], "jac": lambda x: np.hstack([-np.ones((n, 1)), np.eye(n)])}
    bounds = [(1.0, U.min())] + [(1.0, u) for u in U]
    best = np.inf
    for t in (1.0, np.sqrt(U.min()), U.min()):
        x0 = np.concatenate([[t], np.clip(np.sqrt(k / H), t, U)])
        res = minimize(
            f, x0, jac=grad, bounds=bounds, constraints=[cons], method="SLSQP", options={"ftol": 1e-14, "maxiter": 500}
        )
        best = min(best, f(np.clip(res.x, [b[0] for b in bounds], [b[1] for b in bounds])))
    return best


@pytest.mark.parametrize("seed", range(12))
def test_lower_bound_equals_scipy_minimize(seed):
    rng = np.random.default_rng(seed)
    sites, truck = _random_instance(rng, int(rng.integers(1, 9)))
    ours = lower_bound(sites, truck)
    theirs = _scipy_relaxation(sites, truck)
    assert ours == pytest.approx(theirs, rel=1e-6)
    assert ours <= theirs * (1 + 1e-9)


@pytest.mark.parametrize("seed", range(12))
def test_lower_bound_never_above_a_policy(seed):
    rng = np.random.default_rng(100 + seed)
    sites, truck = _random_instance(rng, int(rng.integers(1, 9)))
    bound = lower_bound(sites, truck)
    for method in ("power_of_two", "integer"):
        assert bound <= plan_joint(sites, truck, method=method).cost_per_day * (1 + 1e-12)


def test_single_site_bound_is_the_capped_eoq():
    # one site: LB = min over T in [1, U] of (K + k)/T + H T (DERIVED); C2 data gives 41.0 (docs/planning.md §2)
    site = SiteInput("depot", 1200, 0.002, 50, 20000, safe_fill=1.0)
    assert lower_bound([site], TruckInput(300)) == pytest.approx(41.0, rel=1e-12)


@pytest.mark.parametrize("seed", range(25))
def test_roundy_bounds_on_random_uncapped_instances(seed):
    # Roundy (1985), Management Science 31(11): LB ≤ exact ≤ PoT(opt) ≤ 1.0201394 LB and PoT(fixed base) ≤ 1.0606602 LB
    rng = np.random.default_rng(1000 + seed)
    n = int(rng.integers(1, 6))
    K = float(np.exp(rng.uniform(-2, 5)))
    k = np.exp(rng.uniform(-2, 5, n))
    H = np.exp(rng.uniform(-3, 3, n))
    lb = _relaxation(K, k, H, np.full(n, np.inf), 0.0).value
    fixed = _power_of_two_continuous(K, k, H, float(np.exp(rng.uniform(-1, 1))))[0]
    optimised = power_of_two_optimised_base(K, k, H, grid=400)
    exact = integer_optimum(K, k, H, m_cap=40)[0]
    assert lb <= exact * (1 + 1e-12)
    assert exact <= optimised * (1 + 1e-9)
    assert optimised <= fixed * (1 + 1e-9)
    assert optimised <= 1.0201394 * lb
    assert fixed <= 1.0606602 * lb


def test_fixed_base_bound_is_tight():
    # Roundy (1985) fixed-base bound (√2 + 1/√2)/2: one item with T*/T_L on a √2 boundary reaches 1.06066 (DERIVED)
    K, k, H = 0.0, np.array([2.0]), np.array([1.0])  # T* = √2
    cost = _power_of_two_continuous(K, k, H, 1.0)[0]
    assert cost / (2 * np.sqrt(2.0)) == pytest.approx(1.0606601717798212, rel=1e-12)


@pytest.mark.parametrize(
    "t_star, chosen, ratio",
    # single-item rounding on base 1, cost ratio (x + 1/x)/2 for x = T/T* (EOQ sensitivity; DERIVED)
    [
        (1.0, 1, 1.0),
        (1.2, 1, 1.016667),
        (np.sqrt(2) * (1 - 1e-12), 1, 1.060660),
        (1.5, 2, 1.041667),
        (2.0, 2, 1.0),
        (2.9, 4, 1.052155),
    ],
)
def test_single_item_rounding_table(t_star, chosen, ratio):
    k, H = np.array([t_star**2]), np.array([1.0])
    cost, cycles = _power_of_two_continuous(0.0, k, H, 1.0)
    assert cycles.tolist() == [chosen]
    assert cost / (2 * t_star) == pytest.approx(ratio, abs=5e-7)
