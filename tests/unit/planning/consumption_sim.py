"""Simulated tanks for the consumption tests: a drifted random walk read at random times."""

from __future__ import annotations

import datetime as dt
from dataclasses import dataclass

import numpy as np

from service.planning.consumption import DeliveryRecord, LevelReading

START = dt.datetime(2024, 1, 1, 6, 0, tzinfo=dt.UTC)


@dataclass
class SimulatedTank:
    readings: list
    deliveries: list
    spikes: list  # input positions of readings made outliers
    true_levels: list


def simulate_tank(
    rng: np.random.Generator,
    mu: float = 100.0,
    sigma: float = 25.0,
    days: float = 90.0,
    capacity: float = 10_000.0,
    gaps: tuple[float, float] = (2.0, 9.0),
    spikes: int = 0,
    record_levels: float = 0.5,
) -> SimulatedTank:
    """Readings every ``U(gaps)`` days over ``days``; consumption ``N(μΔ, σ²Δ)`` between events.

    When a reading finds less than 45 % of the tank, a delivery at a uniform time in the next
    gap fills to 85 %; each delivery records its levels with probability ``record_levels``.
    ``spikes`` readings (even positions, not the first or last) are moved by ±25 % of the tank (or set above it).
    """
    t, level = 0.0, 0.7 * capacity
    readings, deliveries, true_levels = [], [], []

    def at(x):
        return START + dt.timedelta(days=float(x))

    readings.append(LevelReading(at(t), level))
    true_levels.append(level)
    while True:
        gap = rng.uniform(*gaps)
        if t + gap > days:
            break
        if level < 0.45 * capacity:
            u = rng.uniform(0, gap)
            level -= rng.normal(mu * u, sigma * np.sqrt(u))
            qty = 0.85 * capacity - level
            record = rng.random() < record_levels
            deliveries.append(
                DeliveryRecord(at(t + u), qty, level if record else None, level + qty if record else None)
            )
            level += qty
            level -= rng.normal(mu * (gap - u), sigma * np.sqrt(gap - u))
        else:
            level -= rng.normal(mu * gap, sigma * np.sqrt(gap))
        t += gap
        readings.append(LevelReading(at(t), level))
        true_levels.append(level)
    # Never two neighbours: two adjacent outliers look like a step, and their intervals are excluded instead.
    chosen = sorted(rng.choice(np.arange(2, len(readings) - 1, 2), size=spikes, replace=False)) if spikes else []
    for k in chosen:
        r = readings[k]
        shifted = r.level + rng.choice([-1, 1]) * 0.25 * capacity
        readings[k] = LevelReading(r.time, shifted if 0 <= shifted <= capacity else 1.2 * capacity)
    return SimulatedTank(readings, deliveries, [int(k) for k in chosen], true_levels)
