"""Heating degree days, the weather-driven consumption model and the trade's K-factor.

* Daily mean temperature ``(max + min) / 2`` and heating degree days ``max(0, base − mean)``
  (UK Met Office base 15.5 °C, 18 °C in the Netherlands and Canada, 65 °F for the US National
  Weather Service — PUBLISHED on the agencies' pages).
* Consumption of an interval ``c_j = b Δ_j + v D_j + e_j`` with ``D_j`` the interval's degree
  days, ``Var e_j = σ² Δ_j`` (the random walk of ``estimate.py``), fitted by weighted least
  squares with weights ``1/Δ_j``.
* K-factor = degree days per unit volume (heating-oil and propane dealers' definition: degree
  days since the last delivery ÷ volume delivered; common practice, C2).
"""

from __future__ import annotations

import datetime as dt
import math
from collections.abc import Mapping, Sequence

import numpy as np
from scipy import stats

from service.planning.consumption.records import DailyDegreeDays, DegreeDayFit
from service.planning.consumption.screen import elapsed_days, wls
from service.planning.errors import PlanningInputError

#: Default base temperature (°C; UK practice).
DEFAULT_BASE_TEMPERATURE = 15.5


def daily_mean_temperature(maximum, minimum) -> np.ndarray:
    """Daily mean temperature ``(max + min) / 2`` (the degree-day convention, C3)."""
    return (np.asarray(maximum, dtype=float) + np.asarray(minimum, dtype=float)) / 2.0


def heating_degree_days(mean_temperature, base: float = DEFAULT_BASE_TEMPERATURE) -> np.ndarray:
    """Heating degree days ``max(0, base − mean)`` of each day (mean and base in one unit)."""
    return np.maximum(0.0, base - np.asarray(mean_temperature, dtype=float))


def degree_day_series(
    first_day: dt.date,
    mean_temperature: Sequence[float],
    base: float = DEFAULT_BASE_TEMPERATURE,
    tz: dt.tzinfo = dt.UTC,
) -> DailyDegreeDays:
    """:class:`DailyDegreeDays` of consecutive days from their mean temperatures."""
    values = heating_degree_days(mean_temperature, base)
    if not np.all(np.isfinite(values)):
        raise PlanningInputError("mean temperatures must be finite numbers", field="mean_temperature")
    return DailyDegreeDays(first_day, tuple(float(v) for v in values), tz)


def _day_starts(weather: DailyDegreeDays) -> np.ndarray:
    """Elapsed-time days of the local midnights bounding the weather's days (``n + 1`` values)."""
    midnight = dt.time(0, tzinfo=weather.tz)
    return np.array(
        [
            elapsed_days(dt.datetime.combine(weather.first_day + dt.timedelta(days=i), midnight), "first_day")
            for i in range(len(weather.degree_days) + 1)
        ]
    )


def cumulative_degree_days(weather: DailyDegreeDays):
    """``F(t)``: degree days from the first day's local midnight to ``t`` (days since the epoch).

    Each day's degree days accrue evenly over its elapsed hours (23 or 25 on a daylight-saving
    change), so ``F`` interpolates linearly between midnights; ``NaN`` outside the days given.
    An interval's degree days are ``F(t_end) − F(t_start)``.
    """
    bounds = _day_starts(weather)
    totals = np.concatenate([[0.0], np.cumsum(weather.degree_days)])

    def F(t):
        t = np.asarray(t, dtype=float)
        out = np.interp(t, bounds, totals)
        return np.where((t >= bounds[0]) & (t <= bounds[-1]), out, np.nan)

    return F


def interval_degree_days(
    weather: DailyDegreeDays, starts: Sequence[dt.datetime], ends: Sequence[dt.datetime]
) -> np.ndarray:
    """Degree days of each interval ``[start, end]`` (``NaN`` where the weather does not cover it)."""
    F = cumulative_degree_days(weather)
    t0 = np.array([elapsed_days(t, "start") for t in starts], dtype=float)
    t1 = np.array([elapsed_days(t, "end") for t in ends], dtype=float)
    return F(t1) - F(t0)


