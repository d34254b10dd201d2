"""Test-only continuous solvers built from the core's real-valued private functions."""

import math

import numpy as np
from scipy.optimize import minimize_scalar

from service.planning.integer_multiple import _class_cost, _multiples_for
from service.planning.power_of_two import _power_of_two_continuous


def integer_optimum(K, k, H, m_cap=60):
    """Exact uncapped integer-multiple optimum (min m_i = 1) over real T.

    Between the breakpoints ``sqrt(k_i / (H_i m (m + 1)))`` the core's per-T choice of
    multiples is fixed up to the site forced to 1; every such candidate ``m`` is a valid
    policy whose best T is ``sqrt(A / B)`` with cost ``2 sqrt(A B)``
    (the JRP cost of docs/planning.md §3, DERIVED).

    Returns
    -------
    tuple
        ``(cost, T, m)``.
    """
    mm = np.arange(1, m_cap + 1)
    breaks = np.sort(np.sqrt(k[:, None] / (H[:, None] * mm * (mm + 1))).ravel())
    probes = np.concatenate([breaks * (1 - 1e-9), breaks * (1 + 1e-9), [breaks[-1] * 2, breaks[0] / 2]])
    best = (math.inf, None, None)
    for T in probes:
        m = _multiples_for(k, H, float(T), m_cap)
        for j in range(-1, len(k)):
            cand = m.copy()
            if j >= 0:
                cand[j] = 1
            if cand.min() != 1:
                continue
            A, B = K + (k / cand).sum(), (H * cand).sum()
            Topt = math.sqrt(A / B)
            cost = _class_cost(K, k, H, Topt, cand)
            if cost < best[0]:
                best = (cost, Topt, tuple(cand.tolist()))
    return best


def power_of_two_optimised_base(K, k, H, grid=2000):
    """Uncapped power-of-two cost with the base optimised over one octave (grid + local refinement)."""
    scale = math.sqrt(k.min() / H.max())
    bases = scale * np.exp2(np.linspace(0.0, 1.0, grid, endpoint=False))
    costs = [_power_of_two_continuous(K, k, H, float(b))[0] for b in bases]
    j = int(np.argmin(costs))
    step = bases[1] / bases[0]
    res = minimize_scalar(
        lambda b: _power_of_two_continuous(K, k, H, float(b))[0],
        bounds=(bases[j] / step, bases[j] * step),
        method="bounded",
        options={"xatol": 1e-12 * bases[j]},
    )
    return min(costs[j], float(res.fun))
