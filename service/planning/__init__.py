"""Pure planning core of Ullage: delivery cycles and joint truck schedules for bulk-liquid tanks.

Rule: this package uses only numpy, scipy and the standard library. It does no I/O and
imports no web, database or schema library (no Flask, Werkzeug, SQLAlchemy, marshmallow)
and nothing else of the service; ``tests/unit/planning/test_purity.py`` checks this.

Model (days, whole-day cycles; derivations in ``docs/planning.md``): site ``i`` has demand
``d_i``, holding term ``H_i = h_i d_i / 2``, stop cost ``k_i`` and longest cycle
``U_i = min(f_i V_i - s_i, W) / d_i``; the truck costs ``K`` per trip. A joint policy has
cycles ``T_i = m_i T0`` (min ``m_i = 1``) and offsets; its cost per day is
``K · trips / R + Σ k_i / T_i + Σ H_i T_i`` over the repeat period ``R = lcm(T_i)``.
"""

from service.planning.dispatch_window import trips_between
from service.planning.errors import PlanningInputError
from service.planning.inputs import SiteInput, TruckInput
from service.planning.joint import plan_joint
from service.planning.relaxation import lower_bound
from service.planning.results import CycleResult, JointResult, SitePlan, Status, Stop, Trip
from service.planning.single_site import single_site_cycle

__all__ = [
    "CycleResult",
    "JointResult",
    "PlanningInputError",
    "SiteInput",
    "SitePlan",
    "Status",
    "Stop",
    "Trip",
    "TruckInput",
    "lower_bound",
    "plan_joint",
    "single_site_cycle",
    "trips_between",
]