def fit_degree_days(dt_days, consumption, degree_days, confidence: float = 0.95) -> DegreeDayFit | None:
    """Fit ``c_j = b Δ_j + v D_j`` by weighted least squares (weights ``1/Δ_j``), with errors.

    ``β = (Xᵀ W X)⁻¹ Xᵀ W c`` with ``X = [Δ, D]``, ``W = diag(1/Δ)``;
    ``σ̂² = Σ (c_j − b Δ_j − v D_j)² / Δ_j / (n − 2)``; ``Cov β = σ̂² (Xᵀ W X)⁻¹``; intervals
    ``β ± t_{n−2} se`` (the standard weighted regression results). ``None`` when fewer than two
    intervals or when ``Δ`` and ``D`` are proportional (no weather signal to separate).
    """
    dt_days, c, dd = (np.asarray(x, dtype=float) for x in (dt_days, consumption, degree_days))
    n = len(c)
    if n < 2 or np.linalg.matrix_rank(np.column_stack([dt_days, dd]) / np.sqrt(dt_days)[:, None]) < 2:
        return None
    beta, resid, xtx_inv = wls(dt_days, c, dd)
    df = n - 2
    b, v = float(beta[0]), float(beta[1])
    se: list[float | None] = [None, None]
    bands: list[tuple[float | None, float | None]] = [(None, None), (None, None)]
    sigma: float | None = None
    if df > 0:
        sigma = math.sqrt(float(resid @ resid) / df)
        q = float(stats.t.ppf(0.5 + confidence / 2, df))
        errors = [sigma * math.sqrt(float(xtx_inv[i, i])) for i in range(2)]
        se = [*errors]
        bands = [(beta[i] - q * errors[i], beta[i] + q * errors[i]) for i in range(2)]
    return DegreeDayFit(
        n_intervals=n,
        df=df,
        confidence=float(confidence),
        base_load_per_day=b,
        base_load_se=se[0],
        base_load_low=None if bands[0][0] is None else float(bands[0][0]),
        base_load_high=None if bands[0][1] is None else float(bands[0][1]),
        volume_per_degree_day=v,
        volume_per_degree_day_se=se[1],
        volume_per_degree_day_low=None if bands[1][0] is None else float(bands[1][0]),
        volume_per_degree_day_high=None if bands[1][1] is None else float(bands[1][1]),
        sigma_per_sqrt_day=sigma,
        k_factor=1.0 / v if v > 0 else None,
    )


def k_factor(degree_days: float, volume: float) -> float:
    """Dealers' K-factor: degree days per unit volume, ``K = DD / volume`` (C2)."""
    if not volume > 0:
        raise PlanningInputError("volume must be positive", field="volume")
    return degree_days / volume


def degree_days_for_volume(volume: float, k: float) -> float:
    """Degree days a usable stock lasts at K-factor ``k``: ``K · volume`` (C2)."""
    return k * volume


def volume_for_degree_days(degree_days: float, k: float) -> float:
    """Volume used over ``degree_days`` at K-factor ``k``: ``DD / K`` (C2)."""
    if not k > 0:
        raise PlanningInputError("k must be positive", field="k_factor")
    return degree_days / k


def expected_degree_days(
    history: DailyDegreeDays, days: Sequence[dt.date], forecast: Mapping[dt.date, float] | None = None
) -> np.ndarray:
    """Expected degree days of future ``days``: a forecast when given, else the past mean.

    The past mean of a day is the mean of the history's values on the same calendar day
    (month and day) over all years present (``NaN`` values of the history, days without data,
    are left out); 29 February falls back to 28 February when the history has none. ``NaN`` for
    a calendar day the history never covers.
    """
    values = np.asarray(history.degree_days, dtype=float)
    first = history.first_day.toordinal()
    keys = np.array([_calendar_key(dt.date.fromordinal(first + i)) for i in range(len(values))], dtype=int)
    known = np.isfinite(values)  # a day missing from the history (NaN) does not count
    sums = np.bincount(keys[known], weights=values[known], minlength=1232)
    counts = np.bincount(keys[known], minlength=1232)
    with np.errstate(invalid="ignore", divide="ignore"):
        means = sums / counts
    means[229] = means[229] if counts[229] else means[228]
    forecast = forecast or {}
    return np.array([forecast[d] if d in forecast else means[_calendar_key(d)] for d in days], dtype=float)


def _calendar_key(day: dt.date) -> int:
    return day.month * 100 + day.day
