"""The consumption rate of one tank learned from its readings and deliveries.

Model (drifted random walk, ``docs/planning.md`` §11): the cumulative consumption is a Brownian
motion with drift ``μ`` per day and variance ``σ²`` per day, so the consumption of disjoint
intervals ``c_j`` over ``Δ_j`` days are independent ``N(μ Δ_j, σ² Δ_j)``. Maximum likelihood
gives the ratio estimator ``μ̂ = Σc_j / ΣΔ_j`` with ``Var μ̂ = σ² / ΣΔ_j``; the unbiased variance
is ``σ̂² = Σ (c_j − μ̂ Δ_j)² / Δ_j / (n − 1)``, and ``(μ̂ − μ) √ΣΔ / σ̂`` is Student t with
``n − 1`` degrees of freedom (the model is a regression through the origin of ``c_j / √Δ_j`` on
``√Δ_j``; e.g. Draper & Smith, *Applied Regression Analysis*, weighted least squares — from memory).
"""

from __future__ import annotations

import datetime as dt
import math
from collections.abc import Sequence

import numpy as np
from scipy import stats

from service.planning.consumption.degree_days import cumulative_degree_days, fit_degree_days
from service.planning.consumption.records import (
    ConsumptionEstimate,
    ConsumptionInterval,
    DailyDegreeDays,
    DeliveryRecord,
    ExcludedInterval,
    LevelReading,
    RejectedReading,
)
from service.planning.consumption.screen import (
    SECONDS_PER_DAY,
    ScreenRule,
    chain,
    elapsed_days,
    gauge_levels,
    screen,
)
from service.planning.errors import PlanningInputError

#: Default data window (days).
DEFAULT_WINDOW_DAYS = 90
#: Default largest unexplained rise, as a share of the tank capacity (common practice: gauges
#: read to about 1–2 % of the tank, and a 10 °C warming expands fuel by about 1 %).
DEFAULT_RISE_SHARE = 0.02
#: Default robust z threshold of the screen.
DEFAULT_THRESHOLD = 5.0


def random_walk_fit(dt_days: np.ndarray, c: np.ndarray, confidence: float = 0.95) -> dict:
    """``μ̂``, ``σ̂``, standard error, df and the ``confidence`` interval of the ratio estimator.

    ``μ̂ = Σc/ΣΔ``; ``σ̂² = Σ (c − μ̂Δ)²/Δ / (n − 1)``; ``se = σ̂ / √ΣΔ``;
    interval ``μ̂ ± t_{n−1, (1+confidence)/2} se``. Undefined values are ``None``.
    """
    n = len(c)
    total_dt, total_c = float(np.sum(dt_days)), float(np.sum(c))
    out: dict[str, float | None] = {
        "n_intervals": n,
        "elapsed_days": total_dt,
        "consumption_total": total_c,
        "df": max(n - 1, 0),
    }
    out |= dict.fromkeys(("rate_per_day", "sigma_per_sqrt_day", "standard_error", "rate_low", "rate_high"))
    if n == 0:
        return out
    mu = total_c / total_dt
    out["rate_per_day"] = mu
    if n < 2:
        return out
    sigma = math.sqrt(float(np.sum((c - mu * dt_days) ** 2 / dt_days)) / (n - 1))
    se = sigma / math.sqrt(total_dt)
    half = float(stats.t.ppf(0.5 + confidence / 2, n - 1)) * se
    out |= {"sigma_per_sqrt_day": sigma, "standard_error": se, "rate_low": mu - half, "rate_high": mu + half}
    return out


def _check(capacity, days, confidence, threshold) -> None:
    for name, value in (("capacity", capacity), ("days", days), ("threshold", threshold)):
        if not (isinstance(value, int | float) and math.isfinite(value) and value > 0):
            raise PlanningInputError(f"{name} must be a positive number, got {value!r}", field=name)
    if not (isinstance(confidence, int | float) and 0 < confidence < 1):
        raise PlanningInputError(f"confidence must be in (0, 1), got {confidence!r}", field="confidence")


