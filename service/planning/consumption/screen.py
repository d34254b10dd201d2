"""Gauge levels in time order, the intervals between them, and the outlier screen.

A *gauge level* is a reading, or the ``level_before``/``level_after`` of a delivery. Events at
the same instant are ordered: level before a delivery, the delivery, level after it, then a plain
reading (so a reading taken at the moment of a delivery counts as after it). The interval between
two consecutive levels ``a → b`` has ``Δ = t_b − t_a`` days of elapsed time and consumption
``c = L_a − L_b + Σ q`` over the deliveries ordered after ``a`` and not after ``b``. Intervals of
zero length (the two levels of one delivery, duplicate readings) carry no consumption and are
skipped; the chain goes on from the later level.

The screen (``docs/planning.md`` §11.3):

1. A level above the tank capacity or below zero is rejected (``above_capacity``,
   ``below_zero``).
2. An interval is *flagged* when the level rose by more than ``rise_tolerance`` beyond the
   deliveries (``c < −tol``), or, with at least ``p + 4`` intervals (``p`` model parameters:
   1 for the flat rate, 2 with degree days), when its robust standardised residual
   ``|u_j| / s > threshold`` and the deviation ``|c_j − x_jᵀβ|`` exceeds ``rise_tolerance`` too
   (nothing within the gauge's tolerance is called implausible), where ``u_j = (c_j − x_jᵀβ) / √Δ_j`` with ``β`` the least absolute
   deviations fit of the scaled rows (:func:`lad`) and ``s = 1.4826 · median|u − median u|`` (the
   normal-consistent median absolute deviation; Hampel 1974, Iglewicz & Hoaglin 1993 — from
   memory).
3. Each flagged interval ``a → b``, in time order, is resolved: if dropping ``b`` merges it with
   the next interval into one that is not flagged, ``b`` is rejected; else if dropping ``a`` does
   so with the previous interval, ``a`` is rejected; else a level with no neighbour to confirm it
   (the end of the chain) is rejected; else the interval is excluded and both levels kept (a step:
   an unrecorded delivery, a leak). A rejected level's reason is ``unexplained_rise`` when the
   interval ending at it rose, else ``implausible_consumption``.
4. Steps 2–3 run twice (iterated once): the second pass refits on the levels the first kept.
"""

from __future__ import annotations

import datetime as dt
from dataclasses import dataclass

import numpy as np
from scipy import optimize, sparse

from service.planning.errors import PlanningInputError

#: Seconds per day of elapsed time.
SECONDS_PER_DAY = 86_400.0
#: Normal-consistency factor of the median absolute deviation, 1 / Φ⁻¹(3/4).
MAD_TO_SIGMA = 1.482602218505602
#: Extra unflagged intervals, beyond the model's parameters, the robust rule needs.
ROBUST_MIN_EXTRA = 4

_ORDER_BEFORE, _ORDER_DELIVERY, _ORDER_AFTER, _ORDER_READING = 0, 1, 2, 3


def elapsed_days(time: dt.datetime, field: str) -> float:
    """Days since the Unix epoch of an aware time (``timestamp() / 86 400``: elapsed, not wall-clock)."""
    if not isinstance(time, dt.datetime) or time.tzinfo is None or time.utcoffset() is None:
        raise PlanningInputError(f"{field} must be a timezone-aware datetime, got {time!r}", field=field)
    return time.timestamp() / SECONDS_PER_DAY


def _finite(value, field: str, *, nonnegative: bool = False) -> float:
    try:
        x = float(value)
    except (TypeError, ValueError):
        raise PlanningInputError(f"{field} must be a number, got {value!r}", field=field) from None
    if not np.isfinite(x) or (nonnegative and x < 0):
        raise PlanningInputError(
            f"{field} must be a finite {'non-negative ' if nonnegative else ''}number", field=field
        )
    return x


@dataclass(frozen=True)
class Levels:
    """Gauge levels in event order with the deliveries before each (``cum``), as arrays."""

    times: tuple[dt.datetime, ...]
    t: np.ndarray
    level: np.ndarray
    cum: np.ndarray
    source: tuple[str, ...]
    index: np.ndarray


