"""The truck's working week seen from a start date: working-day indices and calendar days.

Working day ``w = 0, 1, 2, …`` is the ``w``-th date on or after day 0 whose ISO weekday is a working
day (closed dates are exceptions handled when trips are listed, not here). With ``n`` working
weekdays and ``e_0 < … < e_{n-1}`` the calendar offsets (0–6) of the first week's working days,

    cal(w) = 7 ⌊w / n⌋ + e_{w mod n},

so ``n`` working days are exactly one calendar week. The longest calendar span of ``m`` consecutive
working days is ``span(m) = 7 ⌊m / n⌋ + max_j (cal(j + m mod n) − cal(j))``; it is non-decreasing in
``m``, and a site that lasts ``u`` whole days can be delivered every ``m`` working days exactly when
``span(m) ≤ u``.
"""

from __future__ import annotations

import datetime as dt
import math
from dataclasses import dataclass

import numpy as np


@dataclass(frozen=True)
class WorkWeek:
    """Working weekdays ``working_days`` (ISO) counted from ``start`` (day 0)."""

    start: dt.date
    working_days: tuple[int, ...]

    @property
    def n(self) -> int:
        """Working days per week."""
        return len(self.working_days)

    @property
    def offsets(self) -> np.ndarray:
        """``e_j``: calendar offsets (0–6) of the working days of the first week, sorted."""
        first = self.start.isoweekday()
        return np.sort(np.array([(d - first) % 7 for d in self.working_days], dtype=np.int64))

    def calendar_day(self, w):
        """``cal(w)`` for working-day indices ``w`` (array or int, ``w ≥ 0``)."""
        w = np.asarray(w, dtype=np.int64)
        return 7 * (w // self.n) + self.offsets[w % self.n]

    def span(self, m):
        """Longest calendar span of ``m`` working days (``m ≥ 0``, vectorised)."""
        m = np.asarray(m, dtype=np.int64)
        j = np.arange(self.n)
        extra = np.array([int((self.calendar_day(j + r) - self.calendar_day(j)).max()) for r in range(self.n)])
        return 7 * (m // self.n) + extra[m % self.n]

    @property
    def longest_gap(self) -> int:
        """The longest stretch between two consecutive working days, ``span(1)`` (3 for Monday–Friday)."""
        return int(self.span(1))

    def caps(self, whole_days: np.ndarray) -> np.ndarray:
        """Largest ``m`` with ``span(m) ≤ u_i`` (0 when even one working day is too long)."""
        u = np.asarray(whole_days, dtype=np.int64)
        top = int(u.max()) + 1
        spans = self.span(np.arange(top + 1))
        return np.searchsorted(spans, u, side="right") - 1

    def is_working(self, days) -> np.ndarray:
        """Whether day index ``days`` (days since ``start``, any integer) falls on a working weekday."""
        days = np.asarray(days, dtype=np.int64)
        mask = np.zeros(7, dtype=bool)
        mask[self.offsets] = True
        return mask[days % 7]

    def period_days(self, m: int) -> int:
        """Calendar period of a cycle of ``m`` working days: ``7 lcm(m, n) / n`` (whole weeks)."""
        return 7 * math.lcm(int(m), self.n) // self.n
