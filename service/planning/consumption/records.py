"""Input and result records of the consumption estimator (frozen; results have ``to_dict()``).

Volumes are in the service's one unit (litres, gallons, ...), times are timezone-aware
datetimes, elapsed times are in days (86 400 s of elapsed time, not wall-clock days).
Undefined statistics (a standard deviation from one interval, ...) are ``None``, never NaN.
"""

from __future__ import annotations

import datetime as dt
from dataclasses import dataclass

from service.planning.results import _ToDict


@dataclass(frozen=True)
class LevelReading:
    """A tank gauge reading: ``level`` (volume in the tank) at the aware time ``time``."""

    time: dt.datetime
    level: float


@dataclass(frozen=True)
class DeliveryRecord:
    """A recorded delivery of ``quantity`` at ``time``; the gauge levels just before/after it if known."""

    time: dt.datetime
    quantity: float
    level_before: float | None = None
    level_after: float | None = None


@dataclass(frozen=True)
class DailyDegreeDays:
    """Degree days of consecutive calendar days from ``first_day`` (local days of ``tz``)."""

    first_day: dt.date
    degree_days: tuple[float, ...]
    tz: dt.tzinfo = dt.UTC


@dataclass(frozen=True)
class ConsumptionInterval(_ToDict):
    """Consumption between two consecutive gauge levels kept by the screen.

    ``consumption = start_level − end_level + delivered`` (``delivered``: the deliveries after
    the start level and up to the end level); ``residual`` is ``(c − μ̂ Δ) / (σ̂ √Δ)`` with the
    estimate's rate and standard deviation (``None`` while ``σ̂`` is undefined).
    ``degree_days`` is the interval's share of the daily degree days when weather was given.
    """

    start: dt.datetime
    end: dt.datetime
    elapsed_days: float
    start_level: float
    end_level: float
    delivered: float
    consumption: float
    residual: float | None
    degree_days: float | None


@dataclass(frozen=True)
class ExcludedInterval(_ToDict):
    """An interval left out of the fit although both its levels were kept (see ``reason``).

    ``reason``: ``"unexplained_rise"`` (the level rose by more than the tolerance beyond the
    recorded deliveries, e.g. an unrecorded delivery) or ``"implausible_consumption"``
    (robust standardised residual beyond the threshold, e.g. a leak or an unrecorded pump-out).
    """

    start: dt.datetime
    end: dt.datetime
    elapsed_days: float
    consumption: float
    reason: str


@dataclass(frozen=True)
class RejectedReading(_ToDict):
    """A gauge level rejected as an outlier.

    ``source``: ``"reading"``, ``"level_before"`` or ``"level_after"`` (of delivery
    ``index`` in the input order; for a reading, ``index`` is its input position).
    ``reason``: ``"above_capacity"``, ``"below_zero"``, ``"unexplained_rise"`` (higher than
    its neighbours by more than the deliveries between explain) or ``"implausible_consumption"``
    (its intervals' robust standardised residuals beyond the threshold).
    """

    time: dt.datetime
    level: float
    source: str
    index: int
    reason: str


@dataclass(frozen=True)
class DegreeDayFit(_ToDict):
    """Weighted least-squares fit ``c_j = b Δ_j + v D_j + e_j``, ``Var e_j = σ² Δ_j``.

    Attributes
    ----------
    base_load_per_day, volume_per_degree_day : float
        ``b`` and ``v``; ``*_se`` their standard errors, ``*_low``/``*_high`` the
        ``confidence`` interval (Student t with ``df = n − 2``).
    sigma_per_sqrt_day : float or None
        ``sqrt(Σ (c_j − b Δ_j − v D_j)² / Δ_j / (n − 2))``.
    k_factor : float or None
        Degree days per unit volume of the heating part, ``1 / v`` (``None`` when ``v ≤ 0``).
    """

    n_intervals: int
    df: int
    confidence: float
    base_load_per_day: float
    base_load_se: float | None
    base_load_low: float | None
    base_load_high: float | None
    volume_per_degree_day: float
    volume_per_degree_day_se: float | None
    volume_per_degree_day_low: float | None
    volume_per_degree_day_high: float | None
    sigma_per_sqrt_day: float | None
    k_factor: float | None

    def predict(self, elapsed_days, degree_days):
        """Expected consumption ``b Δ + v D`` (scalars or arrays)."""
        return self.base_load_per_day * elapsed_days + self.volume_per_degree_day * degree_days


