"""Listed trips split to load one product per compartment (service/planning/trip_loading.py).

The expected splits are worked by hand in the comments; the brute-force check at the end tests every
loading against the definition (disjoint compartment sets per product, each holding its load) by
enumerating all assignments of compartments to products with itertools.product (Python standard
library), independently of the search in service/planning/fleet/compartments.py.
"""

from __future__ import annotations

import datetime as dt
import itertools

from service.planning.results import Stop, Trip
from service.planning.trip_loading import split_for_compartments

DAY0 = dt.date(2026, 12, 7)


def _trip(day: int, *stops: tuple[str, float]) -> Trip:
    return Trip(
        day, DAY0 + dt.timedelta(days=day), 1, float(sum(q for _, q in stops)), tuple(Stop(c, q) for c, q in stops)
    )


def _fits(trip: Trip, products: dict[str, str], caps: list[float]) -> bool:
    """Whether some assignment of each compartment to one product (or none) holds every product's load."""
    loads: dict[str, float] = {}
    for s in trip.stops:
        loads[products[s.code]] = loads.get(products[s.code], 0.0) + s.quantity
    names = sorted(loads)
    for owner in itertools.product([None, *names], repeat=len(caps)):
        room = {p: sum(c for c, o in zip(caps, owner, strict=True) if o == p) for p in names}
        if all(room[p] >= loads[p] - 1e-9 for p in names):
            return True
    return False


def test_a_trip_that_loads_stays_whole_and_a_product_may_take_two_compartments():
    # Compartments 6000 | 6000 | 6000. Heating oil 3300 + 3300 = 6600 > 6000 needs two compartments
    # (12000); diesel 1275 takes the third: one trip of 7875, as listed.
    products = {"A": "oil", "B": "oil", "C": "diesel"}
    out = split_for_compartments([_trip(0, ("A", 3300.0), ("B", 3300.0), ("C", 1275.0))], products, [6000.0] * 3, 2)
    assert [t.load for t in out.trips] == [7875.0]
    assert out.split == 0 and out.warnings == ()
    (loading,) = out.loadings
    assert len(loading.compartments["oil"]) == 2 and len(loading.compartments["diesel"]) == 1
    assert set(loading.compartments["oil"]).isdisjoint(loading.compartments["diesel"])
    # The pieces of each stop add up to its quantity and no compartment holds more than 6000.
    assert [sum(q for _, q in piece) for piece in loading.stops] == [3300.0, 3300.0, 1275.0]
    held: dict[int, float] = {}
    for piece in loading.stops:
        for c, q in piece:
            held[c] = held.get(c, 0.0) + q
    assert max(held.values()) <= 6000.0


def test_two_products_that_cannot_share_the_truck_go_on_two_trips():
    # Compartments 6000 | 2000 (capacity 8000). Oil 3000 and diesel 3000 (6000 in all) pass the
    # capacity, but each needs the 6000 compartment (2000 < 3000): no loading, so two trips of one
    # stop each, numbered 1 and 2 on the date.
    products = {"A": "oil", "B": "diesel"}
    out = split_for_compartments([_trip(3, ("A", 3000.0), ("B", 3000.0))], products, [6000.0, 2000.0], None)
    assert [(t.trip, [s.code for s in t.stops], t.load) for t in out.trips] == [(1, ["A"], 3000.0), (2, ["B"], 3000.0)]
    assert out.split == 1
    assert all(t.date == DAY0 + dt.timedelta(days=3) for t in out.trips)


def test_first_fit_decreasing_keeps_what_loads_together():
    # Compartments 4000 | 4000. Stops (largest first): A oil 3500, C diesel 3000, B oil 1000, D gas 500.
    # A opens trip 1 {A}; C joins it (oil 4000, diesel 4000): {A, C}; B: oil 4500 needs both
    # compartments with diesel aboard -> no; trip 2 {B}; D: trip 1 would need a third compartment ->
    # no; trip 2 {B, D} loads (oil 4000, gas 4000). Stops keep their listed order in each trip.
    products = {"A": "oil", "B": "oil", "C": "diesel", "D": "gas"}
    trip = _trip(0, ("A", 3500.0), ("B", 1000.0), ("C", 3000.0), ("D", 500.0))
    out = split_for_compartments([trip], products, [4000.0, 4000.0], 1)
    assert [[s.code for s in t.stops] for t in out.trips] == [["A", "C"], ["B", "D"]]
    assert all(_fits(t, products, [4000.0, 4000.0]) for t in out.trips)
    # Two trips on a date that allows one: a warning naming the date and the sites in backticks.
    (warning,) = out.warnings
    assert "2026-12-07" in warning and "trips_per_day 1" in warning
    assert all(f"`{c}`" in warning for c in "ABCD")


def test_every_split_trip_loads_and_keeps_every_stop():
    caps = [5000.0, 3000.0, 2000.0]
    products = {
        c: p for c, p in zip("ABCDEFGH", ["oil", "oil", "diesel", "gas", "diesel", "kero", "oil", "gas"], strict=True)
    }
    quantities = [2500.0, 2600.0, 1800.0, 900.0, 1400.0, 700.0, 1900.0, 1100.0]
    trips = []
    for day in range(6):
        picked = [(c, q) for k, (c, q) in enumerate(zip("ABCDEFGH", quantities, strict=True)) if (k + day) % 3 != 0]
        trips.append(_trip(day, *picked))
    out = split_for_compartments(trips, products, caps, None)
    assert all(_fits(t, products, caps) for t in out.trips)
    for day, listed in enumerate(trips):
        mine = [t for t in out.trips if t.day == day]
        assert sorted((s.code, s.quantity) for t in mine for s in t.stops) == sorted(
            (s.code, s.quantity) for s in listed.stops
        )
        assert [t.trip for t in mine] == list(range(1, len(mine) + 1))


def test_a_stop_larger_than_every_compartment_together_gets_all_of_them():
    out = split_for_compartments([_trip(0, ("A", 9000.0))], {"A": "oil"}, [6000.0, 2000.0], None)
    assert out.loadings[0].compartments == {"oil": (0, 1)}
