"""The network plan: assign sites to trucks, plan each truck, route and load every trip.

``plan_network`` (see ``docs/fleet.md``):

1. validates the inputs (every site and depot needs coordinates; products and depots must be known),
   and sets aside the sites no truck may serve (no truck carries the product from an allowed depot, or
   the tank holds less than a day), with the reason;
2. assigns the rest to trucks (:mod:`assignment`: sweep around the depots, relocation moves), within the
   trucks' throughput;
3. plans each truck: the drivable one-truck planner (:func:`service.planning.plan_joint`) on the truck's
   sites with routing-aware costs — the trip cost ``K + c · 2 r̄`` (``r̄`` the mean depot distance of the
   truck's sites, and half of it as a second candidate) and each stop's cost ``k_i + c ν_i`` (``ν_i`` the
   distance to its nearest neighbour on the truck) — and, on a truck working every day with at most
   :data:`cyclic.MAX_CHOICES` cycle/offset choices, the exhaustive cyclic search with true tour lengths;
4. routes every trip of each candidate (:func:`routing.shortest_tour`), loads it into the compartments
   (:func:`compartments.load_trip`; a trip that does not load is split into trips that do, in driving
   order) and costs it as ``K + c × route length + Σ stop costs``; the cheapest candidate per truck wins;
5. with shifted trucks, offers the sites set aside to the shifted trucks with hours to spare
   (:func:`_reoffer`, ``docs/fleet.md`` §6a step 5);
6. reports the network's cost per day, the lower bound of :mod:`bound`, utilisation and warnings.

The trucks' plans do not interact once the assignment is fixed, so the network cost is their sum.
"""

from __future__ import annotations

import datetime as dt
import math
import time
from collections.abc import Callable, Sequence
from dataclasses import dataclass, replace

import numpy as np

from service.planning.errors import PlanningInputError
from service.planning.fleet.assignment import relocate, shift_trips, sweep, within_throughput
from service.planning.fleet.bound import nearest_other, network_bound
from service.planning.fleet.compartments import load_trip
from service.planning.fleet.cyclic import MAX_CHOICES, choice_count, cyclic_search
from service.planning.fleet.distance import CircuityDistance, DistanceSource, check_points
from service.planning.fleet.inputs import Calendar, Depot, FleetSite, FleetTruck, Product
from service.planning.fleet.results import NetworkResult, RoutedTrip, RouteStop, TruckPlan, UnservedSite
from service.planning.fleet.routing import shortest_tour
from service.planning.inputs import ALL_WEEKDAYS, WHOLE_DAY_TOLERANCE, TruckInput
from service.planning.joint import plan_joint
from service.planning.results import SitePlan, Status, Stop, Trip
from service.planning.workweek import WorkWeek

#: Longest single call of the one-truck planner (s), so progress is reported at least every 2 s.
STEP_SECONDS = 1.2
#: Seconds after the last progress report at which the next tick reports a fraction moved on: half the
#: job worker's one write a second (``service/network_worker.py``), so each of its writes carries a new
#: fraction and none waits for a whole second more.
TICK_SECONDS = 0.5
#: Trucks with more sites than this are planned with power-of-two cycles only: their repeat period stays
#: short (``B 2^p`` days), so listing, routing and costing every trip of it stays fast; the power-of-two
#: class stays close to the relaxation (Roundy 1985, ``docs/planning.md`` §5).
BEST_METHOD_SITES = 40
#: Share of a truck's throughput (capacity × trips per day × working days) the assignment fills at most:
#: trips are rarely full (compartments, stop limits, whole-day patterns).
LIMIT_SHARE = 0.8
#: Share of a truck's sites (the farthest first) set aside per retry when its plan needs more trips per
#: day than its calendar allows.
SHED_SHARE = 0.1
#: Largest share set aside per retry once the truck's share of the time budget is spent (in proportion to the trips per day
#: missing, ``1 − allowed / needed``, at least :data:`SHED_SHARE`): a few retries, not one per 10 %.
SHED_SHARE_LATE = 0.5
#: Days of each truck's repeat period whose routed trips are listed (all listed days are costed).
ROUTED_DAYS = 63
#: Stem scales of the routing-aware trip cost tried per truck, ``None`` for direct shipping (candidates
#: after the first only while the time budget lasts).
STEM_SCALES = (1.0, None, 0.5)
#: Slack on the shift check (hours), for rounding only.
SHIFT_TOLERANCE = 1e-9
#: With any shifted truck, the share of the time budget (counted as this share of the sites more) kept
#: for offering the sites set aside to the shifted trucks with hours to spare (``_reoffer``).
REOFFER_SHARE = 0.25
#: Seconds left below which no more offers are planned (one planner call and its costing).
REOFFER_SECONDS = 1.0
#: Reasons of sites no re-plan can serve (set before the assignment, whatever the trucks' plans).
FIXED_REASONS = ("no truck carries", "usable stock holds less than one day")


@dataclass
class _Truck:
    """One truck's data during planning: index, sites (network indices), distance matrix over its depot
    (node 0) and its sites (nodes 1…)."""

    index: int
    truck: FleetTruck
    calendar: Calendar
    sites: np.ndarray
    d: np.ndarray
    shift_trips: int | None = None


