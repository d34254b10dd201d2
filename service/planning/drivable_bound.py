"""A lower bound on the cost per day of every drivable plan (load, stop and whole-day limits).

For weights ``α, β, γ ≥ 0`` with ``α + β + γ = 1``

    LB(α, β, γ) = K β D / W + min over 1 ≤ T0 ≤ T_i ≤ u_i of
                  [ K α / T0 + Σ_i ((k_i + K γ / S) / T_i + H_i T_i) ]

is at most the cost per day of every periodic whole-day plan whose trips carry at most ``W``
and stop at most ``S`` times (``D = Σ d_i``, ``u_i = ⌊min(f_i V_i − s_i, W) / d_i⌋``): the trips
``N`` of a plan of ``R`` days satisfy ``N ≥ R / T0``, ``N ≥ D R / W`` and ``N ≥ Σ n_i / S``, so
``K N / R`` is at least any convex combination of the three. The inner minimum is the capped
relaxation of :mod:`service.planning.relaxation` with ``K → K α`` and ``k_i → k_i + K γ / S``.
``LB`` is a minimum of functions affine in the weights, hence concave; the bound is its maximum
over the simplex (docs/planning.md, "Drivable lower bound").

Two tightenings, both valid for plans of any period: the stop room (at most ``trips_per_day × S``
stops per working day, priced by a fourth multiplier ``μ``), and gap patterns — the holding term
``H_i / f`` (``f = 1 / T``) becomes ``H_i ψ_i(f)`` with ``ψ_i`` the least ``Σ g² / R`` of whole-day
gaps (:func:`whole_day_gap_lines`) or of gaps between working weekdays (:func:`weekday_gap_lines`).
Derivation and proofs: ``docs/planning.md`` ("Drivable lower bound"); the construction is
Lagrangian relaxation of the trip-count constraints (Boyd & Vandenberghe 2004, §5).
"""

from __future__ import annotations

import functools
import itertools
import math
from dataclasses import dataclass
from typing import NamedTuple

import numpy as np
from scipy.optimize import minimize, minimize_scalar

from service.planning.cycle_cost import free_cycle
from service.planning.inputs import WHOLE_DAY_TOLERANCE, Problem
from service.planning.relaxation import _relaxation

#: ISO weekdays, Monday = 1 … Sunday = 7.
ALL_WEEKDAYS = (1, 2, 3, 4, 5, 6, 7)
#: Barycentric grid step of the weights tried before the local refinement (vertices included).
GRID_STEPS = 2
#: Simple cycles of the weekday graph are listed up to this length (days, a whole number of weeks);
#: longer ones are covered by the Cauchy–Schwarz curve ``1 / f`` (see :func:`weekday_gap_lines`).
CYCLE_DAYS = 56
#: Whole-day chords are used up to cycles of this many days (see :func:`whole_day_gap_lines`).
WHOLE_DAY_LINES = 14
#: Relative tolerance of the load check of rule 1 (a trip may carry ``W (1 + 1e-9)``).
LOAD_TOLERANCE = 1e-9
#: Relative certified distance to the maximum over the weights below which no refinement is run.
CERTIFIED_GAP = 1e-12
#: Relative slack below which a numerically violated line is lowered instead of dropped.
LINE_SLACK = 1e-9


@dataclass(frozen=True)
class BoundResult:
    """The bound ``value`` (cost per day), the weights ``(α, β, γ)`` that attain it and its parts.

    ``parts`` splits ``value`` at the inner minimiser ``(T0, T_i)``: ``dispatch`` is
    ``K (α / T0 + β D / W + γ Σ 1 / (S T_i))``, ``stops`` is ``Σ k_i / T_i`` and ``holding`` is
    ``Σ H_i T_i`` (``Σ H_i ψ_i(1 / T_i)`` with gap patterns). ``stop_price`` is the price ``μ`` of the stop room (0 when the room does not bind);
    its term ``μ (Σ 1 / T_i − C)`` is counted in ``dispatch``.
    """

    value: float
    weights: tuple[float, float, float]
    parts: dict
    stop_price: float = 0.0


