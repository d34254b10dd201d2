"""The consumption estimator: the drifted random walk's MLE, its interval, the outlier screen."""

import datetime as dt
import json
import math
import zoneinfo

import numpy as np
import pytest
from scipy import optimize, stats

from service.planning import DeliveryRecord, LevelReading, PlanningInputError, estimate_consumption
from tests.unit.planning.consumption_sim import START, simulate_tank


def _at(days, tz=dt.UTC):
    return START.astimezone(tz) + dt.timedelta(days=days)


def _readings(days, levels, tz=dt.UTC):
    return [LevelReading(_at(d, tz), lv) for d, lv in zip(days, levels, strict=True)]


def test_rate_is_total_consumption_over_elapsed_days_with_deliveries_counted():
    # Levels 9000 → 8200 (3 d) → 8900 (4 d, 1500 delivered) → 8000 (2 d): consumption 800, 800, 900.
    readings = _readings([0, 3, 7, 9], [9000, 8200, 8900, 8000])
    deliveries = [DeliveryRecord(_at(5), 1500.0)]
    e = estimate_consumption(readings, deliveries, capacity=10_000)
    assert [i.consumption for i in e.intervals] == [800.0, 800.0, 900.0]
    assert [i.delivered for i in e.intervals] == [0.0, 1500.0, 0.0]
    assert e.rate_per_day == pytest.approx(2500 / 9)
    c, span = np.array([800.0, 800.0, 900.0]), np.array([3.0, 4.0, 2.0])
    mu = c.sum() / span.sum()
    assert e.sigma_per_sqrt_day == pytest.approx(math.sqrt(np.sum((c - mu * span) ** 2 / span) / 2))
    assert e.df == 2
    half = stats.t.ppf(0.975, 2) * e.sigma_per_sqrt_day / 3.0
    assert (e.rate_low, e.rate_high) == pytest.approx((mu - half, mu + half))


def test_ratio_estimator_is_the_maximum_likelihood_estimate():
    # Reference: scipy.optimize.minimize on the random walk's negative log-likelihood
    # (c_j ~ N(μΔ_j, σ²Δ_j)); the MLE of σ² divides by n, the reported σ̂² by n − 1.
    rng = np.random.default_rng(3)
    span = rng.uniform(1, 10, 12)
    c = rng.normal(80 * span, 20 * np.sqrt(span))
    days = np.concatenate([[0.0], np.cumsum(span)])
    levels = 5000 - np.concatenate([[0.0], np.cumsum(c)])
    e = estimate_consumption(_readings(days, levels), capacity=10_000, days=365)

    def nll(theta):
        mu, log_s = theta
        var = np.exp(2 * log_s) * span
        return 0.5 * np.sum(np.log(2 * np.pi * var) + (c - mu * span) ** 2 / var)

    best = optimize.minimize(nll, x0=[50.0, 3.0], method="Nelder-Mead", options={"xatol": 1e-10, "fatol": 1e-12})
    assert e.rate_per_day == pytest.approx(best.x[0], rel=1e-6)
    assert e.sigma_per_sqrt_day**2 * 11 / 12 == pytest.approx(np.exp(2 * best.x[1]), rel=1e-5)


def test_standard_error_matches_weighted_least_squares_of_scipy_curve_fit():
    # Reference: scipy.optimize.curve_fit with sigma = √Δ (weights 1/Δ), relative sigma: the
    # fitted μ and its standard error are the ratio estimator's μ̂ and σ̂ / √ΣΔ.
    rng = np.random.default_rng(11)
    span = rng.uniform(0.5, 9, 20)
    c = rng.normal(120 * span, 30 * np.sqrt(span))
    days = np.concatenate([[0.0], np.cumsum(span)])
    e = estimate_consumption(_readings(days, 19_000 - np.concatenate([[0.0], np.cumsum(c)])), capacity=20_000, days=365)
    popt, pcov = optimize.curve_fit(lambda x, mu: mu * x, span, c, p0=[100.0], sigma=np.sqrt(span))
    assert e.rate_per_day == pytest.approx(popt[0], rel=1e-9)
    assert e.standard_error == pytest.approx(math.sqrt(pcov[0, 0]), rel=1e-6)


def test_elapsed_time_not_wall_clock_across_a_daylight_saving_change():
    paris = zoneinfo.ZoneInfo("Europe/Paris")
    t0 = dt.datetime(2024, 3, 28, 8, 0, tzinfo=paris)  # the clocks go forward on 31 March
    t1 = dt.datetime(2024, 4, 4, 8, 0, tzinfo=paris)  # 7 wall-clock days, 6 d 23 h elapsed
    e = estimate_consumption([LevelReading(t0, 5000.0), LevelReading(t1, 4300.0)], capacity=10_000)
    assert e.intervals[0].elapsed_days == pytest.approx(7 - 1 / 24)
    assert e.rate_per_day == pytest.approx(700 / (7 - 1 / 24))


