"""Optimal power-of-two policies ``T_i = B 2**p_i`` (Roundy 1985), exact per base.

For a base ``B`` and a dispatch exponent ``q`` (``T0 = B 2**q``), each site's best exponent
``p_i ≥ q`` is ``max(p_i*, q)`` where ``p_i*`` minimises the convex ``c_i(B 2**p)`` over
``p`` up to the cap ``B 2**p ≤ U_i`` (:func:`best_exponent`). Enumerating ``q`` gives the
optimum for the base. When no site sits at ``q`` the trips actually happen every
``B 2**min p`` days; that policy is also enumerated (at ``q = min p``) with a lower cost, so
the minimum over ``q`` is the optimum of the class that pays only for trips that happen.
Base ``2B`` policies are base ``B`` policies, so the optimised base runs over odd ``B``.
"""

from __future__ import annotations

import math

import numpy as np

from service.planning.cycle_cost import best_exponent, cycle_cost, free_cycle
from service.planning.inputs import Problem
from service.planning.policy import Policy
from service.planning.relaxation import Relaxation


def _best_for_base(K, k, H, base, q_lo, q_hi, p_hi):
    """Optimal power-of-two policy on a base, dispatch exponent in ``[q_lo, q_hi]``.

    Uses ``cost(q) = K / T(q) + Σ_{p* ≥ q} c_i(B 2**p*) + (Σ_{p* < q} k_i) / T(q)
    + (Σ_{p* < q} H_i) T(q)`` with ``T(q) = B 2**q``, which is O(n + #q).

    Returns
    -------
    tuple
        ``(cost, q, p)`` with ``q = min p`` and the exponents ``p`` (int array).
    """
    p_star = best_exponent(k, H, base, q_lo, p_hi)
    width = q_hi - q_lo + 1
    slot = np.minimum(p_star - q_lo, width)
    own = cycle_cost(k, H, base * np.exp2(p_star))
    below_k = np.concatenate([[0.0], np.cumsum(np.bincount(slot, weights=k, minlength=width + 1))])[:width]
    below_H = np.concatenate([[0.0], np.cumsum(np.bincount(slot, weights=H, minlength=width + 1))])[:width]
    at_or_above = np.cumsum(np.bincount(slot, weights=own, minlength=width + 1)[::-1])[::-1][:width]
    T = base * np.exp2(np.arange(q_lo, q_hi + 1))
    costs = cycle_cost(K + below_k, below_H, T) + at_or_above
    j = int(np.argmin(costs))
    p = np.maximum(p_star, q_lo + j)
    return float(costs[j]), int(p.min()), p


def _power_of_two_continuous(K: float, k: np.ndarray, H: np.ndarray, base: float) -> tuple[float, np.ndarray]:
    """Test-only continuous mode: optimal uncapped power-of-two policy on a real base.

    Cycles ``base · 2**p`` for any integer ``p`` (negative allowed), no caps, ``H_i > 0``.

    Returns
    -------
    tuple
        ``(cost per time unit, cycles)``.
    """
    x = np.log2(free_cycle(k, H) / base)
    q_lo = int(math.floor(x.min())) - 2
    q_hi = int(math.ceil(x.max())) + 2
    cost, _, p = _best_for_base(K, k, H, base, q_lo, q_hi, q_hi)
    return cost, base * np.exp2(p)


def _whole_day_exponent_caps(whole_days: np.ndarray, base: int) -> np.ndarray:
    """Largest ``p`` with ``base · 2**p ≤ u_i`` (exact integer arithmetic)."""
    p = np.floor(np.log2(whole_days / base)).astype(np.int64)
    p += (base << (p + 1)) <= whole_days
    p -= (base << p) > whole_days
    return p


def _policy_for_base(problem: Problem, base: int) -> Policy:
    p_hi = _whole_day_exponent_caps(problem.whole_days, base)
    cost, q, p = _best_for_base(
        problem.dispatch_cost, problem.stop_cost, problem.H, float(base), 0, int(p_hi.min()), p_hi
    )
    cycles = base << p
    return Policy("power_of_two", base, int(base << q), cycles, 2 * cycles, cost)


def power_of_two_policy(problem: Problem, relaxation: Relaxation, base_days: int | None) -> Policy:
    """Optimal power-of-two policy for ``base_days``, or over all odd bases when ``None``.

    Every policy on base ``B`` dispatches every ``B 2**q`` days for some ``q``, so it costs at
    least ``min_q F(B 2**q)`` (``F``: the relaxation at a fixed ``T0``). Bases are solved in
    increasing order of that bound until the bound reaches the best cost found, which is
    exact; equal costs keep the smaller base. The caller checks ``base_days ≤ min u_i``.
    """
    if base_days is not None:
        return _policy_for_base(problem, base_days)
    longest = int(problem.whole_days.min())
    bases = np.arange(1, longest + 1, 2)
    steps = np.exp2(np.arange(int(math.log2(longest)) + 1))
    dispatch = bases[:, None] * steps[None, :]
    bounds = np.where(dispatch <= longest, relaxation.at(np.minimum(dispatch, longest)), np.inf).min(axis=1)
    best: Policy | None = None
    for j in np.argsort(bounds, kind="stable").tolist():
        if best is not None and bounds[j] >= best.class_cost:
            break
        candidate = _policy_for_base(problem, int(bases[j]))
        if best is None or (candidate.class_cost, candidate.base_days) < (best.class_cost, best.base_days):
            best = candidate
    assert best is not None  # the first base is always tried
    return best
