"""Safety stock of a periodic-review site sized from the consumption's variability.

Periodic review with cycle ``T`` days and lead time ``L`` days: consumption over the
protection period ``T + L`` is ``N(μ (T + L), σ² (T + L))`` under the random walk, so a safety
stock ``SS = k σ √(T + L)`` gives a cycle service level (probability of no stock-out in a cycle)
``Φ(k)`` and a fill rate (share of demand met from stock) ``1 − σ √(T + L) G(k) / (μ T)`` with the
standard normal loss function ``G(k) = φ(k) − k (1 − Φ(k))`` (Axsäter, *Inventory Control*, ch. 5;
Silver, Pyke & Peterson — MEMORY for chapter numbers). The fill-rate
formula counts the expected shortage at the end of each cycle as backordered demand (the usual
approximation, good when the fill rate is high).
"""

from __future__ import annotations

import math

from scipy import optimize, special, stats

from service.planning.consumption.records import SafetyStock
from service.planning.errors import PlanningInputError

_SQRT_HALF_PI = math.sqrt(math.pi / 2.0)


def normal_loss(k: float) -> float:
    """``G(k) = φ(k) − k (1 − Φ(k)) = E[(Z − k)⁺]`` for a standard normal ``Z``.

    Written as ``φ(k) (1 − k √(π/2) erfcx(k/√2))`` (``1 − Φ(k) = φ(k) √(π/2) erfcx(k/√2)``) so
    that it stays accurate for large ``k`` where both terms underflow together.
    """
    if k < 0:
        return -k + normal_loss(-k)  # G(−k) = k + G(k)
    return float(stats.norm.pdf(k) * (1.0 - k * _SQRT_HALF_PI * special.erfcx(k / math.sqrt(2.0))))


def _positive(name: str, value: float, *, zero: bool = False) -> float:
    ok = isinstance(value, int | float) and math.isfinite(value) and (value >= 0 if zero else value > 0)
    if not ok:
        raise PlanningInputError(
            f"{name} must be a {'non-negative' if zero else 'positive'} number, got {value!r}", field=name
        )
    return float(value)


def _record(mu: float, sigma: float, cycle: float, lead: float, k: float) -> SafetyStock:
    protection = sigma * math.sqrt(cycle + lead)
    fill = 1.0 - protection * normal_loss(k) / (mu * cycle)
    return SafetyStock(
        demand_per_day=mu,
        sigma_per_sqrt_day=sigma,
        cycle_days=cycle,
        lead_days=lead,
        k=k,
        safety_stock=k * protection,
        sigma_protection=protection,
        cycle_service_level=float(stats.norm.cdf(k)),
        fill_rate=min(1.0, max(0.0, fill)),
    )


def safety_stock(
    demand_per_day: float,
    sigma_per_sqrt_day: float,
    cycle_days: float,
    lead_days: float = 1.0,
    service_level: float = 0.95,
) -> SafetyStock:
    """``SS = z σ √(T + L)`` with ``z = Φ⁻¹(service_level)`` (cycle service level in ``[0.5, 1)``).

    Example (C1): μ = 100, σ = 25, T = 7, L = 1, 95 % → SS = 116.3087, fill rate 0.997889.
    """
    mu, sigma = (
        _positive("demand_per_day", demand_per_day),
        _positive("sigma_per_sqrt_day", sigma_per_sqrt_day, zero=True),
    )
    cycle, lead = _positive("cycle_days", cycle_days), _positive("lead_days", lead_days, zero=True)
    if not (isinstance(service_level, int | float) and 0.5 <= service_level < 1):
        raise PlanningInputError(f"service_level must be in [0.5, 1), got {service_level!r}", field="service_level")
    return _record(mu, sigma, cycle, lead, float(stats.norm.ppf(service_level)))


def safety_stock_for_fill_rate(
    demand_per_day: float, sigma_per_sqrt_day: float, cycle_days: float, lead_days: float = 1.0, fill_rate: float = 0.99
) -> SafetyStock:
    """The smallest ``k ≥ 0`` whose fill rate reaches ``fill_rate`` (in ``(0, 1)``), and its stock.

    Solves ``G(k) = (1 − β) μ T / (σ √(T + L))`` (``G`` decreases) by Brent's method; ``k = 0``
    when the cycle stock alone already gives ``β`` (no negative safety stock).
    Example (C1): 99 % → k = 0.907847, SS = 64.1945.
    """
    mu, sigma = (
        _positive("demand_per_day", demand_per_day),
        _positive("sigma_per_sqrt_day", sigma_per_sqrt_day, zero=True),
    )
    cycle, lead = _positive("cycle_days", cycle_days), _positive("lead_days", lead_days, zero=True)
    if not (isinstance(fill_rate, int | float) and 0 < fill_rate < 1):
        raise PlanningInputError(f"fill_rate must be in (0, 1), got {fill_rate!r}", field="fill_rate")
    protection = sigma * math.sqrt(cycle + lead)
    target = math.inf if protection == 0 else (1.0 - fill_rate) * mu * cycle / protection
    if target >= normal_loss(0.0):
        return _record(mu, sigma, cycle, lead, 0.0)
    high = 1.0
    while normal_loss(high) > target:
        high *= 2.0
    k = optimize.brentq(lambda x: normal_loss(x) - target, 0.0, high, xtol=1e-12, rtol=1e-14)
    return _record(mu, sigma, cycle, lead, float(k))
