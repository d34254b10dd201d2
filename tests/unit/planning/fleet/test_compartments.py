"""Compartment loading against exhaustive enumeration of every compartment → product map."""

import itertools

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from service.planning.fleet.compartments import load_trip


def _exists(totals: dict, capacities) -> bool:
    # Reference: every map of compartments to a product or to nothing (brute force).
    products = list(totals)
    for choice in itertools.product(range(len(products) + 1), repeat=len(capacities)):
        held = [0.0] * len(products)
        for c, k in enumerate(choice):
            if k:
                held[k - 1] += capacities[c]
        if all(held[k] >= totals[p] - 1e-9 for k, p in enumerate(products)):
            return True
    return False


def test_worked_example():
    # 4 compartments 8, 6, 4, 2 (m³): diesel 9 + heating oil 5 + AdBlue 2 fits; every stop names its compartments.
    stops = [("diesel", 5.0), ("heating_oil", 5.0), ("diesel", 4.0), ("adblue", 2.0)]
    loading = load_trip(stops, [8.0, 6.0, 4.0, 2.0])
    assert loading is not None
    for (product, quantity), pieces in zip(stops, loading.stops, strict=True):
        assert sum(q for _, q in pieces) == pytest.approx(quantity)
        assert all(c in loading.compartments[product] for c, _ in pieces)
    sets = [set(cs) for cs in loading.compartments.values()]
    assert sum(len(s) for s in sets) == len(set().union(*sets))  # one product per compartment
    # 7 + 7 + 4 = 18 is the total capacity, yet no split of 8, 6, 4 into three groups holds 7, 7 and 4.
    assert load_trip([("a", 7.0), ("b", 7.0), ("c", 4.0)], [8.0, 6.0, 4.0]) is None


@settings(max_examples=150, deadline=None)
@given(
    st.lists(st.integers(1, 9), min_size=1, max_size=5),
    st.lists(st.tuples(st.sampled_from("abc"), st.integers(1, 12)), min_size=1, max_size=5),
)
def test_loading_exists_exactly_when_brute_force_finds_one(capacities, stops):
    caps = [float(c) for c in capacities]
    totals = {}
    for p, q in stops:
        totals[p] = totals.get(p, 0.0) + q
    loading = load_trip([(p, float(q)) for p, q in stops], caps)
    assert (loading is not None) == _exists(totals, caps)
    if loading is not None:
        for p, cs in loading.compartments.items():
            assert sum(caps[c] for c in cs) >= totals[p] - 1e-9
        used = [c for cs in loading.compartments.values() for c in cs]
        assert len(used) == len(set(used))
        for c in range(len(caps)):  # no compartment holds more than its capacity
            assert sum(q for pieces in loading.stops for k, q in pieces if k == c) <= caps[c] + 1e-9