class _Clock:
    """Budget, progress reports (fraction 0–1) and the cut flag.

    The work is cut into steps (the set-up, each truck), each ending at a known fraction. Within a step
    ``tick`` moves the fraction from the step's start ``f0`` towards its end ``f1`` by the time spent on
    it: ``f = f0 + (f1 − f0)(1 − e^(−t/τ))`` with ``τ = (f1 − f0) · T0 / f0``, the time the step takes at
    the pace of the run so far (``T0`` s for ``f0``; 1 s before any pace is known). The fraction grows at
    every tick yet never reaches ``f1`` before the step ends, so a client sees it move at least every
    ``TICK_SECONDS`` plus the longest stretch without a tick (one call of the one-truck planner is cut at
    ``STEP_SECONDS``) even through one long truck, and the estimate ``elapsed × (1 − f) / f`` stays that
    of the run's pace.
    """

    def __init__(self, budget: float | None, progress: Callable[[float], None] | None):
        self.began = time.monotonic()
        self.deadline = None if budget is None else self.began + budget
        self.progress = progress
        self.cut = False
        self.fraction = 0.0
        self.last = self.began
        self.step_from, self.step_to, self.step_began, self.tau = 0.0, 0.0, self.began, 1.0
        self.soft = math.inf

    def left(self) -> float:
        return math.inf if self.deadline is None else self.deadline - time.monotonic()

    def share(self, fraction: float) -> None:
        """Give the next truck ``fraction`` of the time left (its share of the sites left)."""
        self.soft = time.monotonic() + self.left() * fraction

    def late(self) -> bool:
        """The truck's share of the budget (or the budget) is spent."""
        return time.monotonic() > self.soft or self.out()

    def out(self) -> bool:
        if self.left() <= 0:
            self.cut = True
        return self.cut

    def report(self, fraction: float, until: float | None = None) -> None:
        """Report ``fraction``; with ``until``, a step starts here and ends at ``until``."""
        self.fraction = min(1.0, max(self.fraction, float(fraction)))
        self.last = time.monotonic()
        if until is not None:
            spent = self.last - self.began
            self.step_from, self.step_to, self.step_began = self.fraction, min(1.0, float(until)), self.last
            width = self.step_to - self.step_from
            self.tau = width * spent / self.fraction if self.fraction > 0 and spent > 0 and width > 0 else 1.0
        if self.progress is not None:
            self.progress(self.fraction)

    def tick(self) -> None:
        """Report the fraction moved on within the step when ``TICK_SECONDS`` passed since the last report."""
        now = time.monotonic()
        if now - self.last < TICK_SECONDS:
            return
        if self.step_to > self.fraction:
            share = -math.expm1(-(now - self.step_began) / self.tau)  # 1 − e^(−t/τ), in [0, 1)
            moved = self.step_from + (self.step_to - self.step_from) * share
            self.fraction = max(self.fraction, min(moved, self.step_to))
        self.report(self.fraction)


def _check(sites, trucks, depots, products) -> None:
    for kind, items in (("depot", depots), ("truck", trucks), ("site", sites), ("product", products)):
        seen = set()
        for item in items:
            if not isinstance(item.code, str) or not item.code or item.code in seen:
                raise PlanningInputError(f"{kind} code {item.code!r} is empty or repeated", field="code", code=item.code)
            seen.add(item.code)
    if not trucks:
        raise PlanningInputError("trucks: at least one truck is required", field="trucks")
    check_points([s.location for s in sites], [s.code for s in sites], "sites")
    check_points([d.location for d in depots], [d.code for d in depots], "depots")
    known_depots, known_products = {d.code for d in depots}, {p.code for p in products}
    for t in trucks:
        if t.depot not in known_depots:
            raise PlanningInputError(f"truck `{t.code}`: unknown depot `{t.depot}`", field="depot", code=t.code)
        if not t.compartments or any(not (isinstance(c, int | float) and c > 0) for c in t.compartments):
            raise PlanningInputError(f"truck `{t.code}`: compartments must be capacities > 0", field="compartments")
        if not (t.cost_per_km >= 0 and t.dispatch_cost >= 0):
            raise PlanningInputError(f"truck `{t.code}`: costs must be >= 0", field="cost_per_km", code=t.code)
        _check_shift(t)
        for p in t.products:
            if p not in known_products:
                raise PlanningInputError(f"truck `{t.code}`: unknown product `{p}`", field="products", code=t.code)
    for s in sites:
        if s.product not in known_products:
            raise PlanningInputError(f"site `{s.code}`: unknown product `{s.product}`", field="product", code=s.code)
        if s.depot is not None and s.depot not in known_depots:
            raise PlanningInputError(f"site `{s.code}`: unknown depot `{s.depot}`", field="depot", code=s.code)


def _check_shift(t: FleetTruck) -> None:
    """The shift fields' ranges (as the trucks table's checks) and ``shift_hours`` needing a speed."""
    checks = (
        ("shift_hours", t.shift_hours, lambda v: 0 < v <= 24, "in (0, 24]"),
        ("average_speed_kmh", t.average_speed_kmh, lambda v: v > 0, "> 0"),
        ("stop_minutes", t.stop_minutes, lambda v: v >= 0, ">= 0"),
        ("load_minutes", t.load_minutes, lambda v: v >= 0, ">= 0"),
    )
    for name, value, ok, what in checks:
        if value is not None and not (isinstance(value, int | float) and math.isfinite(value) and ok(value)):
            raise PlanningInputError(f"truck `{t.code}`: {name} must be {what}", field=name, code=t.code)
    if t.shift_hours is not None and t.average_speed_kmh is None:
        raise PlanningInputError(
            f"truck `{t.code}`: shift_hours needs average_speed_kmh", field="average_speed_kmh", code=t.code
        )


