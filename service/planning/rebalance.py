"""Local search over the phases of the sites: fewer trips, and no date over ``trips_per_day``.

Site ``i`` runs every ``m_i`` working days from working day ``r_i`` (its phase); its cycle stays, only the
phase moves. Over the ``N = lcm(L_i)`` working days of the repeat (``L_i = lcm(m_i, n)``, or ``m_i`` when
all seven days work) each date ``t`` needs at least ``L(t) = max(⌈load_t / W⌉, ⌈count_t / S⌉, [count_t > 0])``
trips. The search minimises

    Σ_t  L(t) + BIG · max(0, L(t) − τ)

(τ = ``trips_per_day``; ``BIG`` makes a date over τ cost more than any number of trips). One site at a
time, heaviest first: take it out, score every phase ``r ∈ [0, m_i)`` at once (the dates of phase ``r`` are
``r, r + m_i, …``, so all phases together cover each date once: one vector over the ``N`` dates, summed in
columns), put it back on the best (the current phase on a tie). Repeat until a pass changes nothing, or
``passes`` passes, or the deadline. A delivery on working day ``t`` carries ``d_i (cal(t + m_i) − cal(t))``.
This is the repair step of the planner (dates over τ) and an improvement step (fewer trips); the exact
cost is then evaluated by packing (``evaluation.py``).
"""

from __future__ import annotations

import math
import time

import numpy as np

from service.planning.packing import LOAD_TOLERANCE
from service.planning.workweek import WorkWeek

#: Working days of a repeat period above which the phases are left as they are.
MAX_DATES = 20_000


def rebalance(
    demand: np.ndarray,
    capacity: float,
    max_stops: int | None,
    trips_per_day: int | None,
    week: WorkWeek,
    cycles: np.ndarray,
    phases: np.ndarray,
    deadline: float | None,
    passes: int = 4,
) -> np.ndarray:
    """Better phases ``r_i ∈ [0, m_i)`` for cycles ``m_i`` (working days); see the module docstring."""
    cycles = np.asarray(cycles, dtype=np.int64)
    phases = np.asarray(phases, dtype=np.int64).copy()
    spans = [int(m) if week.n == 7 else math.lcm(int(m), week.n) for m in np.unique(cycles).tolist()]
    N = math.lcm(*spans)
    if N > MAX_DATES:
        return phases
    cal = week.calendar_day(np.arange(N + int(cycles.max()) + 1))
    limit = capacity * (1 + LOAD_TOLERANCE)
    stops = math.inf if max_stops is None else max_stops
    tau = math.inf if trips_per_day is None else trips_per_day
    big = float(len(cycles) + 1)

    def need(load, count):
        by_load = np.ceil(load / limit) if math.isfinite(limit) else 0.0
        return np.maximum(np.maximum(by_load, np.ceil(count / stops)), (count > 0).astype(float))

    def score(load, count):
        L = need(load, count)
        return L + big * np.maximum(L - tau, 0.0)

    t = np.arange(N)
    quantity = {}
    for m in np.unique(cycles).tolist():
        quantity[m] = (cal[t + m] - cal[t]).astype(float)
    load = np.zeros(N)
    count = np.zeros(N)
    for i in range(len(cycles)):
        m = int(cycles[i])
        at = t[phases[i] :: m]
        load[at] += demand[i] * quantity[m][at]
        count[at] += 1
    order = np.argsort(-(demand * cycles), kind="stable")
    for _ in range(passes):
        changed = False
        for i in order.tolist():
            if deadline is not None and time.monotonic() > deadline:
                return phases
            m = int(cycles[i])
            if m == 1:
                continue
            q = demand[i] * quantity[m]
            at = t[phases[i] :: m]
            load[at] -= q[at]
            count[at] -= 1
            delta = score(load + q, count + 1) - score(load, count)
            by_phase = delta.reshape(N // m, m).sum(axis=0)
            best = int(np.argmin(by_phase))
            if by_phase[best] < by_phase[phases[i]] - 1e-9:
                phases[i] = best
                changed = True
            at = t[phases[i] :: m]
            load[at] += q[at]
            count[at] += 1
        if not changed:
            break
    return phases
