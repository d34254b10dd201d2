"""The local search over site patterns (``service/planning/local_search.py``): every plan it proposes keeps
rules 1–2 by construction, and on a realistic network where the class candidates leave nearly empty trips
it reaches the exact optimum of a short period (``scipy.optimize.milp``, HiGHS — a general-purpose
reference solver; ``drivable_exact.py``)."""

from __future__ import annotations

import datetime as dt

import numpy as np
import pytest

from service.planning import SiteInput, TruckInput, plan_joint
from service.planning.evaluation import evaluate
from service.planning.inputs import validate
from service.planning.local_search import improve_local
from service.planning.patterns import Patterns
from service.planning.workweek import WorkWeek

from .drivable_exact import exact_optimum
from .drivable_networks import network
from .drivable_oracle import check_plan

MONDAY = dt.date(2026, 12, 7)


def _assert_rules(problem, week: WorkWeek, patterns: Patterns) -> None:
    """Rule 2's caps and rule 1's calendar on the patterns themselves (the packing is ``evaluate``'s)."""
    for i in range(problem.n):
        mine = patterns.site == i
        offsets, gaps = patterns.offset[mine], patterns.gap[mine]
        P = int(patterns.period[i])
        assert len(offsets) >= 1
        assert (np.diff(offsets) > 0).all() and offsets[0] >= 0 and offsets[-1] < P  # one stop a date
        assert int(gaps.sum()) == P
        assert (np.diff(np.append(offsets, offsets[0] + P)) == gaps).all()
        assert int(gaps.max()) <= int(problem.whole_days[i])  # no gap above ⌊U_i⌋
        assert week.is_working(offsets).all()
        if week.n < 7:
            assert P % 7 == 0


@pytest.mark.parametrize("working", [(1, 2, 3, 4, 5), (1, 2, 3, 4, 5, 6), (1, 2, 3, 4, 5, 6, 7)])
@pytest.mark.parametrize("seed", range(4))
def test_every_proposed_plan_keeps_the_caps_and_the_calendar(seed, working):
    rng = np.random.default_rng(seed)
    sites = []
    for i in range(8):
        d = float(rng.uniform(50, 3000))
        days = float(rng.uniform(3.2, 30.0))
        sites.append(SiteInput(f"s{i}", d, float(rng.uniform(0.001, 0.02)), float(rng.uniform(5, 40)), d * days / 0.95, 0.95))
    truck = TruckInput(200.0, capacity=30_000.0, max_stops=4, working_days=working, trips_per_day=3)
    problem = validate(sites, truck)
    week = WorkWeek(MONDAY, problem.working_days)
    plans = improve_local(problem, week, None, 0, [14, 28], None)
    assert len(plans) == 2
    for patterns in plans:
        _assert_rules(problem, week, patterns)
        assert patterns.repeat in (7, 14, 28) or (len(working) == 7 and 28 % patterns.repeat == 0)
        assert evaluate(problem, patterns, True) is not None


def test_a_garage_network_reaches_the_exact_optimum_of_three_days():
    """Seed 85 of the realistic networks (six sites, every day, two trips a day): the class candidates
    ran 384.50 a day on a 56-day repeat (29 % above the bound); the exact optimum over a 3-day period is
    336.28 (milp). The local search's greedy start on short repeats reaches it or better."""
    net = network(85)
    exact = exact_optimum(net.sites, net.truck, net.start_date, 3)
    assert exact is not None
    result = plan_joint(net.sites, net.truck, start_date=net.start_date)
    check_plan(result, net.sites, net.truck)
    assert result.lower_bound_per_day <= exact.cost_per_day * (1 + 1e-9)
    assert result.cost_per_day <= exact.cost_per_day * (1 + 1e-9), (result.cost_per_day, exact.cost_per_day)