def _shift_sizing(trucks, cals, eligible, r, truck_depot, demand, size, nu, days_share, throughput, limit):
    """The assignment's view of the trucks' shifts (``docs/fleet.md`` §6a); trucks without a shift keep
    their values.

    A truck with a shift ``S`` may serve a site only when a one-stop trip to it fits ``S`` (a site that
    fits no eligible truck's shift is set aside with the reason). Its throughput is ``n × load × working days / 7`` with ``n`` trips of a typical load per
    working day (:func:`assignment.shift_trips`, over the sites whose nearest eligible depot is the
    truck's; capped by the calendar's trips per day), which also bounds its demand in the assignment.
    Returns ``(eligible, throughput, limit, starting trips per day of each truck or None, reasons of the
    sites no eligible truck's shift can reach)``."""
    eligible, throughput, limit = eligible.copy(), throughput.copy(), limit.copy()
    shift_tpd: list[int | None] = [None] * len(trucks)
    timed = [t for t, tr in enumerate(trucks) if tr.shift_hours is not None]
    if not timed:
        return eligible, throughput, limit, shift_tpd, {}
    fits = eligible.copy()
    hours = np.zeros(eligible.shape)
    for t in timed:
        hours[:, t] = [trucks[t].trip_hours(2.0 * float(x), 1) for x in r[:, t]]
        fits[:, t] &= hours[:, t] <= float(trucks[t].shift_hours) + SHIFT_TOLERANCE
    beyond: dict[int, str] = {}
    for i in np.flatnonzero(eligible.any(axis=1) & ~fits.any(axis=1)).tolist():
        t = int(np.argmin(np.where(eligible[i], hours[i], np.inf)))
        beyond[i] = (
            f"the truck's shift cannot fit a trip to this site: truck `{trucks[t].code}` needs {hours[i, t]:.2f} h "
            f"for it alone, its shift is {float(trucks[t].shift_hours):g} h"
        )
    eligible = fits
    home = truck_depot[np.argmin(np.where(eligible, r, np.inf), axis=1)] if len(r) else np.zeros(0, dtype=int)
    for t in timed:
        tr = trucks[t]
        region = eligible[:, t] & (home == truck_depot[t])
        trips, load = shift_trips(
            r[:, t], region if region.any() else eligible[:, t], demand, size[:, t], nu, tr.compartments, tr.max_stops,
            float(tr.shift_hours), float(tr.average_speed_kmh), float(tr.stop_minutes or 0.0) / 60.0,
            float(tr.load_minutes or 0.0) / 60.0,
        )  # fmt: skip
        if cals[t].trips_per_day is not None:
            trips = min(trips, float(cals[t].trips_per_day))
        shift_tpd[t] = int(trips)
        throughput[t] = limit[t] = trips * load * days_share[t]
    return eligible, throughput, limit, shift_tpd, beyond


def _typical_delivery(demand: np.ndarray, usable: np.ndarray, capacity: np.ndarray) -> np.ndarray:
    """Site × truck: ``d_i 2^⌊log₂ U_it⌋`` with ``U_it = min(usable_i, W_t) / d_i`` (at least 1), the
    longest power-of-two cycle's delivery — the class large trucks are planned in (§6 step 3); where
    trip costs outweigh holding, deliveries are as large as the cycle allows."""
    days = np.maximum(np.minimum(usable[:, None], capacity[None, :]) / np.maximum(demand, 1e-12)[:, None], 1.0)
    return demand[:, None] * np.exp2(np.floor(np.log2(days)))


def _usable(site: FleetSite) -> float:
    s = site.site
    return float(s.tank_capacity) * float(s.safe_fill) - float(s.safety_stock)


def _open_days(calendar: Calendar, start: dt.date, days: int) -> int:
    week = WorkWeek(start, tuple(sorted(calendar.working_days)))
    open_ = week.is_working(np.arange(days))
    closed = [(c - start).days for c in calendar.closed_dates if 0 <= (c - start).days < days]
    open_[closed] = False
    return int(open_.sum())


def _route_trip(
    tk: _Truck, local: dict[str, int], products: list[str], stops: list[tuple[str, float]], cache: dict
) -> list[tuple[list[int], float, tuple, tuple]]:
    """Route ``stops`` (codes and quantities) and load them; a trip that does not load is split in
    driving order. Returns ``(nodes in order, length, legs, loading pieces)`` per resulting trip."""
    nodes = [local[code] for code, _ in stops]
    quantity = dict(stops)
    key = frozenset(nodes)
    if key not in cache:
        sub = [0, *nodes]
        tour = shortest_tour(tk.d[np.ix_(sub, sub)])
        cache[key] = ([sub[j] for j in tour.order[1:-1]], tour.length, tour.legs)
    order, length, legs = cache[key]
    codes = {node: code for code, node in local.items()}
    items = [(products[node - 1], quantity[codes[node]]) for node in order]
    loading = load_trip(items, tk.truck.compartments)
    if loading is not None:
        return [(order, length, legs, loading.stops)]
    out: list[tuple[list[int], float, tuple, tuple]] = []
    part: list[int] = []
    for node in order:
        trial = [*part, node]
        if part and load_trip([(products[n - 1], quantity[codes[n]]) for n in trial], tk.truck.compartments) is None:
            out.extend(_route_trip(tk, local, products, [(codes[n], quantity[codes[n]]) for n in part], cache))
            part = [node]
        else:
            part = trial
    out.extend(_route_trip(tk, local, products, [(codes[n], quantity[codes[n]]) for n in part], cache))
    return out


