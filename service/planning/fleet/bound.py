"""A lower bound on the cost per day of every network plan, whatever the assignment of sites to trucks.

Notation: site ``i`` uses ``d_i`` per day, has holding term ``H_i = h_i d_i / 2``, stop cost ``k_i`` and
longest mean gap ``U_i`` (usable stock over ``d_i``, the stock capped by the largest truck that may serve
it); truck ``t`` costs ``K_t`` per trip and ``c_t`` per km, carries ``W_t`` in at most ``S_t`` stops;
``r_it`` is the distance from ``t``'s depot to ``i``, ``ν_i`` the distance from ``i`` to the nearest other
place (site or depot). ``E_i`` are the trucks that may serve ``i``.

**Per trip.** A trip of truck ``t`` through the stops ``S`` with loads ``q_i`` (``Σ q_i ≤ W_t``) has length
``L ≥ 2 max_S r_it ≥ 2 Σ_S r_it q_i / W_t`` (triangle inequality: both halves of the tour reach the
farthest stop) and ``L ≥ Σ_S ν_i`` (each stop has two incident edges of the closed tour, each at least
``ν_i`` long; every edge is counted from both its ends, so ``L ≥ ½ Σ_v 2 ν_v``), and ``K_t ≥ K_t Σ q_i / W_t``,
``K_t ≥ K_t |S| / S_t``. So for every ``θ ∈ [0, 1]``

    K_t + c_t L ≥ Σ_S [θ q_i a_i + (1 − θ) b_i],
    a_i = min_{t ∈ E_i} (K_t + 2 c_t r_it) / W_t,   b_i = min_{t ∈ E_i} (K_t / S_t + c_t ν_i).

**Per site.** Over a repeat period of ``R`` days site ``i`` gets ``n`` deliveries with whole-day gaps
``g_j ≥ 1``, ``Σ g_j = R``, ``g_j ≤ U_i``, each ``d_i g_j`` (so ``Σ q = d_i R``). Its stop and holding
cost is ``(k_i n + H_i Σ g_j²) / R ≥ k_i / ḡ + H_i ḡ`` with ``ḡ = R / n`` (Cauchy–Schwarz:
``Σ g² ≥ R² / n``). Adding the trip shares and dividing by ``R``, every plan costs per day at least

    LB(θ) = Σ_i [θ a_i d_i + min_{1 ≤ ḡ ≤ U_i} ((k_i + (1 − θ) b_i) / ḡ + H_i ḡ)],

for every ``θ``; the bound is the largest over a grid of ``θ``. It holds for any assignment (each site
uses its own cheapest truck), any routing and any calendar (calendars only remove plans). The proof
is also in ``docs/fleet.md``.
"""

from __future__ import annotations

from collections.abc import Callable, Sequence

import numpy as np
from scipy.spatial import cKDTree

from service.planning.fleet.distance import CircuityDistance, DistanceSource, Point, great_circle_km

#: Values of θ tried.
THETAS = np.linspace(0.0, 1.0, 21)
#: Rows of a distance block when looking for nearest places (bounds memory at 10 000 sites).
BLOCK = 512


def nearest_other(
    sites: Sequence[Point], depots: Sequence[Point], source: DistanceSource, tick: Callable[[], None] = lambda: None
) -> np.ndarray:
    """``ν_i``: distance from each site to the nearest other site or depot (both directions).

    For :class:`CircuityDistance` (a constant times the great circle, which grows with the straight
    chord through the Earth) the nearest place by chord is found with a k-d tree; any other source is
    searched in blocks of its matrix. ``tick`` is called between blocks.
    """
    places = list(sites) + list(depots)
    if isinstance(source, CircuityDistance) and len(places) > 1:
        xyz = _unit(places)
        _, idx = cKDTree(xyz).query(xyz[: len(sites)], k=2)
        mine = np.arange(len(sites))
        other = [places[j] for j in np.where(idx[:, 0] == mine, idx[:, 1], idx[:, 0])]
        return source.factor * np.array([great_circle_km([a], [b])[0, 0] for a, b in zip(sites, other, strict=True)])
    out = np.empty(len(sites))
    for lo in range(0, len(sites), BLOCK):
        tick()
        rows = list(range(lo, min(lo + BLOCK, len(sites))))
        there = source.matrix([sites[i] for i in rows], places)
        back = source.matrix(places, [sites[i] for i in rows]).T
        both = np.minimum(there, back)
        both[np.arange(len(rows)), rows] = np.inf
        out[rows] = both.min(axis=1)
    return out


def _unit(points: Sequence[Point]) -> np.ndarray:
    la = np.radians([p.latitude for p in points])
    lo = np.radians([p.longitude for p in points])
    return np.column_stack([np.cos(la) * np.cos(lo), np.cos(la) * np.sin(lo), np.sin(la)])


def network_bound(
    demand: np.ndarray, H: np.ndarray, stop_cost: np.ndarray, longest: np.ndarray, a: np.ndarray, b: np.ndarray
) -> tuple[float, float]:
    """``max_θ LB(θ)`` and its ``θ`` (module docstring); ``longest`` are the ``U_i`` (each ≥ 1)."""
    best, best_theta = -np.inf, 0.0
    for theta in THETAS:
        k = stop_cost + (1.0 - theta) * b
        g = np.clip(np.sqrt(np.divide(k, H, out=np.full_like(k, np.inf), where=H > 0)), 1.0, longest)
        value = float(np.sum(theta * a * demand + k / g + H * g))
        if value > best:
            best, best_theta = value, float(theta)
    return best, best_theta
