"""The drift test: a site using 1.4× its stored demand is named fast; normal sites rarely."""

import datetime as dt
import math

import numpy as np
import pytest
from scipy import stats

from service.planning import (
    LevelReading,
    PlanningInputError,
    consumption_drift,
    estimate_consumption,
    pooled_relative_sigma,
)

START = dt.datetime(2024, 10, 7, 7, 0, tzinfo=dt.UTC)
DEMAND = 400.0
# "consumption = demand ±20 %" per week (issue 15's trial): a uniform factor in [0.8, 1.2], whose
# standard deviation is 0.2/√3; as σ per √day of the random walk over 7-day intervals:
SIGMA_SPEC = 0.2 / math.sqrt(3) * 7 * DEMAND / math.sqrt(7)


def weekly_site(rng, weeks, factor=1.0, demand=DEMAND):
    """Weekly readings of a site using ``factor × demand`` ±20 % (no deliveries: a big tank)."""
    use = 7 * factor * demand * rng.uniform(0.8, 1.2, weeks)
    levels = 50_000 - np.concatenate([[0.0], np.cumsum(use)])
    return [LevelReading(START + dt.timedelta(weeks=w), float(lv)) for w, lv in enumerate(levels)]


def _estimate(readings):
    return estimate_consumption(readings, capacity=60_000)


def test_site_at_1_4_times_its_demand_is_named_within_two_weeks():
    # Two weekly intervals, σ from the ±20 % specification (known): detection in ≥ 90 % of runs at
    # a 1 % false-alarm rate (expected: Z ≈ 4.9 against a 2.58 threshold).
    runs = 400
    named = 0
    for seed in range(runs):
        e = _estimate(weekly_site(np.random.default_rng(seed), weeks=2, factor=1.4))
        test = consumption_drift(e, DEMAND, alpha=0.01, sigma=SIGMA_SPEC)
        named += test.drifted and test.direction == "higher"
    assert named >= 0.9 * runs


@pytest.mark.slow
def test_normal_sites_flagged_at_no_more_than_the_stated_rate():
    # 8 weekly intervals, σ known: the empirical false-alarm rate must not exceed α beyond the
    # binomial tolerance (0.1 % upper quantile of Binomial(runs, α)).
    runs, alpha = 2000, 0.05
    alarms = sum(
        consumption_drift(
            _estimate(weekly_site(np.random.default_rng(seed), weeks=8)), DEMAND, alpha=alpha, sigma=SIGMA_SPEC
        ).drifted
        for seed in range(runs)
    )
    assert alarms <= stats.binom.ppf(0.999, runs, alpha)


@pytest.mark.slow
def test_t_test_with_the_sites_own_sigma_has_exactly_the_stated_rate():
    # Gaussian random walk, random interval lengths, σ estimated from the data (t with n − 1 df):
    # the false-alarm rate is α, within the binomial 0.1 % quantiles on both sides.
    runs, alpha, alarms = 2000, 0.05, 0
    for seed in range(runs):
        rng = np.random.default_rng(10_000 + seed)
        span = rng.uniform(2, 9, 10)
        c = rng.normal(DEMAND * span, 120 * np.sqrt(span))
        levels = 50_000 - np.concatenate([[0.0], np.cumsum(c)])
        days = np.concatenate([[0.0], np.cumsum(span)])
        readings = [
            LevelReading(START + dt.timedelta(days=float(d)), float(lv)) for d, lv in zip(days, levels, strict=True)
        ]
        alarms += consumption_drift(_estimate(readings), DEMAND, alpha=alpha).drifted
    low, high = stats.binom.ppf([0.001, 0.999], runs, alpha)
    assert low <= alarms <= high


def test_decision_and_interval_agree_and_residuals_are_standardised():
    e = _estimate(weekly_site(np.random.default_rng(1), weeks=6, factor=1.3))
    for mu0 in (DEMAND, 1.3 * DEMAND, 1.6 * DEMAND):
        test = consumption_drift(e, mu0, alpha=0.01, sigma=SIGMA_SPEC)
        assert test.drifted == (not test.rate_low <= mu0 <= test.rate_high)
        z = np.array(test.residuals)
        span = np.array([i.elapsed_days for i in e.intervals])
        assert test.statistic == pytest.approx(float(z @ np.sqrt(span)) / math.sqrt(span.sum()))
        assert test.p_value == pytest.approx(2 * stats.norm.sf(abs(test.statistic)))


def test_pooled_sigma_adds_degrees_of_freedom():
    e = _estimate(weekly_site(np.random.default_rng(2), weeks=3))
    test = consumption_drift(e, DEMAND, sigma=SIGMA_SPEC, sigma_df=20)
    assert test.sigma_source == "pooled" and test.df == 22
    span = np.array([i.elapsed_days for i in e.intervals])
    c = np.array([i.consumption for i in e.intervals])
    ss = float(np.sum((c - c.sum() / span.sum() * span) ** 2 / span))
    assert test.sigma_per_sqrt_day == pytest.approx(math.sqrt((20 * SIGMA_SPEC**2 + ss) / 22))


def test_fleet_relative_sigma_recovers_the_specification():
    fleet = [
        _estimate(weekly_site(np.random.default_rng(s), weeks=8, demand=d))
        for s, d in enumerate([100.0, 400, 800] * 20)
    ]
    rho, df = pooled_relative_sigma(fleet)
    assert 0.98 * 60 * 7 <= df <= 60 * 7  # a rare false rejection costs a degree of freedom
    assert rho * DEMAND == pytest.approx(SIGMA_SPEC, rel=0.1)


def test_no_decision_without_sigma_and_bad_inputs_refused():
    e = _estimate(weekly_site(np.random.default_rng(0), weeks=1))
    test = consumption_drift(e, DEMAND)
    assert not test.drifted and test.p_value is None and test.message
    with pytest.raises(PlanningInputError):
        consumption_drift(e, DEMAND, alpha=1.5)
    with pytest.raises(PlanningInputError):
        consumption_drift(e, DEMAND, sigma=-1.0)