def test_naive_times_are_refused():
    naive = dt.datetime(2024, 1, 1)
    with pytest.raises(PlanningInputError) as err:
        estimate_consumption([LevelReading(naive, 1.0), LevelReading(naive + dt.timedelta(days=1), 0.5)], capacity=10)
    assert err.value.field == "time"


def test_reading_at_the_moment_of_a_delivery_counts_after_it_and_delivery_levels_split_intervals():
    # Reading at the delivery's instant is after it: 6000 → (deliver 3000 at day 4) → 8600 at day 4.
    e = estimate_consumption(
        _readings([0, 4, 8], [6000, 8600, 8200]), [DeliveryRecord(_at(4), 3000.0)], capacity=10_000
    )
    assert [i.consumption for i in e.intervals] == [400.0, 400.0]
    # level_before / level_after are gauge levels too: the intervals end at and restart from them.
    e = estimate_consumption(
        _readings([0, 8], [6000, 8200]),
        [DeliveryRecord(_at(4), 3000.0, level_before=5600, level_after=8600)],
        capacity=10_000,
    )
    assert [(i.elapsed_days, i.consumption) for i in e.intervals] == [(4.0, 400.0), (4.0, 400.0)]


def _weekly(n=12, mu=100.0, noise=0.0, seed=0):
    rng = np.random.default_rng(seed)
    c = mu * 7 * (1 + noise * rng.uniform(-1, 1, n))
    return list(np.arange(n + 1) * 7.0), list(9500 - np.concatenate([[0.0], np.cumsum(c)]))


def test_outliers_rejected_with_their_reason():
    days, levels = _weekly(noise=0.1)
    levels[3] = 11_000.0  # above the tank
    levels[6] += 1500.0  # a jump no delivery explains
    levels[9] -= 2000.0  # a level far below both neighbours: implausible consumption
    e = estimate_consumption(_readings(days, levels), capacity=10_000)
    assert {(r.index, r.reason) for r in e.rejected} == {
        (3, "above_capacity"),
        (6, "unexplained_rise"),
        (9, "implausible_consumption"),
    }
    assert e.rate_per_day == pytest.approx((levels[0] - levels[-1]) / days[-1])
    assert not e.excluded_intervals


def test_a_step_no_delivery_explains_is_excluded_and_both_levels_kept():
    days, levels = _weekly(noise=0.1)
    levels[6:] = [lv + 3000.0 for lv in levels[6:]]  # an unrecorded delivery between days 35 and 42
    e = estimate_consumption(_readings(days, levels), capacity=20_000)
    assert e.rejected == ()
    assert [(x.reason, x.start, x.end) for x in e.excluded_intervals] == [("unexplained_rise", _at(35), _at(42))]
    assert e.n_intervals == 11
    assert e.rate_per_day == pytest.approx(100.0, rel=0.05)


def test_the_latest_reading_is_rejected_when_nothing_confirms_it():
    days, levels = _weekly(noise=0.1)
    levels[-1] += 2500.0
    e = estimate_consumption(_readings(days, levels), capacity=10_000)
    assert [(r.index, r.reason) for r in e.rejected] == [(12, "unexplained_rise")]


def test_window_selects_the_last_days():
    days, levels = _weekly(n=20, mu=50.0)
    e = estimate_consumption(_readings(days, levels), capacity=10_000, days=30)
    assert e.n_intervals == 4 and e.elapsed_days == 28.0
    assert e.window_end == _at(140) and e.window_start == _at(110)
    e = estimate_consumption(_readings(days, levels), capacity=10_000, days=30, as_of=_at(70))
    assert e.intervals[-1].end == _at(70) and e.n_intervals == 4


def test_to_dict_is_json_with_iso_times_and_no_nan():
    e = estimate_consumption(_readings([0, 7], [5000, 4300]), capacity=10_000)
    d = e.to_dict()
    text = json.dumps(d, allow_nan=False)
    assert d["intervals"][0]["start"] == START.isoformat()
    assert d["sigma_per_sqrt_day"] is None and d["rate_per_day"] == 100.0
    assert "NaN" not in text


@pytest.mark.slow
def test_interval_covers_the_true_rate_at_its_stated_rate_despite_outliers():
    # Simulation (the model itself): random reading times, deliveries between readings (half of
    # them with their gauge levels), two gross outliers per tank. The 95 % interval must hold the
    # true rate in 95 % of the runs: bounds from the binomial distribution at 0.1 % each side.
    runs, covered, missed = 600, 0, 0
    for seed in range(runs):
        tank = simulate_tank(np.random.default_rng(seed), mu=100.0, sigma=25.0, spikes=2)
        e = estimate_consumption(tank.readings, tank.deliveries, capacity=10_000)
        covered += e.rate_low <= 100.0 <= e.rate_high
        missed += len(set(tank.spikes) - {r.index for r in e.rejected if r.source == "reading"})
    low, high = stats.binom.ppf([0.001, 0.999], runs, 0.95)
    assert low <= covered <= high
    assert missed <= 0.01 * 2 * runs