def _costed(
    tk: _Truck,
    source: str,
    status: Status,
    site_plans: tuple[SitePlan, ...],
    trips: Sequence[Trip],
    repeat: int,
    listed_days: int,
    holding: float,
    warnings: list[str],
    codes: list[str],
    stop_cost: np.ndarray,
    products: list[str],
    start: dt.date,
    tick: Callable[[], None],
) -> TruckPlan:
    """Route, load and cost every listed trip of a candidate (each distinct trip once) into a
    :class:`TruckPlan`: per day = (dispatch · trips + c · Σ lengths + Σ stop costs) / listed days + holding."""
    truck = tk.truck
    local = {codes[i]: j + 1 for j, i in enumerate(tk.sites)}
    k_of = {codes[i]: float(stop_cost[i]) for i in tk.sites}
    cache: dict = {}
    routed_of: dict = {}
    routed: list[RoutedTrip] = []
    split = count = 0
    length_sum = load = stops_sum = 0.0
    by_day: dict[int, int] = {}
    hours_of: dict[int, float] = {}
    for n_trip, trip in enumerate(trips):
        if n_trip % 256 == 0:
            tick()
        key = tuple((s.code, s.quantity) for s in trip.stops)
        if key not in routed_of:
            routed_of[key] = [
                (tuple(codes[tk.sites[node - 1]] for node in order), length, legs, loads)
                for order, length, legs, loads in _route_trip(tk, local, products, list(key), cache)
            ]
        pieces = routed_of[key]
        split += len(pieces) - 1
        for names, length, legs, loads in pieces:
            by_day[trip.day] = by_day.get(trip.day, 0) + 1
            count += 1
            length_sum += length
            stops_sum += sum(k_of[name] for name in names)
            load += sum(q for piece in loads for _, q in piece)
            hours = truck.trip_hours(length, len(names))
            if hours is not None:
                hours_of[trip.day] = hours_of.get(trip.day, 0.0) + hours
            if trip.day >= ROUTED_DAYS:
                continue
            stops = tuple(
                RouteStop(name, float(sum(q for _, q in piece)), tuple((c + 1, q) for c, q in piece), float(leg))
                for name, piece, leg in zip(names, loads, legs[:-1], strict=True)
            )
            cost = truck.dispatch_cost + truck.cost_per_km * length + sum(k_of[name] for name in names)
            routed.append(
                RoutedTrip(
                    trip.day, trip.date, by_day[trip.day], sum(x.quantity for x in stops), stops,
                    float(legs[-1]), float(length), float(cost), hours,
                )
            )
    if split:
        warnings.append(f"{split} trip(s) split to fit the compartments (one product per compartment)")
    scale = 1.0 / max(listed_days, 1)
    dispatch = truck.dispatch_cost * count * scale
    distance = truck.cost_per_km * length_sum * scale
    stops_cost = stops_sum * scale
    open_days = _open_days(tk.calendar, start, listed_days)
    utilisation = {
        "trips_per_open_day": count / open_days if open_days else 0.0,
        "trip_share": count / (open_days * tk.calendar.trips_per_day) if open_days and tk.calendar.trips_per_day else None,
        "load_share": load / (count * truck.capacity) if count else 0.0,
    }
    if truck.shift_hours is not None:
        utilisation["shift_hours"] = float(truck.shift_hours)
        utilisation["longest_day_hours"] = max(hours_of.values(), default=0.0)
        utilisation["mean_day_hours"] = sum(hours_of.values()) / len(hours_of) if hours_of else 0.0
    limit = tk.calendar.trips_per_day
    if limit is not None and any(v > limit for v in by_day.values()):
        warnings.append(f"splitting for the compartments needs more than {limit} trip(s) on some dates")
    return TruckPlan(
        truck=truck.code,
        depot=truck.depot,
        source=source,
        status=status,
        sites=site_plans,
        trips=tuple(routed),
        repeat_days=repeat,
        cost_per_day=dispatch + distance + stops_cost + holding,
        cost_breakdown={"dispatch": dispatch, "distance": distance, "stops": stops_cost, "holding": holding},
        utilisation=utilisation,
        trips_truncated=min(listed_days, ROUTED_DAYS) < repeat,
        warnings=tuple(warnings),
    )


def _joint_candidate(tk, fleet_sites, nu, scale, start, clock, codes, stop_cost, products, unserved):
    """The one-truck planner with routing-aware costs: trip cost ``K + c · 2 r̄ · scale`` and stop costs
    ``k_i + c ν_i``; with ``scale`` ``None`` direct shipping: one stop per trip, each stop costing its
    own trip ``k_i + K + c (r_i0 + r_0i)`` (exact for a one-stop route)."""
    truck, cal = tk.truck, tk.calendar
    if scale is None:
        extra = truck.dispatch_cost + truck.cost_per_km * (tk.d[0, 1:] + tk.d[1:, 0])
        dispatch, max_stops = 0.0, 1
    else:
        extra = truck.cost_per_km * nu
        dispatch = truck.dispatch_cost + truck.cost_per_km * 2.0 * float(tk.d[0, 1:].mean()) * scale
        max_stops = truck.max_stops
    inputs = [
        replace(fleet_sites[i].site, stop_cost=float(stop_cost[i]) + float(extra[j])) for j, i in enumerate(tk.sites)
    ]
    one = TruckInput(
        dispatch,
        truck.capacity,
        max_stops,
        tuple(cal.working_days),
        cal.trips_per_day,
        tuple(cal.closed_dates),
    )
    budget = max(0.05, min(STEP_SECONDS, clock.left()))
    method = "best" if len(tk.sites) <= BEST_METHOD_SITES else "power_of_two"
    result = plan_joint(inputs, one, method=method, start_date=start, deadline_seconds=budget)
    if not result.success and scale is None:
        return "skip"
    if not result.success:
        removed = set((result.needed or {}).get("remove_sites") or [])
        if not removed and (result.needed or {}).get("trips_per_day") and len(tk.sites) > 1:
            share = SHED_SHARE
            needed, allowed = (result.needed or {}).get("trips_per_day"), cal.trips_per_day
            if clock.late() and needed and allowed:  # truck's time spent: in proportion to the trips missing
                share = min(SHED_SHARE_LATE, max(share, 1.0 - float(allowed) / float(needed)))
            far = np.argsort(-(tk.d[0, 1:] + tk.d[1:, 0]), kind="stable")[: max(1, int(share * len(tk.sites)))]
            for j in far:
                unserved.setdefault(codes[tk.sites[j]], f"truck `{truck.code}`: {result.message}")
            return "retry"
        if not removed or len(removed) == len(tk.sites):
            for i in tk.sites:
                unserved.setdefault(codes[i], f"truck `{truck.code}`: {result.message}")
            return None
        for i in tk.sites:
            if codes[i] in removed:
                unserved.setdefault(codes[i], f"truck `{truck.code}`: {result.message}")
        return "retry"
    if result.status == Status.TIME_LIMIT:
        clock.cut = clock.cut or clock.left() <= 0
    listed = result.repeat_days if not result.trips_truncated else (max((t.day for t in result.trips), default=0) + 1)
    trips = [t for t in result.trips if t.day < listed]
    holding = result.cost_breakdown["holding"]
    sites = tuple(
        replace(s, cost_per_day=s.cost_per_day - float(extra[j]) / s.cycle_days)
        for j, s in enumerate(result.sites)
    )
    return _costed(
        tk, "joint" if scale is not None else "direct", result.status, sites, trips, result.repeat_days, listed, holding,
        list(result.warnings), codes, stop_cost, products, start, clock.tick,
    )  # fmt: skip


