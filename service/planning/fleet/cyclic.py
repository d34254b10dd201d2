"""Exhaustive cyclic search for one truck with routed trips (small site sets).

Site ``i`` uses ``d_i`` per day and is delivered every ``T_i`` whole days (``1 ≤ T_i ≤ u_i``, its longest
whole-day cycle) on days ``o_i + j T_i`` (``0 ≤ o_i < T_i``), each delivery ``d_i T_i``. The plan repeats
every ``R = lcm(T_i)`` days; on day ``t`` one trip visits ``S_t = {i : t ≡ o_i (mod T_i)}`` (when not
empty), carrying ``Σ_{S_t} d_i T_i ≤ W`` in at most ``max_stops`` stops. Its cost per day is

    (Σ_t [K + c · tour(S_t) + Σ_{S_t} k_i]) / R + Σ_i H_i T_i,     H_i = h_i d_i / 2,

with ``tour`` the shortest closed tour from the depot (:func:`routing.shortest_tour`). Every choice of
``(T_i, o_i)`` is tried — ``Π_i u_i (u_i + 1) / 2`` of them — so this is the exact optimum of the class
"one trip a day, fixed cycles and offsets" (the reading of Archetti, Bertazzi, Laporte & Speranza 2007's
instances as a cyclic problem in ``docs/fleet.md``). Tours are cached per stop set.
"""

from __future__ import annotations

import itertools
import math
from collections.abc import Callable
from dataclasses import dataclass

import numpy as np

from service.planning.fleet.routing import shortest_tour

#: Largest number of cycle/offset choices searched exhaustively.
MAX_CHOICES = 50_000
#: Longest repeat period considered (days).
MAX_REPEAT = 60


@dataclass(frozen=True)
class CyclicPlan:
    """The best choice: ``cycles`` ``T_i``, ``offsets`` ``o_i``, ``repeat_days`` ``R``, ``cost_per_day`` and
    its parts (``routing`` = dispatch + distance + stop costs per day, ``holding``), ``choices`` searched."""

    cycles: tuple[int, ...]
    offsets: tuple[int, ...]
    repeat_days: int
    cost_per_day: float
    routing_per_day: float
    holding_per_day: float
    choices: int


def choice_count(longest: np.ndarray) -> int:
    """``Π u_i (u_i + 1) / 2``: the cycle/offset choices of :func:`cyclic_search`."""
    return math.prod(int(u) * (int(u) + 1) // 2 for u in longest)


def cyclic_search(
    d: np.ndarray,
    demand: np.ndarray,
    holding_cost: np.ndarray,
    stop_cost: np.ndarray,
    longest: np.ndarray,
    capacity: float,
    dispatch_cost: float,
    cost_per_km: float,
    max_stops: int | None = None,
    out_of_time: Callable[[], bool] = lambda: False,
) -> CyclicPlan | None:
    """Exhaustive search (module docstring). ``d`` is the ``(n+1) × (n+1)`` matrix with the depot as
    node 0 and site ``i`` as node ``i + 1``; ``longest`` the ``u_i``. ``None`` when no choice is feasible,
    when there are more than ``MAX_CHOICES`` choices, or when ``out_of_time()`` stops the search first."""
    n = len(demand)
    longest = np.minimum(np.asarray(longest, dtype=np.int64), MAX_REPEAT)
    if n == 0 or choice_count(longest) > MAX_CHOICES:
        return None
    H = np.asarray(holding_cost, float) * np.asarray(demand, float) / 2.0
    options = [[(T, o) for T in range(1, int(u) + 1) for o in range(T)] for u in longest]
    tours: dict[int, float] = {}

    def day_cost(mask: int) -> float:
        if mask not in tours:
            nodes = [0] + [i + 1 for i in range(n) if mask >> i & 1]
            sub = d[np.ix_(nodes, nodes)]
            tours[mask] = shortest_tour(sub).length
        stops = [i for i in range(n) if mask >> i & 1]
        return dispatch_cost + cost_per_km * tours[mask] + float(sum(stop_cost[i] for i in stops))

    best: CyclicPlan | None = None
    for count, choice in enumerate(itertools.product(*options)):
        if count % 256 == 0 and out_of_time():
            return None
        cycles = [T for T, _ in choice]
        repeat = math.lcm(*cycles)
        if repeat > MAX_REPEAT:
            continue
        holding = float(sum(H[i] * cycles[i] for i in range(n)))
        if best is not None and holding >= best.cost_per_day:
            continue
        total, ok = 0.0, True
        for t in range(repeat):
            mask, load, stops = 0, 0.0, 0
            for i, (T, o) in enumerate(choice):
                if t % T == o:
                    mask |= 1 << i
                    load += demand[i] * T
                    stops += 1
            if mask == 0:
                continue
            if load > capacity * (1 + 1e-9) or (max_stops is not None and stops > max_stops):
                ok = False
                break
            total += day_cost(mask)
        if not ok:
            continue
        cost = total / repeat + holding
        if best is None or cost < best.cost_per_day - 1e-9:
            best = CyclicPlan(tuple(cycles), tuple(o for _, o in choice), repeat, cost, total / repeat, holding, 0)
    if best is None:
        return None
    return CyclicPlan(**{**best.__dict__, "choices": choice_count(longest)})
