"""Degree days, the K-factor and the weather-driven consumption model."""

import datetime as dt
import math
import zoneinfo

import numpy as np
import pytest
from scipy import optimize
from vega_datasets import data

from service.planning import DailyDegreeDays, DeliveryRecord, LevelReading, degree_day_series, estimate_consumption
from service.planning.consumption import (
    daily_mean_temperature,
    degree_days_for_volume,
    expected_degree_days,
    fit_degree_days,
    heating_degree_days,
    interval_degree_days,
    k_factor,
    volume_for_degree_days,
)


@pytest.fixture(scope="module")
def seattle():
    """NOAA daily max/min temperatures (°C) for Seattle 2012–2015, shipped in vega-datasets (MIT), offline."""
    frame = data.seattle_weather()
    assert data.seattle_weather.is_local  # read from the package, never fetched
    days = [d.date() for d in frame["date"]]
    assert all((b - a).days == 1 for a, b in zip(days, days[1:], strict=False))  # consecutive days
    return days, frame["temp_max"].to_numpy(float), frame["temp_min"].to_numpy(float)


def test_seattle_2012_heating_degree_days(seattle):
    # NOAA daily temperatures in vega-datasets' seattle-weather.csv (values DERIVED by us): 2012 HDD at 65 °F from the mean of max and
    # min converted to °F = 4 808.8; at 18 °C 2 565.10; at 15.5 °C 1 835.20. Second, independent
    # route: a plain Python loop over the rows.
    days, tmax, tmin = seattle
    in_2012 = np.array([d.year == 2012 for d in days])
    mean_f = daily_mean_temperature(tmax[in_2012], tmin[in_2012]) * 9 / 5 + 32
    ours = float(heating_degree_days(mean_f, base=65.0).sum())
    loop = 0.0
    for d, hi, lo in zip(days, tmax, tmin, strict=True):
        if d.year == 2012:
            loop += max(0.0, 65.0 - ((hi * 9 / 5 + 32) + (lo * 9 / 5 + 32)) / 2)
    assert ours == pytest.approx(loop, abs=1e-9)
    assert ours == pytest.approx(4808.8, abs=0.05)
    mean_c = daily_mean_temperature(tmax[in_2012], tmin[in_2012])
    assert heating_degree_days(mean_c, 18.0).sum() == pytest.approx(2565.10, abs=0.005)
    assert heating_degree_days(mean_c).sum() == pytest.approx(1835.20, abs=0.005)  # default base 15.5 °C


def test_k_factor_dealers_worked_example():
    # Heating-oil dealers' worked example (common practice, dealers' pages): 1 853 degree days for
    # 287 gallons → K = 6.456; at K = 6.5 a 300-gallon usable stock lasts 1 950 degree days;
    # 40 degree days at K = 6.5 use 6.15 gallons.
    assert k_factor(1853, 287) == pytest.approx(6.456, abs=5e-4)
    assert degree_days_for_volume(300, 6.5) == pytest.approx(1950)
    assert volume_for_degree_days(40, 6.5) == pytest.approx(6.15, abs=5e-3)


def test_interval_degree_days_share_partial_days_by_elapsed_time():
    weather = DailyDegreeDays(dt.date(2024, 1, 1), (10.0, 4.0, 6.0))
    start = dt.datetime(2024, 1, 1, 12, tzinfo=dt.UTC)
    got = interval_degree_days(weather, [start, start], [start + dt.timedelta(hours=36), start + dt.timedelta(days=3)])
    assert got[0] == pytest.approx(5.0 + 4.0)
    assert math.isnan(got[1])  # beyond the last day
    # A 23-hour day (clocks forward in London on 31 March 2024) still carries its whole value.
    london = zoneinfo.ZoneInfo("Europe/London")
    weather = DailyDegreeDays(dt.date(2024, 3, 30), (3.0, 7.0, 5.0), london)
    a = dt.datetime(2024, 3, 31, tzinfo=london)
    assert interval_degree_days(weather, [a], [dt.datetime(2024, 4, 1, tzinfo=london)])[0] == pytest.approx(7.0)


def test_weighted_fit_matches_scipy_curve_fit():
    # Reference: scipy.optimize.curve_fit with sigma = √Δ (weights 1/Δ): same b, v and standard errors.
    rng = np.random.default_rng(5)
    span = rng.uniform(3, 10, 25)
    dd = span * rng.uniform(0, 12, 25)
    c = rng.normal(20 * span + 8 * dd, 10 * np.sqrt(span))
    fit = fit_degree_days(span, c, dd)
    popt, pcov = optimize.curve_fit(
        lambda x, b, v: b * x[0] + v * x[1], np.vstack([span, dd]), c, p0=[1, 1], sigma=np.sqrt(span)
    )
    assert (fit.base_load_per_day, fit.volume_per_degree_day) == pytest.approx(tuple(popt), rel=1e-8)
    assert (fit.base_load_se, fit.volume_per_degree_day_se) == pytest.approx(tuple(np.sqrt(np.diag(pcov))), rel=1e-6)
    assert fit.k_factor == pytest.approx(1 / fit.volume_per_degree_day)
    assert fit_degree_days(span, c, 3 * span) is None  # degree days proportional to time: no weather signal