def _cyclic_candidate(tk, fleet_sites, start, clock, codes, stop_cost, products):
    cal = tk.calendar
    if tuple(sorted(cal.working_days)) != ALL_WEEKDAYS or cal.closed_dates:
        return None
    idx = tk.sites
    demand = np.array([fleet_sites[i].site.demand_per_day for i in idx], dtype=float)
    usable = np.minimum(np.array([_usable(fleet_sites[i]) for i in idx]), tk.truck.capacity)
    longest = np.floor(usable / demand * (1 + WHOLE_DAY_TOLERANCE)).astype(np.int64)
    if choice_count(longest) > MAX_CHOICES:
        return None
    holding = np.array([fleet_sites[i].site.holding_cost for i in idx], dtype=float)
    def out() -> bool:
        clock.tick()
        return clock.out()

    plan = cyclic_search(
        tk.d, demand, holding, stop_cost[idx], longest, tk.truck.capacity, tk.truck.dispatch_cost,
        tk.truck.cost_per_km, tk.truck.max_stops, out,
    )  # fmt: skip
    if plan is None or (cal.trips_per_day is not None and cal.trips_per_day < 1):
        return None
    H = holding * demand / 2
    site_plans = tuple(
        SitePlan(codes[i], float(T), o, float(demand[j] * T), float(stop_cost[i] / T + H[j] * T), None, T, (o,), T)
        for j, (i, T, o) in enumerate(zip(idx, plan.cycles, plan.offsets, strict=True))
    )
    trips = []
    for day in range(plan.repeat_days):
        stops = tuple(
            Stop(codes[i], float(demand[j] * T))
            for j, (i, T, o) in enumerate(zip(idx, plan.cycles, plan.offsets, strict=True))
            if day % T == o
        )
        if stops:
            trips.append(Trip(day, start + dt.timedelta(days=day), 1, sum(s.quantity for s in stops), stops))
    return _costed(
        tk, "cyclic", Status.OPTIMAL, site_plans, trips, plan.repeat_days, plan.repeat_days, plan.holding_per_day,
        [], codes, stop_cost, products, start, clock.tick,
    )  # fmt: skip


def _fits_shift(plan: TruckPlan, truck: FleetTruck) -> bool:
    if truck.shift_hours is None:
        return True
    return plan.utilisation["longest_day_hours"] <= truck.shift_hours + SHIFT_TOLERANCE


