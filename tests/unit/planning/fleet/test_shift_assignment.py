"""The assignment sizes shifted trucks by their shifts (docs/fleet.md §6a): a site goes to a truck whose
shift holds a trip to it, and a shift's throughput counts its trips per day."""

import datetime as dt
import math
from dataclasses import replace

import numpy as np
import pytest
from haversine import Unit, haversine

from service.planning import SiteInput
from service.planning.fleet import Depot, FleetSite, FleetTruck, Point, Product, plan_network
from service.planning.fleet.assignment import shift_trips

START = dt.date(2026, 1, 5)
CIRCUITY = 1.3  # CircuityDistance's default factor


def _network():
    """Four sites within a few km of (52.0, 5.0); depot NEAR 0.5° north (about 56 km), depot FAR 0.8° south
    (about 89 km). Truck A at NEAR has a 2-hour shift, truck B at FAR a 10-hour one; both 60 km/h,
    10 min per stop, 30 min loading."""
    sites = [
        FleetSite(SiteInput(f"S{k}", 1.0, 0.02, 10.0, 30.0, 0.95), Point(52.0 + 0.02 * (k % 2), 5.0 + 0.03 * (k // 2)), "p")
        for k in range(4)
    ]
    depots = [Depot("NEAR", Point(52.5, 5.0)), Depot("FAR", Point(51.2, 5.0))]
    shift = {"average_speed_kmh": 60.0, "stop_minutes": 10.0, "load_minutes": 30.0}
    trucks = [
        FleetTruck("A", "NEAR", 100.0, 1.0, (30.0,), ("p",), shift_hours=2.0, **shift),
        FleetTruck("B", "FAR", 100.0, 1.0, (30.0,), ("p",), shift_hours=10.0, **shift),
    ]
    return sites, trucks, depots, [Product("p")]


def test_sites_go_to_the_truck_whose_shift_holds_a_trip_to_them():
    sites, trucks, depots, products = _network()
    # Hand check with the haversine package: A's one-stop trip to any site takes
    # 2 × 1.3 × ≥ 54 km / 60 km/h + 10/60 + 30/60 h ≥ 3.0 h > 2 h; B's at most 2 × 1.3 × ≤ 92 km / 60 + 0.67 ≤ 4.7 h ≤ 10 h.
    for s in sites:
        p = (s.location.latitude, s.location.longitude)
        to_a = haversine(p, (52.5, 5.0), unit=Unit.KILOMETERS) * CIRCUITY
        to_b = haversine(p, (51.2, 5.0), unit=Unit.KILOMETERS) * CIRCUITY
        assert 2 * to_a / 60 + 10 / 60 + 0.5 > 2.0
        assert 2 * to_b / 60 + 10 / 60 + 0.5 <= 10.0
    # Without shifts the sweep puts every site on A, the truck of the nearest depot…
    free = [replace(t, shift_hours=None) for t in trucks]
    before = plan_network(sites, free, depots, products, start_date=START)
    assert set(before.assignment.values()) == {"A"}
    # …where A's 2-hour shift could serve none of them (as the calendar-sized assignment did: all four
    # were then set aside). Sized by the shifts, all four go to B and none is unserved.
    result = plan_network(sites, trucks, depots, products, start_date=START)
    assert result.assignment == {s.code: "B" for s in sites}
    assert result.unserved == ()
    plan = result.trucks[0]
    assert plan.utilisation["longest_day_hours"] <= 10.0 + 1e-9


def test_a_site_no_shift_can_reach_keeps_the_reason():
    sites, trucks, depots, products = _network()
    short = [replace(t, shift_hours=2.0) for t in trucks]
    result = plan_network(sites, short, depots, products, start_date=START)
    assert not result.assignment
    assert all(u.reason.startswith("the truck's shift cannot fit a trip to this site") for u in result.unserved)


def test_shift_trips_by_hand():
    # Two sites 30 and 50 km from the depot, 1 a day each, deliveries of 10, nearest places 4 km away;
    # compartments 20 and 13 hold two deliveries of 10 (one each). q̄ = 10, T̄ = 10 days, r̄ = 40 km,
    # leg 4 √10 km (Clark & Evans' nearest-neighbour distance at a tenth of the density), so
    # τ = (80 + 4 √10) / 70 + 2 × 10 / 60 + 30 / 60 = 2.157 h and a 12-hour shift holds ⌊5.56⌋ = 5 trips of 20.
    trips, load = shift_trips(
        np.array([30.0, 50.0]), np.array([True, True]), np.array([1.0, 1.0]), np.array([10.0, 10.0]),
        np.array([4.0, 4.0]), (20.0, 13.0), 8, 12.0, 70.0, 10.0 / 60.0, 0.5,
    )  # fmt: skip
    tau = (80 + 4 * math.sqrt(10)) / 70 + 20 / 60 + 0.5
    assert tau == pytest.approx(2.157, abs=1e-3)
    assert (trips, load) == (math.floor(12 / tau), 20.0)
    # One stop a trip when the stop limit is 1: τ = 80/70 + 1/6 + 1/2 = 1.81 h, ⌊12 / 1.81⌋ = 6 trips of 10.
    trips, load = shift_trips(
        np.array([30.0, 50.0]), np.array([True, True]), np.array([1.0, 1.0]), np.array([10.0, 10.0]),
        np.array([4.0, 4.0]), (20.0, 13.0), 1, 12.0, 70.0, 10.0 / 60.0, 0.5,
    )  # fmt: skip
    assert (trips, load) == (6.0, 10.0)
