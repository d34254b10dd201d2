"""Drivable joint plan for the sites of one truck: candidate rhythms, exact evaluation, listing.

See ``docs/planning.md`` (sections 3–8 and "Drivable plans"). In short: the policy algorithms (exact
power-of-two and integer-multiple optima) run on the truck's working-day axis, on the data and on
truck-aware variants of it; each candidate is staggered, turned into calendar patterns, and evaluated
exactly by packing every date of its repeat period into trips; the cheapest candidate that never needs
more than ``trips_per_day`` trips on a date wins. When none fits, the weekly fallback plan of
:mod:`fallback` is tried (under ``best`` also as a candidate up to ``FALLBACK_SITES`` sites). Under
``best`` (up to ``LOCAL_SITES`` sites) the chosen plan then goes through the local search of
:mod:`local_search` (whole site patterns moved to fill trips), kept when its exact cost is lower.
"""

from __future__ import annotations

import datetime as dt
import math
import time
from collections.abc import Sequence
from dataclasses import dataclass, replace

import numpy as np

from service.planning.cycle_cost import best_multiple, cycle_cost
from service.planning.dispatch_window import Limits, window_trips
from service.planning.drivable_bound import drivable_lower_bound
from service.planning.errors import PlanningInputError
from service.planning.evaluation import Evaluation, evaluate, limited
from service.planning.fallback import fallback_patterns
from service.planning.inputs import Problem, SiteInput, TruckInput, validate
from service.planning.integer_multiple import integer_policies_by_interval, integer_policy
from service.planning.local_search import improve_local
from service.planning.patterns import Patterns, from_working_cycles
from service.planning.policy import Policy
from service.planning.power_of_two import power_of_two_policy
from service.planning.rebalance import rebalance
from service.planning.relaxation import relaxation_of
from service.planning.results import JointResult, SitePlan, Status
from service.planning.staggering import site_weights, stagger
from service.planning.weekly import improve_weekly
from service.planning.workweek import WorkWeek

#: The policy classes a plan is drawn from (``JointResult.method``) ...
POLICIES = ("power_of_two", "integer")
#: ... and what a caller may ask for: one of them, or the cheaper of the two.
METHODS = ("best", *POLICIES)
#: Days of a repeat period listed in ``JointResult.trips`` at most.
LISTED_DAYS = 3660
#: Stops listed in ``JointResult.trips`` at most (whole days; keeps 100 000-site results small).
LISTED_STOPS = 200_000
#: Truck-aware variants: dispatch cost scale and extra stop cost in units of ``K / S``.
DISPATCH_SCALES = (1.0, 0.5, 2.0, 0.0, 0.25, 4.0)
#: Most candidates packed exactly once a drivable plan is known (the rest are ranked by their bound).
EXACT_CANDIDATES = 4
#: Other dispatch intervals of the integer class evaluated exactly.
INTERVALS = 8
STOP_PENALTIES = (0.0, 0.5, 1.0, 2.0, 4.0, 8.0)
#: Further stop penalties tried only when no candidate fits ``trips_per_day``.
REPAIR_PENALTIES = (16.0, 32.0, 64.0, 128.0, 256.0, 1024.0)
#: Under ``best``, networks up to this many sites also try the weekly fallback plan (:mod:`fallback`) as a
#: candidate; otherwise it is tried only when no other candidate is drivable.
FALLBACK_SITES = 500
#: Networks up to this many sites (not in the classic setting) also run each method's own search under
#: ``best`` and keep the cheapest plan, so ``best`` is never worse than the methods it runs.
BEST_OF_METHODS_SITES = 500
#: Multiples ``M`` of the common-rhythm candidates (:meth:`_Search.rhythms`).
RHYTHM_MULTIPLES = (1, 2, 4)
#: Under ``best``, networks up to this many sites (not in the classic setting) get the local search of
#: :mod:`local_search` on the chosen plan and on greedy starts of these repeat periods (days).
LOCAL_SITES = 500
LOCAL_REPEATS_WEEKLY = (14, 28, 56, 112)
LOCAL_REPEATS_DAILY = (6, 8, 10, 12, 16, 28, 56, 112)
#: Seconds the local search may take at most (within the planning budget).
LOCAL_SECONDS = 4.0
#: The chosen plan is a local-search start when its repeat (whole weeks) is at most this many days.
LOCAL_START_DAYS = 112
#: A local plan is also a start on twice its repeat when that is at most this many days.
LOCAL_LONG_DAYS = 224
#: Capacity factors of the fallback's greedy bins, tried in turn until the exact packing fits.
FALLBACK_SHRINK = (1.0, 0.9, 0.75)


