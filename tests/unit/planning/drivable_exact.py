"""Exact optimum of small drivable instances over one fixed repeat period (issue 13).

A plan of period ``R`` gives each site a *pattern*: a non-empty set of working dates in
``0..R-1`` whose cyclic gaps are all at most ``⌊U_i⌋`` (rule 2: a delivery on day ``t`` brings
``d_i × gap to the next one``, so the cap on the gap is the tank and truck cap). A pattern costs
``k_i·|P| + Σ_g h_i d_i g²/2`` per period. Each working date has at most ``trips_per_day`` trips;
every chosen delivery is assigned to one trip of its date, and each trip carries at most ``W`` and
``S`` stops. The cost per day is ``(K·#trips + Σ pattern costs) / R``.

:func:`exact_optimum` solves this as a mixed-integer programme with ``scipy.optimize.milp``
(HiGHS, a general-purpose reference solver). The bin packing is modelled explicitly (binary
site–date–trip variables ``y``, continuous loads ``L ≤ q_max·y``), not by the relaxation
``Σ loads ≤ W·trips``. :func:`brute_force_optimum` enumerates every combination of patterns and packs
each date by trying every assignment (n ≤ 3), to check the programme itself.

An optimum over one ``R`` is an upper bound on the optimum over all periods (plans of period
``R`` are a subset of all plans, and include every period dividing ``R``).
"""

from __future__ import annotations

import datetime as dt
import itertools
import math
from dataclasses import dataclass

import numpy as np
from scipy.optimize import Bounds, LinearConstraint, milp
from scipy.sparse import coo_matrix

from .drivable_oracle import whole_day_cap


@dataclass(frozen=True)
class Pattern:
    days: tuple[int, ...]
    quantities: tuple[float, ...]
    cost: float  # per period: k·|P| + Σ h d g² / 2


@dataclass(frozen=True)
class ExactPlan:
    """``cost_per_day`` of the optimum; ``patterns`` per site code; ``trips`` as ``(day, codes)``."""

    cost_per_day: float
    patterns: dict[str, tuple[int, ...]]
    trips: tuple[tuple[int, tuple[str, ...]], ...]


def working_dates(truck, start: dt.date, period: int) -> list[int]:
    days = getattr(truck, "working_days", (1, 2, 3, 4, 5, 6, 7))
    assert not getattr(truck, "closed_dates", ()), "the exact reference takes no closed dates"
    return [t for t in range(period) if (start + dt.timedelta(days=t)).isoweekday() in days]


def site_patterns(site, truck, dates: list[int], period: int) -> list[Pattern]:
    """Every subset of ``dates`` with cyclic gaps ≤ ``⌊U_i⌋`` (depth-first, pruned on the gap)."""
    cap = whole_day_cap(site, truck)
    d, h, k = site.demand_per_day, site.holding_cost, site.stop_cost
    out: list[Pattern] = []

    def extend(chosen: list[int], start_index: int) -> None:
        last = chosen[-1]
        if chosen[0] + period - last <= cap:
            gaps = [b - a for a, b in zip(chosen, chosen[1:], strict=False)] + [chosen[0] + period - last]
            out.append(
                Pattern(
                    tuple(chosen), tuple(d * g for g in gaps), k * len(chosen) + sum(h * d * g * g / 2 for g in gaps)
                )
            )
        for j in range(start_index, len(dates)):
            if dates[j] - last > cap:
                break
            extend(chosen + [dates[j]], j + 1)

    for i, first in enumerate(dates):
        if first + 1 > cap:
            break  # the wrap gap first + R − last is at least first + 1
        extend([first], i + 1)
    return out


