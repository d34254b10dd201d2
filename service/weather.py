"""Weather-driven demand of a site with a ``weather_region`` (heating oil, propane).

Between the stored rows and the pure core (``service.planning.consumption``, docs/planning.md
§11.6): the site's consumption intervals, its degree days from the region's posted daily mean
temperatures (local days of the service time zone), the degree-day fit
``c_j = b Δ_j + v D_j`` and the expected demand of future days ``b + v · E[DD(day)]`` that the
projections use (:func:`expected_daily_demand`).
"""

from __future__ import annotations

import datetime as dt
import math
from collections.abc import Iterable, Sequence
from dataclasses import dataclass
from zoneinfo import ZoneInfo

from sqlalchemy.orm import Session

from service.persistence import deliveries as deliveries_store
from service.persistence import weather as weather_store
from service.persistence.models import Site, WeatherDay
from service.planning.consumption import (
    ConsumptionEstimate,
    DailyDegreeDays,
    DeliveryRecord,
    LevelReading,
    estimate_consumption,
    expected_degree_days,
    heating_degree_days,
)

#: Years of observed weather the expected degree days of a calendar day average over.
HISTORY_YEARS = 10
DAY = dt.timedelta(days=1)


def consumption_intervals(
    session: Session, site: Site, since: dt.datetime, until: dt.datetime
) -> tuple[list[LevelReading], list[DeliveryRecord]]:
    """The gauge levels and recorded deliveries of ``site`` in ``[since, until]``, for the core.

    The one place the weather fit gets its intervals from: an interval's consumption is level
    before − level after + what was delivered in between (docs/planning.md §11).
    """
    readings = [
        LevelReading(r.measured_at, r.level) for r in weather_store.site_readings(session, site.id, since, until)
    ]
    _, recorded = deliveries_store.history(session, [site.id], since)
    deliveries = [
        DeliveryRecord(d.delivered_at, d.quantity, d.level_before, d.level_after)
        for d in recorded[site.id]
        if d.delivered_at <= until
    ]
    return readings, deliveries


def degree_days(
    rows: Iterable[WeatherDay], first: dt.date, last: dt.date, base: float, zone: ZoneInfo
) -> DailyDegreeDays:
    """Degree days ``max(0, base − mean)`` of each day from ``first`` to ``last`` (NaN where no row)."""
    by_day = {w.day: w.mean_temperature for w in rows}
    means = [by_day.get(first + i * DAY, math.nan) for i in range((last - first).days + 1)]
    return DailyDegreeDays(first, tuple(float(v) for v in heating_degree_days(means, base)), zone)


def latest_run(days: Sequence[dt.date]) -> tuple[dt.date, dt.date] | None:
    """First and last day of the latest run of consecutive days in sorted ``days``."""
    if not days:
        return None
    start = len(days) - 1
    while start > 0 and (days[start] - days[start - 1]).days == 1:
        start -= 1
    return days[start], days[-1]


@dataclass(frozen=True)
class WeatherFit:
    """The degree-day estimate of a site and the weather it used.

    ``estimate`` is the core's :class:`ConsumptionEstimate` over the part of the requested window
    that the weather covers without a gap (its ``degree_day_fit`` is the answer; ``None`` when
    fewer than two intervals or no weather signal); ``weather_first_day`` / ``weather_last_day``
    bound that part; ``missing_days`` counts the days of the requested window without an
    observed temperature.
    """

    estimate: ConsumptionEstimate | None
    requested_start: dt.datetime
    requested_end: dt.datetime
    weather_first_day: dt.date | None
    weather_last_day: dt.date | None
    missing_days: int