def _check_options(method, base_days, start_date, deadline_seconds) -> None:
    if not isinstance(method, str) or method not in METHODS:
        raise PlanningInputError(f"method must be one of {', '.join(METHODS)}, got {method!r}", field="method")
    if start_date is not None and (not isinstance(start_date, dt.date) or isinstance(start_date, dt.datetime)):
        raise PlanningInputError(f"start_date must be a date, got {start_date!r}", field="start_date")
    if deadline_seconds is not None and (
        isinstance(deadline_seconds, bool)
        or not isinstance(deadline_seconds, (int, float))
        or not deadline_seconds > 0
        or not math.isfinite(deadline_seconds)
    ):
        raise PlanningInputError(
            f"deadline_seconds must be a number > 0 or null, got {deadline_seconds!r}", field="deadline_seconds"
        )
    if base_days is None:
        return
    if isinstance(base_days, bool) or not isinstance(base_days, (int, np.integer)) or base_days < 1:
        raise PlanningInputError(f"base_days must be an integer >= 1 or null, got {base_days!r}", field="base_days")
    if method == "integer":
        raise PlanningInputError("base_days applies to methods power_of_two and best, not integer", field="base_days")


def _bound(problem: Problem) -> float:
    """Lower bound on the cost per day of every drivable plan (:func:`drivable_lower_bound`; ``inf`` when
    it proves that no plan fits the calendar)."""
    return drivable_lower_bound(problem).value


def _names(problem: Problem, sites) -> str:
    return ", ".join(f"`{problem.codes[i]}`" for i in sites)


def _infeasible(
    problem: Problem, message: str, bound: float, start: dt.date, needed: dict, method: str, base: int | None
) -> JointResult:
    if not math.isfinite(bound):  # the drivable bound proved infeasibility; report the finite relaxation
        bound = relaxation_of(problem).value
    return JointResult(
        status=Status.INFEASIBLE,
        success=False,
        message=message,
        method=method,
        base_days=base,
        dispatch_interval_days=0,
        repeat_days=0,
        trips_per_repeat=0,
        cost_per_day=0.0,
        cost_breakdown={"dispatch": 0.0, "stops": 0.0, "holding": 0.0},
        lower_bound_per_day=bound,
        gap=0.0,
        peak_load=0.0,
        trips_truncated=False,
        sites=(),
        trips=(),
        warnings=(),
        start_date=start,
        needed=needed,
    )


def _calendar_gap(problem: Problem, week: WorkWeek, start: dt.date):
    """Longest stretch (days) between two consecutive open dates within the listed horizon, and its ends.

    Open: a working weekday that is not closed. The horizon is days ``0 … LISTED_DAYS + 6``; closed dates
    outside it do not make a plan infeasible (the listing warns about them instead).
    """
    days = np.arange(LISTED_DAYS + 7)
    open_ = week.is_working(days)
    closed = [(c - start).days for c in problem.closed_dates]
    closed = [t for t in closed if 0 <= t < len(days)]
    open_[closed] = False
    at = np.flatnonzero(open_)
    if len(at) < 2:
        return None
    gaps = np.diff(at)
    j = int(np.argmax(gaps))
    return int(gaps[j]), int(at[j]), int(at[j + 1])


@dataclass
class _Candidate:
    method: str
    base_days: int | None
    patterns: Patterns
    binding: np.ndarray
    evaluation: Evaluation
    policy: Policy | None