def exact_optimum(sites, truck, start: dt.date, period: int, *, time_limit: float = 60.0) -> ExactPlan | None:
    """The cheapest plan of repeat period ``period`` (``None`` when there is none)."""
    dates = working_dates(truck, start, period)
    n = len(sites)
    patterns = [site_patterns(s, truck, dates, period) for s in sites]
    if any(not p for p in patterns):
        return None
    tau = min(truck.trips_per_day or n, n)
    W, S = truck.capacity, truck.max_stops
    cols = 0

    def block(size: int) -> np.ndarray:
        nonlocal cols
        idx = np.arange(cols, cols + size)
        cols += size
        return idx

    x = [block(len(p)) for p in patterns]
    T = len(dates)
    z = block(T * tau).reshape(T, tau)
    y = block(n * T * tau).reshape(n, T, tau)
    L = block(n * T * tau).reshape(n, T, tau) if W is not None else None
    integral = np.ones(cols)
    if L is not None:
        integral[L.ravel()] = 0
    upper = np.ones(cols)
    qmax = [site.demand_per_day * whole_day_cap(site, truck) for site in sites]
    if L is not None:
        for i in range(n):
            upper[L[i].ravel()] = qmax[i]
    for i in range(n):  # symmetry: trips of a date ordered by their first site, so site i rides on trips ≤ i
        upper[y[i, :, i + 1 :].ravel()] = 0
        if L is not None:
            upper[L[i, :, i + 1 :].ravel()] = 0
    c = np.zeros(cols)
    c[z.ravel()] = truck.dispatch_cost
    for i in range(n):
        c[x[i]] = [p.cost for p in patterns[i]]

    rows, cidx, vals, lo, hi = [], [], [], [], []
    r = 0

    def row(entries, low, high):
        nonlocal r
        for col, v in entries:
            rows.append(r)
            cidx.append(int(col))
            vals.append(float(v))
        lo.append(low)
        hi.append(high)
        r += 1

    position = {t: a for a, t in enumerate(dates)}
    for i in range(n):
        row([(col, 1.0) for col in x[i]], 1.0, 1.0)  # one pattern per site
        serves = [[] for _ in dates]
        amounts = [[] for _ in dates]
        for col, p in zip(x[i], patterns[i], strict=True):
            for t, q in zip(p.days, p.quantities, strict=True):
                serves[position[t]].append(col)
                amounts[position[t]].append((col, q))
        for a in range(T):
            # the site is on exactly one trip of date a when its pattern serves a, else on none
            row([(y[i, a, j], 1.0) for j in range(tau)] + [(col, -1.0) for col in serves[a]], 0.0, 0.0)
            for j in range(tau):
                row([(y[i, a, j], 1.0), (z[a, j], -1.0)], -np.inf, 0.0)
                if L is not None:
                    row([(L[i, a, j], 1.0), (y[i, a, j], -qmax[i])], -np.inf, 0.0)
            if L is not None:  # the day's quantity goes to the trip it is on
                row([(L[i, a, j], 1.0) for j in range(tau)] + [(col, -q) for col, q in amounts[a]], 0.0, 0.0)
    for a in range(T):
        for j in range(tau):
            if S is not None:
                row([(y[i, a, j], 1.0) for i in range(n)] + [(z[a, j], -float(S))], -np.inf, 0.0)
            if L is not None:
                row([(L[i, a, j], 1.0) for i in range(n)] + [(z[a, j], -float(W))], -np.inf, 0.0)
            if j + 1 < tau:  # trips numbered in order of use (symmetry)
                row([(z[a, j + 1], 1.0), (z[a, j], -1.0)], -np.inf, 0.0)
    A = coo_matrix((vals, (rows, cidx)), shape=(r, cols)).tocsr()
    res = milp(
        c,
        constraints=LinearConstraint(A, lo, hi),
        integrality=integral,
        bounds=Bounds(np.zeros(cols), upper),
        options={"time_limit": time_limit, "mip_rel_gap": 1e-6},
    )
    if res.status == 2:  # infeasible
        return None
    assert res.status == 0, f"milp did not prove optimality: {res.message}"
    sol = res.x
    chosen = {}
    for i, site in enumerate(sites):
        best = int(np.argmax(sol[x[i]]))
        chosen[site.code] = patterns[i][best].days
    trips = []
    for a, t in enumerate(dates):
        for j in range(tau):
            if sol[z[a, j]] > 0.5:
                codes = tuple(sites[i].code for i in range(n) if sol[y[i, a, j]] > 0.5)
                if codes:
                    trips.append((t, codes))
    return ExactPlan(float(res.fun) / period, chosen, tuple(trips))


