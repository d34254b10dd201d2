"""Which truck serves each site: a sweep around the depots, then relocation moves.

1. **Eligibility.** Site ``i`` may go to truck ``t`` when ``t`` carries ``i``'s product and, if the site
   names a depot, ``t`` is based there.
2. **Sweep** (after Gillett & Miller 1974's sweep heuristic): each site goes to the nearest depot that
   has an eligible truck; around each depot the sites are sorted by bearing and cut into consecutive
   sectors, one per truck of the depot, each sector's demand proportional to the truck's throughput
   ``W_t × trips_per_day × working days / 7`` (one trip a day when unlimited; a truck with a shift: the
   trips and load its shift holds, :func:`shift_trips`). A site whose sector truck
   may not carry it goes to the eligible truck of its depot with the most spare throughput.
3. **Relocation.** Each site is moved to the eligible truck with the lowest surrogate cost per day
   ``d_i (K_t + 2 c_t r_it) / W_t + 2 c_t ν_it d_i / min(q_i, W_t)`` (its radial full-load share plus a
   detour to the nearest site already on ``t``, ``ν_it``, at each delivery of the largest size ``q_i``)
   when that is lower and ``t`` has throughput to spare; two passes.
4. **Throughput.** A truck still over its throughput hands its farthest sites to the nearest eligible
   truck with room, or leaves them unserved.
"""

from __future__ import annotations

from collections.abc import Callable

import numpy as np
from scipy.spatial import cKDTree

from service.planning.fleet.distance import EARTH_RADIUS_KM

#: Relocation passes.
PASSES = 2
#: Trucks considered per site in a relocation pass (nearest depots first).
CANDIDATES = 4


def _xyz(lat: np.ndarray, lon: np.ndarray) -> np.ndarray:
    la, lo = np.radians(lat), np.radians(lon)
    return EARTH_RADIUS_KM * np.column_stack([np.cos(la) * np.cos(lo), np.cos(la) * np.sin(lo), np.sin(la)])


def sweep(
    lat: np.ndarray,
    lon: np.ndarray,
    eligible: np.ndarray,
    r: np.ndarray,
    truck_depot: np.ndarray,
    depot_lat: np.ndarray,
    depot_lon: np.ndarray,
    demand: np.ndarray,
    throughput: np.ndarray,
) -> np.ndarray:
    """Truck index of each site (``-1`` when none is eligible), by step 2 of the module docstring."""
    n, m = eligible.shape
    out = np.full(n, -1)
    load = np.zeros(m)
    masked = np.where(eligible, r, np.inf)
    nearest_truck = np.argmin(masked, axis=1)
    home = truck_depot[nearest_truck]
    for g in np.unique(home[eligible.any(axis=1)]):
        members = np.flatnonzero((home == g) & eligible.any(axis=1))
        trucks = np.flatnonzero(truck_depot == g)
        dx = (lon[members] - depot_lon[g]) * np.cos(np.radians(depot_lat[g]))
        dy = lat[members] - depot_lat[g]
        members = members[np.argsort(np.arctan2(dy, dx), kind="stable")]
        share = np.cumsum(throughput[trucks]) / throughput[trucks].sum()
        position = (np.cumsum(demand[members]) - demand[members] / 2) / demand[members].sum()
        sector = trucks[np.minimum(np.searchsorted(share, position), len(trucks) - 1)]
        for i, t in zip(members, sector, strict=True):
            if not eligible[i, t]:
                mine = trucks[eligible[i, trucks]]
                t = mine[np.argmin(load[mine] / throughput[mine])]
            out[i] = t
            load[t] += demand[i]
    return out


