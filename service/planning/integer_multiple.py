"""Exact optimal integer-multiple policy ``T_i = m_i T0`` over whole-day ``T0``, min ``m_i = 1``.

For a fixed ``T0`` the class cost ``K / T0 + Σ (k_i / (m_i T0) + H_i m_i T0)`` separates by
site; each site's best ``m_i`` in ``[1, floor(u_i / T0)]`` is the convex integer minimiser
(:func:`best_multiple`). The class requires min ``m_i = 1``; when no site picks 1, the best
constrained choice moves to 1 the single site whose cost rises least (the others are
unaffected). ``T0`` runs outward from the relaxation's ``t0``; ``F(T0)`` bounds every policy
with that ``T0`` and is convex, so each direction stops once ``F(T0)`` reaches the best cost.
"""

from __future__ import annotations

import math

import numpy as np

from service.planning.cycle_cost import best_multiple, cycle_cost
from service.planning.inputs import Problem
from service.planning.policy import Policy
from service.planning.relaxation import Relaxation


def _multiples_for(k: np.ndarray, H: np.ndarray, T0: float, m_hi) -> np.ndarray:
    """Best multiples ``m_i ∈ [1, m_hi]`` for dispatch interval ``T0`` (real allowed), min ``m = 1``."""
    m = best_multiple(k, H, T0, 1, m_hi)
    if not (m == 1).any():
        rise = cycle_cost(k, H, T0) - cycle_cost(k, H, m * T0)
        m[int(np.argmin(rise))] = 1
    return m


def _class_cost(K: float, k: np.ndarray, H: np.ndarray, T0: float, m: np.ndarray) -> float:
    """``K / T0 + Σ (k_i / (m_i T0) + H_i m_i T0)``: cost of a policy with min ``m_i = 1``."""
    return float(cycle_cost(K, 0.0, T0) + cycle_cost(k, H, m * T0).sum())


def integer_policy(problem: Problem, relaxation: Relaxation) -> Policy:
    """Exact optimum of the integer-multiple class over whole-day ``T0 ∈ [1, min u_i]``."""
    K, k, H, u = problem.dispatch_cost, problem.stop_cost, problem.H, problem.whole_days
    longest = int(u.min())
    start = min(max(int(math.floor(relaxation.t0)), 1), longest)
    best: tuple[float, int, np.ndarray] | None = None
    for direction, first in ((-1, start), (1, start + 1)):
        T0 = first
        while 1 <= T0 <= longest:
            if best is not None and relaxation.at(T0) >= best[0]:
                break
            m = _multiples_for(k, H, float(T0), u // T0)
            cost = _class_cost(K, k, H, float(T0), m)
            if best is None or cost < best[0] or (cost == best[0] and T0 < best[1]):
                best = (cost, T0, m)
            T0 += direction
    assert best is not None  # the search starts inside [1, longest], so it priced at least one T0
    cost, T0, m = best
    return Policy("integer", None, T0, m * T0, (m + 1) * T0, cost)


def integer_policies_by_interval(problem: Problem, relaxation: Relaxation, count: int) -> list[Policy]:
    """The optimal integer-multiple policy of each of the ``count`` dispatch intervals with the lowest class cost.

    ``T0`` runs over whole days in ``[t0 / 4, 4 t0] ∩ [1, min u_i]`` around the relaxation's ``t0``. A truck
    whose load binds may need a ``T0`` other than the class optimum's (three sites that fit one trip
    every 12 days but not every 13), so the planner evaluates these exactly too.
    """
    K, k, H, u = problem.dispatch_cost, problem.stop_cost, problem.H, problem.whole_days
    longest = int(u.min())
    lo = max(1, int(relaxation.t0 // 4))
    hi = min(longest, max(int(math.ceil(relaxation.t0 * 4)), lo))
    found = []
    for T0 in range(lo, hi + 1):
        m = _multiples_for(k, H, float(T0), u // T0)
        found.append((_class_cost(K, k, H, float(T0), m), T0, m))
    found.sort(key=lambda x: (x[0], x[1]))
    return [Policy("integer", None, T0, m * T0, (m + 1) * T0, cost) for cost, T0, m in found[:count]]
