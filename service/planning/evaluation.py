"""The exact cost of a plan: every trip of one repeat period counted (docs/planning.md, "Evaluation").

Over one repeat period ``R`` the plan's deliveries are materialised (vectorised), each date is packed into
trips (:func:`packing.pack`), and

    cost per day = (K · trips + Σ_i k_i n_i R / P_i + Σ_i H_i Σ_j g_ij² R / P_i) / R,

the same sum anyone gets from the listed trips (a stop of ``q = d g`` holds ``h q² / (2 d) = H g²``).
Without a load or stop limit a date is one trip, so the trips are the distinct delivery dates; a plain
policy whose cycles are multiples of ``T0 = min T_i`` with offsets on multiples of ``T0`` (the classic
policies) has exactly ``R / T0`` of them, which is used when ``R`` is too long to materialise (its peak
load is then evaluated over the first ``EVALUATED_DAYS`` days, with a warning). With one stop per trip
every delivery is a trip, which is also counted exactly whatever ``R``.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from service.planning.inputs import Problem
from service.planning.packing import least_trips, pack
from service.planning.patterns import Patterns

#: Most deliveries materialised to evaluate one candidate.
MAX_EVALUATED_DELIVERIES = 4_000_000
#: Days over which the peak load of a too-long classic repeat period is evaluated.
EVALUATED_DAYS = 2**17


@dataclass(frozen=True)
class Evaluation:
    """What one repeat period of a plan costs and needs."""

    repeat: int
    trips: int
    max_trips: int
    peak_load: float
    interval: int
    dispatch: float
    stops: float
    holding: float
    site_stops: np.ndarray
    site_holding: np.ndarray
    warnings: tuple[str, ...] = ()
    exact: bool = True

    @property
    def cost(self) -> float:
        return self.dispatch + self.stops + self.holding


def _interval(dates: np.ndarray, repeat: int) -> int:
    if len(dates) == 0:
        return 0
    if len(dates) == 1:
        return repeat
    return int(min(np.diff(dates).min(), dates[0] + repeat - dates[-1]))


def _classic_long(problem: Problem, patterns: Patterns, repeat: int):
    """Trips ``R / T0`` and the peak over the first days of a classic plain policy with a huge ``R``."""
    T0 = int(patterns.period.min())
    if len(patterns.site) != len(patterns.period) or (patterns.period % T0).any() or (patterns.offset % T0).any():
        return None
    last = min(repeat, EVALUATED_DAYS * T0) - 1
    day, site, gap = patterns.deliveries(0, last)
    load = np.bincount(day // T0, weights=problem.demand[site] * gap)
    warnings = (
        f"the repeat period has {repeat // T0} dispatch days; the peak load was evaluated over the first "
        f"{EVALUATED_DAYS}",
    )
    return repeat // T0, float(load.max()), T0, warnings, 1


def _alone_long(problem: Problem, patterns: Patterns, repeat: int):
    """One stop per trip: every delivery is a trip of its own (each fits: ``d_i g ≤ q_i ≤ W``), so the
    trips are the deliveries, counted exactly; the busiest date and the shortest gap between trip
    dates are taken over the first ``EVALUATED_DAYS`` days (with a warning)."""
    day, site, gap = patterns.deliveries(0, min(repeat, EVALUATED_DAYS) - 1)
    dates, per_date = np.unique(day, return_counts=True)
    warnings = (
        f"the repeat period has {repeat} days; the busiest date and the shortest gap between trip dates were "
        f"evaluated over the first {EVALUATED_DAYS}",
    )
    peak = float((problem.demand[patterns.site] * patterns.gap).max())
    return patterns.deliveries_per_repeat(), peak, _interval(dates, repeat), warnings, int(per_date.max())


def evaluate(problem: Problem, patterns: Patterns, limited: bool, exact: bool = True) -> Evaluation | None:
    """Evaluation of ``patterns`` (None when too long to evaluate with a load or stop limit).

    With ``exact=False`` the trips of each date are the lower bound ``max(⌈load / W⌉, ⌈count / S⌉, 1)``
    (no packing): a lower bound on the exact cost, used to rank candidates cheaply.
    """
    repeat = patterns.repeat
    site_stops, site_holding = patterns.site_costs(problem.stop_cost, problem.H)
    stops, holding = float(site_stops.sum()), float(site_holding.sum())
    warnings: tuple[str, ...] = ()
    long = None
    if patterns.deliveries_per_repeat() > MAX_EVALUATED_DELIVERIES:
        long = _alone_long(problem, patterns, repeat) if problem.max_stops == 1 else None
        if not limited:
            long = _classic_long(problem, patterns, repeat)
        if long is None:
            return None
        trips, peak, interval, warnings, max_trips = long
    else:
        day, site, gap = patterns.deliveries(0, repeat - 1)
        quantity = problem.demand[site] * gap
        if limited and not exact:
            _, _, dates, per_date = least_trips(day, quantity, problem.capacity, problem.max_stops)
            peak = min(float(quantity.max()), problem.capacity)
        elif limited:
            trip, dates, per_date = pack(day, site, quantity, problem.capacity, problem.max_stops)
            key = day * int(per_date.max()) + trip
            _, inverse = np.unique(key, return_inverse=True)
            peak = float(np.bincount(inverse, weights=quantity).max())
        else:
            dates, inverse = np.unique(day, return_inverse=True)
            per_date = np.ones(len(dates), dtype=np.int64)
            peak = float(np.bincount(inverse, weights=quantity).max())
        trips, max_trips = int(per_date.sum()), int(per_date.max())
        interval = _interval(dates, repeat)
    return Evaluation(
        repeat=repeat,
        trips=trips,
        max_trips=max_trips,
        peak_load=peak,
        interval=interval,
        dispatch=problem.dispatch_cost * trips / repeat,
        stops=stops,
        holding=holding,
        site_stops=site_stops,
        site_holding=site_holding,
        warnings=warnings,
        exact=exact or not limited or long is not None,
    )


def limited(problem: Problem) -> bool:
    """Whether a date may need more than one trip (a load or a stop limit)."""
    return math.isfinite(problem.capacity) or problem.max_stops is not None
