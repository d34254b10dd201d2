"""Consumption learned from readings and deliveries: rate, drift, safety stock, degree days.

The model, its estimator and the tests are derived in ``docs/planning.md`` §11.
"""

from service.planning.consumption.degree_days import (
    DEFAULT_BASE_TEMPERATURE,
    daily_mean_temperature,
    degree_day_series,
    degree_days_for_volume,
    expected_degree_days,
    fit_degree_days,
    heating_degree_days,
    interval_degree_days,
    k_factor,
    volume_for_degree_days,
)
from service.planning.consumption.drift import DEFAULT_ALPHA, consumption_drift, pooled_relative_sigma
from service.planning.consumption.estimate import DEFAULT_WINDOW_DAYS, estimate_consumption
from service.planning.consumption.records import (
    ConsumptionEstimate,
    ConsumptionInterval,
    DailyDegreeDays,
    DegreeDayFit,
    DeliveryRecord,
    DriftTest,
    ExcludedInterval,
    LevelReading,
    RejectedReading,
    SafetyStock,
)
from service.planning.consumption.safety_stock import normal_loss, safety_stock, safety_stock_for_fill_rate

__all__ = [
    "DEFAULT_ALPHA",
    "DEFAULT_BASE_TEMPERATURE",
    "DEFAULT_WINDOW_DAYS",
    "ConsumptionEstimate",
    "ConsumptionInterval",
    "DailyDegreeDays",
    "DegreeDayFit",
    "DeliveryRecord",
    "DriftTest",
    "ExcludedInterval",
    "LevelReading",
    "RejectedReading",
    "SafetyStock",
    "consumption_drift",
    "daily_mean_temperature",
    "degree_day_series",
    "degree_days_for_volume",
    "estimate_consumption",
    "expected_degree_days",
    "fit_degree_days",
    "heating_degree_days",
    "interval_degree_days",
    "k_factor",
    "normal_loss",
    "pooled_relative_sigma",
    "safety_stock",
    "safety_stock_for_fill_rate",
    "volume_for_degree_days",
]
