"""A site's consumption learned from its readings and recorded deliveries (issue 15).

The glue between the stored rows and the pure core ``service.planning.consumption``
(docs/planning.md §11): the estimate over the data window, the drift test of the stored
``demand_per_day`` and the safety stock suggested for the site's ``service_level``.

The drift test needs a σ the site cannot yet give after two or three weekly intervals (§11.4):
it uses the fleet's relative noise ``ρ`` pooled over the other active sites of the same truck
(``pooled_relative_sigma``), scaled by the stored demand, with its degrees of freedom; with no
such fleet it falls back to the site's own σ (t test).
"""

from __future__ import annotations

import datetime as dt
import math
from dataclasses import dataclass
from statistics import NormalDist
from typing import Any

from sqlalchemy.orm import Session

from service.cache import LruCache
from service.persistence import deliveries as store
from service.persistence import plans as plan_store
from service.persistence.models import Delivery, Reading, Site, Truck, utcnow
from service.planning.consumption import (
    DEFAULT_ALPHA,
    ConsumptionEstimate,
    DeliveryRecord,
    DriftTest,
    LevelReading,
    consumption_drift,
    estimate_consumption,
    pooled_relative_sigma,
    safety_stock,
)

#: The data window of the trips notices and apply-estimate (days), the consumption answer's default.
DEFAULT_DAYS = 90


def noise_cover(site: Site, estimate: ConsumptionEstimate) -> float:
    """``z·σ`` per √day for a site with a ``service_level`` (``z = Φ⁻¹(service_level)``), else 0:
    a corrected delivery then also covers ``z·σ·√g`` of consumption noise until the next one."""
    sigma = estimate.sigma_per_sqrt_day
    if site.service_level is None or not sigma or site.service_level < 0.5:
        return 0.0
    return NormalDist().inv_cdf(site.service_level) * sigma


@dataclass(frozen=True)
class SiteConsumption:
    """What the consumption answer, the trips notices and the status page show for one site."""

    site: Site
    estimate: ConsumptionEstimate
    drift: DriftTest
    cycle_days: float | None
    suggested_safety_stock: float | None
    fill_rate: float | None


def _estimate(site: Site, readings: list[Reading], deliveries: list[Delivery], days: int, now: dt.datetime):
    return estimate_consumption(
        [LevelReading(r.measured_at, r.level) for r in readings],
        [DeliveryRecord(d.delivered_at, d.quantity, d.level_before, d.level_after) for d in deliveries],
        capacity=site.tank_capacity,
        days=days,
        as_of=now,
    )


def cycle_days(session: Session, site: Site, truck: Truck | None = None) -> float:
    """``T``: the site's cycle in its truck's active plan; without one, the longest the tank allows,
    ``(safe_fill × tank_capacity − safety_stock) / demand_per_day``."""
    truck = truck if truck is not None else session.get(Truck, site.truck_id)
    plan = plan_store.active_plan(session, truck) if truck is not None else None
    if plan is not None:
        for entry in plan_store.stored_result(plan)["sites"]:
            if entry["code"] == site.code:
                return float(entry["cycle_days"])
    return (site.safe_fill * site.tank_capacity - site.safety_stock) / site.demand_per_day


@dataclass(frozen=True)
class _Pool:
    """Each site's sum of squared relative residuals and degrees of freedom (``pooled_relative_sigma``
    of the site alone: ``SS_i = ρ_i² · df_i``) and their totals, for the others' pooled σ."""

    terms: dict[int, tuple[float, int]]
    total_ss: float
    total_df: int
    positive: int  # sites with SS_i > 0

    @classmethod
    def of(cls, estimates: dict[int, ConsumptionEstimate]) -> _Pool:
        terms = {}
        for i, e in estimates.items():
            rho, df = pooled_relative_sigma([e])
            terms[i] = ((rho or 0.0) ** 2 * df, df)
        ss = math.fsum(t[0] for t in terms.values())
        return cls(terms, ss, sum(t[1] for t in terms.values()), sum(1 for t in terms.values() if t[0] > 0))

    def others(self, site_id: int) -> tuple[float | None, int]:
        """``pooled_relative_sigma`` of every site but ``site_id``: ρ² pools sums of squares over
        degrees of freedom, so the others' are the totals less the site's own,
        ``ρ_{−i}² = (Σ_j SS_j − SS_i) / (Σ_j df_j − df_i)`` (linear, not quadratic, in the sites)."""
        ss, df = self.terms.get(site_id, (0.0, 0))
        others_df = self.total_df - df
        others_ss = 0.0 if self.positive - (ss > 0) == 0 else max(0.0, self.total_ss - ss)
        return (math.sqrt(others_ss / others_df) if others_df else None), others_df


