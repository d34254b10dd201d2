"""Joint delivery policy for the sites of one truck: choose, stagger, count, report."""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import replace

import numpy as np

from service.planning.cycle_cost import cycle_cost
from service.planning.delivery_calendar import LOAD_TOLERANCE, Calendar
from service.planning.errors import PlanningInputError
from service.planning.inputs import Problem, SiteInput, TruckInput, validate
from service.planning.integer_multiple import integer_policy
from service.planning.policy import Policy
from service.planning.power_of_two import power_of_two_policy
from service.planning.relaxation import Relaxation, relaxation_of
from service.planning.results import JointResult, SitePlan, Status, Trip
from service.planning.staggering import site_weights, stagger

METHODS = ("best", "power_of_two", "integer")
#: Days of a repeat period listed in ``JointResult.trips`` at most.
LISTED_DAYS = 3660
#: Stops listed in ``JointResult.trips`` at most (whole days; keeps 100 000-site results small).
LISTED_STOPS = 200_000
#: Base trips of a repeat period evaluated exactly for the peak load and the extra trips.
EVALUATED_TRIPS = 2**17


def _check_options(method, base_days) -> None:
    if not isinstance(method, str) or method not in METHODS:
        raise PlanningInputError(f"method must be one of {', '.join(METHODS)}, got {method!r}", field="method")
    if base_days is None:
        return
    if isinstance(base_days, bool) or not isinstance(base_days, (int, np.integer)) or base_days < 1:
        raise PlanningInputError(f"base_days must be an integer >= 1 or null, got {base_days!r}", field="base_days")
    if method == "integer":
        raise PlanningInputError("base_days applies to methods power_of_two and best, not integer", field="base_days")


def _base_too_long(base_days: int, problem: Problem) -> str:
    i = int(np.argmin(problem.whole_days))
    return (
        f"base_days {base_days} is longer than the longest whole-day cycle {int(problem.whole_days[i])} "
        f"of site `{problem.codes[i]}`"
    )


def _infeasible(base_days: int, problem: Problem, relaxation: Relaxation) -> JointResult:
    return JointResult(
        status=Status.INFEASIBLE,
        success=False,
        message=_base_too_long(base_days, problem),
        method="power_of_two",
        base_days=base_days,
        dispatch_interval_days=0,
        repeat_days=0,
        trips_per_repeat=0,
        cost_per_day=0.0,
        cost_breakdown={"dispatch": 0.0, "stops": 0.0, "holding": 0.0},
        lower_bound_per_day=relaxation.value,
        gap=0.0,
        peak_load=0.0,
        extra_trips=0,
        trips_truncated=False,
        sites=(),
        trips=(),
        warnings=(),
    )


def _per_trip(multiples: np.ndarray, residues: np.ndarray, values: np.ndarray, trips: int) -> np.ndarray:
    """``Σ_i values_i [t ≡ r_i mod m_i]`` for base trips ``t = 0 … trips - 1``."""
    total = np.zeros(trips)
    t = np.arange(trips)
    for m in np.unique(multiples).tolist():
        members = multiples == m
        total += np.bincount(residues[members], weights=values[members], minlength=m)[t % m]
    return total


def _count_trips(problem: Problem, calendar: Calendar, T0: int, multiples, residues, quantity, period: int):
    """Peak day load, extra trips per repeat period, stops per dispatch day, warnings.

    Exact over the first ``min(period, EVALUATED_TRIPS)`` dispatch days; beyond that the peak
    is bounded and the extra trips are scaled from the window (with warnings).
    """
    evaluated = min(period, EVALUATED_TRIPS)
    loads = _per_trip(multiples, residues, quantity, evaluated)
    counts = _per_trip(multiples, residues, np.ones(problem.n), evaluated).astype(np.int64)
    over = loads > problem.capacity * (1 + LOAD_TOLERANCE)
    if problem.max_stops is not None:
        over |= counts > problem.max_stops
    extra = sum(len(calendar.split(calendar.sites_on(int(t) * T0))) - 1 for t in np.flatnonzero(over).tolist())
    warnings = []
    if evaluated < period:
        upper = sum(
            np.bincount(residues[multiples == m], weights=quantity[multiples == m], minlength=m).max()
            for m in np.unique(multiples).tolist()
        )
        warnings.append(
            f"the repeat period has {period} dispatch days; peak load and extra trips were evaluated over the "
            f"first {evaluated}; the peak load over the whole period is at most {upper:g}"
        )
        if extra:
            extra = extra * period // evaluated
            warnings.append(f"extra trips per repeat period are estimated from the first {evaluated} dispatch days")
    if extra:
        warnings.append(f"{extra} extra trip(s) per repeat period: no offsets fit every day in the truck")
    return float(loads.max()), int(extra), counts, warnings