def whole_day_caps(problem: Problem) -> np.ndarray:
    """``u_i = ⌊min(f_i V_i − s_i, W) / d_i⌋``: the longest whole-day gap any plan can use.

    A gap is a whole number of days ``g``; the tank must last it (``g ≤ (f_i V_i − s_i) / d_i``)
    and its delivery ``d_i g`` fits one trip (``g ≤ W / d_i``), so ``g ≤ u_i``. The floor is
    taken with a slightly wider tolerance than the planner's (relative ``1e-9``, as its load check)
    so that the cap is never below a gap the planner accepts. Not clipped to ``MAX_WHOLE_DAYS``:
    a longer gap is still a plan, and the bound must not exclude it.
    """
    U = problem.cap_days
    return np.maximum(np.floor(U * (1.0 + WHOLE_DAY_TOLERANCE) + WHOLE_DAY_TOLERANCE), 1.0)


class _Inner:
    """``LB`` at given weights, with a supergradient, for one problem."""

    def __init__(self, problem: Problem, stop_room: float | None):
        self.K = problem.dispatch_cost
        self.k = problem.stop_cost
        self.H = problem.H
        self.caps = whole_day_caps(problem)
        self.low = 1.0 / self.caps
        self.S = problem.max_stops
        self.room = stop_room
        W = problem.capacity
        # loads up to W (1 + LOAD_TOLERANCE) pass rule 1, so the load cut counts trips of that size
        self.load_rate = float(problem.demand.sum()) / (W * (1.0 + LOAD_TOLERANCE)) if math.isfinite(W) else 0.0
        self.feasible = True

    def steepest(self) -> float:
        """A price per stop above which every site sits at its lowest frequency ``1 / u_i``."""
        return float(np.max(self.H * self.caps**2)) + 1.0

    def solve(self, alpha: float, beta: float, gamma: float, mu: float = 0.0):
        """``(value, parts, gradient)``, ``gradient`` = ``∂LB/∂(α, β, γ, μ)`` at the minimiser."""
        K, S = self.K, self.S
        per_stop = (K * gamma / S if S else 0.0) + mu
        rel = _relaxation(K * alpha, self.k + per_stop, self.H, self.caps, 1.0)
        T = np.maximum(rel.t0, np.minimum(free_cycle(self.k + per_stop, self.H), self.caps))
        visits = float(np.sum(1.0 / T))
        load = K * beta * self.load_rate - mu * (self.room or 0.0)
        stops = float(np.sum(self.k / T))
        holding = float(np.sum(self.H * T))
        parts = {"dispatch": rel.value + load - stops - holding, "stops": stops, "holding": holding}
        # T0 = min T_i is a minimiser too (the same one when α > 0): the smallest supergradient in α
        gradient = np.array(
            [K / float(T.min()), K * self.load_rate, K * visits / S if S else 0.0, visits - (self.room or 0.0)]
        )
        return rel.value + load, parts, gradient


def _weekday_cycles(weekdays: tuple[int, ...], cap: int) -> dict[tuple[int, int], int]:
    """Least ``Σ g²`` of a simple cycle of the weekday graph, keyed by ``(deliveries n, length L)``.

    Nodes are the working weekdays (0–6); an edge ``a → b`` is a gap ``g ≡ b − a (mod 7)``,
    ``1 ≤ g ≤ cap``. A simple cycle visits ``n`` distinct weekdays once each; its length is a
    multiple of 7. For a node order, ``Σ g²`` over the gaps with ``e`` extra weeks is least when each
    extra week goes to the currently shortest gap that can take it (separable convex allocation, each
    week adds ``14 g + 49``; Ibaraki & Katoh 1988, greedy for resource allocation). Lengths up to
    ``CYCLE_DAYS``.
    """
    best: dict[tuple[int, int], int] = {}
    for n in range(1, len(weekdays) + 1):
        for first, *rest in itertools.combinations(weekdays, n):
            for order in itertools.permutations(rest):
                nodes = (first, *order)
                gaps = [(nodes[(j + 1) % n] - nodes[j]) % 7 or 7 for j in range(n)]
                if max(gaps) > cap:
                    continue
                length, squares = sum(gaps), sum(g * g for g in gaps)
                while length <= CYCLE_DAYS:
                    best[n, length] = min(best.get((n, length), squares), squares)
                    room = [j for j in range(n) if gaps[j] + 7 <= cap]
                    if not room:
                        break
                    j = min(room, key=gaps.__getitem__)
                    squares += 14 * gaps[j] + 49
                    gaps[j] += 7
                    length += 7
    return best