def gauge_levels(readings, deliveries, start: float, end: float) -> Levels:
    """The readings and delivery levels with ``start ≤ t ≤ end`` (days), in event order."""
    rows = []  # (t, order, input position, time, level, source, index)
    for i, r in enumerate(readings):
        rows.append((elapsed_days(r.time, "time"), _ORDER_READING, i, r.time, _finite(r.level, "level"), "reading", i))
    d_t, d_order, d_qty = [], [], []
    for i, d in enumerate(deliveries):
        t = elapsed_days(d.time, "delivered_at")
        d_t.append(t)
        d_order.append(_ORDER_DELIVERY)
        d_qty.append(_finite(d.quantity, "quantity", nonnegative=True))
        for name, rank in (("level_before", _ORDER_BEFORE), ("level_after", _ORDER_AFTER)):
            value = getattr(d, name)
            if value is not None:
                rows.append((t, rank, len(readings) + i, d.time, _finite(value, name), name, i))
    rows = [row for row in rows if start <= row[0] <= end]
    p_t = np.array([row[0] for row in rows], dtype=float)
    p_order = np.array([row[1] for row in rows], dtype=int)
    p_pos = np.array([row[2] for row in rows], dtype=int)
    # All events in (t, order, position) order; the cumulative delivered quantity at each level.
    all_t = np.concatenate([p_t, np.array(d_t, dtype=float)])
    all_order = np.concatenate([p_order, np.array(d_order, dtype=int)])
    all_pos = np.concatenate([p_pos, np.arange(len(d_t)) + len(readings) + len(deliveries)])
    qty = np.concatenate([np.zeros(len(rows)), np.array(d_qty, dtype=float)])
    order = np.lexsort((all_pos, all_order, all_t))
    cum_sorted = np.cumsum(qty[order])
    is_level = order < len(rows)
    ranked = order[is_level]  # level rows in event order
    return Levels(
        times=tuple(rows[k][3] for k in ranked),
        t=p_t[ranked],
        level=np.array([rows[k][4] for k in ranked], dtype=float),
        cum=cum_sorted[is_level],
        source=tuple(rows[k][5] for k in ranked),
        index=np.array([rows[k][6] for k in ranked], dtype=int),
    )


@dataclass(frozen=True)
class Chain:
    """Intervals ``a → b`` between consecutive kept levels (positions in ``Levels``), ``Δ > 0``."""

    a: np.ndarray
    b: np.ndarray
    dt: np.ndarray
    c: np.ndarray


def chain(levels: Levels, kept: np.ndarray) -> Chain:
    """Intervals between consecutive kept levels (``kept``: increasing positions)."""
    a, b = kept[:-1], kept[1:]
    span = levels.t[b] - levels.t[a]
    positive = span > 0
    a, b = a[positive], b[positive]
    c = levels.level[a] - levels.level[b] + levels.cum[b] - levels.cum[a]
    return Chain(a, b, span[positive], c)


def _design(dt_days: np.ndarray, dd: np.ndarray | None) -> np.ndarray:
    return dt_days[:, None] if dd is None else np.column_stack([dt_days, dd])


def wls(dt_days: np.ndarray, c: np.ndarray, dd: np.ndarray | None = None):
    """Weighted least squares of ``c = X β`` with ``Var c_j ∝ Δ_j`` (weights ``1/Δ_j``).

    ``X = [Δ]`` (flat rate) or ``[Δ, D]`` (base load and degree days). Dividing row ``j`` by
    ``√Δ_j`` makes the errors homoscedastic; ordinary least squares on the scaled rows.

    Returns
    -------
    beta, scaled_residuals, XtX_inv
        ``β``, ``(c − X β)/√Δ`` and ``(Xᵀ W X)⁻¹``.
    """
    root = np.sqrt(dt_days)
    X = _design(dt_days, dd) / root[:, None]
    y = c / root
    beta, *_ = np.linalg.lstsq(X, y, rcond=None)
    return beta, y - X @ beta, np.linalg.pinv(X.T @ X)


@dataclass(frozen=True)
class ScreenRule:
    """The screen's parameters: ``rise_tolerance`` (volume) and ``threshold`` (robust z)."""

    capacity: float
    rise_tolerance: float
    threshold: float


