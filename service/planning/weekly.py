"""Weekday patterns for sub-week rhythms: a site delivered on a fixed set of weekdays every week.

A set ``E`` of working weekdays (offsets from day 0, period 7) has cyclic gaps ``g``; it is allowed for
site ``i`` when every gap is at most ``u_i`` and costs ``(k_i |E| + H_i Σ g²) / 7`` per day. Monday,
Wednesday, Friday (gaps 2, 2, 3) serves a three-day tank on a Monday–Friday truck, where a cycle of two
working days (gaps 2, 2, 4, 2, 4) needs four days and the working-day axis falls back to every day.

The improvement step, one site at a time (largest own cost first): take the site out of the per-date
loads and counts of the plan's repeat period, score each allowed set cheaper for the site than its
pattern by ``K · Δ Σ_t L(t) / R + Δ own cost`` (``L(t)`` the per-date trip bound of ``rebalance.py``, with
a large charge for a date over ``trips_per_day``), and switch when that is negative. The planner keeps
the result only when its exact cost is lower.
"""

from __future__ import annotations

import itertools
import math
import time

import numpy as np

from service.planning.inputs import Problem
from service.planning.packing import LOAD_TOLERANCE
from service.planning.patterns import Patterns
from service.planning.workweek import WorkWeek

#: Repeat periods (days), and days × sites, above which the step is skipped (it is for sub-week rhythms on
#: a working calendar; with all seven days working the plain cycles already cover them).
MAX_DAYS = 20_000
MAX_WORK = 2_000_000


def _weekday_sets(week: WorkWeek):
    """Every non-empty set of working-day offsets: ``(offsets, gaps)`` with cyclic gaps over 7 days."""
    e = week.offsets.tolist()
    out = []
    for size in range(1, len(e) + 1):
        for subset in itertools.combinations(e, size):
            offs = np.array(subset, dtype=np.int64)
            gaps = np.diff(np.append(offs, offs[0] + 7))
            out.append((offs, gaps))
    return out


def improve_weekly(problem: Problem, week: WorkWeek, patterns: Patterns, deadline: float | None) -> Patterns | None:
    """Patterns with some sites on weekday sets (module docstring), or None when nothing changed."""
    R = math.lcm(patterns.repeat, 7)
    if week.n == 7 or R > MAX_DAYS or R * problem.n > MAX_WORK:
        return None
    sets = _weekday_sets(week)
    d, k, H, u = problem.demand, problem.stop_cost, problem.H, problem.whole_days
    limit = problem.capacity * (1 + LOAD_TOLERANCE)
    stops = math.inf if problem.max_stops is None else problem.max_stops
    tau = math.inf if problem.trips_per_day is None else problem.trips_per_day
    big = float(problem.n + 1)

    def need(load, count):
        by_load = np.ceil(load / limit) if math.isfinite(limit) else 0.0
        L = np.maximum(np.maximum(by_load, np.ceil(count / stops)), (count > 0).astype(float))
        return L + big * np.maximum(L - tau, 0.0)

    day, site, gap = patterns.deliveries(0, R - 1)
    load = np.bincount(day, weights=d[site] * gap, minlength=R)
    count = np.bincount(day, minlength=R).astype(float)
    own_stops, own_hold = patterns.site_costs(k, H)
    own = own_stops + own_hold
    per_site = {i: (day[site == i], gap[site == i]) for i in range(problem.n)}
    t7 = np.arange(R) % 7
    placed = []
    for offs, g in sets:
        where = np.flatnonzero(np.isin(t7, offs))
        placed.append((where, g[np.searchsorted(offs, t7[where])].astype(float)))
    chosen: dict[int, int] = {}
    for i in np.argsort(-own, kind="stable").tolist():
        if deadline is not None and time.monotonic() > deadline:
            break
        options = [
            (j, (k[i] * len(o) + H[i] * float((g * g).sum())) / 7.0)
            for j, (o, g) in enumerate(sets)
            if int(g.max()) <= u[i]
        ]
        options = [(j, c) for j, c in options if c < own[i] - 1e-12]
        if not options:
            continue
        days_i, gaps_i = per_site[i]
        load[days_i] -= d[i] * gaps_i
        count[days_i] -= 1
        before = need(load[days_i] + d[i] * gaps_i, count[days_i] + 1).sum() - need(load[days_i], count[days_i]).sum()
        best, best_delta = None, 0.0
        for j, c in options:
            where, per_day_gap = placed[j]
            q = d[i] * per_day_gap
            after = need(load[where] + q, count[where] + 1).sum() - need(load[where], count[where]).sum()
            delta = problem.dispatch_cost * (after - before) / R + c - own[i]
            if delta < best_delta - 1e-12:
                best, best_delta = (j, where, q), delta
        if best is None:
            load[days_i] += d[i] * gaps_i
            count[days_i] += 1
            continue
        j, where, q = best
        load[where] += q
        count[where] += 1
        chosen[i] = j
    if not chosen:
        return None
    period = patterns.period.copy()
    keep = ~np.isin(patterns.site, list(chosen))
    sites, offsets, gaps = [patterns.site[keep]], [patterns.offset[keep]], [patterns.gap[keep]]
    for i, j in chosen.items():
        offs, g = sets[j]
        period[i] = 7
        sites.append(np.full(len(offs), i))
        offsets.append(offs)
        gaps.append(g)
    site_all, offset_all, gap_all = np.concatenate(sites), np.concatenate(offsets), np.concatenate(gaps)
    order = np.lexsort((offset_all, site_all))
    return Patterns(period, site_all[order], offset_all[order], gap_all[order])