#: A truck's :class:`_Pool` by (truck id, days, UTC date, change stamp): the consumption answer of
#: one site then estimates only that site (every reading, delivery or site change moves the stamp).
POOL_CACHE: LruCache[_Pool] = LruCache(64)


def estimates(
    session: Session, sites: list[Site], days: int, now: dt.datetime | None = None
) -> dict[int, ConsumptionEstimate]:
    """Each site's consumption estimate over the last ``days`` days, by site id."""
    now = now or utcnow()
    readings, deliveries = store.history(session, (s.id for s in sites), now - dt.timedelta(days=days))
    return {s.id: _estimate(s, readings[s.id], deliveries[s.id], days, now) for s in sites}


def _drift(site: Site, estimate: ConsumptionEstimate, pooled: tuple[float | None, int]) -> DriftTest:
    """The drift test of the stored demand, with the others' ``ρ · demand_per_day`` as σ when they have one."""
    rho, df = pooled
    if rho:
        return consumption_drift(estimate, site.demand_per_day, sigma=rho * site.demand_per_day, sigma_df=df)
    return consumption_drift(estimate, site.demand_per_day)


def for_sites(session: Session, sites: list[Site], days: int, now: dt.datetime | None = None) -> dict[int, Any]:
    """``(estimate, drift)`` of each site, the drift tested with σ pooled over the other sites given."""
    learned = estimates(session, sites, days, now)
    pool = _Pool.of(learned)
    return {s.id: (learned[s.id], _drift(s, learned[s.id], pool.others(s.id))) for s in sites}


def estimated_rates(session: Session, sites: list[Site], days: int = DEFAULT_DAYS) -> dict[str, float | None]:
    """Each site's estimated consumption per day (``None``: too little data), by code."""
    learned = estimates(session, sites, days)
    return {s.code: learned[s.id].rate_per_day for s in sites}


def _pool(session: Session, site: Site, days: int, now: dt.datetime, stamp: str | None) -> _Pool:
    """The pool of the site's truck (its other active sites and itself), from :data:`POOL_CACHE`
    when the store's change ``stamp`` is given."""
    key = (site.truck_id, days, now.date(), stamp)
    cached = POOL_CACHE.get(key) if stamp is not None else None
    if cached is not None:
        return cached
    fleet = [s for s in store.truck_sites(session, site.truck_id) if s.id != site.id] + [site]
    pool = _Pool.of(estimates(session, fleet, days, now))
    return POOL_CACHE.put(key, pool) if stamp is not None else pool


def site_consumption(session: Session, site: Site, days: int, stamp: str | None = None) -> SiteConsumption:
    """The consumption of one site, its drift tested against its truck's other active sites (their
    pool cached under the store's change ``stamp`` when given; apply-estimate passes none)."""
    now = utcnow()
    estimate = estimates(session, [site], days, now)[site.id]
    drift = _drift(site, estimate, _pool(session, site, days, now, stamp).others(site.id))
    cycle = cycle_days(session, site)
    suggested = fill = None
    mu, sigma = estimate.rate_per_day, estimate.sigma_per_sqrt_day
    if site.service_level is not None and mu and sigma and site.service_level >= 0.5:
        sized = safety_stock(mu, sigma, cycle, site.lead_time_days, site.service_level)
        suggested, fill = sized.safety_stock, sized.fill_rate
    return SiteConsumption(site, estimate, drift, cycle, suggested, fill)


def answer(result: SiteConsumption) -> dict[str, Any]:
    """The JSON answer of ``GET /sites/{code}/consumption``."""
    e = result.estimate.to_dict()
    drift = result.drift.to_dict()
    site = result.site
    return {
        "site": site.code,
        "demand_per_day": site.demand_per_day,
        **{k: e[k] for k in ("days", "window_start", "window_end", "rate_per_day", "sigma_per_sqrt_day")},
        **{k: e[k] for k in ("rate_low", "rate_high", "confidence", "n_intervals", "elapsed_days")},
        "intervals": [{k: v for k, v in i.items() if k != "degree_days"} for i in e["intervals"]],
        "excluded_intervals": e["excluded_intervals"],
        "rejected": [{k: r[k] for k in ("time", "level", "source", "reason")} for r in e["rejected"]],
        "drift": {
            k: drift[k]
            for k in ("drifted", "direction", "alpha", "statistic", "p_value", "rate_low", "rate_high", "sigma_source")
        }
        | {"message": drift["message"]},
        "service_level": site.service_level,
        "cycle_days": result.cycle_days,
        "lead_time_days": site.lead_time_days,
        "suggested_safety_stock": result.suggested_safety_stock,
        "fill_rate": result.fill_rate,
    }


__all__ = [
    "DEFAULT_ALPHA",
    "DEFAULT_DAYS",
    "noise_cover",
    "SiteConsumption",
    "answer",
    "cycle_days",
    "estimates",
    "for_sites",
    "site_consumption",
]
