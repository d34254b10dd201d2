"""A lower bound on the cost per day of every drivable plan (load, stop and whole-day limits).

For weights ``α, β, γ ≥ 0`` with ``α + β + γ = 1``

    LB(α, β, γ) = K β D / W + min over 1 ≤ T0 ≤ T_i ≤ u_i of
                  [ K α / T0 + Σ_i ((k_i + K γ / S) / T_i + H_i T_i) ]

is at most the cost per day of every periodic whole-day plan whose trips carry at most ``W``
and stop at most ``S`` times (``D = Σ d_i``, ``u_i = ⌊min(f_i V_i − s_i, W) / d_i⌋``): the trips
``N`` of a plan of ``R`` days satisfy ``N ≥ R / T0``, ``N ≥ D R / W`` and ``N ≥ Σ n_i / S``, so
``K N / R`` is at least any convex combination of the three. The inner minimum is the capped
relaxation of :mod:`service.planning.relaxation` with ``K → K α`` and ``k_i → k_i + K γ / S``.
``LB`` is a minimum of functions affine in the weights, hence concave; the bound is its maximum
over the simplex. Derivation and proof: ``docs/planning.md`` ("Drivable lower bound"); the
construction is Lagrangian relaxation of the trip-count constraints (Boyd & Vandenberghe 2004, §5).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from scipy.optimize import minimize, minimize_scalar

from service.planning.cycle_cost import free_cycle
from service.planning.inputs import WHOLE_DAY_TOLERANCE, Problem
from service.planning.relaxation import _relaxation

#: Barycentric grid step of the weights tried before the local refinement (vertices included).
GRID_STEPS = 6


@dataclass(frozen=True)
class BoundResult:
    """The bound ``value`` (cost per day), the weights ``(α, β, γ)`` that attain it and its parts.

    ``parts`` splits ``value`` at the inner minimiser ``(T0, T_i)``: ``dispatch`` is
    ``K (α / T0 + β D / W + γ Σ 1 / (S T_i))``, ``stops`` is ``Σ k_i / T_i`` and ``holding`` is
    ``Σ H_i T_i``.
    """

    value: float
    weights: tuple[float, float, float]
    parts: dict


def whole_day_caps(problem: Problem) -> np.ndarray:
    """``u_i = ⌊min(f_i V_i − s_i, W) / d_i⌋``: the longest whole-day gap any plan can use.

    A gap is a whole number of days ``g``; the tank must last it (``g ≤ (f_i V_i − s_i) / d_i``)
    and its delivery ``d_i g`` fits one trip (``g ≤ W / d_i``), so ``g ≤ u_i``. The floor is
    taken with a slightly wider tolerance than the planner's (relative ``1e-9``, as its load check)
    so that the cap is never below a gap the planner accepts. Not clipped to ``MAX_WHOLE_DAYS``:
    a longer gap is still a plan, and the bound must not exclude it.
    """
    U = problem.cap_days
    return np.maximum(np.floor(U * (1.0 + WHOLE_DAY_TOLERANCE) + WHOLE_DAY_TOLERANCE), 1.0)


class _Inner:
    """``LB`` at given weights, with a supergradient, for one problem."""

    def __init__(self, problem: Problem):
        self.K = problem.dispatch_cost
        self.k = problem.stop_cost
        self.H = problem.H
        self.caps = whole_day_caps(problem)
        self.S = problem.max_stops
        W = problem.capacity
        self.load_rate = float(problem.demand.sum()) / W if math.isfinite(W) else 0.0

    def solve(self, alpha: float, beta: float, gamma: float):
        """``(value, parts, gradient)`` where ``gradient`` is ``∂LB/∂(α, β, γ)`` at the minimiser."""
        K, S = self.K, self.S
        per_stop = K * gamma / S if S else 0.0
        rel = _relaxation(K * alpha, self.k + per_stop, self.H, self.caps, 1.0)
        T = np.maximum(rel.t0, np.minimum(free_cycle(self.k + per_stop, self.H), self.caps))
        stops_per_day = float(np.sum(1.0 / T)) / S if S else 0.0
        load = K * beta * self.load_rate
        stops = float(np.sum(self.k / T))
        holding = float(np.sum(self.H * T))
        parts = {"dispatch": rel.value + load - stops - holding, "stops": stops, "holding": holding}
        gradient = np.array([K / rel.t0, K * self.load_rate, K * stops_per_day])
        return rel.value + load, parts, gradient


def drivable_lower_bound(problem: Problem, working_days: tuple[int, ...] = (1, 2, 3, 4, 5, 6, 7)) -> BoundResult:
    """The drivable lower bound: ``max over the weight simplex of LB(α, β, γ)`` (see module doc).

    Weights whose cut is void are fixed at 0 (``β`` when there is no capacity, ``γ`` when there
    is no stop limit). The maximum is searched on a barycentric grid (vertices included) and
    refined from the best grid point (bounded Brent in one free weight, SLSQP with the
    supergradient in two); every evaluated ``LB`` is a valid bound and the largest is returned.

    ``working_days`` (ISO weekdays) is accepted for the calendar; the bound holds for every
    calendar because a plan on fewer days is still a plan of the relaxation.
    """
    inner = _Inner(problem)
    free = [j for j, on in ((1, math.isfinite(problem.capacity)), (2, problem.max_stops is not None)) if on]
    best: dict = {}

    def evaluate(x) -> float:
        w = np.zeros(3)
        w[free] = np.clip(np.asarray(x, dtype=float), 0.0, 1.0)
        if w[1:].sum() > 1.0:
            w[1:] /= w[1:].sum()
        w[0] = max(0.0, 1.0 - w[1:].sum())
        key = tuple(float(v) for v in w)
        if key not in best:
            best[key] = inner.solve(*key)
        return best[key]

    if not free or problem.dispatch_cost == 0:
        evaluate([0.0] * len(free))
    elif len(free) == 1:
        for x in np.linspace(0.0, 1.0, GRID_STEPS + 1):
            evaluate([x])
        minimize_scalar(lambda x: -evaluate([x])[0], bounds=(0.0, 1.0), method="bounded", options={"xatol": 1e-10})
    else:
        grid = [(i / GRID_STEPS, j / GRID_STEPS) for i in range(GRID_STEPS + 1) for j in range(GRID_STEPS + 1 - i)]
        for x in grid:
            evaluate(x)
        start = max(grid, key=lambda x: evaluate(x)[0])

        def objective(x):
            value, _, g = evaluate(x)
            return -value, -(g[1:] - g[0])

        minimize(
            objective,
            np.asarray(start),
            jac=True,
            method="SLSQP",
            bounds=[(0.0, 1.0), (0.0, 1.0)],
            constraints=[{"type": "ineq", "fun": lambda x: 1.0 - x[0] - x[1], "jac": lambda x: -np.ones(2)}],
            options={"ftol": 1e-15, "maxiter": 200},
        )
    weights, (value, parts, _) = max(best.items(), key=lambda item: item[1][0])
    return BoundResult(value=float(value), weights=weights, parts=parts)
