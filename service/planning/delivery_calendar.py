"""The delivery calendar of a staggered policy: which sites are served on a day, and trips.

Site ``i`` is delivered ``Q_i`` on days ``o_i + j T_i``. A day whose stops fit the truck
(load ≤ ``W``, count ≤ ``max_stops``) is one trip with the stops in input order; an
over-full day is split by first-fit decreasing (largest delivery first, ties by input
order, into the first trip with room in load and stops), each split trip again listing its
stops in input order. Every delivery fits a trip on its own because ``Q_i ≤ q_i ≤ W``.
"""

from __future__ import annotations

import math

import numpy as np

from service.planning.results import Stop, Trip

#: Relative slack when comparing a load with the truck capacity (float rounding of ``d_i T_i``).
LOAD_TOLERANCE = 1e-9


class Calendar:
    """Index of the deliveries by ``(T_i, o_i)`` for fast lookup of any day's stops.

    Parameters
    ----------
    codes : sequence of str
    cycles, offsets : ndarray of int
        ``T_i`` and ``o_i`` (``0 ≤ o_i < T_i``), days.
    quantity : ndarray
        ``Q_i``.
    capacity : float
        ``W`` (``inf`` for none).
    max_stops : int or None
    """

    def __init__(self, codes, cycles, offsets, quantity, capacity: float, max_stops: int | None):
        self.codes = tuple(codes)
        self.quantity = np.asarray(quantity, dtype=float)
        self.capacity = capacity
        self.max_stops = max_stops
        cycles = np.asarray(cycles, dtype=np.int64)
        offsets = np.asarray(offsets, dtype=np.int64)
        self._order = np.lexsort((np.arange(len(cycles)), offsets, cycles))
        sorted_cycles, sorted_offsets = cycles[self._order], offsets[self._order]
        self._groups = []
        for T in np.unique(cycles).tolist():
            lo, hi = np.searchsorted(sorted_cycles, [T, T + 1])
            bounds = lo + np.searchsorted(sorted_offsets[lo:hi], np.arange(T + 1))
            self._groups.append((T, bounds))

    def sites_on(self, day: int) -> np.ndarray:
        """Indices (input order) of the sites delivered on ``day`` (any integer)."""
        parts = []
        for T, bounds in self._groups:
            r = day % T
            if bounds[r] < bounds[r + 1]:
                parts.append(self._order[bounds[r] : bounds[r + 1]])
        return np.sort(np.concatenate(parts)) if parts else np.zeros(0, dtype=np.int64)

    def fits(self, load: float, count: int) -> bool:
        """Whether one trip can carry ``load`` in ``count`` stops."""
        return load <= self.capacity * (1 + LOAD_TOLERANCE) and (self.max_stops is None or count <= self.max_stops)

    def split(self, sites: np.ndarray) -> list[np.ndarray]:
        """The day's trips as arrays of site indices (see the module docstring)."""
        q = self.quantity[sites]
        if self.fits(float(q.sum()), len(sites)):
            return [sites]
        loads: list[float] = []
        members: list[list[int]] = []
        limit = self.capacity * (1 + LOAD_TOLERANCE)
        stops = math.inf if self.max_stops is None else self.max_stops
        for j in np.argsort(-q, kind="stable").tolist():
            for b, load in enumerate(loads):
                if load + q[j] <= limit and len(members[b]) < stops:
                    loads[b] += q[j]
                    members[b].append(j)
                    break
            else:
                loads.append(float(q[j]))
                members.append([j])
        return [sites[np.sort(np.asarray(m))] for m in members]

    def trips_on(self, day: int) -> list[Trip]:
        """The trips on ``day``, as the policy delivers them."""
        sites = self.sites_on(day)
        if len(sites) == 0:
            return []
        trips = []
        for group in self.split(sites):
            q = self.quantity[group].tolist()
            stops = tuple(Stop(self.codes[i], x) for i, x in zip(group.tolist(), q, strict=True))
            trips.append(Trip(day=int(day), load=float(sum(q)), stops=stops))
        return trips