def _lower_hull(x: np.ndarray, y: np.ndarray) -> list[int]:
    """Indices of the lower convex hull of the points, left to right (Andrew's monotone chain)."""
    hull: list[int] = []
    for i in np.lexsort((y, x)):
        while len(hull) >= 2:
            (x1, y1), (x2, y2) = (x[hull[-2]], y[hull[-2]]), (x[hull[-1]], y[hull[-1]])
            if (x2 - x1) * (y[i] - y1) - (y2 - y1) * (x[i] - x1) <= 0:
                hull.pop()
            else:
                break
        if not hull or x[i] != x[hull[-1]]:
            hull.append(int(i))
    return hull


class GapLines(NamedTuple):
    """``Σ g² / R ≥ max(1 / f, p_j + q_j f)`` and ``f ≥ lowest`` for every weekday pattern."""

    p: np.ndarray
    q: np.ndarray
    lowest: float


@functools.lru_cache(maxsize=256)
def weekday_gap_lines(weekdays: tuple[int, ...], cap: int) -> GapLines | None:
    """Lines ``p_j + q_j f`` with ``Σ g² / R ≥ max(1 / f, p_j + q_j f)`` for every periodic pattern.

    A pattern is ``n`` deliveries in ``R`` days (``R`` a multiple of 7), on the working ``weekdays``
    (0 = Monday), every gap ``≤ cap``; ``f = n / R``. ``None`` when no such pattern exists.

    Proof. The gaps of a pattern, read delivery after delivery, form a closed walk in the weekday
    graph of :func:`_weekday_cycles`; a closed walk splits into simple cycles ``C`` (cut it at the
    first repeated weekday, repeat), so ``(f, Σ g² / R)`` is the convex combination with weights
    ``L_C / R`` of the cycles' points ``(n_C / L_C, Σ_C g² / L_C)``. A line below every cycle point is
    below every convex combination. Cycles longer than ``CYCLE_DAYS`` are not listed; they have
    ``f ≤ m / (CYCLE_DAYS + 7)`` (``m`` working weekdays) and lie on or above ``1 / f``
    (Cauchy–Schwarz: ``Σ g² ≥ L² / n``), so the lines are the edges of the lower hull of the listed
    points and the curve's end point, each checked below every listed point and below ``1 / f`` up
    to that frequency (and lowered by any rounding excess). ``1 / f`` itself is valid by
    Cauchy–Schwarz. When every cycle is listed (``m · cap ≤ CYCLE_DAYS``), ``f`` is also at least the
    least cycle frequency ``lowest`` (a convex combination), and a hull of one point gets the
    horizontal line through it.
    """
    best = _weekday_cycles(weekdays, cap)
    if not best:
        return None
    keys = np.array(list(best), dtype=float)
    f = keys[:, 0] / keys[:, 1]
    y = np.array(list(best.values()), dtype=float) / keys[:, 1]
    m = len(weekdays)
    curve_end = m / (CYCLE_DAYS + 7) if m * cap > CYCLE_DAYS else 0.0
    right = f > curve_end
    hx, hy = f[right], y[right]
    if curve_end > 0:
        hx, hy = np.append(hx, curve_end), np.append(hy, 1.0 / curve_end)
    hull = _lower_hull(hx, hy)
    p_lines, q_lines = ([float(hy[hull[0]])], [0.0]) if len(hull) == 1 else ([], [])
    for a, b in itertools.pairwise(hull):
        q = (hy[b] - hy[a]) / (hx[b] - hx[a])
        p = hy[a] - q * hx[a]
        excess = float(np.max(p + q * f - y))
        if curve_end > 0:
            probes = [curve_end] + ([1.0 / math.sqrt(-q)] if q < 0 and 1.0 / math.sqrt(-q) < curve_end else [])
            excess = max(excess, max(p + q * x - 1.0 / x for x in probes))
        if excess <= LINE_SLACK * float(np.max(y)):
            p_lines.append(p - max(excess, 0.0))
            q_lines.append(q)
    return GapLines(np.array(p_lines), np.array(q_lines), 0.0 if curve_end > 0 else float(f.min()))


