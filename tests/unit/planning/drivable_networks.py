"""Realistic one-truck networks from a seed (invented data, our own scenario), and their class.

Four kinds of tank (figures are common practice of the trade, invented here, no single source):

| kind | tank (L) | use (L/day) | safety stock | price (per L) |
|---|---|---|---|---|
| farm diesel | 2 500–10 000 | 30–300 | 10–15 % of the tank | 1.0–1.4 |
| garage forecourt | 20 000–50 000 | 1 500–6 000 | 8–12 % | 1.2–1.6 |
| heating-oil home | 1 000–2 500 | 4–30 | 100–200 L | 0.9–1.2 |
| industrial chemical | 5 000–30 000 | 200–2 500 | 15–25 % | 2–6 |

Holding cost per litre and day = price × a yearly rate of 15–30 % / 365; safe fill 0.90–0.95
(above-ground tanks are not filled above 95 % — International Fire Code 5704.2.9.7.5; US
underground tanks 40 CFR 280.20(c)); stop cost 10–80 by kind. The truck carries
20 000–38 000 L, 6–12 stops per trip, costs 150–400 per trip, and works Mon–Fri, Mon–Sat or every
day with 1–3 trips a day, some networks with a list of closed dates (public holidays).

A dispatcher gives a truck what it can carry: when the relaxation's trip rate (the most of
``1/T0``, ``D/W`` and ``Σ 1/(S U'_i)``) exceeds 75 % of the trips the calendar offers, demands are
scaled down; every tank lasts the calendar's longest closed stretch (demand capped so that
``⌊U'_i⌋`` ≥ stretch + 1); then sites are taken off until :func:`witness_plan` finds a plain
drivable plan. So every network is feasible (an infeasible answer on one is wrong), and the
witness's cost is a naive upper bound on its optimum.

Classes: **truck-binding** when the load or stop cut raises the plain bound of
``docs/planning.md`` ("Drivable lower bound", by more than 0.1 %); **calendar-binding** when fewer than
seven days are working days or ``trips_per_day`` offers less than twice the relaxation's trip rate.
"""

from __future__ import annotations

import datetime as dt
import math
from dataclasses import dataclass

import numpy as np

from service.planning import SiteInput, TruckInput

from .drivable_oracle import bound_caps, convex_solve, whole_day_cap

KINDS = {
    # kind: (tank range, use range, safety stock as fraction of tank or litres, price, stop cost)
    "farm": ((2_500, 10_000), (30, 300), ("fraction", 0.10, 0.15), (1.0, 1.4), (15, 40)),
    "garage": ((20_000, 50_000), (1_500, 6_000), ("fraction", 0.08, 0.12), (1.2, 1.6), (20, 50)),
    "home": ((1_000, 2_500), (4, 30), ("litres", 100, 200), (0.9, 1.2), (10, 25)),
    "chemical": ((5_000, 30_000), (200, 2_500), ("fraction", 0.15, 0.25), (2.0, 6.0), (30, 80)),
}
CALENDARS = {"Mon-Fri": (1, 2, 3, 4, 5), "Mon-Sat": (1, 2, 3, 4, 5, 6), "all week": (1, 2, 3, 4, 5, 6, 7)}
#: Invented public holidays of the networks that have closed dates (fixed dates in 2026–2027).
HOLIDAYS = tuple(
    dt.date.fromisoformat(d)
    for d in ("2026-12-25", "2026-12-26", "2027-01-01", "2027-04-02", "2027-04-05", "2027-05-03", "2027-08-30")
)


@dataclass(frozen=True)
class Network:
    seed: int
    sites: tuple[SiteInput, ...]
    truck: TruckInput
    start_date: dt.date
    calendar: str
    truck_binding: bool
    calendar_binding: bool

    @property
    def label(self) -> str:
        if self.truck_binding and self.calendar_binding:
            return "truck+calendar"
        return "truck" if self.truck_binding else "calendar" if self.calendar_binding else "neither"