def test_expected_degree_days_is_the_mean_of_the_same_calendar_day(seattle):
    days, tmax, tmin = seattle
    history = degree_day_series(days[0], daily_mean_temperature(tmax, tmin))  # 2012-2015
    by_day = dict(zip(days, history.degree_days, strict=True))
    targets = [dt.date(2016, 1, 10), dt.date(2016, 2, 29), dt.date(2016, 7, 4)]
    got = expected_degree_days(history, targets, forecast={dt.date(2016, 7, 4): 1.5})
    assert got[0] == pytest.approx(np.mean([by_day[dt.date(y, 1, 10)] for y in range(2012, 2016)]))
    assert got[1] == pytest.approx(by_day[dt.date(2012, 2, 29)])  # the one leap day of the history
    assert got[2] == 1.5
    no_leap = DailyDegreeDays(dt.date(2013, 1, 1), history.degree_days[366 : 366 + 365])
    assert expected_degree_days(no_leap, [dt.date(2016, 2, 29)])[0] == pytest.approx(by_day[dt.date(2013, 2, 28)])


def _heating_site(seattle, rng, base_load=20.0, per_dd=8.0, sigma=10.0):
    """A heating-oil tank in Seattle: weekly readings Sept–Nov 2013, consumption b Δ + v DD + noise."""
    days, tmax, tmin = seattle
    weather = degree_day_series(days[0], daily_mean_temperature(tmax, tmin))
    t0 = dt.datetime(2013, 9, 2, 8, tzinfo=dt.UTC)
    times = [t0 + dt.timedelta(days=7 * w, hours=float(rng.uniform(-3, 3))) for w in range(14)]
    dd = interval_degree_days(weather, times[:-1], times[1:])
    span = np.diff([t.timestamp() / 86400 for t in times])
    use = rng.normal(base_load * span + per_dd * dd, sigma * np.sqrt(span))
    level, readings, deliveries = 6000.0, [], []
    readings.append(LevelReading(times[0], level))
    for k, c in enumerate(use):
        if level < 2500:
            deliveries.append(DeliveryRecord(times[k] + dt.timedelta(days=2), 5000.0))
            level += 5000.0
        level -= c
        readings.append(LevelReading(times[k + 1], level))
    return weather, readings, deliveries


def test_degree_day_model_follows_the_winter_where_a_flat_rate_misses(seattle):
    # Fit on Sept–Nov 2013 (13 weekly intervals), predict each week of Dec 2013 – Feb 2014 from its
    # observed degree days. Over 20 simulated sites: the degree-day model's weekly consumption is
    # within 10 % on average (mean absolute relative error; the weekly noise alone is about 4 %),
    # while the flat autumn rate misses by more than 25 %.
    weeks = [dt.datetime(2013, 12, 2, tzinfo=dt.UTC) + dt.timedelta(weeks=w) for w in range(13)]
    for seed in range(20):
        rng = np.random.default_rng(seed)
        weather, readings, deliveries = _heating_site(seattle, rng)
        e = estimate_consumption(readings, deliveries, capacity=10_000, days=100, weather=weather)
        fit = e.degree_day_fit
        assert e.rejected == () and fit.n_intervals == 13
        dd = interval_degree_days(weather, weeks[:-1], weeks[1:])
        actual = rng.normal(20 * 7 + 8 * dd, 10 * math.sqrt(7))
        assert np.mean(np.abs(fit.predict(7.0, dd) - actual) / actual) <= 0.10
        assert np.mean(np.abs(7 * e.rate_per_day - actual) / actual) > 0.25


def test_heating_site_screened_with_the_degree_day_model_keeps_cold_weeks(seattle):
    # The cold weeks of a heating site are not outliers: the screen uses the degree-day model.
    weather, readings, deliveries = _heating_site(seattle, np.random.default_rng(8), base_load=5.0, per_dd=15.0)
    with_weather = estimate_consumption(readings, deliveries, capacity=10_000, weather=weather)
    assert with_weather.rejected == () and with_weather.excluded_intervals == ()
    readings[7] = LevelReading(readings[7].time, readings[7].level - 1500)  # a gauge outlier
    e = estimate_consumption(readings, deliveries, capacity=10_000, weather=weather)
    assert [(r.index, r.reason) for r in e.rejected] == [(7, "implausible_consumption")]


def test_expected_degree_days_leave_out_days_missing_from_the_history():
    # 10 January has 4.0 in 2024, nothing in 2025 (NaN) and 6.0 in 2026: the mean of the two known.
    first = dt.date(2024, 1, 1)
    values = [math.nan] * (dt.date(2026, 12, 31) - first).days
    values[(dt.date(2024, 1, 10) - first).days] = 4.0
    values[(dt.date(2026, 1, 10) - first).days] = 6.0
    got = expected_degree_days(DailyDegreeDays(first, tuple(values)), [dt.date(2027, 1, 10), dt.date(2027, 1, 11)])
    assert got[0] == pytest.approx(5.0)
    assert math.isnan(got[1])  # never known: no expectation
