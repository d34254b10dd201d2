"""Packing one date's deliveries into trips: load ≤ W (1e-9 relative slack) and at most S stops per trip.

A date needs at least ``L = max(⌈load / W⌉, ⌈count / S⌉, 1)`` trips. The packing is deterministic and the
same everywhere (plan evaluation, the plan's listing, ``trips_between``):

1. A date whose deliveries fit one trip is one trip.
2. Otherwise the deliveries, heaviest first (ties: input order), are dealt to ``L`` trips in a snake
   order (0, 1, …, L−1, L−1, …, 0, 0, 1, …). Each trip then has at most ``⌈count / L⌉ ≤ S`` stops and
   the loads are levelled; vectorised over all dates at once. If every trip's load fits, the date uses
   exactly the lower bound ``L`` (optimal).
3. Dates where the snake overloads a trip are packed one by one: first-fit decreasing and best-fit
   decreasing (the one with fewer trips, first-fit on a tie); when that is still above ``L`` and the
   date has at most ``EXACT_ITEMS`` deliveries, an exact depth-first search (bounded by
   ``EXACT_NODES`` nodes) decides whether one trip fewer suffices.

Every delivery fits a trip alone because ``d_i g ≤ q_i ≤ W`` for every gap ``g ≤ u_i``.
"""

from __future__ import annotations

import math

import numpy as np

#: Relative slack when comparing a load with the truck capacity (float rounding of ``d_i g``).
LOAD_TOLERANCE = 1e-9
#: Largest date searched exactly when the heuristics leave a trip above the lower bound, and the search's size.
EXACT_ITEMS = 12
EXACT_NODES = 20_000


def _limit(capacity: float) -> float:
    return capacity * (1 + LOAD_TOLERANCE)


def _fit_decreasing(q: np.ndarray, limit: float, stops: float, best: bool) -> list[list[int]]:
    loads: list[float] = []
    members: list[list[int]] = []
    for j in np.argsort(-q, kind="stable").tolist():
        chosen = -1
        for b, load in enumerate(loads):
            if load + q[j] <= limit and len(members[b]) < stops:
                if not best:
                    chosen = b
                    break
                if chosen < 0 or loads[b] > loads[chosen]:
                    chosen = b
        if chosen < 0:
            loads.append(float(q[j]))
            members.append([j])
        else:
            loads[chosen] += q[j]
            members[chosen].append(j)
    return members


def _exact(q: np.ndarray, limit: float, stops: float, bins: int) -> list[list[int]] | None:
    """A packing into ``bins`` trips by depth-first search (heaviest first, an empty trip tried once),
    or None when there is none or the search passes ``EXACT_NODES`` nodes."""
    order = np.argsort(-q, kind="stable").tolist()
    loads = [0.0] * bins
    members: list[list[int]] = [[] for _ in range(bins)]
    nodes = 0

    def place(k: int) -> bool:
        nonlocal nodes
        nodes += 1
        if k == len(order):
            return True
        if nodes > EXACT_NODES:
            return False
        j = order[k]
        tried_empty = False
        for b in range(bins):
            if loads[b] + q[j] > limit or len(members[b]) >= stops:
                continue
            if not members[b]:
                if tried_empty:
                    continue
                tried_empty = True
            loads[b] += q[j]
            members[b].append(j)
            if place(k + 1):
                return True
            loads[b] -= q[j]
            members[b].pop()
        return False

    return [m for m in members if m] if place(0) else None


def pack_date(q: np.ndarray, capacity: float, max_stops: int | None) -> list[list[int]]:
    """Trips of one date as lists of positions into ``q`` (steps 1 and 3 of the module docstring)."""
    limit = _limit(capacity)
    stops = math.inf if max_stops is None else max_stops
    m = len(q)
    if float(q.sum()) <= limit and m <= stops:
        return [list(range(m))]
    first = _fit_decreasing(q, limit, stops, best=False)
    second = _fit_decreasing(q, limit, stops, best=True)
    packing = second if len(second) < len(first) else first
    bound = max(math.ceil(float(q.sum()) / limit), math.ceil(m / stops), 1)
    if len(packing) > bound and m <= EXACT_ITEMS:
        exact = _exact(q, limit, stops, len(packing) - 1)
        if exact is not None:
            packing = exact
    return packing


def pack(day: np.ndarray, site: np.ndarray, quantity: np.ndarray, capacity: float, max_stops: int | None):
    """Trips of many dates at once.

    Parameters
    ----------
    day, site, quantity : ndarray
        Deliveries sorted by day then site.

    Returns
    -------
    tuple
        ``(trip, dates, trips)``: the 0-based trip index of each delivery within its date, the distinct
        dates and the number of trips on each.
    """
    count_all = len(day)
    trip = np.zeros(count_all, dtype=np.int64)
    if count_all == 0:
        return trip, np.zeros(0, dtype=np.int64), np.zeros(0, dtype=np.int64)
    starts = np.flatnonzero(np.concatenate([[True], day[1:] != day[:-1]]))
    counts = np.diff(np.append(starts, count_all))
    loads = np.add.reduceat(quantity, starts)
    limit = _limit(capacity)
    stops = math.inf if max_stops is None else max_stops
    with np.errstate(invalid="ignore"):
        by_load = np.ceil(loads / limit) if math.isfinite(limit) else np.ones(len(starts))
    L = np.maximum(np.maximum(by_load, np.ceil(counts / stops)), 1).astype(np.int64)
    dates = day[starts]
    multi = L > 1
    if not multi.any():
        return trip, dates, L
    group = np.repeat(np.arange(len(starts)), counts)
    order = np.lexsort((site, -quantity, group))
    rank = np.arange(count_all) - starts[group[order]]
    Lg = L[group[order]]
    lap, pos = rank // Lg, rank % Lg
    trip[order] = np.where(lap % 2 == 0, pos, Lg - 1 - pos)
    base = np.cumsum(L) - L
    bin_load = np.bincount(base[group] + trip, weights=quantity, minlength=int(L.sum()))
    over = np.zeros(len(starts), dtype=bool)
    np.logical_or.at(over, np.repeat(np.arange(len(starts)), L), bin_load > limit)
    for g in np.flatnonzero(over).tolist():
        lo, hi = starts[g], starts[g] + counts[g]
        packing = pack_date(quantity[lo:hi], capacity, max_stops)
        for b, members in enumerate(packing):
            trip[lo + np.asarray(members, dtype=np.int64)] = b
        L[g] = len(packing)
    return trip, dates, L
