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
over the simplex. Derivation and proof: ``docs/planning.md`` ("Drivable lower bound"); the
construction is Lagrangian relaxation of the trip-count constraints (Boyd & Vandenberghe 2004, §5).
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

#: Barycentric grid step of the weights tried before the local refinement (vertices included).
GRID_STEPS = 2
#: Simple cycles of the weekday graph are listed up to this length (days, a whole number of weeks);
#: longer ones are covered by the Cauchy–Schwarz curve ``1 / f`` (see :func:`weekday_gap_lines`).
CYCLE_DAYS = 56
#: Relative slack below which a numerically violated line is lowered instead of dropped.
LINE_SLACK = 1e-9


@dataclass(frozen=True)
class BoundResult:
    """The bound ``value`` (cost per day), the weights ``(α, β, γ)`` that attain it and its parts.

    ``parts`` splits ``value`` at the inner minimiser ``(T0, T_i)``: ``dispatch`` is
    ``K (α / T0 + β D / W + γ Σ 1 / (S T_i))``, ``stops`` is ``Σ k_i / T_i`` and ``holding`` is
    ``Σ H_i T_i``.
    """

    value: float
    weights: tuple[float, float, float]
    parts: dict


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

    def __init__(self, problem: Problem):
        self.K = problem.dispatch_cost
        self.k = problem.stop_cost
        self.H = problem.H
        self.caps = whole_day_caps(problem)
        self.S = problem.max_stops
        W = problem.capacity
        self.load_rate = float(problem.demand.sum()) / W if math.isfinite(W) else 0.0

    def solve(self, alpha: float, beta: float, gamma: float):
        """``(value, parts, gradient)`` where ``gradient`` is ``∂LB/∂(α, β, γ)`` at the minimiser."""
        K, S = self.K, self.S
        per_stop = K * gamma / S if S else 0.0
        rel = _relaxation(K * alpha, self.k + per_stop, self.H, self.caps, 1.0)
        T = np.maximum(rel.t0, np.minimum(free_cycle(self.k + per_stop, self.H), self.caps))
        stops_per_day = float(np.sum(1.0 / T)) / S if S else 0.0
        load = K * beta * self.load_rate
        stops = float(np.sum(self.k / T))
        holding = float(np.sum(self.H * T))
        parts = {"dispatch": rel.value + load - stops - holding, "stops": stops, "holding": holding}
        gradient = np.array([K / rel.t0, K * self.load_rate, K * stops_per_day])
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
    """Least ``A x + B / x + C`` on ``[lo, hi]`` (elementwise; ``B ≥ 0``, ``0 < lo ≤ hi``) and where."""
    with np.errstate(divide="ignore", invalid="ignore"):
        stationary = np.where((A > 0) & (B > 0), np.sqrt(B / np.where(A > 0, A, 1.0)), lo)
    xs = np.stack([lo, hi, np.clip(stationary, lo, hi)])
    values = A * xs + B / xs + C
    j = np.argmin(values, axis=0)
    cols = np.arange(xs.shape[1])
    return values[j, cols], xs[j, cols]


class _CalendarInner(_Inner):
    """``LB`` in frequencies ``f = 1 / T`` with the weekday calendar: holding ``H_i ψ_i(f_i)``.

    ``min over f0 ∈ [max 1/u_i, m/7]`` of ``K α f0 + Σ_i min over f_i ∈ [1/u_i, min(f0, m/7)] of
    (a_i f_i + H_i ψ_i(f_i))`` with ``a_i = k_i + K γ / S`` and ``ψ_i`` from
    :func:`weekday_gap_lines`. Every site term is convex in ``f_i``; the sum over sites of their
    minima with ``f_i ≤ f0`` is, between the sorted breakpoints, ``A f0 + B / f0 + C``, minimised
    exactly on each segment (the scan of :mod:`service.planning.relaxation` with more breakpoints).
    """

    def __init__(self, problem: Problem, weekdays: tuple[int, ...]):
        super().__init__(problem)
        self.top = len(weekdays) / 7
        groups = np.minimum(self.caps, CYCLE_DAYS).astype(np.int64)
        self.lines = {int(g): weekday_gap_lines(weekdays, int(g)) for g in np.unique(groups)}
        self.group = groups
        self.feasible = all(v is not None for v in self.lines.values())
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
        out = np.empty_like(f)
        for g, lines in self.lines.items():
            mask = self.group == g
            out[mask] = _psi(lines, f[mask])
        return out

    def solve(self, alpha: float, beta: float, gamma: float):
        if not self.feasible:
            return math.inf, {"dispatch": math.inf, "stops": 0.0, "holding": 0.0}, np.zeros(3)
        K, S = self.K, self.S
        a = self.k + (K * gamma / S if S else 0.0)
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
        stops_per_day = float(np.sum(f)) / S if S else 0.0
        load = K * beta * self.load_rate
        stops = float(np.sum(self.k * f))
        holding = float(np.sum(self.H * self.psi(f)))
        extra = K * alpha * f0 + (K * gamma / S if S else 0.0) * float(np.sum(f))
        parts = {"dispatch": extra + load, "stops": stops, "holding": holding}
        gradient = np.array([K * f0, K * self.load_rate, K * stops_per_day])
        return extra + load + stops + holding, parts, gradient