@functools.lru_cache(maxsize=256)
def whole_day_gap_lines(cap: int) -> GapLines:
    """Lines of ``Σ g² / R`` for whole-day gaps on a seven-day calendar: ``(2a + 1) − a (a + 1) f``.

    For every integer ``a``, ``Σ_j (g_j − a)(g_j − a − 1) ≥ 0`` (a product of two consecutive integers),
    i.e. ``Σ g² ≥ (2a + 1) Σ g − a (a + 1) n``; divided by ``R = Σ g`` with ``f = n / R``:
    ``Σ g² / R ≥ (2a + 1) − a (a + 1) f``, the chord of ``1 / f`` between ``T = a`` and ``a + 1``
    (equality when every gap is ``a`` or ``a + 1``). Lines for ``a < min(cap, WHOLE_DAY_LINES)``: beyond,
    ``1 / f`` is within ``1 / (4 T²)`` relative of the chords (0.13 % at 14 days), not worth the pieces.
    """
    a = np.arange(1, max(min(cap, WHOLE_DAY_LINES), 1), dtype=float)
    return GapLines(2 * a + 1, -a * (a + 1), 0.0)


def _psi(lines: GapLines, f: np.ndarray) -> np.ndarray:
    """``max(1 / f, p_j + q_j f)``: the least ``Σ g² / R`` at frequency ``f`` (elementwise)."""
    p, q, _ = lines
    return np.maximum(1.0 / f, np.max(p[None, :] + q[None, :] * f[:, None], axis=1, initial=-np.inf))


def _pieces(lines: GapLines, top: float):
    """``_psi`` on ``(0, top]`` as pieces ``P + Q f + B / f`` between ``edges`` (``B`` is 1 or 0)."""
    p, q, _ = lines
    xs = [top]
    for (p1, q1), (p2, q2) in itertools.combinations(zip(p, q, strict=True), 2):
        if q1 != q2:
            xs.append((p1 - p2) / (q2 - q1))
    for pj, qj in zip(p, q, strict=True):
        # p + q f = 1 / f  ⇔  q f² + p f − 1 = 0
        roots = [1.0 / pj] if qj == 0 and pj > 0 else []
        if qj != 0 and pj * pj + 4 * qj >= 0:
            roots = [(-pj + sign * math.sqrt(pj * pj + 4 * qj)) / (2 * qj) for sign in (-1, 1)]
        xs.extend(roots)
    edges = np.unique(np.array([0.0] + [x for x in xs if 0 < x < top] + [top]))
    middle = (edges[:-1] + edges[1:]) / 2
    values = np.column_stack([1.0 / middle, p[None, :] + q[None, :] * middle[:, None]])
    active = np.argmax(values, axis=1)
    keep = np.concatenate([[True], active[1:] != active[:-1]])
    edges = np.append(edges[:-1][keep], top)
    active = active[keep]
    line = np.maximum(active - 1, 0)
    on_line = active > 0
    P = np.where(on_line, p[line] if len(p) else 0.0, 0.0)
    Q = np.where(on_line, q[line] if len(q) else 0.0, 0.0)
    return edges, P, Q, np.where(on_line, 0.0, 1.0)


def _best_on(A, B, C, lo, hi):
    """Least ``A x + B / x + C`` on ``[lo, hi]`` (elementwise; ``B ≥ 0``, ``0 < lo ≤ hi``) and where.

    The function is convex (``B ≥ 0``): its minimiser is ``sqrt(B / A)`` clipped to the interval when
    ``A, B > 0``, ``hi`` when ``A ≤ 0`` (non-increasing) and ``lo`` when ``B = 0 < A`` (increasing).
    """
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        stationary = np.clip(np.sqrt(B / np.where(A > 0, A, 1.0)), lo, hi)
    x = np.where(A > 0, np.where(B > 0, stationary, lo), hi)
    return A * x + B / x + C, x


