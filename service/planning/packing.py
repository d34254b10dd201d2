"""Packing one date's deliveries into trips: load ≤ W (1e-9 relative slack) and at most S stops per trip.

A date needs at least ``L = max(⌈load / W⌉, ⌈count / S⌉, 1)`` trips. The packing is deterministic and the
same everywhere (plan evaluation, the plan's listing, ``trips_between``):

1. A date whose deliveries fit one trip is one trip.
2. Otherwise the deliveries, heaviest first (ties: input order), are dealt to ``L`` trips in a snake
   order (0, 1, …, L−1, L−1, …, 0, 0, 1, …). Each trip then has at most ``⌈count / L⌉ ≤ S`` stops and
   the loads are levelled; vectorised over all dates at once. If every trip's load fits, the date uses
   exactly the lower bound ``L`` (optimal).
3. Dates where the snake overloads a trip are packed one by one, once per distinct date (a periodic plan
   repeats its dates): best-fit decreasing with the rooms kept sorted (O(log trips) per delivery); when
   that is above ``L`` and the date has at most ``EXACT_ITEMS`` deliveries, an exact depth-first search (bounded by
   ``EXACT_NODES`` nodes) decides whether one trip fewer suffices.

Every delivery fits a trip alone because ``d_i g ≤ q_i ≤ W`` for every gap ``g ≤ u_i``.
"""

from __future__ import annotations

import bisect
import math

import numpy as np

#: Relative slack when comparing a load with the truck capacity (float rounding of ``d_i g``).
LOAD_TOLERANCE = 1e-9
#: Largest date searched exactly when the heuristics leave a trip above the lower bound, and the search's size.
EXACT_ITEMS = 12
EXACT_NODES = 20_000


def _limit(capacity: float) -> float:
    return capacity * (1 + LOAD_TOLERANCE)


def _best_fit_decreasing(q: np.ndarray, limit: float, stops: float) -> list[list[int]]:
    """Best-fit decreasing: heaviest first, into the open trip with the least room that still fits
    (room kept sorted, ``bisect``: O(log trips) per delivery); a trip with ``S`` stops is closed."""
    rooms: list[tuple[float, int]] = []
    members: list[list[int]] = []
    for j in np.argsort(-q, kind="stable").tolist():
        x = float(q[j])
        k = bisect.bisect_left(rooms, (x - limit * LOAD_TOLERANCE, -1))
        if k < len(rooms):
            room, b = rooms.pop(k)
        else:
            room, b = limit, len(members)
            members.append([])
        members[b].append(j)
        if len(members[b]) < stops:
            bisect.insort(rooms, (room - x, b))
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
    packing = _best_fit_decreasing(q, limit, stops)
    bound = max(math.ceil(float(q.sum()) / limit), math.ceil(m / stops), 1)
    if len(packing) > bound and m <= EXACT_ITEMS:
        exact = _exact(q, limit, stops, len(packing) - 1)
        if exact is not None:
            packing = exact
    return packing


def _snake(rank: np.ndarray, bins: np.ndarray) -> np.ndarray:
    """Trip of the delivery of rank ``rank`` (heaviest first) dealt to ``bins`` trips in snake order."""
    lap, pos = rank // bins, rank % bins
    return np.where(lap % 2 == 0, pos, bins - 1 - pos)


def _pack_one(trip, start, count, quantity, capacity, max_stops) -> int:
    packing = pack_date(quantity[start : start + count], capacity, max_stops)
    for b, members in enumerate(packing):
        trip[start + np.asarray(members, dtype=np.int64)] = b
    return len(packing)


def _pack_distinct(groups, trip, starts, counts, L, site, quantity, capacity, max_stops) -> None:
    """Step 3 on the dates ``groups``, once per distinct date (same sites and quantities): a periodic plan
    repeats its dates, and equal dates get the same trips."""
    if len(groups) == 0:
        return
    # a fingerprint of each date's deliveries: two random projections of its sites and quantities
    rng = np.random.default_rng(0)
    a, b = rng.random(int(site.max()) + 1), rng.random(int(site.max()) + 1)
    which = np.repeat(np.arange(len(groups)), counts[groups])
    pos = np.concatenate([np.arange(starts[g], starts[g] + counts[g]) for g in groups.tolist()])
    keys = np.stack(
        [
            counts[groups].astype(float),
            np.bincount(which, weights=a[site[pos]]),
            np.bincount(which, weights=b[site[pos]] * quantity[pos]),
        ],
        axis=1,
    )
    _, first, inverse = np.unique(keys, axis=0, return_index=True, return_inverse=True)
    for j, g in enumerate(groups.tolist()):
        rep = groups[first[inverse[j]]]
        if rep == g:
            L[g] = _pack_one(trip, starts[g], counts[g], quantity, capacity, max_stops)
    for j, g in enumerate(groups.tolist()):
        rep = groups[first[inverse[j]]]
        if rep != g:
            trip[starts[g] : starts[g] + counts[g]] = trip[starts[rep] : starts[rep] + counts[rep]]
            L[g] = L[rep]


def least_trips(day: np.ndarray, quantity: np.ndarray, capacity: float, max_stops: int | None):
    """Per date (deliveries sorted by day): ``(starts, counts, dates, L)`` with the lower bound
    ``L = max(⌈load / W⌉, ⌈count / S⌉, 1)`` on its trips."""
    count_all = len(day)
    starts = np.flatnonzero(np.concatenate([[True], day[1:] != day[:-1]]))
    counts = np.diff(np.append(starts, count_all))
    loads = np.add.reduceat(quantity, starts)
    limit = _limit(capacity)
    stops = math.inf if max_stops is None else max_stops
    by_load = np.ceil(loads / limit) if math.isfinite(limit) else np.ones(len(starts))
    L = np.maximum(np.maximum(by_load, np.ceil(counts / stops)), 1).astype(np.int64)
    return starts, counts, day[starts], L


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
    starts, counts, dates, L = least_trips(day, quantity, capacity, max_stops)
    limit = _limit(capacity)
    multi = L > 1
    if not multi.any():
        return trip, dates, L
    group = np.repeat(np.arange(len(starts)), counts)
    order = np.lexsort((site, -quantity, group))
    rank = np.arange(count_all) - starts[group[order]]
    bins = L
    trip[order] = _snake(rank, bins[group[order]])
    base = np.cumsum(bins) - bins
    bin_load = np.bincount(base[group] + trip, weights=quantity, minlength=int(bins.sum()))
    over = np.zeros(len(starts), dtype=bool)
    np.logical_or.at(over, np.repeat(np.arange(len(starts)), bins), bin_load > limit)
    _pack_distinct(np.flatnonzero(over), trip, starts, counts, L, site, quantity, capacity, max_stops)
    return trip, dates, L
    for g in np.flatnonzero(over).tolist():
        lo, hi = starts[g], starts[g] + counts[g]
        packing = pack_date(quantity[lo:hi], capacity, max_stops)
        for b, members in enumerate(packing):
            trip[lo + np.asarray(members, dtype=np.int64)] = b
        L[g] = len(packing)
    return trip, dates, L
