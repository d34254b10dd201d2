"""Driving order of one trip: the shortest closed tour from the depot through its stops and back.

Trips of a bulk-liquid truck have few stops (a tank truck of 20–40 m³ serves a handful of tanks), so:

* up to ``EXACT_STOPS`` stops the **Held–Karp dynamic programme** (Held & Karp 1962) gives the exact
  optimum: with node 0 the depot, ``C(S, j) = min_{k ∈ S∖{j}} C(S∖{j}, k) + d(k, j)``,
  ``C({j}, j) = d(0, j)``, tour length ``min_j C(N, j) + d(j, 0)``; ``O(2ⁿ n²)`` time, evaluated layer
  by layer (subsets of equal size) with numpy;
* above it, **2-opt** (reverse a segment) and **Or-opt** (move a run of 1–3 stops) local search from the
  nearest-neighbour tour and from a few seeded random tours, the best kept.

No routing library: trips this small are solved exactly faster than a library call is set up, and the
planning core stays numpy/scipy only (``docs/fleet.md``). ``d`` may be asymmetric for the exact
programme; the local search assumes symmetry when it reverses segments.
"""

from __future__ import annotations

import random
from dataclasses import dataclass

import numpy as np

#: Stops up to which a trip is routed exactly (Held–Karp).
EXACT_STOPS = 12
#: Random starts of the local search (besides the nearest-neighbour tour); seeded, so answers repeat.
RESTARTS = 8


@dataclass(frozen=True)
class Tour:
    """``order``: node indices from the depot (0) through every stop back to 0; ``length``: its length;
    ``legs``: the length of each leg (``len(order) − 1`` values); ``exact``: proven shortest."""

    order: tuple[int, ...]
    length: float
    legs: tuple[float, ...]
    exact: bool


def _tour(d: np.ndarray, inner: list[int], exact: bool) -> Tour:
    order = (0, *inner, 0)
    legs = tuple(float(d[a, b]) for a, b in zip(order[:-1], order[1:], strict=True))
    return Tour(order, float(sum(legs)), legs, exact)


def held_karp(d: np.ndarray) -> list[int]:
    """The exact shortest tour's stop order (nodes ``1 … n`` of ``d``), by the programme above."""
    n = d.shape[0] - 1
    if n <= 1:
        return list(range(1, n + 1))
    full = 1 << n
    cost = np.full((full, n), np.inf)
    parent = np.full((full, n), -1, dtype=np.int64)
    single = 1 << np.arange(n)
    cost[single, np.arange(n)] = d[0, 1:]
    masks = np.arange(full)
    popcount = np.zeros(full, dtype=np.int64)
    for j in range(n):
        popcount += (masks >> j) & 1
    inner = d[1:, 1:]
    for size in range(2, n + 1):
        layer = masks[popcount == size]
        for j in range(n):
            sel = layer[(layer >> j) & 1 == 1]
            prev = sel ^ (1 << j)
            total = cost[prev] + inner[:, j][None, :]
            k = np.argmin(total, axis=1)
            cost[sel, j] = total[np.arange(len(sel)), k]
            parent[sel, j] = k
    last = int(np.argmin(cost[full - 1] + d[1:, 0]))
    mask, order = full - 1, []
    while last >= 0:
        order.append(last + 1)
        mask, last = mask ^ (1 << last), int(parent[mask, last])
    return order[::-1]


def _length(d: np.ndarray, inner: list[int]) -> float:
    path = [0, *inner, 0]
    return float(sum(d[a, b] for a, b in zip(path[:-1], path[1:], strict=True)))


def _two_opt(d: np.ndarray, path: list[int]) -> bool:
    """One first-improvement pass of 2-opt on the closed ``path`` (depot at both ends)."""
    improved = False
    m = len(path)
    for a in range(m - 3):
        for b in range(a + 2, m - 1):
            p, q, r, s = path[a], path[a + 1], path[b], path[b + 1]
            if d[p, r] + d[q, s] < d[p, q] + d[r, s] - 1e-12:
                path[a + 1 : b + 1] = path[a + 1 : b + 1][::-1]
                improved = True
    return improved


def _or_opt(d: np.ndarray, path: list[int]) -> bool:
    """One pass of Or-opt: move a run of 1–3 stops (either direction) to its best other place."""
    improved = False
    for run in (1, 2, 3):
        a = 1
        while a + run < len(path):
            seg = path[a : a + run]
            before, after = path[a - 1], path[a + run]
            removed = d[before, seg[0]] + d[seg[-1], after] - d[before, after]
            rest = path[:a] + path[a + run :]
            best, where, flip = -1e-12, None, False
            for k in range(len(rest) - 1):
                u, v = rest[k], rest[k + 1]
                for rev in (False, True):
                    s0, s1 = (seg[-1], seg[0]) if rev else (seg[0], seg[-1])
                    gain = removed - (d[u, s0] + d[s1, v] - d[u, v])
                    if gain > best + 1e-12 and not (k == a - 1 and not rev):
                        best, where, flip = gain, k, rev
            if where is not None and best > 1e-12:
                path[:] = rest[: where + 1] + (seg[::-1] if flip else seg) + rest[where + 1 :]
                improved = True
            a += 1
    return improved


def _local_search(d: np.ndarray, inner: list[int]) -> list[int]:
    path = [0, *inner, 0]
    while _two_opt(d, path) or _or_opt(d, path):
        pass
    return path[1:-1]


def _nearest_neighbour(d: np.ndarray) -> list[int]:
    left, at, out = set(range(1, d.shape[0])), 0, []
    while left:
        at = min(left, key=lambda j: (d[at, j], j))
        out.append(at)
        left.remove(at)
    return out


def shortest_tour(d: np.ndarray, exact_stops: int = EXACT_STOPS, restarts: int = RESTARTS) -> Tour:
    """Route one trip: ``d`` is the ``(n+1) × (n+1)`` distance matrix with the depot as node 0.

    Exact (Held–Karp) for ``n ≤ exact_stops``, else the best of 2-opt/Or-opt local search from the
    nearest-neighbour tour and ``restarts`` seeded random tours (``exact`` false).
    """
    d = np.asarray(d, dtype=float)
    n = d.shape[0] - 1
    if n <= exact_stops:
        return _tour(d, held_karp(d), exact=True)
    rng = random.Random(n)
    best = _local_search(d, _nearest_neighbour(d))
    best_length = _length(d, best)
    for _ in range(restarts):
        start = list(range(1, n + 1))
        rng.shuffle(start)
        found = _local_search(d, start)
        length = _length(d, found)
        if length < best_length - 1e-9:
            best, best_length = found, length
    return _tour(d, best, exact=False)
