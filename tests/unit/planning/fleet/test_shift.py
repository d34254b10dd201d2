"""Trucks' shifts in the network plan (docs/fleet.md §6a): every day's trips fit ``shift_hours``, recomputed
here from the listed legs; with no shift the plan is the same as before."""

import datetime as dt
from dataclasses import replace

import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from service.planning import SiteInput
from service.planning.errors import PlanningInputError
from service.planning.fleet import Depot, FleetSite, FleetTruck, Point, Product, network, plan_network

from .networks import fleet

START = dt.date(2026, 1, 5)


def _day_hours(plan, truck):
    """Each listed day's hours from the trips' legs: Σ (km / speed + stops × stop min / 60 + load min / 60)."""
    days: dict[int, float] = {}
    for trip in plan.trips:
        km = sum(s.leg_km for s in trip.stops) + trip.return_km
        hours = (
            km / truck.average_speed_kmh
            + len(trip.stops) * (truck.stop_minutes or 0) / 60
            + (truck.load_minutes or 0) / 60
        )
        assert trip.duration_hours == pytest.approx(hours)
        days[trip.day] = days.get(trip.day, 0.0) + hours
    return days


@settings(max_examples=8, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(
    seed=st.integers(0, 10_000),
    n_sites=st.integers(3, 14),
    shift=st.floats(2.0, 10.0),
    speed=st.floats(30.0, 80.0),
    stop_minutes=st.floats(0.0, 60.0),
    load_minutes=st.floats(0.0, 60.0),
)
def test_every_day_fits_the_shift(seed, n_sites, shift, speed, stop_minutes, load_minutes):
    sites, trucks, depots, products, calendars = fleet(n_sites, 2, 1, seed=seed)
    trucks = [
        replace(t, shift_hours=shift, average_speed_kmh=speed, stop_minutes=stop_minutes, load_minutes=load_minutes)
        for t in trucks
    ]
    result = plan_network(sites, trucks, depots, products, calendars, start_date=START)
    truck_of = {t.code: t for t in trucks}
    for plan in result.trucks:
        truck = truck_of[plan.truck]
        days = _day_hours(plan, truck)
        assert all(h <= shift + 1e-6 for h in days.values())
        assert plan.utilisation["shift_hours"] == shift
        assert plan.utilisation["longest_day_hours"] <= shift + 1e-6
        assert max(days.values(), default=0.0) <= plan.utilisation["longest_day_hours"] + 1e-9
    served = set(result.assignment) | {u.code for u in result.unserved}
    assert served == {s.code for s in sites}


def test_a_short_shift_cuts_the_day_and_names_the_reason():
    sites, trucks, depots, products, calendars = fleet(12, 1, 1, seed=3)
    trucks = [replace(trucks[0], products=tuple(p.code for p in products))]
    plain = plan_network(sites, trucks, depots, products, calendars, start_date=START)
    # The plain plan's longest day, at 50 km/h and 30 min per stop and loading.
    timed = replace(trucks[0], average_speed_kmh=50.0, stop_minutes=30.0, load_minutes=30.0)
    free = plan_network(sites, [timed], depots, products, calendars, start_date=START)
    longest = free.trucks[0].utilisation.get("longest_day_hours")
    assert longest is None  # no shift: no shift figures (durations are listed per trip)
    days = _day_hours(free.trucks[0], timed)
    shift = max(days.values()) * 0.6
    shifted = replace(timed, shift_hours=shift)
    result = plan_network(sites, [shifted], depots, products, calendars, start_date=START)
    assert all(h <= shift + 1e-6 for h in _day_hours(result.trucks[0], shifted).values()) if result.trucks else True
    assert result.cost_per_day >= plain.cost_per_day - 1e-9 or len(result.assignment) < len(plain.assignment)
    # A site farther than the shift allows for one trip is set aside with the reason.
    far = FleetSite(SiteInput("FAR", 1.0, 0.02, 10.0, 30.0, 0.95), Point(56.0, 5.0), "diesel")
    result = plan_network([*sites, far], [shifted], depots, products, calendars, start_date=START)
    reasons = {u.code: u.reason for u in result.unserved}
    assert reasons["FAR"].startswith("the truck's shift cannot fit")


@pytest.mark.parametrize("seed", [0, 1])
def test_without_a_shift_the_plan_is_unchanged(seed):
    sites, trucks, depots, products, calendars = fleet(40, 2, 2, seed=seed)
    plain = plan_network(sites, trucks, depots, products, calendars, start_date=START)
    timed = [replace(t, average_speed_kmh=60.0, stop_minutes=20.0, load_minutes=45.0) for t in trucks]
    other = plan_network(sites, timed, depots, products, calendars, start_date=START)
    generous = [replace(t, shift_hours=24.0) for t in timed]
    assert plain.cost_per_day == other.cost_per_day
    assert plain.assignment == other.assignment
    for a, b in zip(plain.trucks, other.trucks, strict=True):
        assert a.utilisation == b.utilisation
        assert [replace(t, duration_hours=None) for t in b.trips] == list(a.trips)
        assert all(t.duration_hours is None for t in a.trips)
    # A 24-hour shift that every day of the free plan fits leaves the plan as it was.
    longest = max(max(_day_hours(p, timed[0]).values()) for p in other.trucks)
    if longest <= 24.0:
        wide = plan_network(sites, generous, depots, products, calendars, start_date=START)
        assert wide.cost_per_day == pytest.approx(plain.cost_per_day)


@pytest.mark.parametrize(
    ("changes", "field"),
    [
        ({"shift_hours": 8.0}, "average_speed_kmh"),
        ({"shift_hours": 25.0, "average_speed_kmh": 50.0}, "shift_hours"),
        ({"average_speed_kmh": 0.0}, "average_speed_kmh"),
        ({"stop_minutes": -1.0}, "stop_minutes"),
        ({"load_minutes": float("nan")}, "load_minutes"),
    ],
)
def test_bad_shift_settings_are_named(changes, field):
    truck = FleetTruck("T1", "D1", 100.0, 1.0, (30.0,), ("p",), **changes)
    site = FleetSite(SiteInput("S1", 1.0, 0.02, 10.0, 30.0, 0.95), Point(52.0, 5.0), "p")
    with pytest.raises(PlanningInputError) as err:
        plan_network([site], [truck], [Depot("D1", Point(52.1, 5.1))], [Product("p")], start_date=START)
    assert err.value.field == field


def test_sites_one_truck_sets_aside_go_to_a_truck_with_hours_to_spare(monkeypatch):
    # 16 sites around one depot, two trucks with 5-hour shifts (60 km/h, 15 min per stop, 30 min loading):
    # T01's busiest day sets three of its sites aside while T02's days end early.
    sites, trucks, depots, products, calendars = fleet(16, 2, 1, seed=4)
    shift = {"shift_hours": 5.0, "average_speed_kmh": 60.0, "stop_minutes": 15.0, "load_minutes": 30.0}
    trucks = [replace(t, **shift) for t in trucks]
    monkeypatch.setattr(network, "_reoffer", lambda *args: None)
    alone = plan_network(sites, trucks, depots, products, calendars, start_date=START)
    monkeypatch.undo()
    result = plan_network(sites, trucks, depots, products, calendars, start_date=START)
    set_aside = {u.code: u.reason for u in alone.unserved}
    moved = {c: t for c, t in result.assignment.items() if c not in alone.assignment}
    assert moved
    for code, truck in moved.items():
        assert set_aside[code].startswith("the truck's shift cannot fit it")
        assert f"truck `{truck}`" not in set_aside[code]  # served by a truck other than the one that set it aside
    assert len(result.assignment) > len(alone.assignment)
    truck_of = {t.code: t for t in trucks}
    for plan in result.trucks:  # every day of every plan still fits the shift, recomputed from the legs
        assert max(_day_hours(plan, truck_of[plan.truck]).values()) <= 5.0 + 1e-6
