"""Exact cheapest periodic drivable plan of a tiny instance, by exhaustive search over day states.

A plan is described day by day. The state of a day is, for every site, the number of days until its
next delivery (0 = delivered today). On a day the sites at 0 are delivered; each chooses its next gap
``g ∈ 1..u_i`` (its tank lasts ``u_i`` whole days) and so its quantity ``d_i g``; the day's deliveries
are packed into the fewest trips (every partition of the delivered set is tried) that respect the
load ``W`` and stop ``S`` limits, at most ``trips_per_day`` trips; the day costs
``K · trips + Σ (k_i + H_i g²)`` (a gap of ``g`` days holds ``h_i d_i g² / 2 = H_i g²``). A periodic plan
of period ``R`` is exactly a closed walk of ``R`` days in this state graph (calendar weekday by
weekday), so the cheapest plan of period ``R`` is the smallest diagonal entry of the min-plus product
of the ``R`` day matrices. This enumerates every subset of delivery days of every site and every
assignment of each day's stops to trips, without listing the combinations one by one.
"""

from __future__ import annotations

import itertools
import math

import numpy as np


def _partitions(items):
    """Every set partition of ``items`` (a list), as lists of blocks."""
    if not items:
        yield []
        return
    first, rest = items[0], items[1:]
    for partition in _partitions(rest):
        yield [[first], *partition]
        for j in range(len(partition)):
            yield [*partition[:j], [first, *partition[j]], *partition[j + 1 :]]


def _fewest_trips(loads, capacity, max_stops):
    """Fewest trips carrying ``loads`` within ``capacity`` and ``max_stops`` (``inf`` if none fits)."""
    if not loads:
        return 0
    best = math.inf
    for partition in _partitions(list(range(len(loads)))):
        if all(len(b) <= max_stops and sum(loads[i] for i in b) <= capacity * (1 + 1e-9) for b in partition):
            best = min(best, len(partition))
    return best


def day_matrices(K, k, H, d, caps, capacity=math.inf, max_stops=None, trips_per_day=None):
    """The min-plus transition matrix of a working day and of a closed day, and the state list."""
    n = len(k)
    stops_limit = max_stops if max_stops is not None else n
    trips_limit = trips_per_day if trips_per_day is not None else n
    states = list(itertools.product(*[range(u) for u in caps]))
    index = {s: j for j, s in enumerate(states)}
    working = np.full((len(states), len(states)), np.inf)
    closed = np.full((len(states), len(states)), np.inf)
    for j, state in enumerate(states):
        due = [i for i in range(n) if state[i] == 0]
        if not due:
            closed[j, index[tuple(x - 1 for x in state)]] = 0.0
        for gaps in itertools.product(*[range(1, caps[i] + 1) for i in due]):
            trips = _fewest_trips([d[i] * g for i, g in zip(due, gaps, strict=True)], capacity, stops_limit)
            if trips > trips_limit:
                continue
            nxt = list(state)
            for i, g in zip(due, gaps, strict=True):
                nxt[i] = g
            nxt = tuple(x - 1 for x in nxt)
            cost = K * trips + sum(k[i] + H[i] * g * g for i, g in zip(due, gaps, strict=True))
            working[j, index[nxt]] = min(working[j, index[nxt]], cost)
    return working, closed


def _min_plus(a, b):
    return np.min(a[:, :, None] + b[None, :, :], axis=1)


def cheapest_plan(K, k, H, d, caps, periods, working_weekdays=range(7), **limits):
    """Least cost per day over every periodic plan whose period is in ``periods``.

    Day ``t`` of the period is weekday ``t mod 7`` (0-based); deliveries only on
    ``working_weekdays``. Returns ``inf`` when no plan exists.
    """
    working, closed = day_matrices(K, k, H, d, caps, **limits)
    days = [working if t % 7 in set(working_weekdays) else closed for t in range(max(periods))]
    best = math.inf
    walk = days[0]
    for R in range(1, max(periods) + 1):
        if R > 1:
            walk = _min_plus(walk, days[R - 1])
        if R in periods:
            best = min(best, float(np.min(np.diag(walk))) / R)
    return best