def _fewest_trips(loads: list[float], W: float | None, S: int | None) -> int:
    """Fewest trips carrying the items (each within W and S), by trying every assignment."""
    m = len(loads)
    for bins in range(1, m + 1):
        for assign in itertools.product(range(bins), repeat=m):
            ok = True
            for b in range(bins):
                items = [loads[j] for j in range(m) if assign[j] == b]
                if not items or (S is not None and len(items) > S) or (W is not None and sum(items) > W * (1 + 1e-9)):
                    ok = False
                    break
            if ok:
                return bins
    raise AssertionError("unreachable: one item per trip always fits")


def brute_force_optimum(sites, truck, start: dt.date, period: int) -> float | None:
    """The same optimum by enumerating every combination of patterns (n ≤ 3)."""
    assert len(sites) <= 3
    dates = working_dates(truck, start, period)
    patterns = [site_patterns(s, truck, dates, period) for s in sites]
    tau = truck.trips_per_day
    best = math.inf
    for combo in itertools.product(*patterns):
        cost = sum(p.cost for p in combo)
        trips = 0
        for t in dates:
            loads = [p.quantities[p.days.index(t)] for p in combo if t in p.days]
            if loads:
                need = _fewest_trips(loads, truck.capacity, truck.max_stops)
                if tau is not None and need > tau:
                    break
                trips += need
        else:
            best = min(best, (cost + truck.dispatch_cost * trips) / period)
    return None if best == math.inf else best


def as_result(sites, truck, start: dt.date, period: int, plan: ExactPlan, status: str = "FEASIBLE"):
    """The exact plan in the shape of a ``JointResult`` (attributes only), for ``check_plan``.

    Quantities follow rule 2 from the patterns; costs are those of the model above.
    """
    from types import SimpleNamespace as NS

    by_code = {s.code: s for s in sites}
    quantity = {}
    site_plans = []
    holding = stops = 0.0
    for code, days in plan.patterns.items():
        site = by_code[code]
        gaps = [b - a for a, b in zip(days, days[1:], strict=False)] + [days[0] + period - days[-1]]
        for t, g in zip(days, gaps, strict=True):
            quantity[code, t] = site.demand_per_day * g
        s = site.stop_cost * len(days)
        h = sum(site.holding_cost * site.demand_per_day * g * g / 2 for g in gaps)
        stops, holding = stops + s, holding + h
        site_plans.append(
            NS(
                code=code,
                cycle_days=period / len(days),
                offset_days=days[0],
                quantity=site.demand_per_day * period / len(days),
                cost_per_day=(s + h) / period,
                binding=None,
                period_days=period,
                delivery_days=tuple(days),
                longest_gap_days=max(gaps),
            )
        )
    trips, index = [], {}
    for t, codes in sorted(plan.trips):
        index[t] = index.get(t, 0) + 1
        stop_list = tuple(NS(code=c, quantity=quantity[c, t]) for c in codes)
        trips.append(
            NS(
                day=t,
                date=start + dt.timedelta(days=t),
                trip=index[t],
                load=math.fsum(x.quantity for x in stop_list),
                stops=stop_list,
            )
        )
    dispatch = truck.dispatch_cost * len(trips) / period
    dates = sorted(index)
    spacing = [b - a for a, b in zip(dates, dates[1:], strict=False)] + [dates[0] + period - dates[-1]]
    return NS(
        status=NS(name=status),
        success=True,
        message="",
        needed=None,
        start_date=start,
        repeat_days=period,
        trips_per_repeat=len(trips),
        cost_per_day=dispatch + (stops + holding) / period,
        cost_breakdown={"dispatch": dispatch, "stops": stops / period, "holding": holding / period},
        peak_load=max(x.load for x in trips),
        dispatch_interval_days=min(spacing),
        trips_truncated=False,
        sites=tuple(site_plans),
        trips=tuple(trips),
        warnings=(),
    )