def relocate(
    assigned: np.ndarray,
    lat: np.ndarray,
    lon: np.ndarray,
    eligible: np.ndarray,
    r: np.ndarray,
    demand: np.ndarray,
    usable: np.ndarray,
    dispatch: np.ndarray,
    per_km: np.ndarray,
    capacity: np.ndarray,
    limit: np.ndarray,
    circuity: float,
    tick: Callable[[], None] = lambda: None,
) -> np.ndarray:
    """Step 3 of the module docstring; ``limit`` is each truck's throughput per day (``inf``: none)."""
    assigned = assigned.copy()
    xyz = _xyz(lat, lon)
    n, m = eligible.shape
    for _ in range(PASSES):
        load = np.bincount(assigned[assigned >= 0], weights=demand[assigned >= 0], minlength=m)
        trees = {}
        for t in range(m):
            on = np.flatnonzero(assigned == t)
            if len(on):
                trees[t] = (cKDTree(xyz[on]), on)
        moved = 0
        for count, i in enumerate(np.flatnonzero(assigned >= 0)):
            if count % 256 == 0:
                tick()
            options = np.flatnonzero(eligible[i])
            options = options[np.argsort(r[i, options])][:CANDIDATES]
            if assigned[i] not in options:
                options = np.append(options, assigned[i])
            costs = []
            for t in options.tolist():
                detour = r[i, t]
                if t in trees:
                    tree, on = trees[t]
                    dist, idx = tree.query(xyz[i], k=min(2, len(on)))
                    dist, idx = np.atleast_1d(dist), np.atleast_1d(idx)
                    others = [d for d, j in zip(dist, idx, strict=True) if on[j] != i]
                    if others:
                        detour = min(detour, circuity * others[0])
                size = min(usable[i], capacity[t])
                costs.append(
                    demand[i] * (dispatch[t] + 2 * per_km[t] * r[i, t]) / capacity[t]
                    + 2 * per_km[t] * detour * demand[i] / size
                )
            best = options[int(np.argmin(costs))]
            now = assigned[i]
            if best != now and min(costs) < costs[list(options).index(now)] - 1e-9:
                if load[best] + demand[i] <= limit[best]:
                    load[best] += demand[i]
                    load[now] -= demand[i]
                    assigned[i] = best
                    moved += 1
        if not moved:
            break
    return assigned


def within_throughput(
    assigned: np.ndarray, eligible: np.ndarray, r: np.ndarray, demand: np.ndarray, limit: np.ndarray
) -> np.ndarray:
    """Keep each truck's demand per day within ``limit``: the farthest sites of a truck over it move to
    the nearest eligible truck with room, else are left unassigned (``-1``)."""
    assigned = assigned.copy()
    m = eligible.shape[1]
    load = np.bincount(assigned[assigned >= 0], weights=demand[assigned >= 0], minlength=m)
    for t in np.flatnonzero(load > limit):
        mine = np.flatnonzero(assigned == t)
        for i in mine[np.argsort(-r[mine, t], kind="stable")]:
            if load[t] <= limit[t]:
                break
            options = [u for u in np.flatnonzero(eligible[i]) if u != t and load[u] + demand[i] <= limit[u]]
            target = min(options, key=lambda u: r[i, u]) if options else -1
            assigned[i] = target
            load[t] -= demand[i]
            if target >= 0:
                load[target] += demand[i]
    return assigned


def shift_trips(
    r: np.ndarray,
    region: np.ndarray,
    demand: np.ndarray,
    size: np.ndarray,
    nu: np.ndarray,
    compartments: tuple[float, ...],
    max_stops: int | None,
    shift: float,
    speed: float,
    stop_h: float,
    load_h: float,
) -> tuple[float, float]:
    """Trips per working day a shift of ``shift`` hours holds, and the load of a typical trip, for a
    truck whose region is the sites ``region`` (``docs/fleet.md`` §6a).

    Over the region, weighted by demand ``d_i``: the depot distance ``r̄``, the delivery ``q̄`` (each
    delivery ``size`` of each site) and its cycle ``T̄ = q̄ / d̄``. A trip visits ``s`` stops, as many
    deliveries of ``q̄`` as the compartments hold when each needs compartments of its own (different
    products; compartments taken largest first until they hold ``q̄``), at least 1 and at most the stop
    limit; a delivery larger than the truck counts as a full load. Between stops it drives the nearest-neighbour
    distance among the sites served that day, a ``1 / T̄`` share of them: for points spread at density
    ``ρ`` the mean nearest-neighbour distance is ``1 / (2 √ρ)`` (Clark & Evans 1954, *Ecology* 35), so
    it grows from ``ν̄`` (nearest other place of each site) to ``ℓ = ν̄ √T̄``. The trip lasts

        τ = (2 r̄ + (s − 1) ℓ) / v + s · m_stop / 60 + m_load / 60   hours

    and the shift holds ``n = max(1, ⌊S / τ⌋)`` of them, each carrying ``min(W, s q̄)``."""
    capacity = float(sum(compartments))
    if not region.any():
        return 1.0, capacity
    w = demand[region] / demand[region].sum()
    r_bar = float(w @ r[region])
    q_bar = float(w @ size[region])
    cycle = max(1.0, q_bar / float(demand[region].mean()))
    stops, held = 0, 0.0
    for c in sorted(compartments, reverse=True):
        held += c
        if held >= q_bar:
            stops, held = stops + 1, 0.0
    stops = max(1, stops if max_stops is None else min(stops, max_stops))
    leg = float(w @ nu[region]) * np.sqrt(cycle)
    tau = (2.0 * r_bar + (stops - 1) * leg) / speed + stops * stop_h + load_h
    return float(max(1, np.floor(shift / tau))), float(min(capacity, stops * q_bar))
