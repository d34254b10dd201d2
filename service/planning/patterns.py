"""Site delivery patterns: a period and the delivery offsets inside it.

Site ``i`` has a period ``P_i`` (days) and sorted offsets ``0 ≤ o_1 < … < o_n < P_i``; it is delivered on
days ``o + j P_i``. Its gaps are the cyclic differences ``g_j = o_{j+1} − o_j`` (``o_{n+1} = o_1 + P_i``), and a
delivery on ``o_j`` carries ``d_i g_j`` (just enough until the next one). Between two deliveries ``g`` days
apart the level falls linearly from ``s_i + d_i g`` to ``s_i``, so the holding cost of the gap is
``h_i d_i g² / 2 = H_i g²``, and the site's stop and holding cost per day is

    (k_i n + H_i Σ_j g_j²) / P_i        (k_i / T + H_i T for a plain cycle of T days).

The slots (one per offset) are kept flat: ``site``, ``offset``, ``gap`` arrays sorted by site then offset.
The plan repeats every ``R = lcm(P_i)`` days.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from service.planning.workweek import WorkWeek


@dataclass(frozen=True)
class Patterns:
    """Per-site periods and the flat delivery slots (see the module docstring)."""

    period: np.ndarray
    site: np.ndarray
    offset: np.ndarray
    gap: np.ndarray

    @property
    def repeat(self) -> int:
        """``R = lcm(P_i)``."""
        return math.lcm(*np.unique(self.period).tolist())

    def deliveries_per_repeat(self) -> int:
        """Number of deliveries in one repeat period (Python int; may be huge)."""
        R = self.repeat
        return sum(R // int(p) * int(c) for p, c in zip(*self._slots_by_period(), strict=True))

    def _slots_by_period(self):
        periods = self.period[self.site]
        values, counts = np.unique(periods, return_counts=True)
        return values, counts

    def site_costs(self, stop_cost: np.ndarray, H: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """Per-site stop and holding cost per day, ``(k n / P, H Σ g² / P)``."""
        n = len(self.period)
        count = np.bincount(self.site, minlength=n)
        squares = np.bincount(self.site, weights=self.gap.astype(float) ** 2, minlength=n)
        return stop_cost * count / self.period, H * squares / self.period

    def longest_gap(self) -> np.ndarray:
        """Longest gap of each site."""
        out = np.zeros(len(self.period), dtype=np.int64)
        np.maximum.at(out, self.site, self.gap)
        return out

    def slot_count(self) -> np.ndarray:
        """Deliveries per period of each site."""
        return np.bincount(self.site, minlength=len(self.period))

    def deliveries(self, first: int, last: int) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """Deliveries on days ``first … last`` as ``(day, site, gap)`` sorted by day then site (vectorised)."""
        P = self.period[self.site]
        t0 = first + (self.offset - first) % P
        counts = np.where(t0 <= last, (last - t0) // P + 1, 0)
        total = int(counts.sum())
        slot = np.repeat(np.arange(len(self.site)), counts)
        starts = np.cumsum(counts) - counts
        j = np.arange(total) - np.repeat(starts, counts)
        day = t0[slot] + j * P[slot]
        site = self.site[slot]
        order = np.lexsort((site, day))
        return day[order], site[order], self.gap[slot][order]


def plain(cycles: np.ndarray, offsets: np.ndarray) -> Patterns:
    """Plain cycles ``T_i`` with offsets ``o_i < T_i``: one slot per site, gap ``T_i``."""
    cycles = np.asarray(cycles, dtype=np.int64)
    n = len(cycles)
    return Patterns(cycles, np.arange(n), np.asarray(offsets, dtype=np.int64), cycles.copy())


def from_working_cycles(week: WorkWeek, multiples: np.ndarray, residues: np.ndarray) -> Patterns:
    """Calendar patterns of cycles of ``m_i`` working days starting on working day ``r_i``.

    The working-day indices ``r_i + j m_i`` repeat with the week after ``L_i = lcm(m_i, n)`` working
    days (``L_i = m_i`` when all seven days work), i.e. ``P_i = 7 L_i / n`` calendar days; the offsets are ``cal(r_i + j m_i)``, ``j < L_i / m_i``.
    With seven working days and day 0 this is the plain cycle ``T_i = m_i``, offset ``r_i``.
    """
    multiples = np.asarray(multiples, dtype=np.int64)
    residues = np.asarray(residues, dtype=np.int64)
    n = len(multiples)
    period = np.zeros(n, dtype=np.int64)
    sites, offsets, gaps = [], [], []
    for m in np.unique(multiples).tolist():
        members = np.flatnonzero(multiples == m)
        L = m if week.n == 7 else math.lcm(m, week.n)  # with every day working, cal(w + m) = cal(w) + m
        P = 7 * L // week.n
        period[members] = P
        w = residues[members][:, None] + m * np.arange(L // m)[None, :]
        cal = week.calendar_day(w)
        nxt = np.concatenate([cal[:, 1:], cal[:, :1] + P], axis=1)
        sites.append(np.repeat(members, L // m))
        offsets.append(cal.ravel())
        gaps.append((nxt - cal).ravel())
    site, offset, gap = np.concatenate(sites), np.concatenate(offsets), np.concatenate(gaps)
    order = np.lexsort((offset, site))
    return Patterns(period, site[order], offset[order], gap[order])


def from_site_lists(periods, delivery_days) -> Patterns:
    """Patterns from per-site ``period_days`` and sorted ``delivery_days`` (e.g. a stored plan)."""
    period = np.asarray(periods, dtype=np.int64)
    site = np.repeat(np.arange(len(period)), [len(o) for o in delivery_days])
    offset = np.asarray([o for offs in delivery_days for o in offs], dtype=np.int64)
    nxt = np.asarray(
        [o for p, offs in zip(periods, delivery_days, strict=True) for o in (*offs[1:], offs[0] + p)], dtype=np.int64
    )
    return Patterns(period, site, offset, nxt - offset)