def _plan_truck(tk, fleet_sites, start, clock, codes, stop_cost, products, unserved):
    """The cheapest candidate plan of one truck (module docstring, steps 3–4) whose every day fits the
    truck's shift (``docs/fleet.md`` §6a), or ``None``.

    With a shift: sites whose one-stop trip alone is longer than the shift are set aside; the stop limit
    and trips per day start at what the shift allows (``floor`` of the hours left for stops over the
    minutes per stop; ``floor`` of the shift over the shortest one-stop trip); while no candidate's every
    day fits: when every listed trip fits the shift, the farthest ``1 − 1/o`` of the sites are set aside
    (``o`` the longest day over the shift) if that is less than one trip a day's share ``1/n``, else the
    trips per day are cut (to ``⌈n/o⌉``, ``⌊n/o⌋`` once the truck's share of the budget is spent, at least
    by one); otherwise the stop limit is cut (in proportion to the overflow, at least by one); and the
    truck is planned again (once the time budget is spent, straight to one stop and one trip a
    day). At one stop and one trip a day every day is one one-stop trip, which
    fits (the sites left all passed the first test); should none fit even so, the truck's sites are set
    aside. Sites set aside while the limits were cut get the reason "the truck's shift cannot fit …".
    Returns the plan (or ``None``) and, with a shift, the truck at its last limits (for :func:`_reoffer`)."""
    truck = tk.truck
    if truck.shift_hours is None:
        return _plan_truck_once(tk, fleet_sites, start, clock, codes, stop_cost, products, unserved)[0], None
    shift = float(truck.shift_hours)
    local_products = dict(zip([codes[i] for i in tk.sites], products, strict=True))
    single = np.array([truck.trip_hours(float(tk.d[0, j] + tk.d[j, 0]), 1) for j in range(1, len(tk.sites) + 1)])
    too_long = single > shift + SHIFT_TOLERANCE
    for j in np.flatnonzero(too_long):
        unserved.setdefault(
            codes[tk.sites[j]],
            f"the truck's shift cannot fit a trip to this site: truck `{truck.code}` needs {single[j]:.2f} h "
            f"for it alone, its shift is {shift:g} h",
        )
    tk = _subset(tk, ~too_long)
    if not len(tk.sites):
        return None, None
    single = single[~too_long]
    stop_h = float(truck.stop_minutes or 0.0) / 60.0
    load_h = float(truck.load_minutes or 0.0) / 60.0
    drive_h = float(single.min()) - stop_h - load_h
    stops = truck.max_stops
    if stop_h > 0:
        room = max(1, int(math.floor((shift - load_h - drive_h) / stop_h + SHIFT_TOLERANCE)))
        stops = room if stops is None else min(stops, room)
    tpd = max(1, int(math.floor(shift / float(single.min()) + SHIFT_TOLERANCE)))
    safe_tpd = max(1, int(math.floor(shift / float(single.max()) + SHIFT_TOLERANCE)))
    if tk.calendar.trips_per_day is not None:
        tpd = min(tpd, tk.calendar.trips_per_day)
    if tk.shift_trips is not None:
        tpd = min(tpd, tk.shift_trips)
    tightened = False
    while True:
        keep = np.array([codes[i] not in unserved for i in tk.sites], dtype=bool)
        tk = _subset(tk, keep)
        if not len(tk.sites):
            return None, None
        cur = replace(tk, truck=replace(truck, max_stops=stops), calendar=replace(tk.calendar, trips_per_day=tpd))
        before = set(unserved)
        prods = [local_products[codes[i]] for i in cur.sites]
        best, rejected = _plan_truck_once(cur, fleet_sites, start, clock, codes, stop_cost, prods, unserved)
        if tightened:
            for code in set(unserved) - before:
                unserved[code] = (
                    f"the truck's shift cannot fit it: {shift:g} h allow truck `{truck.code}` at most {tpd} trip(s) "
                    f"of at most {stops} stop(s) a day; {unserved[code]}"
                )
        if best is not None or rejected is None:
            return best, cur
        over = rejected.utilisation["longest_day_hours"] / shift
        seen_stops = max((len(t.stops) for t in rejected.trips), default=1)
        seen_trips = max((t.trip for t in rejected.trips), default=1)
        longest_trip = max((t.duration_hours or 0.0 for t in rejected.trips), default=0.0)
        now_stops = stops if stops is not None else seen_stops
        if clock.out() and (stops != 1 or tpd > safe_tpd):  # budget spent: limits that surely fit
            stops, tpd = 1, min(tpd, safe_tpd)
        elif tpd > 1 and longest_trip <= shift + SHIFT_TOLERANCE:  # the trips fit, their number does not
            now = min(tpd, seen_trips)
            # Dropping the 1 − 1/over farthest share of the sites costs less than one trip a day (1/now of them).
            if len(cur.sites) > 1 and over * (now - 1) < now:
                drop = max(1, min(len(cur.sites) - 1, math.ceil(len(cur.sites) * (1.0 - 1.0 / over))))
                for j in np.argsort(-(cur.d[0, 1:] + cur.d[1:, 0]), kind="stable")[:drop]:
                    unserved.setdefault(
                        codes[cur.sites[j]],
                        f"the truck's shift cannot fit it: the busiest day of truck `{truck.code}` needs "
                        f"{over * shift:.2f} h at {now} trip(s) a day, its shift is {shift:g} h",
                    )
            else:  # while the truck's share of the budget lasts, round up: the next round may drop sites instead
                tpd = max(1, min(now - 1, int((math.floor if clock.late() else math.ceil)(now / over))))
        elif now_stops > 1:
            over_trip = max(longest_trip / shift, 1.0)
            stops = max(1, min(now_stops - 1, int(math.floor(now_stops / over_trip))))
        elif tpd > 1:
            tpd = max(1, min(min(tpd, seen_trips) - 1, int(math.floor(min(tpd, seen_trips) / over))))
        else:
            for i in cur.sites:
                unserved.setdefault(
                    codes[i], f"the truck's shift cannot fit its trips: truck `{truck.code}`, shift {shift:g} h"
                )
            return None, None
        tightened = True


def _plan_truck_once(tk, fleet_sites, start, clock, codes, stop_cost, products, unserved):
    """The cheapest candidate fitting the shift and the cheapest one that does not (or ``None``s)."""
    best: TruckPlan | None = None
    rejected: TruckPlan | None = None
    retry = True
    while retry and len(tk.sites):
        retry, nu = False, _neighbour(tk.d)
        for n_scale, scale in enumerate(STEM_SCALES):
            if n_scale and (clock.late() if tk.truck.shift_hours is not None else clock.out()):
                break
            clock.tick()
            plan = _joint_candidate(tk, fleet_sites, nu, scale, start, clock, codes, stop_cost, products, unserved)
            clock.tick()
            if plan == "retry":
                tk = _subset(tk, np.array([codes[i] not in unserved for i in tk.sites]))
                best, rejected, retry = None, None, True
                break
            if plan is None:
                return None, None
            if plan == "skip":
                continue
            if not _fits_shift(plan, tk.truck):
                rejected = rejected or plan
                continue
            if best is None or plan.cost_per_day < best.cost_per_day:
                best = plan
    cyclic = _cyclic_candidate(tk, fleet_sites, start, clock, codes, stop_cost, products)
    if cyclic is not None and not _fits_shift(cyclic, tk.truck):
        rejected, cyclic = rejected or cyclic, None
    if best is None:  # every candidate skipped (no cyclic fallback then), or none fits the shift
        return (cyclic if rejected is not None else None), rejected
    if cyclic is not None and cyclic.cost_per_day < best.cost_per_day - 1e-9:
        best = cyclic
    return best, rejected


