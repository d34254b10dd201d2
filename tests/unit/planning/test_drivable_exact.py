"""Validity of the bound and quality of the plans against the exact optimum of small instances
(``scipy.optimize.milp``, HiGHS — a general-purpose reference solver; ``drivable_exact.py``).

The exact optimum over one repeat period ``R`` is the cost of a drivable plan, so the service's bound
must lie below it (rule 4); it is also an upper bound on the optimum over all periods, so the
planner's plan (free to use any period) should come close to it or beat it.
"""

from __future__ import annotations

import datetime as dt

import numpy as np
import pytest

from service.planning import SiteInput, TruckInput, plan_joint

from .drivable_exact import as_result, exact_optimum
from .drivable_oracle import check_plan

MONDAY = dt.date(2026, 12, 7)
#: The planner's plan is at most this much above the exact optimum of the periods tried (measured: see
#: docs/planning.md, "Drivable plans against exact and bound").
QUALITY = 0.10
WEEK = (1, 2, 3, 4, 5, 6, 7)


def small_instance(seed: int):
    """n = 2–5 sites with short caps, a tight truck (load, stops, trips a day) and a weekly calendar."""
    rng = np.random.default_rng(seed)
    working = [(1, 2, 3, 4, 5), (1, 2, 3, 4, 5, 6), WEEK][seed % 3]
    n = int(rng.integers(2, 6))
    sites = []
    for i in range(n):
        d = float(rng.uniform(300, 3000))
        days = rng.uniform(3.1, 7.5) if len(working) < 7 else rng.uniform(1.1, 6.0)
        sites.append(
            SiteInput(f"x{i}", d, float(rng.uniform(0.002, 0.03)), float(rng.uniform(5, 40)), d * days / 0.95, 0.95)
        )
    W = float(rng.uniform(1.0, 2.5)) * max(s.tank_capacity * 0.95 for s in sites)
    truck = TruckInput(
        float(rng.uniform(80, 300)),
        capacity=W,
        max_stops=int(rng.integers(1, 4)),
        working_days=working,
        trips_per_day=int(rng.integers(1, 4)),
    )
    periods = (7,) if len(working) < 7 else (3, 4, 5, 6)
    return sites, truck, periods


@pytest.mark.slow
@pytest.mark.parametrize("seed", range(18))
def test_bound_below_and_plan_near_the_exact_optimum(seed):
    sites, truck, periods = small_instance(seed)
    exact = [e for R in periods if (e := exact_optimum(sites, truck, MONDAY, R)) is not None]
    result = plan_joint(sites, truck, start_date=MONDAY)
    check_plan(result, sites, truck)
    if not exact:
        return  # no plan of these periods; the planner may still find a longer one
    best = min(e.cost_per_day for e in exact)
    R = next(R for R, e in zip(periods, exact, strict=False) if e.cost_per_day == best)
    check_plan(as_result(sites, truck, MONDAY, R, min(exact, key=lambda e: e.cost_per_day)), sites, truck)
    assert result.success, f"infeasible ({result.message}) although a plan of {R} days exists"
    assert result.lower_bound_per_day <= best * (1 + 1e-9), "the bound is above a drivable plan's cost"
    assert result.cost_per_day <= best * (1 + QUALITY), f"plan {result.cost_per_day} vs exact {best}"
