"""A simple drivable plan when the policy search finds none: per-site weekly rhythms placed greedily.

Every site gets one of these patterns (repeat ``R = FALLBACK_DAYS``, a whole number of weeks):

* a set ``E`` of working weekdays every week (period 7; for each size the sets with the least
  ``Σ g²``), allowed when every cyclic gap is at most ``u_i = ⌊U_i⌋``;
* one working day every ``c = 7·2^p`` days (``c ≤ min(u_i, R)``; period ``c``, gap ``c``).

A site that lasts the calendar's longest closed stretch always has one (every working day), so the
construction only fails on the truck's load, stops and ``trips_per_day``. Sites are placed one at a time,
the least flexible first (fewest days of stock, then the heaviest); each date keeps its trips as
first-fit bins (load ≤ ``W``, stops ≤ ``S``) and an option is allowed only when no date goes above
``trips_per_day`` bins; among allowed options the site takes the least
``own cost + K × (new trips) / R`` (own cost ``(k_i |E| + H_i Σ g²) / P``, as in ``patterns.py``). The
planner evaluates the result exactly (its packing never needs more trips than these bins on a date in
practice; it is checked) and keeps it only when it is drivable.
"""

from __future__ import annotations

import itertools
import math

import numpy as np

from service.planning.inputs import Problem
from service.planning.packing import LOAD_TOLERANCE
from service.planning.patterns import Patterns
from service.planning.workweek import WorkWeek

#: Repeat period of the fallback plan (days; a whole number of weeks and a power-of-two multiple of 7).
FALLBACK_DAYS = 56
#: Weekday sets kept per size: those within this factor of the least ``Σ g²`` of the size.
EVEN_SLACK = 1.0


def _options(week: WorkWeek):
    """``(period, offsets, gaps)`` of every pattern of the module docstring (calendar offsets from day 0)."""
    e = week.offsets.tolist()
    out: list[tuple[int, np.ndarray, np.ndarray]] = []
    for size in range(1, len(e) + 1):
        sets = []
        for subset in itertools.combinations(e, size):
            offs = np.array(subset, dtype=np.int64)
            gaps = np.diff(np.append(offs, offs[0] + 7))
            sets.append((int((gaps * gaps).sum()), offs, gaps))
        least = min(s[0] for s in sets)
        out.extend((7, offs, gaps) for sq, offs, gaps in sets if sq <= least * EVEN_SLACK)
    c = 14
    while c <= FALLBACK_DAYS:
        for o in np.flatnonzero(week.is_working(np.arange(c))).tolist():
            out.append((c, np.array([o], dtype=np.int64), np.array([c], dtype=np.int64)))
        c *= 2
    return out


def fallback_patterns(problem: Problem, week: WorkWeek, shrink: float = 1.0) -> Patterns | None:
    """The greedy plan of the module docstring (loads checked against ``shrink × W``), or None when a site
    finds no allowed option."""
    R = FALLBACK_DAYS
    limit = problem.capacity * shrink * (1 + LOAD_TOLERANCE)
    stops = math.inf if problem.max_stops is None else problem.max_stops
    tau = math.inf if problem.trips_per_day is None else problem.trips_per_day
    K = problem.dispatch_cost
    d, k, H, u = problem.demand, problem.stop_cost, problem.H, problem.whole_days
    options = _options(week)
    dates = [[int(o) + j * p for j in range(R // p) for o in offs] for p, offs, _ in options]
    gap_of = [[int(g) for _ in range(R // p) for g in gaps] for p, _, gaps in options]
    longest = [int(g.max()) for _, _, g in options]
    squares = [float((g * g).sum()) for _, _, g in options]
    bins: list[list[list[float]]] = [[] for _ in range(R)]
    chosen = np.zeros(problem.n, dtype=np.int64)
    for i in np.lexsort((-d, u)).tolist():
        best, best_score = None, math.inf
        for j, (p, offs, _) in enumerate(options):
            if longest[j] > u[i]:
                continue
            new = 0
            for t, g in zip(dates[j], gap_of[j], strict=True):
                q = d[i] * g
                if not any(b[0] + q <= limit and b[1] < stops for b in bins[t]):
                    new += 1
                    if len(bins[t]) + 1 > tau:
                        break
            else:
                score = (k[i] * len(offs) + H[i] * squares[j]) / p + K * new / R
                if score < best_score:
                    best, best_score = j, score
        if best is None:
            return None
        chosen[i] = best
        for t, g in zip(dates[best], gap_of[best], strict=True):
            q = d[i] * g
            b = next((b for b in bins[t] if b[0] + q <= limit and b[1] < stops), None)
            if b is None:
                bins[t].append([q, 1])
            else:
                b[0] += q
                b[1] += 1
    period = np.array([options[j][0] for j in chosen.tolist()], dtype=np.int64)
    counts = [len(options[j][1]) for j in chosen.tolist()]
    site = np.repeat(np.arange(problem.n), counts)
    offset = np.concatenate([options[j][1] for j in chosen.tolist()])
    gap = np.concatenate([options[j][2] for j in chosen.tolist()])
    return Patterns(period, site, offset, gap)
