"""The trip router against TSPLIB's published optima and brute force."""

import itertools

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from service.planning.fleet.routing import held_karp, shortest_tour

from .tsplib import BURMA14, OPTIMUM, ULYSSES16, geo_matrix

CASES = [("burma14", BURMA14), ("ulysses16", ULYSSES16)]


@pytest.mark.parametrize(("name", "coords"), CASES)
def test_exact_programme_finds_the_tsplib_optimum(name, coords):
    # Reinelt 1991 (TSPLIB 95): burma14 = 3 323, ulysses16 = 6 859 with TSPLIB's GEO distance.
    d = geo_matrix(coords)
    tour = shortest_tour(d, exact_stops=len(coords))
    assert tour.exact
    assert tour.length == OPTIMUM[name]
    assert sorted(tour.order[1:-1]) == list(range(1, len(coords)))
    assert sum(tour.legs) == tour.length


@pytest.mark.parametrize(("name", "coords"), CASES)
def test_local_search_finds_the_tsplib_optimum(name, coords):
    # Reinelt 1991 (TSPLIB 95): the 2-opt/Or-opt router used above EXACT_STOPS reaches the optimum too.
    tour = shortest_tour(geo_matrix(coords), exact_stops=0)
    assert not tour.exact
    assert tour.length == OPTIMUM[name]


def _brute(d):
    n = d.shape[0] - 1
    return min(
        sum(d[a, b] for a, b in zip((0, *p), (*p, 0), strict=True)) for p in itertools.permutations(range(1, n + 1))
    )


@settings(max_examples=40, deadline=None)
@given(st.integers(1, 7), st.integers(0, 2**32 - 1))
def test_held_karp_equals_brute_force_on_asymmetric_matrices(n, seed):
    # Reference: enumeration of every stop order (brute force).
    d = np.random.default_rng(seed).integers(1, 100, size=(n + 1, n + 1)).astype(float)
    np.fill_diagonal(d, 0)
    order = held_karp(d)
    length = sum(d[a, b] for a, b in zip((0, *order), (*order, 0), strict=True))
    assert length == _brute(d)