def fit(session: Session, site: Site, days: int, zone: ZoneInfo, now: dt.datetime) -> WeatherFit:
    """Fit base load per day and volume per degree day on the site's intervals of the last ``days``.

    The window ends at the site's latest reading (``now`` without readings). The levels used lie in
    the latest run of consecutive days with an observed temperature inside the window, so a missing
    day never splits an interval (the fit needs each interval's degree days).
    """
    end = weather_store.latest_reading_time(session, site.id) or now
    start = end - dt.timedelta(days=days)
    # The last day the window reaches into (a window ending at 00:00 needs no weather of that day).
    first_day, last_day = start.astimezone(zone).date(), (end - dt.timedelta(microseconds=1)).astimezone(zone).date()
    observed = [
        w
        for w in weather_store.days_between(session, site.weather_region or "", first_day, last_day)
        if w.source == "observed"
    ]
    missing = (last_day - first_day).days + 1 - len(observed)
    run = latest_run([w.day for w in observed])
    if run is None:
        return WeatherFit(None, start, end, None, None, missing)
    since = max(start, dt.datetime.combine(run[0], dt.time(0), tzinfo=zone))
    until = min(end, dt.datetime.combine(run[1] + DAY, dt.time(0), tzinfo=zone))
    readings, deliveries = consumption_intervals(session, site, since, until)
    weather = degree_days(observed, run[0], run[1], site.base_temperature, zone)
    span = (until - since).total_seconds() / 86400.0
    estimate = None
    if span > 0 and readings:
        estimate = estimate_consumption(
            readings, deliveries, capacity=site.tank_capacity, days=span, as_of=until, weather=weather
        )
    return WeatherFit(estimate, start, end, run[0], run[1], missing)


def variance_explained(estimate: ConsumptionEstimate) -> float | None:
    """Share of the flat rate's weighted residual sum of squares the degree days explain.

    ``1 − RSS_dd / RSS_flat`` with ``RSS = Σ (c_j − ĉ_j)² / Δ_j`` (the partial R² of the degree-day
    term given the base load); ``None`` when either RSS is undefined or the flat fit is exact.
    """
    f = estimate.degree_day_fit
    if f is None or f.sigma_per_sqrt_day is None or not estimate.sigma_per_sqrt_day:
        return None
    rss_dd = f.sigma_per_sqrt_day**2 * f.df
    rss_flat = estimate.sigma_per_sqrt_day**2 * estimate.df
    return 1.0 - rss_dd / rss_flat


def expected_daily_demand(
    session: Session, site: Site, days: Sequence[dt.date], zone: ZoneInfo, now: dt.datetime, window: int
) -> dict[dt.date, float]:
    """Expected consumption of each of ``days``: ``max(0, b + v · E[DD(day)])`` from the site's fit.

    ``E[DD(day)]`` is the day's own posted value (observed, or a forecast), else the mean of the
    observed days of the same calendar day over the last :data:`HISTORY_YEARS` years
    (``expected_degree_days``). Empty when the
    site has no usable fit (no region, too few intervals, ``v ≤ 0``): the projection then keeps
    ``demand_per_day``. A day without history or forecast is left out (the projection's flat rate).
    """
    if site.weather_region is None or not days:
        return {}
    result = fit(session, site, window, zone, now)
    f = None if result.estimate is None else result.estimate.degree_day_fit
    if f is None or not f.volume_per_degree_day > 0:
        return {}
    first = min(days) - dt.timedelta(days=366 * HISTORY_YEARS)
    rows = weather_store.days_between(session, site.weather_region, first, max(days))
    observed = [w for w in rows if w.source == "observed"]
    wanted = set(days)
    known = {  # a day's own observation or forecast, before any mean of past years
        w.day: float(heating_degree_days(w.mean_temperature, site.base_temperature)) for w in rows if w.day in wanted
    }
    if not observed and not known:
        return {}
    history = (
        degree_days(observed, observed[0].day, observed[-1].day, site.base_temperature, zone)
        if observed
        else DailyDegreeDays(min(days), (math.nan,), zone)
    )
    expected = expected_degree_days(history, days, known)
    return {
        day: max(0.0, f.base_load_per_day + f.volume_per_degree_day * float(e))
        for day, e in zip(days, expected, strict=True)
        if math.isfinite(e)
    }
