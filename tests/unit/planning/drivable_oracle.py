"""Independent checks of drivable plans (issue 13, rules 1–5), from the listed trips only.

Nothing here imports the planner's internals: a plan is judged by what it lists (dates, trips,
stops, quantities) against the input records, and the bound is recomputed by a general-purpose
convex solver (``scipy.optimize.minimize``, SLSQP).

Rules (issue 13):
1. trips on working weekdays only, never on a closed date; at most ``trips_per_day`` trips per
   date, indexed 1..n; load = Σ stop quantities ≤ W; stops ≤ S; a site at most once per date.
2. quantity = d_i × days to the site's next delivery; no gap above ⌊U_i⌋ whole days.
3. cost_per_day = (K·#trips + Σ k_i + Σ h_i d_i g²/2) / repeat_days over one repeat period.
4. bound ≥ the relaxation of ``docs/planning.md``, "The plain bound" (:func:`reference_bound`).
5. infeasible answers: status, success false, ``needed``.
"""

from __future__ import annotations

import datetime as dt
import math
from collections import defaultdict
from dataclasses import dataclass, replace

import numpy as np
from scipy.optimize import minimize, minimize_scalar

REL = 1e-9
#: Whole-day tolerance when flooring U_i (the core floors ``q_i/d_i`` with the same 1e-9 days, so
#: that 0.94 × 4300 / 4042 — 0.9999999999999999 in floating point — still counts as one day).
DAY_TOL = 1e-9
WEEK = frozenset(range(1, 8))


def _close(a: float, b: float, rel: float = REL, abs_: float = 1e-9) -> bool:
    return math.isclose(a, b, rel_tol=rel, abs_tol=abs_)


def usable_stock(site, truck) -> float:
    """``q_i = min(f_i V_i − s_i, W)``: the most one delivery may bring."""
    tank = site.tank_capacity * site.safe_fill - site.safety_stock
    return tank if truck.capacity is None else min(tank, truck.capacity)


def whole_day_cap(site, truck) -> int:
    """``⌊U_i⌋``, ``U_i = q_i / d_i`` (docs/planning.md §1), floored with ``DAY_TOL``."""
    return int(math.floor(usable_stock(site, truck) / site.demand_per_day + DAY_TOL))


def _working(truck) -> frozenset[int]:
    return frozenset(getattr(truck, "working_days", WEEK))


def _closed(truck) -> frozenset[dt.date]:
    return frozenset(getattr(truck, "closed_dates", ()))


@dataclass(frozen=True)
class Delivery:
    day: int
    date: dt.date
    trip: int
    quantity: float


def _check_trips(trips, sites_by_code, truck, start: dt.date, where: str) -> dict[str, list[Delivery]]:
    """Rule 1 on a list of trips; returns each site's deliveries in day order."""
    working, closed = _working(truck), _closed(truck)
    tau = getattr(truck, "trips_per_day", None)
    W, S = truck.capacity, truck.max_stops
    by_date: dict[dt.date, list] = defaultdict(list)
    deliveries: dict[str, list[Delivery]] = defaultdict(list)
    for trip in trips:
        label = f"{where}: trip {trip.trip} of day {trip.day} ({trip.date})"
        assert trip.date == start + dt.timedelta(days=trip.day), f"{label}: date is not start_date + day ({start})"
        assert trip.date.isoweekday() in working, f"{label}: weekday {trip.date.isoweekday()} is not a working day"
        assert trip.date not in closed, f"{label}: on a closed date"
        assert trip.stops, f"{label}: a trip without stops"
        load = math.fsum(s.quantity for s in trip.stops)
        assert _close(trip.load, load), f"{label}: load {trip.load!r} is not the sum of its stops {load!r}"
        assert W is None or load <= W * (1 + REL), f"{label}: load {load!r} above capacity {W!r}"
        assert S is None or len(trip.stops) <= S, f"{label}: {len(trip.stops)} stops above max_stops {S}"
        for stop in trip.stops:
            assert stop.code in sites_by_code, f"{label}: unknown site {stop.code!r}"
            assert stop.quantity > 0, f"{label}: site {stop.code} gets {stop.quantity!r}"
            deliveries[stop.code].append(Delivery(trip.day, trip.date, trip.trip, stop.quantity))
        by_date[trip.date].append(trip)
    for date, day_trips in by_date.items():
        numbers = sorted(t.trip for t in day_trips)
        assert numbers == list(range(1, len(numbers) + 1)), f"{where}: {date} has trip indices {numbers}"
        assert tau is None or len(numbers) <= tau, f"{where}: {date} has {len(numbers)} trips, trips_per_day {tau}"
        codes = [s.code for t in day_trips for s in t.stops]
        twice = sorted({c for c in codes if codes.count(c) > 1})
        assert not twice, f"{where}: {date}: sites {twice} get more than one stop"
    for code in deliveries:
        deliveries[code].sort(key=lambda x: x.day)
    return deliveries


