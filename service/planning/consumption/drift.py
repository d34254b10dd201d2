"""Has a tank's consumption drifted from its stored ``demand_per_day``? A test at a stated rate.

Under the random walk (``estimate.py``) the interval residuals against the stored rate ``μ0``,
``z_j = (c_j − μ0 Δ_j) / (σ √Δ_j)``, are independent ``N((μ − μ0) √Δ_j / σ, 1)``. The
likelihood-ratio test of ``μ = μ0`` against ``μ ≠ μ0`` (σ known) rejects when
``Z² = (Σ z_j √Δ_j)² / ΣΔ_j = ((μ̂ − μ0) √ΣΔ / σ)²`` exceeds the ``χ²₁`` quantile, i.e. when
``|Z| > Φ⁻¹(1 − α/2)``; with σ estimated from the same intervals it is the t test with ``n − 1``
degrees of freedom (the LR statistic is a monotone function of ``|t|``; e.g. Casella & Berger,
*Statistical Inference*, LR tests of a normal mean — from memory). Either way the false-alarm
probability of one test is exactly ``α`` under the model.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from typing import Any

import numpy as np
from scipy import stats

from service.planning.consumption.records import ConsumptionEstimate, DriftTest
from service.planning.errors import PlanningInputError

#: Default false-alarm rate of one test.
DEFAULT_ALPHA = 0.01


def _arrays(estimate: ConsumptionEstimate):
    span = np.array([i.elapsed_days for i in estimate.intervals], dtype=float)
    c = np.array([i.consumption for i in estimate.intervals], dtype=float)
    return span, c


def _sigma(span, c, mu, sigma, sigma_df):
    """(σ, df, source): the data's, a known one, or the pooled ``(ν0 σ0² + SS) / (ν0 + n − 1)``."""
    n = len(c)
    ss = float(np.sum((c - mu * span) ** 2 / span))
    if sigma is None:
        return (math.sqrt(ss / (n - 1)), n - 1, "data") if n >= 2 else (None, None, None)
    if sigma_df is None:
        return float(sigma), None, "given"
    df = sigma_df + n - 1
    return math.sqrt((sigma_df * sigma**2 + ss) / df), df, "pooled"


def consumption_drift(
    estimate: ConsumptionEstimate,
    demand_per_day: float,
    *,
    alpha: float = DEFAULT_ALPHA,
    sigma: float | None = None,
    sigma_df: int | None = None,
) -> DriftTest:
    """Test the stored rate ``demand_per_day`` (``μ0``) against the estimate's intervals.

    ``sigma`` (per √day): ``None`` uses the intervals' own ``σ̂`` (t test, ``n − 1`` df; needs
    two intervals and decides slowly with few); a value with ``sigma_df=None`` is taken as known
    (z test; e.g. the fleet's relative noise × ``μ0``); with ``sigma_df = ν0`` it is pooled with
    the intervals as if it came from ``ν0`` earlier degrees of freedom (t test, ``ν0 + n − 1`` df).
    ``drifted`` when ``|Z| > q``, ``q`` the ``1 − α/2`` quantile; the reported interval
    ``μ̂ ± q σ / √ΣΔ`` excludes ``μ0`` exactly then.
    """
    if not (isinstance(alpha, int | float) and 0 < alpha < 1):
        raise PlanningInputError(f"alpha must be in (0, 1), got {alpha!r}", field="alpha")
    if not (isinstance(demand_per_day, int | float) and math.isfinite(demand_per_day) and demand_per_day >= 0):
        raise PlanningInputError("demand_per_day must be a finite non-negative number", field="demand_per_day")
    if sigma is not None and not (isinstance(sigma, int | float) and math.isfinite(sigma) and sigma > 0):
        raise PlanningInputError("sigma must be a positive number", field="sigma")
    if sigma_df is not None and not (isinstance(sigma_df, int) and sigma_df > 0):
        raise PlanningInputError("sigma_df must be a positive integer", field="sigma_df")
    span, c = _arrays(estimate)
    mu0 = float(demand_per_day)
    base: dict[str, Any] = dict(
        demand_per_day=mu0, alpha=float(alpha), n_intervals=len(c), drifted=False, direction=None
    )
    empty: dict[str, Any] = dict(
        statistic=None, p_value=None, df=None, rate_low=None, rate_high=None, sigma_per_sqrt_day=None
    )
    if len(c) == 0:
        return DriftTest(**base, **empty, rate_per_day=None, sigma_source=None, residuals=(), message="no intervals")
    total = float(span.sum())
    mu = float(c.sum()) / total
    s, df, source = _sigma(span, c, mu, sigma, sigma_df)
    if s is None or s == 0:
        message = "fewer than two intervals and no sigma given" if s is None else "zero variability"
        return DriftTest(**base, **empty, rate_per_day=mu, sigma_source=source, residuals=(), message=message)
    reference = stats.norm if df is None else stats.t(df)
    q = float(reference.ppf(1 - alpha / 2))
    statistic = (mu - mu0) * math.sqrt(total) / s
    drifted = abs(statistic) > q
    half = q * s / math.sqrt(total)
    return DriftTest(
        **(base | {"drifted": drifted, "direction": ("higher" if mu > mu0 else "lower") if drifted else None}),
        statistic=statistic,
        p_value=float(2 * reference.sf(abs(statistic))),
        df=df,
        rate_per_day=mu,
        rate_low=mu - half,
        rate_high=mu + half,
        sigma_per_sqrt_day=s,
        sigma_source=source,
        residuals=tuple(float(z) for z in (c - mu0 * span) / (s * np.sqrt(span))),
        message="",
    )


def pooled_relative_sigma(estimates: Sequence[ConsumptionEstimate]) -> tuple[float | None, int]:
    """The fleet's relative noise ``ρ`` (σ per √day per unit rate) and its degrees of freedom.

    ``ρ² = Σ_i Σ_j (c_ij − μ̂_i Δ_ij)² / (Δ_ij μ̂_i²) / Σ_i (n_i − 1)`` over sites with two or more
    intervals and ``μ̂_i > 0`` (the pooled variance of the relative residuals, assuming the noise
    is proportional to the rate, as with a ±x % consumption). ``ρ · μ0`` is the ``sigma`` to test
    a site with few intervals of its own (``sigma_df`` = the degrees of freedom returned).
    """
    ss, df = 0.0, 0
    for e in estimates:
        span, c = _arrays(e)
        if len(c) < 2 or not c.sum() > 0:
            continue
        mu = float(c.sum() / span.sum())
        ss += float(np.sum((c - mu * span) ** 2 / span)) / mu**2
        df += len(c) - 1
    return (math.sqrt(ss / df) if df else None), df