def lad(dt_days: np.ndarray, c: np.ndarray, dd: np.ndarray | None = None) -> np.ndarray:
    """Least absolute deviations fit of the scaled rows: ``min Σ |c_j − x_jᵀβ| / √Δ_j``.

    The robust counterpart of :func:`wls`. For the flat rate it is the weighted median of the
    rates ``c_j/Δ_j`` with weights ``√Δ_j`` (``Σ √Δ_j |c_j/Δ_j − μ|``); with degree days, the
    linear programme ``min Σ (e⁺ + e⁻)`` s.t. ``X β + e⁺ − e⁻ = y``, ``e± ≥ 0``
    (scipy.optimize.linprog, HiGHS).
    """
    root = np.sqrt(dt_days)
    if dd is None:
        rates = c / dt_days
        order = np.argsort(rates)
        cum = np.cumsum(root[order])
        return rates[order][np.searchsorted(cum, cum[-1] / 2)][None]
    X = _design(dt_days, dd) / root[:, None]
    n, p = X.shape
    cost = np.concatenate([np.zeros(p), np.ones(2 * n)])
    eye = sparse.eye(n, format="csr")
    A = sparse.hstack([sparse.csr_matrix(X), eye, -eye], format="csr")
    bounds = [(None, None)] * p + [(0, None)] * (2 * n)
    res = optimize.linprog(cost, A_eq=A, b_eq=c / root, bounds=bounds, method="highs")
    return res.x[:p]


def _flags(ch: Chain, dd: np.ndarray | None, rule: ScreenRule):
    """Rise flags, robust flags and the check of any interval against them (for merges)."""
    rise = ch.c < -rule.rise_tolerance
    p = 1 if dd is None else 2
    if len(ch.c) < p + ROBUST_MIN_EXTRA:
        return rise, np.zeros_like(rise), lambda c, span, d: c < -rule.rise_tolerance
    beta = lad(ch.dt, ch.c, dd)
    u = (ch.c - _design(ch.dt, dd) @ beta) / np.sqrt(ch.dt)
    scale = MAD_TO_SIGMA * float(np.median(np.abs(u - np.median(u))))
    scale = max(scale, 1e-12 * float(np.max(np.abs(ch.c / np.sqrt(ch.dt)))))

    def flagged(c, span, d):
        expected = beta[0] * span + (0.0 if d is None else beta[1] * d)
        off = np.abs(c - expected)
        return (c < -rule.rise_tolerance) | (
            (off > rule.threshold * scale * np.sqrt(span)) & (off > rule.rise_tolerance)
        )

    return rise, flagged(ch.c, ch.dt, dd) & ~rise, flagged


def screen_pass(levels: Levels, kept: np.ndarray, rule: ScreenRule, dd_of=None):
    """One pass of steps 2–3; returns (rejected {position: reason}, excluded {(a, b): reason})."""
    ch = chain(levels, kept)
    dd = None if dd_of is None else dd_of(ch.a, ch.b)
    rise, robust, flagged = _flags(ch, dd, rule)
    rejected: dict[int, str] = {}
    excluded: dict[tuple[int, int], str] = {}
    rose_into = {int(b): bool(r) for b, r in zip(ch.b, rise, strict=True)}

    def cured(a: int, b: int) -> bool:
        c = levels.level[a] - levels.level[b] + levels.cum[b] - levels.cum[a]
        span = levels.t[b] - levels.t[a]
        d = None if dd_of is None else dd_of(np.array([a]), np.array([b]))[0]
        return span > 0 and not bool(flagged(c, span, d))

    n = len(ch.a)
    for j in np.flatnonzero(rise | robust):
        a, b = int(ch.a[j]), int(ch.b[j])
        if a in rejected or b in rejected:
            continue
        has_next = j + 1 < n and ch.a[j + 1] == b
        has_prev = j > 0 and ch.b[j - 1] == a
        if has_next and cured(a, int(ch.b[j + 1])):
            victim = b
        elif has_prev and cured(int(ch.a[j - 1]), b):
            victim = a
        elif not has_next:
            victim = b
        elif not has_prev:
            victim = a
        else:
            excluded[(a, b)] = "unexplained_rise" if rise[j] else "implausible_consumption"
            continue
        rejected[victim] = "unexplained_rise" if rose_into.get(victim, False) else "implausible_consumption"
    return rejected, excluded


def screen(levels: Levels, rule: ScreenRule, dd_of=None):
    """Steps 1–4; returns (kept positions, rejected {position: reason}, excluded {(a, b): reason})."""
    rejected: dict[int, str] = {}
    above = levels.level > rule.capacity
    below = levels.level < 0
    for k in np.flatnonzero(above | below):
        rejected[int(k)] = "above_capacity" if above[k] else "below_zero"
    kept = np.flatnonzero(~(above | below))
    excluded: dict[tuple[int, int], str] = {}
    for _ in range(2):
        more, excluded = screen_pass(levels, kept, rule, dd_of)
        rejected.update(more)
        kept = np.array([k for k in kept if k not in more], dtype=int)
    return kept, rejected, excluded
