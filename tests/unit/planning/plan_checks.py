"""Rules 1–3 of a drivable plan checked from its listed trips alone (no planner code used)."""

import math
from collections import defaultdict

import pytest


def usable(site, truck):
    tank = site.tank_capacity * site.safe_fill - site.safety_stock
    return tank if truck.capacity is None else min(tank, truck.capacity)


def whole_days(site, truck):
    return math.floor(usable(site, truck) / site.demand_per_day * (1 + 1e-9))


def check_rules(result, sites, truck, *, closures_applied=False):
    """Assert rules 1–3 on ``result.trips`` (and the patterns of ``result.sites``)."""
    by_code = {s.code: s for s in sites}
    closed = set(truck.closed_dates)
    per_date = defaultdict(list)
    stops_of = defaultdict(list)
    for trip in result.trips:
        # rule 1: working weekday, not closed, limits per trip
        assert trip.date.isoweekday() in truck.working_days, trip
        assert trip.date not in closed, trip
        assert (trip.date - result.start_date).days == trip.day
        assert truck.capacity is None or trip.load <= truck.capacity * (1 + 1e-9)
        assert truck.max_stops is None or len(trip.stops) <= truck.max_stops
        assert trip.load == pytest.approx(sum(s.quantity for s in trip.stops), rel=1e-12)
        per_date[trip.day].append(trip)
        for stop in trip.stops:
            stops_of[stop.code].append((trip.day, stop.quantity))
    for trips in per_date.values():
        assert [t.trip for t in trips] == list(range(1, len(trips) + 1))
        assert truck.trips_per_day is None or len(trips) <= truck.trips_per_day
        codes = [s.code for t in trips for s in t.stops]
        assert len(codes) == len(set(codes))  # a site at most once per date
    plans = {p.code: p for p in result.sites}
    for code, stops in stops_of.items():
        site, plan = by_code[code], plans[code]
        stops.sort()
        days = [d for d, _ in stops]
        u = whole_days(site, truck)
        if not closures_applied:  # the listed stops are the pattern's days
            pattern = sorted(o + j * plan.period_days for o in plan.delivery_days for j in range(result.repeat_days))
            assert days == [d for d in pattern if d <= days[-1]][: len(days)]
        for (day, q), (nxt, _) in zip(stops, stops[1:], strict=False):
            # rule 2: just enough until the next delivery, never more than the tank or truck holds
            assert q == pytest.approx(site.demand_per_day * (nxt - day), rel=1e-9)
            assert nxt - day <= u
        assert stops[-1][1] <= usable(site, truck) * (1 + 1e-9)
        assert plan.longest_gap_days <= u
    if not result.trips_truncated and not closures_applied:
        # rule 3: the cost recomputed from the listed trips of one repeat period
        R = result.repeat_days
        assert len(result.trips) == result.trips_per_repeat
        dispatch = truck.dispatch_cost * len(result.trips) / R
        stop_cost = holding = 0.0
        for trip in result.trips:
            for stop in trip.stops:
                site = by_code[stop.code]
                stop_cost += site.stop_cost / R
                holding += site.holding_cost * stop.quantity**2 / (2 * site.demand_per_day) / R
        assert dispatch + stop_cost + holding == pytest.approx(result.cost_per_day, rel=1e-9)
        assert result.peak_load == pytest.approx(max(t.load for t in result.trips), rel=1e-12)
