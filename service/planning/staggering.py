"""Offsets that level the truck's trip loads (the staggering problem).

Site ``i`` with multiple ``m_i`` is delivered on base trips ``t ≡ r_i (mod m_i)``; the
offset in days is ``r_i T0``. Choosing the ``r_i`` to minimise the peak trip load is NP-hard
(Gallego, Shaw & Simchi-Levi 1992; Hum, Sharafali & Teo 2005). The greedy here goes
through the cycle classes from the shortest, and inside a class from the heaviest site,
putting each site on the residue whose current peak is lowest (longest-processing-time
order within the class). For nested multiples (power-of-two) the load on residue ``r`` of
class ``m`` is exact and the greedy's peak is at most ``A + max Q_i`` with
``A = Σ Q_i / m_i`` the average trip load (see ``docs/planning.md``); for other multiples
the earlier classes are bounded by their largest compatible residue, so the greedy works
with an upper bound.
"""

from __future__ import annotations

import heapq
import math

import numpy as np


def site_weights(quantity: np.ndarray, capacity: float, max_stops: int | None) -> np.ndarray:
    """What the greedy levels: ``Q_i / W + 1 / max_stops`` (missing limits drop out; ``Q_i`` with none)."""
    weight = np.zeros_like(quantity)
    if math.isfinite(capacity):
        weight = weight + quantity / capacity
    if max_stops is not None:
        weight = weight + 1.0 / max_stops
    return weight if (math.isfinite(capacity) or max_stops is not None) else quantity.copy()


def stagger(multiples: np.ndarray, weight: np.ndarray) -> np.ndarray:
    """Residues ``r_i ∈ [0, m_i)`` chosen by the class-by-class greedy.

    Parameters
    ----------
    multiples : ndarray of int
        ``m_i = T_i / T0``.
    weight : ndarray
        Per-delivery weight to level (see :func:`site_weights`).
    """
    residues = np.zeros(len(multiples), dtype=np.int64)
    placed: dict[int, np.ndarray] = {}
    for m in np.unique(multiples).tolist():
        members = np.flatnonzero(multiples == m)
        members = members[np.argsort(-weight[members], kind="stable")]
        start = np.zeros(m)
        for earlier, sums in placed.items():
            g = math.gcd(m, earlier)
            start += sums.reshape(earlier // g, g).max(axis=0)[np.arange(m) % g]
        if m > 1:
            heap = [(float(level), r) for r, level in enumerate(start)]
            heapq.heapify(heap)
            chosen = np.empty(len(members), dtype=np.int64)
            for j, w in enumerate(weight[members].tolist()):
                level, r = heap[0]
                chosen[j] = r
                heapq.heapreplace(heap, (level + w, r))
            residues[members] = chosen
        placed[m] = np.bincount(residues[members], weights=weight[members], minlength=m)
    return residues
