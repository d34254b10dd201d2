"""Pure planning core of Ullage: delivery cycles and joint truck schedules for bulk-liquid tanks.

Rule: this package uses only numpy, scipy and the standard library. It does no I/O and
imports no web, database or schema library (no Flask, Werkzeug, SQLAlchemy, marshmallow)
and nothing else of the service; ``tests/unit/planning/test_purity.py`` checks this.

Model (days, whole-day gaps; derivations in ``docs/planning.md``): site ``i`` has demand
``d_i``, holding term ``H_i = h_i d_i / 2``, stop cost ``k_i`` and longest cycle
``U_i = min(f_i V_i - s_i, W) / d_i``; the truck costs ``K`` per trip, carries at most ``W`` in at
most ``S`` stops, works on its working weekdays, at most ``trips_per_day`` trips a date, never on
closed dates. A plan gives each site a pattern (period ``P_i``, delivery offsets, gaps ``g``; each
delivery carries ``d_i g``); its cost per day over the repeat period ``R = lcm(P_i)`` is
``(K · every trip + Σ stop costs + Σ_i H_i Σ g²) / R``. ``plan_joint`` searches the power-of-two and
integer-multiple policies on the working-day axis and truck-aware variants, evaluating each exactly
by packing every date into trips; ``trips_between`` lists any window with closed dates applied; the
reported bound is ``drivable_bound.drivable_lower_bound``.

``service.planning.consumption`` learns each tank's consumption from readings and deliveries
(drifted random walk), tests the stored demand for drift, sizes safety stock from the
variability and fits degree days (``docs/planning.md`` §11).
"""

from service.planning.consumption import (
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
    consumption_drift,
    degree_day_series,
    estimate_consumption,
    expected_degree_days,
    interval_degree_days,
    pooled_relative_sigma,
    safety_stock,
    safety_stock_for_fill_rate,
)
from service.planning.dispatch_window import TripWindow, trips_between
from service.planning.errors import PlanningInputError
from service.planning.inputs import SiteInput, TruckInput
from service.planning.joint import plan_joint
from service.planning.relaxation import lower_bound
from service.planning.results import CycleResult, JointResult, SitePlan, Status, Stop, Trip
from service.planning.single_site import single_site_cycle

__all__ = [
    "ConsumptionEstimate",
    "ConsumptionInterval",
    "CycleResult",
    "DailyDegreeDays",
    "DegreeDayFit",
    "DeliveryRecord",
    "DriftTest",
    "ExcludedInterval",
    "JointResult",
    "LevelReading",
    "PlanningInputError",
    "RejectedReading",
    "SafetyStock",
    "SiteInput",
    "SitePlan",
    "Status",
    "Stop",
    "Trip",
    "TripWindow",
    "TruckInput",
    "consumption_drift",
    "degree_day_series",
    "estimate_consumption",
    "expected_degree_days",
    "interval_degree_days",
    "lower_bound",
    "plan_joint",
    "pooled_relative_sigma",
    "safety_stock",
    "safety_stock_for_fill_rate",
    "single_site_cycle",
    "trips_between",
]