@dataclass(frozen=True)
class ConsumptionEstimate(_ToDict):
    """The tank's consumption learned from readings and deliveries (drifted random walk).

    Attributes
    ----------
    window_start, window_end, days
        The data window ``[window_end − days, window_end]``.
    n_intervals, elapsed_days, consumption_total
        ``n``, ``ΣΔ_j`` and ``Σc_j`` over the intervals used.
    rate_per_day
        ``μ̂ = Σc_j / ΣΔ_j`` (``None`` without intervals).
    sigma_per_sqrt_day
        ``σ̂ = sqrt(Σ (c_j − μ̂ Δ_j)² / Δ_j / (n − 1))`` (``None`` when ``n < 2``).
    standard_error, df, confidence, rate_low, rate_high
        ``σ̂ / √ΣΔ``, ``n − 1`` and the ``confidence`` interval ``μ̂ ± t σ̂ / √ΣΔ``.
    intervals, excluded_intervals, rejected
        The intervals used (time order), the ones left out with a reason, the rejected levels.
    degree_day_fit
        The degree-day model fitted on the same intervals when weather was given.
    """

    window_start: dt.datetime | None
    window_end: dt.datetime | None
    days: float
    n_intervals: int
    elapsed_days: float
    consumption_total: float
    rate_per_day: float | None
    sigma_per_sqrt_day: float | None
    standard_error: float | None
    df: int
    confidence: float
    rate_low: float | None
    rate_high: float | None
    intervals: tuple[ConsumptionInterval, ...]
    excluded_intervals: tuple[ExcludedInterval, ...]
    rejected: tuple[RejectedReading, ...]
    degree_day_fit: DegreeDayFit | None


@dataclass(frozen=True)
class DriftTest(_ToDict):
    """Is the stored demand ``μ0`` wrong? A two-sided test of ``μ = μ0`` at level ``alpha``.

    Attributes
    ----------
    drifted : bool
        ``True`` when ``|statistic|`` exceeds the ``1 − alpha/2`` quantile (``p_value < alpha``).
    direction : {"higher", "lower"} or None
        Whether the data use more or less than ``μ0`` (only when ``drifted``).
    statistic, p_value, df
        ``(μ̂ − μ0) √ΣΔ / σ`` and its two-sided p-value; ``df`` is ``None`` for the normal (z)
        reference (σ given as known) and the Student t degrees of freedom otherwise.
    rate_per_day, rate_low, rate_high
        ``μ̂`` and its ``1 − alpha`` interval with the same σ and reference: it excludes ``μ0``
        exactly when ``drifted``.
    sigma_per_sqrt_day, sigma_source
        The σ used: ``"data"`` (the site's intervals), ``"given"`` (known) or ``"pooled"``.
    residuals
        ``z_j = (c_j − μ0 Δ_j) / (σ √Δ_j)``, one per interval (time order).
    message
        Why no decision was possible (no intervals, no σ), else empty.
    """

    demand_per_day: float
    alpha: float
    drifted: bool
    direction: str | None
    statistic: float | None
    p_value: float | None
    df: int | None
    n_intervals: int
    rate_per_day: float | None
    rate_low: float | None
    rate_high: float | None
    sigma_per_sqrt_day: float | None
    sigma_source: str | None
    residuals: tuple[float, ...]
    message: str


@dataclass(frozen=True)
class SafetyStock(_ToDict):
    """Safety stock of a periodic-review site: ``k σ √(T + L)`` and the service it gives.

    Attributes
    ----------
    k : float
        Safety factor; ``cycle_service_level = Φ(k)``.
    safety_stock : float
        ``k σ √(T + L)``.
    sigma_protection : float
        ``σ √(T + L)``: standard deviation of consumption over the review cycle plus lead time.
    fill_rate : float
        ``1 − σ √(T + L) G(k) / (μ T)`` (clamped to ``[0, 1]``), ``G(k) = φ(k) − k (1 − Φ(k))``.
    """

    demand_per_day: float
    sigma_per_sqrt_day: float
    cycle_days: float
    lead_days: float
    k: float
    safety_stock: float
    sigma_protection: float
    cycle_service_level: float
    fill_rate: float