def drivable_lower_bound(problem: Problem, working_days: tuple[int, ...] = (1, 2, 3, 4, 5, 6, 7)) -> BoundResult:
    """The drivable lower bound: ``max over the weight simplex of LB(α, β, γ)`` (see module doc).

    Weights whose cut is void are fixed at 0 (``β`` when there is no capacity, ``γ`` when there
    is no stop limit). The maximum is searched on a barycentric grid (vertices included) and
    refined from the best grid point (bounded Brent in one free weight, SLSQP with the
    supergradient in two); every evaluated ``LB`` is a valid bound and the largest is returned.

    With fewer than seven ``working_days`` (ISO weekdays, 1 = Monday) the holding term of each site
    is the weekday-pattern bound of :func:`weekday_gap_lines` and ``T0 ≥ 7 / m`` (``m`` working
    weekdays); the value is ``inf`` when no plan fits the calendar (a cap shorter than a closed
    stretch or than ``7 / m`` days).
    """
    weekdays = tuple(sorted({int(day) - 1 for day in working_days}))
    inner = _Inner(problem) if len(weekdays) == 7 else _CalendarInner(problem, weekdays)
    if not getattr(inner, "feasible", True):
        return BoundResult(value=math.inf, weights=(1.0, 0.0, 0.0), parts=inner.solve(1.0, 0.0, 0.0)[1])
    free = [j for j, on in ((1, math.isfinite(problem.capacity)), (2, problem.max_stops is not None)) if on]
    best: dict = {}

    def evaluate(x) -> float:
        w = np.zeros(3)
        w[free] = np.clip(np.asarray(x, dtype=float), 0.0, 1.0)
        if w[1:].sum() > 1.0:
            w[1:] /= w[1:].sum()
        w[0] = max(0.0, 1.0 - w[1:].sum())
        key = tuple(float(v) for v in w)
        if key not in best:
            best[key] = inner.solve(*key)
        return best[key]

    if not free or problem.dispatch_cost == 0:
        evaluate([0.0] * len(free))
    elif len(free) == 1:
        for x in np.linspace(0.0, 1.0, GRID_STEPS + 1):
            evaluate([x])
        minimize_scalar(lambda x: -evaluate([x])[0], bounds=(0.0, 1.0), method="bounded", options={"xatol": 1e-10})
    else:
        grid = [(i / GRID_STEPS, j / GRID_STEPS) for i in range(GRID_STEPS + 1) for j in range(GRID_STEPS + 1 - i)]
        for x in grid:
            evaluate(x)
        start = max(grid, key=lambda x: evaluate(x)[0])

        def objective(x):
            value, _, g = evaluate(x)
            return -value, -(g[1:] - g[0])

        minimize(
            objective,
            np.asarray(start),
            jac=True,
            method="SLSQP",
            bounds=[(0.0, 1.0), (0.0, 1.0)],
            constraints=[{"type": "ineq", "fun": lambda x: 1.0 - x[0] - x[1], "jac": lambda x: -np.ones(2)}],
            options={"ftol": 1e-15, "maxiter": 200},
        )
    weights, (value, parts, _) = max(best.items(), key=lambda item: item[1][0])
    return BoundResult(value=float(value), weights=weights, parts=parts)