def _reoffer(planned, eligible, r, matrix, fleet_sites, start, clock, codes, stop_cost, products_of, unserved):
    """Offer the sites set aside (for the shifts, throughput or the one-truck planner; not those of
    :data:`FIXED_REASONS`) to the shifted trucks with hours to spare (``docs/fleet.md`` §6a).

    Trucks whose longest day ``h`` is under their shift ``S`` are taken most spare first. Each is offered
    the ``k = ⌈n (S − h) / h⌉`` eligible set-aside sites nearest its depot (``n`` its sites: the spare
    hours at its current hours per site) and planned again (:func:`_plan_truck_once`) at its last limits
    (trips per day, stops) on its sites plus the offered ones; the new plan is kept only when it fits the
    shift and serves more sites, else ``k`` is halved. Rounds repeat while a plan was kept and at least
    :data:`REOFFER_SECONDS` are left. Updates ``planned`` and ``unserved`` in place."""
    index = {c: i for i, c in enumerate(codes)}
    kept = True
    while kept:
        kept = False
        spare = []
        for t, (plan, limits) in planned.items():
            if limits is None:
                continue
            shift, longest = float(limits.truck.shift_hours), plan.utilisation["longest_day_hours"]
            if longest < shift - SHIFT_TOLERANCE:
                spare.append((longest / shift, t))
        for _, t in sorted(spare):
            plan, limits = planned[t]
            shift, longest = float(limits.truck.shift_hours), plan.utilisation["longest_day_hours"]
            offer = [
                i for i in np.flatnonzero(eligible[:, t]).tolist()
                if codes[i] in unserved and not unserved[codes[i]].startswith(FIXED_REASONS)
            ]  # fmt: skip
            offer.sort(key=lambda i: r[i, t])
            own = np.array([index[s.code] for s in plan.sites], dtype=int)
            k = min(len(offer), math.ceil(len(own) * (shift - longest) / max(longest, SHIFT_TOLERANCE)))
            while k >= 1 and clock.left() >= REOFFER_SECONDS:
                idx = np.concatenate([own, np.array(offer[:k], dtype=int)])
                tk = replace(limits, sites=idx, d=matrix(t, idx))
                offered = {codes[i] for i in offer[:k]}
                scratch = {c: why for c, why in unserved.items() if c not in offered}
                clock.share(0.5)
                prods = [products_of[i] for i in idx]
                best, _ = _plan_truck_once(tk, fleet_sites, start, clock, codes, stop_cost, prods, scratch)
                if best is not None and _fits_shift(best, tk.truck) and len(best.sites) > len(plan.sites):
                    served = {s.code for s in best.sites}
                    for c in offered - served:
                        scratch.setdefault(c, unserved[c])
                    unserved.clear()
                    unserved.update(scratch)
                    planned[t] = (best, limits)
                    kept = True
                    break
                k //= 2
                clock.tick()


def _subset(tk: _Truck, keep: np.ndarray) -> _Truck:
    nodes = np.concatenate([[0], np.flatnonzero(keep) + 1])
    return replace(tk, sites=tk.sites[keep], d=tk.d[np.ix_(nodes, nodes)])


def _neighbour(d: np.ndarray) -> np.ndarray:
    """Distance from each site (node 1…) to its nearest other node of the truck, depot included."""
    both = np.minimum(d, d.T)
    np.fill_diagonal(both, np.inf)
    return both[1:].min(axis=1) if both.shape[0] > 1 else np.zeros(0)