def _axis_problem(problem: Problem, week: WorkWeek, dispatch_scale: float, stop_penalty: float) -> Problem:
    """The problem on the working-day axis: one unit is a working day.

    A cycle of ``m`` working days lasts about ``7 m / n`` calendar days, so per working day the holding
    term is ``H (7/n)²`` (cost per working day = ``7/n`` × cost per calendar day); caps are the
    largest ``m`` whose longest calendar span fits the tank (:meth:`WorkWeek.caps`).
    """
    if week.n == 7 and dispatch_scale == 1.0 and stop_penalty == 0.0:
        return problem
    caps = week.caps(problem.whole_days)
    scale = 7.0 / week.n
    extra = 0.0 if problem.max_stops is None else stop_penalty * problem.dispatch_cost / problem.max_stops
    return replace(
        problem,
        H=problem.H * scale * scale,
        whole_days=caps,
        cap_days=caps.astype(float) if week.n < 7 else problem.cap_days,
        dispatch_cost=problem.dispatch_cost * dispatch_scale,
        stop_cost=problem.stop_cost + extra,
    )


def _independent(axis: Problem) -> Policy:
    """Every site on its own best whole-day cycle (``T0 = 1``): the optimum when nothing is shared, e.g.
    one stop per trip with the dispatch cost moved into the stop cost."""
    cycles = best_multiple(axis.stop_cost, axis.H, 1.0, 1, axis.whole_days)
    cost = float(cycle_cost(axis.stop_cost, axis.H, cycles).sum())
    return Policy("integer", None, 1, cycles, cycles + 1, cost)


def _policies(axis: Problem, method: str, base_days: int | None, intervals: int, alone: bool) -> list[Policy]:
    """The class optima of ``axis`` and, with ``intervals > 0``, the best integer policies of that many
    other dispatch intervals; with ``alone`` also every site on its own cycle."""
    relaxation = relaxation_of(axis)
    out = []
    if method in ("best", "integer") and alone:
        out.append(_independent(axis))
    if method in ("best", "power_of_two") and (base_days is None or base_days <= int(axis.whole_days.min())):
        out.append(power_of_two_policy(axis, relaxation, base_days))
    if method in ("best", "integer"):
        out.append(integer_policy(axis, relaxation))
        if intervals:
            out.extend(integer_policies_by_interval(axis, relaxation, intervals))
    return out


def _nested(policy: Policy) -> Policy:
    """The integer policy with each multiple rounded down to a power of two (a nested integer-multiple
    policy, repeat ``T0 · max m``), for when the exact one's repeat period is too long to evaluate."""
    T0 = policy.dispatch_interval
    m = policy.cycles // T0
    nested = np.left_shift(1, np.floor(np.log2(m)).astype(np.int64))
    nested = np.where(nested * 2 <= m, nested * 2, nested)
    return replace(policy, cycles=nested * T0, next_cycles=nested * 2 * T0)


def _binding(problem: Problem, axis: Problem, policy: Policy) -> np.ndarray:
    k, H = axis.stop_cost, axis.H
    capped = (policy.next_cycles > axis.whole_days) & (
        cycle_cost(k, H, policy.next_cycles) < cycle_cost(k, H, policy.cycles)
    )
    return np.where(capped, np.where(problem.tank_binds, "tank", "truck"), "")