def longest_closed_stretch(working_days, closed_dates, start: dt.date, horizon: int = 400) -> int:
    """Longest run of consecutive non-working days from ``start`` over ``horizon`` days."""
    closed = set(closed_dates)
    run = best = 0
    for t in range(horizon):
        day = start + dt.timedelta(days=t)
        if day.isoweekday() in working_days and day not in closed:
            run = 0
        else:
            run += 1
            best = max(best, run)
    return best


def _site(rng: np.random.Generator, kind: str, code: str) -> SiteInput:
    tank_range, use_range, safety, price, stop = KINDS[kind]
    tank = float(round(rng.uniform(*tank_range), -2))
    use = float(np.exp(rng.uniform(math.log(use_range[0]), math.log(use_range[1]))))
    fill = float(round(rng.uniform(0.90, 0.95), 2))
    stock = tank * rng.uniform(safety[1], safety[2]) if safety[0] == "fraction" else rng.uniform(safety[1], safety[2])
    holding = rng.uniform(*price) * rng.uniform(0.15, 0.30) / 365.0
    return SiteInput(
        code, round(use, 1), float(holding), float(round(rng.uniform(*stop), 2)), tank, fill, float(round(stock))
    )


def trip_rate(sites, truck) -> float:
    """Trips per day the relaxation needs at least: ``max(1/⌊min U'⌋, D/W, Σ 1/(S U'_i))``."""
    caps = bound_caps(sites, truck)
    D = sum(s.demand_per_day for s in sites)
    load = D / truck.capacity if truck.capacity else 0.0
    stops = float(np.sum(1.0 / caps)) / truck.max_stops if truck.max_stops else 0.0
    return max(1.0 / float(np.floor(caps.min())), load, stops)


def classify(sites, truck) -> tuple[bool, bool]:
    """``(truck_binding, calendar_binding)`` as in the module docstring (direct convex solves)."""
    with_cuts, rate = convex_solve(sites, truck)
    without, _ = convex_solve(sites, truck, cuts=False)
    truck_binding = with_cuts > without * (1 + 1e-3)
    days = len(truck.working_days)
    tau = truck.trips_per_day
    calendar_binding = days < 7 or (tau is not None and tau * days / 7 < 2 * rate)
    return truck_binding, calendar_binding


def network(seed: int, n: int | None = None, *, classified: bool = True) -> Network:
    """A feasible realistic network of ``n`` sites (5–150, log-uniform when ``None``) from ``seed``."""
    rng = np.random.default_rng(seed)
    if n is None:
        n = int(round(math.exp(rng.uniform(math.log(5), math.log(150)))))
    mix = rng.dirichlet(np.ones(len(KINDS)))
    profile = rng.integers(3)  # 0: rural (farms and homes), 1: mixed, 2: urban (garages and chemicals)
    if profile != 1:
        mix[[0, 2] if profile == 2 else [1, 3]] = 0.0
        mix /= mix.sum()
    kinds = rng.choice(list(KINDS), size=n, p=mix)
    sites = [_site(rng, str(kind), f"{kind[:2]}-{seed}-{i:03d}") for i, kind in enumerate(kinds)]
    calendar = str(rng.choice(list(CALENDARS), p=[0.4, 0.2, 0.4]))
    working = CALENDARS[calendar]
    closed = tuple(d for d in HOLIDAYS if d.isoweekday() in working) if rng.random() < 0.3 else ()
    start = dt.date(2026, 11, 2) + dt.timedelta(days=int(rng.integers(0, 120)))
    truck = TruckInput(
        float(round(rng.uniform(150, 400))),
        capacity=float(round(rng.uniform(20_000, 38_000), -2)),
        max_stops=int(rng.integers(6, 13)),
        working_days=working,
        trips_per_day=int(rng.integers(1, 4)),
        closed_dates=closed,
    )
    stretch = longest_closed_stretch(working, closed, start)
    # every tank lasts the longest closed stretch: ⌊U'_i⌋ ≥ stretch + 1 (a little margin against rounding)
    sites = [_fit(s, truck, stretch + 1.05) for s in sites]
    offered = truck.trips_per_day * len(working) / 7
    for _ in range(60):
        rate = trip_rate(sites, truck)
        if rate <= 0.75 * offered:
            break
        sites = [_scaled(s, 0.9) for s in sites]
    else:  # pragma: no cover - the scaling always converges on these ranges
        raise AssertionError(f"network {seed}: demand could not be brought within the calendar")
    for _ in range(200):  # a dispatcher takes sites off until a plain plan of 28 days exists
        if witness_plan(sites, truck, start) is not None:
            break
        sites = sites[:-1]
    else:  # pragma: no cover
        raise AssertionError(f"network {seed}: no witness plan")
    truck_binding = calendar_binding = False
    if classified:
        truck_binding, calendar_binding = classify(sites, truck)
    return Network(seed, tuple(sites), truck, start, calendar, truck_binding, calendar_binding)