def _listing(calendar: Calendar, counts: np.ndarray, T0: int, repeat: int) -> tuple[list[Trip], bool]:
    """Trips of the first ``min(R, LISTED_DAYS)`` days, cut at whole days at ``LISTED_STOPS`` stops."""
    days = -(-min(repeat, LISTED_DAYS) // T0)
    days = max(1, int(np.searchsorted(np.cumsum(counts[:days]), LISTED_STOPS, side="right")))
    trips: list[Trip] = []
    for t in range(days):
        trips.extend(calendar.trips_on(t * T0))
    return trips, days * T0 < repeat


def _assemble(problem: Problem, relaxation: Relaxation, policy: Policy) -> JointResult:
    T0 = policy.dispatch_interval
    cycles = policy.cycles
    multiples = cycles // T0
    quantity = problem.demand * cycles
    residues = stagger(multiples, site_weights(quantity, problem.capacity, problem.max_stops))
    offsets = residues * T0
    calendar = Calendar(problem.codes, cycles, offsets, quantity, problem.capacity, problem.max_stops)
    period = math.lcm(*np.unique(multiples).tolist())
    repeat = T0 * period
    peak, extra, counts, warnings = _count_trips(problem, calendar, T0, multiples, residues, quantity, period)
    trips, truncated = _listing(calendar, counts, T0, repeat)
    if truncated:
        warnings.append(f"trips list days 0 to {trips[-1].day} of the {repeat}-day repeat period")
    k, H = problem.stop_cost, problem.H
    site_cost = cycle_cost(k, H, cycles)
    dispatch = problem.dispatch_cost * (period + extra) / repeat
    stops, holding = float((k / cycles).sum()), float((H * cycles).sum())
    cost = dispatch + stops + holding
    capped = (policy.next_cycles > problem.whole_days) & (cycle_cost(k, H, policy.next_cycles) < site_cost)
    binding = np.where(capped, np.where(problem.tank_binds, "tank", "truck"), "")
    sites = tuple(
        SitePlan(code, T, o, q, c, b or None)
        for code, T, o, q, c, b in zip(
            problem.codes,
            cycles.tolist(),
            offsets.tolist(),
            quantity.tolist(),
            site_cost.tolist(),
            binding.tolist(),
            strict=True,
        )
    )
    return JointResult(
        status=Status.OPTIMAL,
        success=True,
        message=f"optimal {policy.method} policy",
        method=policy.method,
        base_days=policy.base_days,
        dispatch_interval_days=T0,
        repeat_days=repeat,
        trips_per_repeat=period + extra,
        cost_per_day=cost,
        cost_breakdown={"dispatch": dispatch, "stops": stops, "holding": holding},
        lower_bound_per_day=relaxation.value,
        gap=cost / relaxation.value - 1.0 if relaxation.value > 0 else 0.0,
        peak_load=peak,
        extra_trips=extra,
        trips_truncated=truncated,
        sites=sites,
        trips=tuple(trips),
        warnings=tuple(warnings),
    )


def plan_joint(
    sites: Sequence[SiteInput], truck: TruckInput, *, method: str = "best", base_days: int | None = None
) -> JointResult:
    """Plan whole-day joint deliveries for the sites of one truck.

    Parameters
    ----------
    sites : sequence of SiteInput
    truck : TruckInput
    method : {"best", "power_of_two", "integer"}
        ``power_of_two``: the optimal policy with cycles ``B 2**p`` for ``base_days`` (or the
        best odd base when ``None``); ``integer``: the exact optimal integer-multiple policy;
        ``best``: the cheaper of the two after staggering (a tie goes to power_of_two).
    base_days : int or None
        Base ``B`` for ``power_of_two`` and ``best``.

    Returns
    -------
    JointResult
        ``Status.INFEASIBLE`` when ``base_days`` exceeds some site's longest whole-day cycle
        (under ``best`` the integer policy is returned instead, with a warning).

    Raises
    ------
    PlanningInputError
        For invalid sites, truck, method or base_days.
    """
    _check_options(method, base_days)
    problem = validate(sites, truck)
    relaxation = relaxation_of(problem)
    base_fits = base_days is None or base_days <= int(problem.whole_days.min())
    if method == "power_of_two" and not base_fits:
        return _infeasible(int(base_days), problem, relaxation)
    results = []
    if method in ("best", "power_of_two") and base_fits:
        results.append(_assemble(problem, relaxation, power_of_two_policy(problem, relaxation, base_days)))
    if method in ("best", "integer"):
        results.append(_assemble(problem, relaxation, integer_policy(problem, relaxation)))
    chosen = min(results, key=lambda r: r.cost_per_day)
    if not base_fits:
        chosen = replace(
            chosen, warnings=chosen.warnings + (f"power_of_two skipped: {_base_too_long(int(base_days), problem)}",)
        )
    return chosen