def estimate_consumption(
    readings: Sequence[LevelReading],
    deliveries: Sequence[DeliveryRecord] = (),
    *,
    capacity: float,
    days: float = DEFAULT_WINDOW_DAYS,
    as_of: dt.datetime | None = None,
    confidence: float = 0.95,
    rise_tolerance: float | None = None,
    threshold: float = DEFAULT_THRESHOLD,
    weather: DailyDegreeDays | None = None,
) -> ConsumptionEstimate:
    """Estimate a tank's consumption rate per day from its readings and recorded deliveries.

    The levels (readings and delivery ``level_before``/``level_after``) timed in
    ``[as_of − days, as_of]`` (``as_of``: default the latest reading or delivery) are screened for
    outliers (``screen.py``: above the tank, a rise no delivery explains — default tolerance 2 % of
    ``capacity`` —, a robust standardised residual beyond ``threshold``, iterated once), and the
    drifted random walk is fitted to the intervals kept (``μ̂ = Σc/ΣΔ``, ``σ̂``, t interval; see
    :func:`random_walk_fit`). With ``weather`` the screen uses the degree-day model and the
    result carries its fit (:func:`~service.planning.consumption.degree_days.fit_degree_days`).

    Raises
    ------
    PlanningInputError
        Naive times, non-finite numbers, negative quantities, bad parameters.
    """
    _check(capacity, days, confidence, threshold)
    tol = DEFAULT_RISE_SHARE * capacity if rise_tolerance is None else float(rise_tolerance)
    if not (math.isfinite(tol) and tol >= 0):
        raise PlanningInputError("rise_tolerance must be a finite non-negative number", field="rise_tolerance")
    if as_of is None:
        stamps = [r.time for r in readings] + [d.time for d in deliveries]
        end = max((elapsed_days(t, "time") for t in stamps), default=0.0)
    else:
        end = elapsed_days(as_of, "as_of")
    levels = gauge_levels(readings, deliveries, end - days, end)
    dd_of = None
    if weather is not None:
        cumulative = cumulative_degree_days(weather)(levels.t)
        if np.all(np.isfinite(cumulative)):  # the weather covers every level

            def dd_of(a, b):
                return cumulative[b] - cumulative[a]

    kept, rejected, excluded = screen(levels, ScreenRule(float(capacity), tol, float(threshold)), dd_of)
    ch = chain(levels, kept)
    used = np.array([(int(a), int(b)) not in excluded for a, b in zip(ch.a, ch.b, strict=True)], dtype=bool)
    fit = random_walk_fit(ch.dt[used], ch.c[used], confidence)
    dd = None if dd_of is None else dd_of(ch.a[used], ch.b[used])
    dd_fit = None if dd is None else fit_degree_days(ch.dt[used], ch.c[used], dd, confidence)
    mu, sigma = fit["rate_per_day"], fit["sigma_per_sqrt_day"]
    intervals = []
    for j, (a, b) in enumerate(zip(ch.a[used], ch.b[used], strict=True)):
        span, c = float(ch.dt[used][j]), float(ch.c[used][j])
        residual = None if not sigma else (c - mu * span) / (sigma * math.sqrt(span))
        delivered = float(levels.cum[b] - levels.cum[a])
        d_j = None if dd is None else float(dd[j])
        intervals.append(
            ConsumptionInterval(
                levels.times[a],
                levels.times[b],
                span,
                float(levels.level[a]),
                float(levels.level[b]),
                delivered,
                c,
                residual,
                d_j,
            )
        )
    left_out = [
        ExcludedInterval(levels.times[a], levels.times[b], float(ch.dt[j]), float(ch.c[j]), excluded[(int(a), int(b))])
        for j, (a, b) in enumerate(zip(ch.a, ch.b, strict=True))
        if not used[j]
    ]
    bad = [
        RejectedReading(levels.times[k], float(levels.level[k]), levels.source[k], int(levels.index[k]), reason)
        for k, reason in sorted(rejected.items())
    ]
    stamp = dt.datetime.fromtimestamp(end * SECONDS_PER_DAY, dt.UTC) if (readings or deliveries or as_of) else None
    return ConsumptionEstimate(
        window_start=None if stamp is None else stamp - dt.timedelta(days=days),
        window_end=stamp,
        days=float(days),
        confidence=float(confidence),
        intervals=tuple(intervals),
        excluded_intervals=tuple(left_out),
        rejected=tuple(bad),
        degree_day_fit=dd_fit,
        **fit,
    )