class _CalendarInner(_Inner):
    """``LB`` in frequencies ``f = 1 / T`` with gap patterns: holding ``H_i ψ_i(f_i)``.

    ``min over f0 ∈ [max f_i^min, m/7]`` of ``K α f0 + Σ_i min over f_i ∈ [f_i^min, f0] of
    (a_i f_i + H_i ψ_i(f_i))`` with ``a_i = k_i + K γ / S + μ``, ``f_i^min = max(1/u_i, lowest_i)`` and
    ``ψ_i`` from :func:`weekday_gap_lines` (``m < 7``) or :func:`whole_day_gap_lines`. Every site term is convex in ``f_i``; the sum over sites of their
    minima with ``f_i ≤ f0`` is, between the sorted breakpoints, ``A f0 + B / f0 + C``, minimised
    exactly on each segment (the scan of :mod:`service.planning.relaxation` with more breakpoints).
    """

    def __init__(self, problem: Problem, weekdays: tuple[int, ...], stop_room: float | None):
        super().__init__(problem, stop_room)
        self.top = len(weekdays) / 7
        groups = np.minimum(self.caps, CYCLE_DAYS).astype(np.int64)
        lines_for = whole_day_gap_lines if len(weekdays) == 7 else functools.partial(weekday_gap_lines, weekdays)
        by_group = {int(g): lines_for(int(g)) for g in np.unique(groups)}
        self.group = groups
        self.feasible = all(v is not None for v in by_group.values())
        self.lines = {g: v for g, v in by_group.items() if v is not None}
        if not self.feasible:
            return
        lowest = np.array([self.lines[int(g)].lowest for g in groups])
        self.low = np.maximum(1.0 / self.caps, lowest)
        self.feasible = bool(self.low.max() <= self.top)
        if not self.feasible:
            return
        rows = []
        for g, lines in self.lines.items():
            edges, P, Q, B = _pieces(lines, self.top)
            sites = np.flatnonzero(groups == g)
            site = np.repeat(sites, len(P))
            lo = np.maximum(np.tile(edges[:-1], len(sites)), self.low[site])
            hi = np.tile(edges[1:], len(sites))
            rows.append((site, lo, hi, np.tile(P, len(sites)), np.tile(Q, len(sites)), np.tile(B, len(sites))))
        site, lo, hi, P, Q, B = (np.concatenate(column) for column in zip(*rows, strict=True))
        keep = lo <= hi
        self.rows = site[keep], lo[keep], hi[keep], P[keep], Q[keep], B[keep]
        # the rows of one site are consecutive: where each site's run starts, and which site it is
        site = self.rows[0]
        self.starts = np.flatnonzero(np.concatenate([[True], site[1:] != site[:-1]]))
        self.run = np.cumsum(np.concatenate([[False], site[1:] != site[:-1]]))

    def psi(self, f: np.ndarray) -> np.ndarray:
        """``ψ_i(f_i)`` for every site."""
        out = np.empty_like(f)
        for g, lines in self.lines.items():
            mask = self.group == g
            out[mask] = _psi(lines, f[mask])
        return out

    def steepest(self) -> float:
        slopes = [np.max(np.abs(lines.q), initial=0.0) for lines in self.lines.values()]
        return max(super().steepest(), float(np.max(self.H)) * max(slopes) + 1.0, float(np.max(self.H / self.low**2)))

    def solve(self, alpha: float, beta: float, gamma: float, mu: float = 0.0):
        K, S = self.K, self.S
        a = self.k + (K * gamma / S if S else 0.0) + mu
        site, lo, hi, P, Q, B = self.rows
        H = self.H[site]
        A, Bc, C = a[site] + H * Q, H * B, H * P
        value, where = _best_on(A, Bc, C, lo, hi)
        least = np.minimum.reduceat(value, self.starts)
        at_least = np.flatnonzero(value <= least[self.run])
        first = at_least[np.searchsorted(at_least, self.starts)]  # first row of each run at its minimum
        f_star, c_star = np.empty(self.k.shape), np.empty(self.k.shape)
        f_star[site[self.starts]], c_star[site[self.starts]] = where[first], value[first]
        end = np.minimum(hi, f_star[site])
        live = lo < end
        positions = np.concatenate([lo[live], end[live], f_star])
        deltas = np.concatenate(
            [
                np.column_stack([A[live], Bc[live], C[live]]),
                -np.column_stack([A[live], Bc[live], C[live]]),
                np.column_stack([np.zeros_like(c_star), np.zeros_like(c_star), c_star]),
            ]
        )
        order = np.argsort(positions, kind="stable")
        positions, totals = positions[order], np.cumsum(deltas[order], axis=0)
        start = self.low.max()
        seg_lo = np.clip(positions, start, self.top)
        seg_hi = np.clip(np.append(positions[1:], self.top), start, self.top)
        seg_value, seg_x = _best_on(K * alpha + totals[:, 0], totals[:, 1], totals[:, 2], seg_lo, seg_hi)
        # a segment holds every site's term once all events at its start are summed: the last event
        # of its position, at or after the largest lower limit (where the last site comes in)
        complete = (positions >= start) & np.append(positions[1:] > positions[:-1], True)
        f0 = float(seg_x[int(np.argmin(np.where(complete, seg_value, np.inf)))])
        f = np.minimum(f0, f_star)
        visits = float(np.sum(f))
        load = K * beta * self.load_rate - mu * (self.room or 0.0)
        stops = float(np.sum(self.k * f))
        holding = float(np.sum(self.H * self.psi(f)))
        extra = K * alpha * f0 + ((K * gamma / S if S else 0.0) + mu) * visits
        parts = {"dispatch": extra + load, "stops": stops, "holding": holding}
        gradient = np.array(
            [K * float(f.max()), K * self.load_rate, K * visits / S if S else 0.0, visits - (self.room or 0.0)]
        )
        return extra + load + stops + holding, parts, gradient