WITNESS_DAYS = 28


def witness_plan(sites, truck, start: dt.date) -> float | None:
    """The cost per day of a plain drivable plan of 28 days, or ``None`` when this construction fails.

    A witness that the network is feasible (so an infeasible answer is wrong) and a naive upper bound on
    its optimum. Each site is delivered every 28, 14 or 7 days (the longest its whole-day cap allows) on
    one working day chosen greedily (heaviest first, where the largest of the affected dates' load and
    stop shares is least), or on every working day when its cap is under 7 days (which needs a cap of at
    least the longest weekly closed stretch + 1). Each date is packed by first-fit decreasing within
    ``W`` and ``S``; the construction fails when a date needs more than ``trips_per_day`` trips or a gap
    exceeds a cap. Closed dates are not applied (they are exceptions to the periodic plan).
    """
    R = WITNESS_DAYS
    work = [t for t in range(R) if (start + dt.timedelta(days=t)).isoweekday() in truck.working_days]
    if not work:
        return None
    W = truck.capacity or math.inf
    S = truck.max_stops or math.inf
    load = np.zeros(R)
    stops = np.zeros(R)
    items: list[list[float]] = [[] for _ in range(R)]
    cost = 0.0
    order = sorted(sites, key=lambda s: -s.demand_per_day)
    for site in order:
        cap = whole_day_cap(site, truck)
        cycle = next((c for c in (28, 14, 7) if cap >= c), None)
        if cycle is None:
            days = work
            gaps = [b - a for a, b in zip(work, work[1:], strict=False)] + [work[0] + R - work[-1]]
            if max(gaps) > cap:
                return None
        else:

            def share(t0, c=cycle, q=site.demand_per_day * cycle):
                return max((load[t] + q) / W + (stops[t] + 1) / S for t in range(t0, R, c))

            t0 = min((t for t in work if t < cycle), key=share)
            days = list(range(t0, R, cycle))
            gaps = [cycle] * len(days)
        for t, g in zip(days, gaps, strict=True):
            q = site.demand_per_day * g
            load[t] += q
            stops[t] += 1
            items[t].append(q)
            cost += site.stop_cost + site.holding_cost * site.demand_per_day * g * g / 2
    trips = 0
    for t in work:
        bins: list[list[float]] = []
        for q in sorted(items[t], reverse=True):
            for b in bins:
                if b[0] + q <= W * (1 + 1e-12) and b[1] + 1 <= S:
                    b[0] += q
                    b[1] += 1
                    break
            else:
                bins.append([q, 1])
        if truck.trips_per_day is not None and len(bins) > truck.trips_per_day:
            return None
        trips += len(bins)
    return (cost + truck.dispatch_cost * trips) / R


def _scaled(site: SiteInput, factor: float) -> SiteInput:
    return SiteInput(
        site.code,
        max(round(site.demand_per_day * factor, 1), 0.1),
        site.holding_cost,
        site.stop_cost,
        site.tank_capacity,
        site.safe_fill,
        site.safety_stock,
    )


def _fit(site: SiteInput, truck: TruckInput, days: float) -> SiteInput:
    usable = min(site.tank_capacity * site.safe_fill - site.safety_stock, truck.capacity)
    if usable / site.demand_per_day >= days:
        return site
    return _scaled(site, usable / (site.demand_per_day * days) * 0.999)
