"""The joint-replenishment relaxation and its exact breakpoint scan.

The bound is ``min over T0 in [t_min, min U_i]`` of

    F(T0) = K / T0 + Σ_i min over T_i in [T0, U_i] of (k_i / T_i + H_i T_i),

the relaxation of the joint replenishment problem with cycle caps (after Roundy 1985 and
Jackson, Maxwell & Muckstadt 1985). Site ``i``'s inner minimum is attained at
``max(T0, τ_i)`` with the clamped free cycle ``τ_i = min(sqrt(k_i / H_i), U_i)``. With the
``τ`` sorted, on the segment between consecutive breakpoints the first ``j`` sites are
pinned at ``T0`` and ``F(T0) = A_j / T0 + B_j T0 + C_j`` with ``A_j = K + Σ_{pinned} k``,
``B_j = Σ_{pinned} H`` and ``C_j = Σ_{free} c_i(τ_i)``; its minimum on the segment is
``sqrt(A_j / B_j)`` clamped to the segment. ``F`` is convex, so it is also minimised by
this scan, in O(n log n) (the sort). See ``docs/planning.md``.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

from service.planning.cycle_cost import cycle_cost, free_cycle
from service.planning.inputs import Problem, SiteInput, TruckInput, validate


@dataclass(frozen=True)
class Relaxation:
    """The solved relaxation: bound ``value`` at ``t0`` and the data to evaluate ``F``.

    ``breakpoints`` are the sorted ``τ_i``; ``A``, ``B``, ``C`` hold the segment
    coefficients for ``j = 0 … n`` pinned sites.
    """

    value: float
    t0: float
    breakpoints: np.ndarray
    A: np.ndarray
    B: np.ndarray
    C: np.ndarray

    def at(self, T0):
        """``F(T0)`` (vectorised): ``A_j / T0 + B_j T0 + C_j`` with ``j = #{τ_i ≤ T0}``."""
        T0 = np.asarray(T0, dtype=float)
        j = np.searchsorted(self.breakpoints, T0, side="right")
        return cycle_cost(self.A[j], self.B[j], T0) + self.C[j]


def _relaxation(K: float, k: np.ndarray, H: np.ndarray, U: np.ndarray, t_min: float) -> Relaxation:
    """Solve the relaxation exactly by the sorted breakpoint scan.

    Parameters
    ----------
    K : float
        Dispatch cost per trip.
    k, H, U : ndarray
        Stop cost, holding term ``h d / 2`` and cycle cap of each site (``U`` may be
        ``inf`` for the uncapped textbook relaxation).
    t_min : float
        Smallest allowed ``T0`` (1 day in the planner, 0 for the textbook relaxation).
    """
    free = free_cycle(k, H)
    tau = np.minimum(free, U)
    order = np.argsort(tau, kind="stable")
    taus = tau[order]
    at_tau = np.where(tau == free, 2.0 * np.sqrt(k * H), cycle_cost(k, H, tau))[order]
    zero = np.zeros(1)
    A = K + np.concatenate([zero, np.cumsum(k[order])])
    B = np.concatenate([zero, np.cumsum(H[order])])
    C = np.concatenate([np.cumsum(at_tau[::-1])[::-1], zero])
    lo = np.maximum(np.concatenate([[-np.inf], taus]), t_min)
    hi = np.minimum(np.concatenate([taus, [np.inf]]), U.min())
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        T = np.where(B > 0, np.clip(np.sqrt(A / np.where(B > 0, B, 1.0)), lo, hi), hi)
    values = np.where(lo <= hi, cycle_cost(A, B, T) + C, np.inf)
    t0 = float(T[int(np.argmin(values))])
    # the value at t0 summed site by site (the prefix and suffix sums lose a few digits)
    value = float(cycle_cost(K, 0.0, t0) + cycle_cost(k, H, np.maximum(t0, tau)).sum())
    return Relaxation(value=value, t0=t0, breakpoints=taus, A=A, B=B, C=C)


def relaxation_of(problem: Problem) -> Relaxation:
    """The planner's relaxation: ``T0`` in ``[1, min U_i]`` days."""
    return _relaxation(problem.dispatch_cost, problem.stop_cost, problem.H, problem.cap_days, 1.0)


def lower_bound(sites: Sequence[SiteInput], truck: TruckInput) -> float:
    """Lower bound on the cost per day of every whole-day joint policy.

    ``min over T0 in [1, min U_i]`` of ``K / T0 + Σ_i min over T_i in [T0, U_i] of
    (k_i / T_i + H_i T_i)`` (after Roundy 1985 and Jackson, Maxwell & Muckstadt 1985),
    solved exactly by :func:`_relaxation`.

    Raises
    ------
    PlanningInputError
        See :func:`service.planning.inputs.validate`.
    """
    return relaxation_of(validate(sites, truck)).value