def drivable_lower_bound(
    problem: Problem,
    working_days: tuple[int, ...] | None = None,
    trips_per_day: int | None = None,
    *,
    gap_patterns: bool = True,
) -> BoundResult:
    """The drivable lower bound: ``max LB(α, β, γ, μ)`` over the weight simplex and ``μ ≥ 0``.

    ``working_days`` (ISO weekdays, 1 = Monday) and ``trips_per_day`` default to the problem's
    (``problem.working_days``, ``problem.trips_per_day`` when it carries a calendar), else to all
    seven days and no trip limit. With fewer than seven working days the holding term of each site
    is the weekday-pattern bound of :func:`weekday_gap_lines` and ``T0 ≥ 7 / m`` (``m`` working
    weekdays). With a stop limit ``S`` and ``trips_per_day`` ``τ`` the stops per day cannot exceed
    ``C = τ S m / 7``; the price ``μ ≥ 0`` of that room adds ``μ (Σ_i 1 / T_i − C)`` (≤ 0 on every
    plan). The value is ``inf`` when no plan fits (a cap shorter than a closed stretch or than
    ``7 / m`` days, more stops than the room, or more load than ``τ W m / 7`` a day).

    Whenever the truck has a limit or a calendar (and ``gap_patterns``), holding is bounded through
    the gaps' patterns: :func:`weekday_gap_lines` on a weekly calendar, :func:`whole_day_gap_lines`
    (whole-day gaps) on seven days. With no limit and all seven days the bound stays §4's relaxation
    on the caps ``u_i``. ``gap_patterns=False`` gives the plain bound of ``docs/planning.md`` alone (plus the
    stop room), e.g. to compare with it.

    Weights whose cut is void are fixed at 0 (``β`` when there is no capacity, ``γ`` when there
    is no stop limit, ``μ`` when there is no stop room). The maximum is searched on a barycentric
    grid of ``(α, β, γ)`` with ``μ = 0`` (vertices included); unless the best grid point is
    certified optimal it is refined (bounded Brent for one free weight, SLSQP with the supergradient
    otherwise). Every evaluated ``LB`` is a valid bound and the largest is returned. Certificate:
    with ``g`` the supergradient at ``w`` (the terms ``(K / T0, K D / W, K Σ 1 / (S T_i),
    Σ 1 / T_i − C)`` at the inner minimiser), concavity gives ``max LB ≤ LB(w) + max_j g_j − g · w``
    over the usable simplex vertices ``j``, plus ``−g_μ μ`` when ``g_μ ≤ 0`` (else no certificate).
    """
    if working_days is None:
        working_days = getattr(problem, "working_days", ALL_WEEKDAYS)
    if trips_per_day is None:
        trips_per_day = getattr(problem, "trips_per_day", None)
    weekdays = tuple(sorted({int(day) - 1 for day in working_days}))
    room = trips_per_day * problem.max_stops * len(weekdays) / 7 if trips_per_day and problem.max_stops else None
    limited = math.isfinite(problem.capacity) or problem.max_stops is not None or len(weekdays) < 7
    limited = limited and gap_patterns
    inner = _CalendarInner(problem, weekdays, room) if limited else _Inner(problem, room)
    too_many_stops = room is not None and float(np.sum(inner.low)) > room * (1 + 1e-12)
    too_much_load = bool(trips_per_day and inner.load_rate > trips_per_day * len(weekdays) / 7 * (1 + 1e-12))
    if not inner.feasible or too_many_stops or too_much_load:
        return BoundResult(
            value=math.inf, weights=(1.0, 0.0, 0.0), parts={"dispatch": math.inf, "stops": 0.0, "holding": 0.0}
        )
    simplex = [j for j, on in ((1, math.isfinite(problem.capacity)), (2, problem.max_stops is not None)) if on]
    free = simplex + ([3] if room is not None else [])
    mu_max = inner.steepest() if room is not None else 0.0
    best: dict = {}
    coords: dict = {}

    def weights_of(x) -> tuple[float, float, float, float]:
        w = np.zeros(4)
        w[free] = np.clip(np.asarray(x, dtype=float), 0.0, 1.0)
        if w[1:3].sum() > 1.0:
            w[1:3] /= w[1:3].sum()
        w[0] = max(0.0, 1.0 - w[1:3].sum())
        w[3] *= mu_max
        return float(w[0]), float(w[1]), float(w[2]), float(w[3])

    def evaluate(x):
        key = weights_of(x)
        if key not in best:
            best[key] = inner.solve(*key)
            coords[key] = np.asarray(x, dtype=float)
        return best[key]

    def certified(x) -> bool:
        value, _, g = evaluate(x)
        w = np.array(weights_of(x))
        gap = float(np.max(g[[0, *simplex]]) - g[:3] @ w[:3])
        if room is not None:
            gap = math.inf if g[3] > 0 and w[3] < mu_max else gap - g[3] * w[3]
        return gap <= CERTIFIED_GAP * abs(value)

    def climb(start, dims: list[int]) -> None:
        """Refine from ``start`` over the weights ``dims`` (the others stay as in ``start``)."""
        at = [free.index(d) for d in dims]
        chain = np.array([0.0, 1.0, 1.0, 0.0])[dims]  # dα/dw = −1 for β and γ

        def full(z):
            x = np.array(start, dtype=float)
            x[at] = z
            return x

        if len(dims) == 1 and dims != [3]:
            minimize_scalar(
                lambda z: -evaluate(full([z]))[0], bounds=(0.0, 1.0), method="bounded", options={"xatol": 1e-10}
            )
            return

        def objective(z):
            value, _, g = evaluate(full(z))
            slope = np.where(np.array(dims) == 3, g[3] * mu_max, g[dims] - chain * g[0])
            return -value, -slope

        minimize(
            objective,
            np.asarray(start, dtype=float)[at],
            jac=True,
            method="SLSQP",
            bounds=[(0.0, 1.0)] * len(dims),
            constraints=[{"type": "ineq", "fun": lambda z: 1.0 - z @ chain, "jac": lambda z: -chain}],
            options={"ftol": 1e-15, "maxiter": 200},
        )

    def best_coords():
        return coords[max(best, key=lambda key: best[key][0])]

    # the simplex of (α, β, γ) at μ = 0 first: a grid, then a refinement unless certified
    steps = range(GRID_STEPS + 1)
    grid = [
        [*(i / GRID_STEPS, j / GRID_STEPS)[: len(simplex)], *([0.0] if room is not None else [])]
        for i in steps
        for j in (steps[: GRID_STEPS + 1 - i] if len(simplex) == 2 else [0])
    ]
    vertices = [x for x in grid if all(v in (0.0, 1.0) for v in x)]
    start = max(vertices, key=lambda x: evaluate(x)[0])
    if not certified(start):  # the vertices first: one of them is optimal in most networks
        start = max(grid, key=lambda x: evaluate(x)[0])
    if simplex and problem.dispatch_cost > 0 and not certified(start):
        climb(start, simplex)
    # then the price of the stop room, together with the simplex
    if room is not None and not certified(best_coords()):
        climb(best_coords(), free)
    weights, (value, parts, _) = max(best.items(), key=lambda item: item[1][0])
    return BoundResult(value=float(value), weights=weights[:3], parts=parts, stop_price=weights[3])