def _cyclic_gaps(days: list[int], period: int) -> list[int]:
    return [b - a for a, b in zip(days, days[1:], strict=False)] + [days[0] + period - days[-1]]


def _check_period(result, sites, truck) -> None:
    """Rules 1–3 over one full repeat period without closures (cyclic)."""
    R = result.repeat_days
    sites_by_code = {s.code: s for s in sites}
    trips = result.trips
    # a closed date up to the longest cap after the period still moves deliveries inside it
    reach = R + max(whole_day_cap(s, truck) for s in sites)
    closed_in_window = [c for c in _closed(truck) if 0 <= (c - result.start_date).days < reach]
    where = "listing"
    if closed_in_window:  # the listing has closures applied; the cost is that of the plain period
        from service.planning import trips_between

        truck = replace(truck, closed_dates=())
        trips = trips_between(result, truck, 0, R - 1).trips
        where = "trips_between without closures"
    assert all(0 <= t.day < R for t in trips), f"{where}: a trip outside days 0..{R - 1}"
    deliveries = _check_trips(trips, sites_by_code, truck, result.start_date, where)
    missing = sorted(set(sites_by_code) - set(deliveries))
    assert not missing, f"{where}: sites {missing} are never served in the repeat period of {R} days"
    K = truck.dispatch_cost
    stops = holding = 0.0
    plans = {p.code: p for p in result.sites}
    assert set(plans) == set(sites_by_code), "result.sites does not list every input site once"
    site_costs = 0.0
    for code, ds in deliveries.items():
        site = sites_by_code[code]
        days = [x.day for x in ds]
        gaps = _cyclic_gaps(days, R)
        cap = whole_day_cap(site, truck)
        for x, g in zip(ds, gaps, strict=True):
            assert g <= cap, f"site {code}: gap of {g} days after day {x.day} above its whole-day cap {cap}"
            want = site.demand_per_day * g
            assert _close(x.quantity, want), (
                f"site {code}: day {x.day} brings {x.quantity!r}, demand × {g} days to the next delivery = {want!r}"
            )
        s = site.stop_cost * len(ds)
        h = math.fsum(site.holding_cost * site.demand_per_day * g * g / 2 for g in gaps)
        stops += s
        holding += h
        plan = plans[code]
        p = plan.period_days
        assert R % p == 0, f"site {code}: period {p} does not divide repeat_days {R}"
        pattern = sorted(plan.delivery_days)
        assert pattern == sorted(set(pattern)) and all(0 <= o < p for o in pattern), f"site {code}: bad pattern"
        expected = sorted(o + j * p for j in range(R // p) for o in pattern)
        assert days == expected, f"site {code}: listed on days {days[:12]}…, its pattern says {expected[:12]}…"
        assert _close(plan.cycle_days, p / len(pattern)), f"site {code}: cycle_days {plan.cycle_days} ≠ period/len"
        assert plan.offset_days == pattern[0], f"site {code}: offset_days {plan.offset_days} ≠ {pattern[0]}"
        assert _close(plan.quantity, site.demand_per_day * p / len(pattern)), f"site {code}: mean quantity"
        assert plan.longest_gap_days == max(gaps), (
            f"site {code}: longest_gap_days {plan.longest_gap_days} ≠ {max(gaps)}"
        )
        assert _close(plan.cost_per_day, (s + h) / R), f"site {code}: cost_per_day {plan.cost_per_day} ≠ {(s + h) / R}"
        site_costs += (s + h) / R
    n_trips = len(trips)
    dispatch = K * n_trips / R
    cost = dispatch + stops / R + holding / R
    assert result.trips_per_repeat == n_trips, f"trips_per_repeat {result.trips_per_repeat} ≠ {n_trips} listed"
    assert _close(result.cost_per_day, cost), f"cost_per_day {result.cost_per_day!r} ≠ recomputed {cost!r}"
    assert _close(result.cost_per_day, dispatch + site_costs), "cost_per_day ≠ dispatch + Σ site cost_per_day"
    b = result.cost_breakdown
    for key, value in (("dispatch", dispatch), ("stops", stops / R), ("holding", holding / R)):
        assert _close(b[key], value), f"cost_breakdown[{key!r}] {b[key]!r} ≠ recomputed {value!r}"
    assert _close(result.peak_load, max(t.load for t in trips)), f"peak_load {result.peak_load} ≠ largest trip load"
    dates = sorted({t.day for t in trips})
    spacing = [b - a for a, b in zip(dates, dates[1:], strict=False)]
    allowed = {min(spacing + [dates[0] + R - dates[-1]])} | ({min(spacing)} if spacing else {R, 0})
    assert result.dispatch_interval_days in allowed, (
        f"dispatch_interval_days {result.dispatch_interval_days} is not the shortest gap between trip dates {allowed}"
    )


def _check_closures(result, sites, truck) -> None:
    """Rules 1–2 on the listing with closed dates applied (moves to earlier working days).

    A violation is accepted only when a warning names both the site and an ISO date.
    """
    sites_by_code = {s.code: s for s in sites}
    deliveries = _check_trips(result.trips, sites_by_code, truck, result.start_date, "listing with closures")
    from service.planning import trips_between

    last_day = result.trips[-1].day if result.trips else 0
    horizon = max(whole_day_cap(s, truck) for s in sites) + 1
    after = trips_between(result, truck, last_day + 1, last_day + horizon).trips
    nexts: dict[str, int] = {}
    for trip in sorted(after, key=lambda t: t.day):
        for stop in trip.stops:
            nexts.setdefault(stop.code, trip.day)
    warned = " ".join(result.warnings)
    closed_named = any(c.isoformat() in warned for c in _closed(truck))
    for code, ds in deliveries.items():
        site = sites_by_code[code]
        cap = whole_day_cap(site, truck)
        for j, x in enumerate(ds):
            nxt = ds[j + 1].day if j + 1 < len(ds) else nexts.get(code)
            if nxt is None:
                continue
            g = nxt - x.day
            ok = g <= cap and _close(x.quantity, site.demand_per_day * g)
            assert ok or (code in warned and closed_named), (
                f"site {code}: with closures, day {x.day} ({x.date}) brings {x.quantity!r} for a gap of {g} days "
                f"(cap {cap}, want {site.demand_per_day * g!r}) and no warning names it"
            )


def check_window(result, sites, truck, first_day: int, last_day: int) -> None:
    """Rules 1–2 on ``trips_between(result, truck, first_day, last_day)``: every trip drivable, and inside
    the window each delivery brings ``d_i ×`` the days to the site's next delivery, gaps within the caps;
    without closures the window repeats the listed period (day ``t`` as day ``t mod R``)."""
    from service.planning import trips_between

    window = trips_between(result, truck, first_day, last_day)
    assert all(first_day <= t.day <= last_day for t in window.trips), "trips_between lists days outside its window"
    sites_by_code = {s.code: s for s in sites}
    deliveries = _check_trips(window.trips, sites_by_code, truck, result.start_date, f"window {first_day}..{last_day}")
    warned = " ".join(window.warnings)
    for code, ds in deliveries.items():
        site, cap = sites_by_code[code], whole_day_cap(sites_by_code[code], truck)
        for a, b in zip(ds, ds[1:], strict=False):
            g = b.day - a.day
            ok = g <= cap and _close(a.quantity, site.demand_per_day * g)
            assert ok or code in warned, (
                f"window: site {code} day {a.day} brings {a.quantity!r} for a gap of {g} (cap {cap})"
            )
    if not _closed(truck) and not result.trips_truncated:
        R = result.repeat_days
        listed = sorted((t.day, t.trip, tuple((s.code, s.quantity) for s in t.stops)) for t in result.trips)
        by_day = {}
        for day, trip, stops in listed:
            by_day.setdefault(day, []).append((trip, stops))
        for t in window.trips:
            want = dict(by_day.get(t.day % R, []))
            got = tuple((s.code, s.quantity) for s in t.stops)
            assert t.trip in want and [c for c, _ in want[t.trip]] == [c for c, _ in got], (
                f"window day {t.day}: trip {t.trip} {got} is not listed day {t.day % R}'s {want.get(t.trip)}"
            )


def check_infeasible(result, sites) -> None:
    """Rule 5: the shape of an infeasible answer."""
    assert result.status.name == "INFEASIBLE", f"status {result.status!r} on an unsuccessful result"
    assert result.success is False
    assert result.message, "an infeasible answer without a message"
    needed = result.needed
    assert isinstance(needed, dict) and set(needed) >= {"trips_per_day", "remove_sites"}, f"needed = {needed!r}"
    tpd, remove = needed["trips_per_day"], needed["remove_sites"]
    assert tpd is None or (isinstance(tpd, int) and tpd >= 1), f"needed.trips_per_day = {tpd!r}"
    codes = {s.code for s in sites}
    assert isinstance(remove, list) and set(remove) <= codes, f"needed.remove_sites = {remove!r}"
    assert tpd is not None or remove, "needed names neither a trips_per_day nor sites to take off"
    assert not result.trips and result.cost_per_day == 0, "an infeasible answer lists trips or a cost"


def check_plan(result, sites, truck) -> None:
    """Rules 1–3 (and rule 5's shape when unsuccessful); raises AssertionError naming what failed."""
    assert result.success == (result.status.name != "INFEASIBLE"), "success must be False only when infeasible"
    if not result.success:
        check_infeasible(result, sites)
        return
    assert result.status.name in {"OPTIMAL", "FEASIBLE", "TIME_LIMIT"}, f"status {result.status!r}"
    assert result.needed is None, "needed is set on a successful result"
    R = result.repeat_days
    assert R >= 1
    if _working(truck) != WEEK:
        assert R % 7 == 0, f"repeat_days {R} is not a whole number of weeks with working days {sorted(_working(truck))}"
    sites_by_code = {s.code: s for s in sites}
    deliveries = _check_trips(result.trips, sites_by_code, truck, result.start_date, "listing")  # rule 1 first
    if result.trips_truncated:  # rule 2 on the gaps inside the listing
        assert R > 3660, f"trips_truncated with repeat_days {R} ≤ 3660"
        for code, ds in deliveries.items():
            site, cap = sites_by_code[code], whole_day_cap(sites_by_code[code], truck)
            for a, b in zip(ds, ds[1:], strict=False):
                assert b.day - a.day <= cap, f"site {code}: gap {b.day - a.day} above cap {cap}"
                assert _close(a.quantity, site.demand_per_day * (b.day - a.day)), f"site {code}: day {a.day} quantity"
        return
    _check_period(result, sites, truck)
    reach = R + max(whole_day_cap(s, truck) for s in sites)
    if any(0 <= (c - result.start_date).days < reach for c in _closed(truck)):
        _check_closures(result, sites, truck)


# --- rule 4: the reference bound -------------------------------------------------------------


@dataclass(frozen=True)
class ReferenceBound:
    """The plain bound of ``docs/planning.md`` ("Drivable lower bound"), computed two ways without the core.

    ``value``: the Lagrangian form maximised over the weights (:func:`dual_bound`; a valid lower
    bound for any weights by weak duality). ``primal``: the direct convex solve
    (:func:`convex_solve`), the cost of a feasible point of the relaxation, so at least its minimum.
    ``value ≤ minimum ≤ primal``; the tests check that the two agree closely (strong duality), so a
    service bound ``≥ value`` is at least the relaxation's minimum up to that difference.
    ``trips_per_day``: ``max(1/T0, D/W, Σ 1/(S T_i))`` at the primal point.
    """

    value: float
    primal: float
    weights: tuple[float, float, float]
    trips_per_day: float


def bound_caps(sites, truck) -> np.ndarray:
    """``U'_i = min(⌊(f_i V_i − s_i)/d_i⌋, W/d_i)`` (docs/planning.md, "The plain bound")."""
    caps = []
    for s in sites:
        tank = math.floor((s.tank_capacity * s.safe_fill - s.safety_stock) / s.demand_per_day + DAY_TOL)
        caps.append(min(tank, math.inf if truck.capacity is None else truck.capacity / s.demand_per_day))
    return np.asarray(caps, dtype=float)


def reference_bound(sites, truck, *, cuts: bool = True, primal: bool = True) -> ReferenceBound:
    """Both forms of the bound (``cuts=False``: without the load and stop terms, caps ``U'_i``)."""
    if not cuts:
        value, weights = lagrangian_bound(sites, truck, 1.0, 0.0, 0.0), (1.0, 0.0, 0.0)
    else:
        value, weights = dual_bound(sites, truck)
    if not primal:
        return ReferenceBound(value, math.nan, weights, math.nan)
    p, rate = convex_solve(sites, truck, cuts=cuts)
    return ReferenceBound(value, p, weights, rate)


def convex_solve(sites, truck, *, cuts: bool = True) -> tuple[float, float]:
    """``min K·max(1/T0, D/W, Σ 1/(S T_i)) + Σ (k_i/T_i + H_i T_i)`` over ``1 ≤ T0 ≤ T_i ≤ U'_i``.

    Solved directly by ``scipy.optimize.minimize`` (SLSQP) in the epigraph form (variable ``z`` for
    the maximum) and in logarithmic days ``x = log T`` (still convex: ``e^{-x}`` and ``e^{x}`` are
    convex, the order constraints linear; better scaled for tanks that last years). Returns the
    objective at the solver's point projected onto the feasible set (``x`` clipped, ``z`` the
    maximum): the cost of a feasible point, so at least the minimum; and the ``z`` there.
    """
    K = float(truck.dispatch_cost)
    d, k, H, U = _arrays(sites, truck)
    n = len(sites)
    load = d.sum() / truck.capacity if (cuts and truck.capacity is not None) else 0.0
    per_stop = 1.0 / truck.max_stops if (cuts and truck.max_stops is not None) else 0.0
    logU = np.log(U)
    lu0 = float(logU.min())
    assert lu0 >= 0.0, "a site whose whole-day cap is below one day has no plan"

    def project(x):
        x0 = min(max(x[1], 0.0), lu0)
        T0, T = math.exp(x0), np.exp(np.clip(x[2:], x0, logU))
        z = max(1.0 / T0, load, per_stop * float(np.sum(1.0 / T)))
        return K * z + float(np.sum(k / T + H * T)), z

    def f(x):
        T = np.exp(x[2:])
        return K * x[0] + np.sum(k / T + H * T)

    def grad(x):
        T = np.exp(x[2:])
        return np.concatenate([[K, 0.0], -k / T + H * T])

    order = np.hstack([np.zeros((n, 1)), -np.ones((n, 1)), np.eye(n)])
    cons = [
        {"type": "ineq", "fun": lambda x: x[2:] - x[1], "jac": lambda x: order},
        {
            "type": "ineq",
            "fun": lambda x: np.array([x[0] - math.exp(-x[1])]),
            "jac": lambda x: np.concatenate([[1.0, math.exp(-x[1])], np.zeros(n)])[None, :],
        },
        {
            "type": "ineq",
            "fun": lambda x: np.array([x[0] - load]),
            "jac": lambda x: np.concatenate([[1.0, 0.0], np.zeros(n)])[None, :],
        },
        {
            "type": "ineq",
            "fun": lambda x: np.array([x[0] - per_stop * np.sum(np.exp(-x[2:]))]),
            "jac": lambda x: np.concatenate([[1.0, 0.0], per_stop * np.exp(-x[2:])])[None, :],
        },
    ]
    a = k + K * per_stop
    free = np.where(H > 0, np.sqrt(np.divide(a, H, out=np.ones(n), where=H > 0)), U)
    xs = np.log(np.clip(free, 1.0, U))
    x0 = float(xs.min())
    start = np.concatenate([[0.0, x0], xs])
    start[0] = project(start)[1]
    best = project(start)
    res = minimize(
        f,
        start,
        jac=grad,
        bounds=[(0.0, None), (0.0, lu0)] + [(0.0, u) for u in logU],
        constraints=cons,
        method="SLSQP",
        options={"ftol": 1e-15, "maxiter": 3000},
    )
    if np.all(np.isfinite(res.x)):
        best = min(best, project(res.x))
    return best


def _arrays(sites, truck):
    d = np.array([s.demand_per_day for s in sites], dtype=float)
    k = np.array([s.stop_cost for s in sites], dtype=float)
    H = np.array([s.holding_cost for s in sites], dtype=float) * d / 2.0
    return d, k, H, bound_caps(sites, truck)


def lagrangian_bound(sites, truck, alpha: float, beta: float, gamma: float) -> float:
    """``LB(α, β, γ)`` of docs/planning.md ("The plain bound") for one choice of weights (α + β + γ = 1).

    ``K β D/W + min_{T0} [K α/T0 + Σ_i min_{T_i ∈ [T0, U'_i]} ((k_i + K γ/S)/T_i + H_i T_i)]``; the
    inner minimum of each convex ``a/T + H T`` on an interval is at ``sqrt(a/H)`` clipped to it, and
    the outer function of ``T0`` is convex, minimised by ``scipy.optimize.minimize_scalar`` (bounded)
    and compared with both ends.
    """
    K = float(truck.dispatch_cost)
    d, k, H, U = _arrays(sites, truck)
    load = K * beta * d.sum() / truck.capacity if truck.capacity is not None else 0.0
    a = k + (K * gamma / truck.max_stops if truck.max_stops is not None else 0.0)
    with np.errstate(over="ignore"):  # a holding cost near 0 puts the free optimum at +inf, clipped to U below
        free = np.where(H > 0, np.sqrt(np.divide(a, H, out=np.zeros_like(a), where=H > 0)), np.inf)
    u0 = float(U.min())

    def F(T0: float) -> float:
        T = np.clip(free, T0, U)
        return K * alpha / T0 + float(np.sum(a / T + H * T))

    res = minimize_scalar(F, bounds=(1.0, u0), method="bounded", options={"xatol": 1e-12})
    return load + min(F(1.0), F(u0), float(res.fun))


def dual_bound(sites, truck) -> tuple[float, tuple[float, float, float]]:
    """``max`` of :func:`lagrangian_bound` over the weights: a grid of step 0.1 refined by
    Nelder–Mead (the function is concave in the weights). Weak duality makes every value a valid
    bound; by strong duality (Boyd & Vandenberghe 2004, §5.2) the maximum equals the direct convex solve."""
    absent_load, absent_stops = truck.capacity is None, truck.max_stops is None

    def weights(ab) -> tuple[float, float, float]:
        alpha, beta = float(np.clip(ab[0], 0, 1)), float(np.clip(ab[1], 0, 1))
        if absent_load:
            beta = 0.0
        if alpha + beta > 1:
            alpha, beta = alpha / (alpha + beta), beta / (alpha + beta)
        # max(0, …): the normalised alpha + beta may exceed 1 by a rounding step, and a negative
        # gamma would make a stop weight below zero (sqrt of a negative in lagrangian_bound).
        gamma = 0.0 if absent_stops else max(0.0, 1 - alpha - beta)
        return 1 - beta - gamma, beta, gamma

    def g(ab) -> float:
        return lagrangian_bound(sites, truck, *weights(ab))

    grid = [(a, b) for a in np.linspace(0, 1, 11) for b in np.linspace(0, 1, 11) if a + b <= 1 + 1e-12]
    start = max(grid, key=g)
    res = minimize(
        lambda ab: -g(ab),
        np.asarray(start),
        method="Nelder-Mead",
        options={"xatol": 1e-9, "fatol": 1e-12, "maxiter": 400},
    )
    best = max([tuple(start), tuple(res.x)], key=g)
    return g(best), weights(best)