def _patterns(
    problem: Problem, week: WorkWeek, policy: Policy, deadline: float | None, rebalanced: bool = False
) -> Patterns:
    """Stagger the policy's cycles (working-day axis) and, when a date may need several trips, improve the
    phases (:func:`rebalance`); then the calendar patterns."""
    T0 = policy.dispatch_interval
    cycles = policy.cycles
    quantity = problem.demand * cycles * (7.0 / week.n)
    phases = stagger(cycles // T0, site_weights(quantity, problem.capacity, problem.max_stops)) * T0
    if rebalanced:
        phases = rebalance(
            problem.demand, problem.capacity, problem.max_stops, problem.trips_per_day, week, cycles, phases, deadline
        )
    return from_working_cycles(week, cycles, phases)


def _site_plans(problem: Problem, candidate: _Candidate) -> tuple[SitePlan, ...]:
    p, ev = candidate.patterns, candidate.evaluation
    count = p.slot_count()
    longest = p.longest_gap()
    bounds = np.concatenate([[0], np.cumsum(count)])
    offsets = p.offset.tolist()
    cost = ev.site_stops + ev.site_holding
    plans = []
    for i, code in enumerate(problem.codes):
        period = int(p.period[i])
        days = tuple(offsets[bounds[i] : bounds[i + 1]])
        cycle = period / len(days)
        plans.append(
            SitePlan(
                code=code,
                cycle_days=float(cycle),
                offset_days=days[0],
                quantity=float(problem.demand[i] * cycle),
                cost_per_day=float(cost[i]),
                binding=str(candidate.binding[i]) or None,
                period_days=period,
                delivery_days=days,
                longest_gap_days=int(longest[i]),
            )
        )
    return tuple(plans)


def _result(problem, candidate: _Candidate, bound, start, status, message, warnings) -> JointResult:
    ev = candidate.evaluation
    sites = _site_plans(problem, candidate)
    limits = Limits(problem.capacity, problem.max_stops, problem.trips_per_day, problem.working_days, problem.closed_dates)
    last = min(ev.repeat, LISTED_DAYS) - 1
    trips, window_warnings, listed_last = window_trips(sites, start, limits, 0, last, stop_limit=LISTED_STOPS)
    truncated = listed_last < ev.repeat - 1
    warnings = list(warnings) + list(ev.warnings) + window_warnings
    if truncated:
        warnings.append(f"trips list days 0 to {listed_last} of the {ev.repeat}-day repeat period")
    cost = ev.cost
    return JointResult(
        status=status,
        success=True,
        message=message,
        method=candidate.method,
        base_days=candidate.base_days,
        dispatch_interval_days=ev.interval,
        repeat_days=ev.repeat,
        trips_per_repeat=ev.trips,
        cost_per_day=cost,
        cost_breakdown={"dispatch": ev.dispatch, "stops": ev.stops, "holding": ev.holding},
        lower_bound_per_day=bound,
        gap=cost / bound - 1.0 if bound > 0 else 0.0,
        peak_load=ev.peak_load,
        trips_truncated=truncated,
        sites=sites,
        trips=tuple(trips),
        warnings=tuple(warnings),
        start_date=start,
        needed=None,
    )


class _Search:
    """Candidates ranked by a cheap lower bound on their cost, then evaluated exactly in that order.

    Each candidate is first evaluated with the per-date trip lower bound (no packing); the exact cost is
    at least that. :meth:`finish` evaluates exactly in increasing order of the bound and stops when the
    best exact cost is at most the next bound (then no other candidate can be cheaper), or after
    ``EXACT_CANDIDATES`` packed candidates, or at the deadline.
    """

    def __init__(self, problem: Problem, week: WorkWeek, method: str, base_days, deadline: float | None):
        self.problem, self.week, self.method, self.base_days = problem, week, method, base_days
        self.deadline = deadline
        self.limited = limited(problem)
        self.candidates: list[_Candidate] = []
        self.best: _Candidate | None = None
        self.fewest: _Candidate | None = None  # least trips on the busiest date (for `needed`)
        self.seen: set[bytes] = set()
        self.cut = False
        self.classic = week.n == 7 and not self.limited

    def out_of_time(self) -> bool:
        if self.deadline is not None and time.monotonic() > self.deadline:
            self.cut = True
        return self.cut

    def drivable(self, ev: Evaluation) -> bool:
        return self.problem.trips_per_day is None or ev.max_trips <= self.problem.trips_per_day

    def any_drivable(self) -> bool:
        return any(self.drivable(c.evaluation) for c in self.candidates)

    def variant(self, dispatch_scale: float, stop_penalty: float, intervals: int = 0) -> None:
        axis = _axis_problem(self.problem, self.week, dispatch_scale, stop_penalty)
        for policy in _policies(axis, self.method, self.base_days, intervals, dispatch_scale == 0):
            if self.out_of_time() and self.candidates:
                return
            patterns = _patterns(self.problem, self.week, policy, self.deadline)
            ev = self._evaluate(patterns)
            if ev is None and policy.method == "integer":
                policy = _nested(policy)
                patterns = _patterns(self.problem, self.week, policy, self.deadline)
                ev = self._evaluate(patterns)
            if ev is not None and not self.drivable(ev):  # repair: move phases off the dates over the limit
                patterns = _patterns(self.problem, self.week, policy, self.deadline, rebalanced=True)
                ev = self._evaluate(patterns) or ev
            if ev is not None:
                binding = _binding(self.problem, axis, policy)
                self.candidates.append(_Candidate(policy.method, policy.base_days, patterns, binding, ev, policy))

    def rhythms(self) -> None:
        """Common-rhythm candidates, blind to the cost model but kind to the truck: for each dispatch
        interval ``T0`` up to the shortest cap (working-day axis) and each ``M`` in ``RHYTHM_MULTIPLES``,
        every site on ``T0 · min(M, p_i)`` with ``p_i`` the largest power of two whose cycle fits its
        cap. Few distinct cycles make the staggered slots carry similar loads, so trips fill up where
        the class optimum's mixed cycles leave nearly empty ones."""
        caps = self.week.caps(self.problem.whole_days)
        if caps.min() < 1:
            return
        for T0 in range(1, int(caps.min()) + 1):
            room = caps // T0
            top = np.left_shift(1, np.floor(np.log2(room)).astype(np.int64))
            for M in RHYTHM_MULTIPLES:
                if self.out_of_time() and self.candidates:
                    return
                m = np.minimum(M, top)
                if M > 1 and (m == np.minimum(M // 2, top)).all():
                    continue  # same as the previous M
                policy = Policy("integer", None, T0, m * T0, m * T0 * 2, math.nan)
                patterns = _patterns(self.problem, self.week, policy, self.deadline)
                ev = self._evaluate(patterns)
                if ev is not None and not self.drivable(ev):
                    patterns = _patterns(self.problem, self.week, policy, self.deadline, rebalanced=True)
                    ev = self._evaluate(patterns) or ev
                if ev is not None:
                    binding = np.full(self.problem.n, "", dtype=object)
                    self.candidates.append(_Candidate("integer", None, patterns, binding, ev, policy))

    def _evaluate(self, patterns: Patterns) -> Evaluation | None:
        key = patterns.period.tobytes() + patterns.offset.tobytes() + patterns.site.tobytes()
        if key in self.seen:
            return None
        self.seen.add(key)
        return evaluate(self.problem, patterns, self.limited, exact=False)

    def _exact(self, c: _Candidate) -> _Candidate:
        if not c.evaluation.exact:
            exact = evaluate(self.problem, c.patterns, self.limited)
            assert exact is not None  # the same patterns were evaluated (exact=False) before
            c.evaluation = exact
        return c

    def _improve(self) -> None:
        """The phase search of :func:`rebalance` on the chosen plan (fewer trips), then weekday patterns
        (:func:`improve_weekly`); each kept when its exact cost is lower."""
        b = self.best
        assert b is not None  # called once a drivable plan is chosen
        patterns = None if b.policy is None else _patterns(self.problem, self.week, b.policy, self.deadline, True)
        key = b"" if patterns is None else patterns.period.tobytes() + patterns.offset.tobytes() + patterns.site.tobytes()
        if patterns is not None and key not in self.seen:
            self.seen.add(key)
            ev = evaluate(self.problem, patterns, self.limited)
            if ev is not None and self.drivable(ev) and ev.cost < b.evaluation.cost:
                self.best = _Candidate(b.method, b.base_days, patterns, b.binding, ev, b.policy)
        if self.out_of_time():
            return
        b = self.best
        assert b is not None
        weekly = improve_weekly(self.problem, self.week, b.patterns, self.deadline)
        if weekly is not None:
            ev = evaluate(self.problem, weekly, self.limited)
            if ev is not None and self.drivable(ev) and ev.cost < b.evaluation.cost:
                self.best = _Candidate(b.method, b.base_days, weekly, b.binding, ev, b.policy)

    def _fallback(self) -> None:
        """The weekly fallback plan (:mod:`fallback`), kept when drivable and cheaper (any time when nothing
        else is drivable, even past the deadline: a drivable answer beats none). With loads packed above
        the bins' count on some date it is retried with the capacity shrunk by ``FALLBACK_SHRINK``."""
        for shrink in FALLBACK_SHRINK:
            patterns = fallback_patterns(self.problem, self.week, shrink)
            if patterns is None:
                return
            ev = evaluate(self.problem, patterns, self.limited)
            if ev is not None and self.drivable(ev):
                if self.best is None or ev.cost < self.best.evaluation.cost:
                    binding = np.full(self.problem.n, "", dtype=object)
                    self.best = _Candidate("integer", None, patterns, binding, ev, None)
                return

    def finish(self) -> None:
        """Exact evaluation in increasing order of the lower bound (see the class docstring)."""
        order = sorted(range(len(self.candidates)), key=lambda j: self.candidates[j].evaluation.cost)
        packed = 0
        for j in order:
            c = self.candidates[j]
            if not self.drivable(c.evaluation):
                continue
            if self.best is not None and (
                self.best.evaluation.cost <= c.evaluation.cost or self.out_of_time() or packed >= EXACT_CANDIDATES
            ):
                break
            packed += 1
            self._exact(c)
            if self.drivable(c.evaluation) and (self.best is None or c.evaluation.cost < self.best.evaluation.cost):
                self.best = c
        if self.best is None or (self.method == "best" and not self.classic and self.problem.n <= FALLBACK_SITES):
            self._fallback()
        if self.best is not None and (self.limited or self.week.n < 7) and not self.out_of_time():
            self._improve()
        if self.best is None and self.candidates:
            key = min(range(len(self.candidates)), key=lambda j: (self.candidates[j].evaluation.max_trips, self.candidates[j].evaluation.cost))
            self.fewest = self._exact(self.candidates[key])


def _search(problem: Problem, week: WorkWeek, method: str, base_days, deadline) -> _Search:
    """All candidates (module docstring) and the exact choice among them."""
    search = _Search(problem, week, method, base_days, deadline)
    classic = week.n == 7 and not search.limited
    search.variant(1.0, 0.0)
    if not classic:
        search.variant(1.0, 0.0, INTERVALS)
        if method != "power_of_two":
            search.rhythms()
        for scale in DISPATCH_SCALES:
            for penalty in STOP_PENALTIES if problem.max_stops is not None else (0.0,):
                if search.out_of_time():
                    break
                search.variant(scale, penalty)
        if not search.any_drivable():
            for penalty in REPAIR_PENALTIES:
                if search.out_of_time() or search.any_drivable():
                    break
                for scale in (1.0, 4.0, 16.0):
                    search.variant(scale, penalty)
    search.finish()
    return search


def _local(problem: Problem, week: WorkWeek, search: _Search, deadline) -> _Candidate:
    """The chosen plan or the cheapest drivable plan of the local search (:mod:`local_search`)."""
    best = search.best
    assert best is not None
    R = best.evaluation.repeat if week.n == 7 else math.lcm(best.evaluation.repeat, 7)
    start = best.patterns if R <= LOCAL_START_DAYS else None
    repeats = list(LOCAL_REPEATS_DAILY if week.n == 7 else LOCAL_REPEATS_WEEKLY)
    own = time.monotonic() + LOCAL_SECONDS
    until = own if deadline is None else min(deadline, own)
    plans = improve_local(problem, week, start, R, repeats, until)
    best = _cheapest(problem, search, best, plans)
    R = best.evaluation.repeat
    if best.policy is None and 2 * R <= LOCAL_LONG_DAYS:  # the local plan as a start on twice its repeat
        best = _cheapest(problem, search, best, improve_local(problem, week, best.patterns, 2 * R, [], until))
    return best


def _cheapest(problem: Problem, search: _Search, best: _Candidate, plans: list[Patterns]) -> _Candidate:
    for patterns in plans:
        ev = evaluate(problem, patterns, search.limited)
        if ev is not None and search.drivable(ev) and ev.cost < best.evaluation.cost * (1 - 1e-12):
            best = _Candidate("integer", None, patterns, np.full(problem.n, "", dtype=object), ev, None)
    return best


def _least_trips_needed(problem: Problem, week: WorkWeek, method: str, base_days, deadline, found: int) -> int:
    """The least ``trips_per_day`` above the given one for which the search finds a drivable plan: each
    smaller value than ``found`` (what the best candidate needed) whose drivable bound is finite is
    searched, in increasing order, while time remains."""
    assert problem.trips_per_day is not None  # without a trip limit every plan is drivable
    for tau in range(problem.trips_per_day + 1, found):
        if deadline is not None and time.monotonic() > deadline:
            break
        relaxed = replace(problem, trips_per_day=tau)
        if not math.isfinite(drivable_lower_bound(relaxed).value):
            continue
        if _search(relaxed, week, method, base_days, deadline).best is not None:
            return tau
    return found


def plan_joint(
    sites: Sequence[SiteInput],
    truck: TruckInput,
    *,
    method: str = "best",
    base_days: int | None = None,
    start_date: dt.date | None = None,
    deadline_seconds: float | None = None,
) -> JointResult:
    """Plan drivable whole-day joint deliveries for the sites of one truck.

    Parameters
    ----------
    sites : sequence of SiteInput
    truck : TruckInput
    method : {"best", "power_of_two", "integer"}
        The policy families searched: ``power_of_two`` (cycles ``B 2**p`` on the working-day axis, for
        ``base_days`` or the best odd base), ``integer`` (integer multiples of a dispatch interval), or
        ``best`` (both, the cheaper plan; a tie goes to power_of_two).
    base_days : int or None
        Base ``B`` for ``power_of_two`` and ``best``, in working days (days when all seven work).
    start_date : datetime.date or None
        Day 0 (``None``: today).
    deadline_seconds : float or None
        Time budget of the search (``None``: none). When it cuts the search the best drivable plan so
        far is returned with status ``time_limit`` and a warning.

    Returns
    -------
    JointResult
        With all seven working days and no load or stop limit, the exact optimum of the method's class
        (``optimal``). Otherwise the cheapest drivable candidate (``feasible``; ``optimal`` when its cost
        equals the bound). ``infeasible`` (``success`` false, ``needed`` filled) when a site cannot last
        the longest stretch between two open dates (working weekdays that are not closed, within the
        first ``LISTED_DAYS`` days: the longest closed stretch is the one named), when ``base_days``
        exceeds a site's longest cycle under ``power_of_two``, or when no candidate fits
        ``trips_per_day`` (``needed.trips_per_day`` is the least the candidates needed).

    Raises
    ------
    PlanningInputError
        For invalid sites, truck, method, base_days, start_date or deadline_seconds.
    """
    began = time.monotonic()
    _check_options(method, base_days, start_date, deadline_seconds)
    problem = validate(sites, truck)
    start = dt.date.today() if start_date is None else start_date
    bound = _bound(problem)
    week = WorkWeek(start, problem.working_days)
    gap = _calendar_gap(problem, week, start)
    if gap is None or (problem.whole_days < gap[0]).any():
        short = np.arange(problem.n) if gap is None else np.flatnonzero(problem.whole_days < gap[0])
        if gap is None:
            text = "the truck has no open date in the listed horizon"
        else:
            a, b = (start + dt.timedelta(days=x) for x in gap[1:])
            text = f"cannot last the {gap[0]} days between the open dates {a.isoformat()} and {b.isoformat()}"
        removed = {problem.codes[i] for i in short}
        rest = [s for s in sites if s.code not in removed]
        trips_needed = None
        if rest and gap is not None:  # the other sites may still need more trips a day (rule 5: all that binds)
            left = None if deadline_seconds is None else max(began + deadline_seconds - time.monotonic(), 1e-3)
            others = plan_joint(rest, truck, method=method, base_days=base_days, start_date=start, deadline_seconds=left)
            if not others.success:
                assert others.needed is not None  # an unsuccessful result names what it needs
                trips_needed = others.needed["trips_per_day"]
                text += f"; without them, {others.message}"
        return _infeasible(
            problem,
            f"site(s) {_names(problem, short)} {text}",
            bound,
            start,
            {"trips_per_day": trips_needed, "remove_sites": [problem.codes[i] for i in short]},
            "power_of_two" if method == "power_of_two" else "integer",
            base_days,
        )
    axis_caps = week.caps(problem.whole_days)
    base_fits = base_days is None or base_days <= int(axis_caps.min())
    if method == "power_of_two" and not base_fits:
        i = int(np.argmin(axis_caps))
        too_short = np.flatnonzero(axis_caps < base_days)
        return _infeasible(
            problem,
            f"base_days {base_days} is longer than the longest whole-day cycle {int(axis_caps[i])} "
            f"of site `{problem.codes[i]}`",
            bound,
            start,
            {"trips_per_day": None, "remove_sites": [problem.codes[j] for j in too_short]},
            "power_of_two",
            base_days,
        )
    deadline = None if deadline_seconds is None else began + float(deadline_seconds)
    search = _search(problem, week, method, base_days if base_fits else None, deadline)
    if method == "best" and problem.n <= BEST_OF_METHODS_SITES and not search.classic:
        for single in ("power_of_two", "integer") if base_fits else ("integer",):
            other = _search(problem, week, single, base_days, deadline)
            search.cut = search.cut or other.cut
            if other.best is not None and (
                search.best is None or other.best.evaluation.cost < search.best.evaluation.cost * (1 - 1e-12)
            ):
                search.best = other.best
    classic = week.n == 7 and not search.limited
    if method == "best" and search.best is not None and not classic and problem.n <= LOCAL_SITES:
        search.best = _local(problem, week, search, deadline)
    warnings: list[str] = []
    if not base_fits:
        i = int(np.argmin(axis_caps))
        warnings.append(
            f"power_of_two skipped: base_days {base_days} is longer than the longest whole-day cycle "
            f"{int(axis_caps[i])} of site `{problem.codes[i]}`"
        )
    if search.best is None:
        fewest = search.fewest
        need = None if fewest is None else fewest.evaluation.max_trips
        if need is not None and not search.cut:
            need = _least_trips_needed(problem, week, method, base_days if base_fits else None, deadline, need)
        message = (
            f"no plan found within {problem.trips_per_day} trip(s) per day"
            + ("" if need is None else f"; {need} trips per day are enough")
        )
        return _infeasible(
            problem,
            message,
            bound,
            start,
            {"trips_per_day": need, "remove_sites": []},
            "integer" if fewest is None else fewest.method,
            None if fewest is None else fewest.base_days,
        )
    best = search.best
    cost = best.evaluation.cost
    if search.cut:
        status, message = Status.TIME_LIMIT, f"best {best.method} plan found before the deadline"
        warnings.append(f"the search stopped at the deadline of {deadline_seconds:g} s; the plan may not be the best")
    elif classic or (bound > 0 and cost <= bound * (1 + 1e-9)) or cost == bound == 0:
        status, message = Status.OPTIMAL, f"optimal {best.method} policy"
    else:
        status, message = Status.FEASIBLE, f"drivable {best.method} plan (optimality not proven)"
    return _result(problem, best, bound, start, status, message, warnings)