def plan_network(
    sites: Sequence[FleetSite],
    trucks: Sequence[FleetTruck],
    depots: Sequence[Depot],
    products: Sequence[Product],
    calendars: dict[str, Calendar] | None = None,
    *,
    distance: DistanceSource | None = None,
    start_date: dt.date | None = None,
    time_budget_seconds: float | None = None,
    progress: Callable[[float], None] | None = None,
) -> NetworkResult:
    """Plan a whole fleet (module docstring).

    Parameters
    ----------
    sites, trucks, depots, products : sequences of the :mod:`fleet.inputs` records
    calendars : dict or None
        Working calendar per truck code (missing: every day, no trip limit).
    distance : DistanceSource or None
        Road distances (default :class:`CircuityDistance` with factor 1.3).
    start_date : datetime.date or None
        Day 0 (``None``: today).
    time_budget_seconds : float or None
        When it runs out, each truck not yet planned gets one quick candidate and the status is
        ``time_limit``.
    progress : callable or None
        Called with the fraction done (0–1), never decreasing, about every ``TICK_SECONDS`` and at least
        every 2 s of planning, with a larger fraction each time within a step (``_Clock``; each call of
        the one-truck planner is cut at ``STEP_SECONDS``).

    Raises
    ------
    PlanningInputError
        Repeated or unknown codes, sites or depots without valid coordinates (all named), bad trucks, and
        the one-truck planner's site checks.
    """
    clock = _Clock(time_budget_seconds, progress)
    clock.report(0.0, until=0.02)
    calendars = dict(calendars or {})
    _check(sites, trucks, depots, products)
    source = distance if distance is not None else CircuityDistance()
    start = dt.date.today() if start_date is None else start_date
    sites, trucks = list(sites), list(trucks)
    codes = [s.code for s in sites]
    n, m = len(sites), len(trucks)
    depot_index = {d.code: g for g, d in enumerate(depots)}
    truck_depot = np.array([depot_index[t.depot] for t in trucks])
    capacity = np.array([t.capacity for t in trucks])
    eligible = np.array(
        [[s.product in t.products and (s.depot is None or s.depot == t.depot) for t in trucks] for s in sites],
        dtype=bool,
    ).reshape(n, m)
    demand = np.array([float(s.site.demand_per_day) for s in sites])
    usable = np.array([_usable(s) for s in sites])
    best_capacity = np.array([capacity[eligible[i]].max() if eligible[i].any() else 0.0 for i in range(n)])
    unserved: dict[str, str] = {}
    for i, s in enumerate(sites):
        if not eligible[i].any():
            where = f" from depot `{s.depot}`" if s.depot else ""
            unserved[s.code] = f"no truck carries product `{s.product}`{where}"
        elif not demand[i] > 0 or min(usable[i], best_capacity[i]) / demand[i] * (1 + WHOLE_DAY_TOLERANCE) < 1:
            unserved[s.code] = "usable stock holds less than one day of demand"
    plannable = np.array([c not in unserved for c in codes])
    eligible &= plannable[:, None]
    eligible_bound = eligible.copy()
    depot_points = [d.location for d in depots]
    site_points = [s.location for s in sites if s.location is not None]  # every site has one (_check)
    r_depot = source.matrix(depot_points, site_points).T if n else np.zeros((0, len(depots)))
    r = r_depot[:, truck_depot]
    clock.report(0.02, until=0.08)
    served = np.flatnonzero(plannable)
    nu = nearest_other([site_points[i] for i in served], depot_points, source, clock.tick) if len(served) else np.zeros(0)
    cals = [calendars.get(t.code, Calendar()) for t in trucks]
    days_share = np.array([len(set(c.working_days)) / 7.0 for c in cals])
    per_day = np.array([c.trips_per_day or 1 for c in cals], dtype=float)
    throughput = capacity * days_share * per_day
    limit = np.where([c.trips_per_day is None for c in cals], np.inf, throughput)
    nu_all = np.zeros(n)
    nu_all[served] = nu
    eligible, throughput, limit, shift_tpd, beyond = _shift_sizing(
        trucks, cals, eligible, r, truck_depot, demand, _typical_delivery(demand, usable, capacity), nu_all,
        days_share, throughput, limit,
    )  # fmt: skip
    for i, why in beyond.items():
        unserved[codes[i]] = why
    lat = np.array([p.latitude for p in site_points], dtype=float)
    lon = np.array([p.longitude for p in site_points], dtype=float)
    dlat = np.array([p.latitude for p in depot_points], dtype=float)
    dlon = np.array([p.longitude for p in depot_points], dtype=float)
    assigned = sweep(lat, lon, eligible, r, truck_depot, dlat, dlon, demand, throughput)
    factor = getattr(source, "factor", 1.0)
    dispatch = np.array([t.dispatch_cost for t in trucks], dtype=float)
    per_km = np.array([t.cost_per_km for t in trucks], dtype=float)
    assigned = relocate(
        assigned, lat, lon, eligible, r, demand, usable, dispatch, per_km, capacity, limit, factor, clock.tick
    )
    assigned = within_throughput(assigned, eligible, r, demand, LIMIT_SHARE * limit)
    for i in np.flatnonzero((assigned < 0) & plannable).tolist():
        unserved.setdefault(
            codes[i],
            "the trucks that may serve it have no throughput left (capacity × trips per day, or the trips "
            "their shifts hold)"
        )
    clock.report(0.08, until=0.12)
    # The bound over the plannable sites (bound.py), every truck that may carry them eligible.
    E = eligible_bound[served]
    stem = np.where(E, (dispatch + 2 * per_km * r[served]) / capacity, np.inf).min(axis=1)
    stops_limit = np.array([t.max_stops or np.inf for t in trucks], dtype=float)
    visit = np.where(E, dispatch / stops_limit + per_km * nu[:, None], np.inf).min(axis=1)
    H = np.array([sites[i].site.holding_cost * demand[i] / 2 for i in served])
    stop_cost = np.array([float(s.site.stop_cost) for s in sites])
    cap_days = np.maximum(np.minimum(usable[served], best_capacity[served]) / demand[served], 1.0)
    parts = (demand[served], H, stop_cost[served], cap_days, stem, visit)
    clock.report(0.12, until=0.12)
    products_of = [s.product for s in sites]
    planned: dict[int, tuple[TruckPlan, _Truck | None]] = {}
    total_sites = max(1, int((assigned >= 0).sum()))
    shifted = any(t.shift_hours is not None for t in trucks)
    reserve = REOFFER_SHARE * total_sites if shifted else 0.0
    done = 0
    for t in range(m):
        idx = np.flatnonzero(assigned == t)
        if not len(idx):
            continue
        clock.report(clock.fraction, until=0.12 + 0.88 * (done + len(idx)) / (total_sites + reserve))
        nodes = [depot_points[truck_depot[t]]] + [site_points[i] for i in idx]
        tk = _Truck(t, trucks[t], cals[t], idx, source.matrix(nodes, nodes), shift_tpd[t])
        prods = [products_of[i] for i in idx]
        clock.share(len(idx) / max(1, total_sites - done + reserve))
        plan, limits = _plan_truck(tk, sites, start, clock, codes, stop_cost, prods, unserved)
        if plan is not None:
            planned[t] = (plan, limits)
        done += len(idx)
        clock.report(0.12 + 0.88 * done / (total_sites + reserve))
    if shifted:
        clock.report(clock.fraction, until=1.0)
        def matrix(t: int, idx: np.ndarray) -> np.ndarray:
            nodes = [depot_points[truck_depot[t]]] + [site_points[i] for i in idx]
            return source.matrix(nodes, nodes)

        _reoffer(planned, eligible, r, matrix, sites, start, clock, codes, stop_cost, products_of, unserved)
    plans = [planned[t][0] for t in sorted(planned)]
    assignment = {s.code: p.truck for p in plans for s in p.sites}
    kept = np.array([codes[i] in assignment for i in served], dtype=bool)
    lower = network_bound(*(x[kept] for x in parts))[0] if kept.any() else 0.0
    return _network_result(plans, assignment, unserved, lower, clock, [codes[i] for i in served])


def _network_result(plans, assignment, unserved, lower, clock, candidates) -> NetworkResult:
    for code in candidates:
        if code not in assignment and code not in unserved:
            unserved[code] = "not planned"
    cost = float(sum(p.cost_per_day for p in plans))
    breakdown = {k: float(sum(p.cost_breakdown[k] for p in plans)) for k in ("dispatch", "distance", "stops", "holding")}
    warnings: list[str] = []
    if clock.cut:
        status, message = Status.TIME_LIMIT, "best network plan found within the time budget"
    elif plans and lower > 0 and cost <= lower * (1 + 1e-9):
        status, message = Status.OPTIMAL, "network plan equal to its lower bound"
    else:
        status, message = Status.FEASIBLE, "network plan (optimality not proven)"
    if not plans:
        status, message = Status.INFEASIBLE, "no site could be served"
    clock.report(1.0)
    return NetworkResult(
        status=status,
        success=bool(plans),
        message=message,
        assignment=assignment,
        trucks=tuple(plans),
        cost_per_day=cost,
        cost_breakdown=breakdown,
        lower_bound_per_day=lower,
        gap=cost / lower - 1.0 if lower > 0 else 0.0,
        unserved=tuple(UnservedSite(c, why) for c, why in sorted(unserved.items())),
        elapsed_seconds=time.monotonic() - clock.began,
        warnings=tuple(warnings),
    )
