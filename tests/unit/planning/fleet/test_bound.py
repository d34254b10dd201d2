"""The network bound's pieces against direct computation."""

import numpy as np
import pytest

from service.planning.fleet import CircuityDistance, Point
from service.planning.fleet.bound import nearest_other, network_bound


class Generic:
    """CircuityDistance seen through the plain DistanceSource interface (the block search path)."""

    def matrix(self, a, b):
        return CircuityDistance().matrix(a, b)


@pytest.mark.parametrize("seed", range(3))
def test_nearest_place_by_tree_equals_the_full_matrix(seed):
    # Reference: the full distance matrix's row minima (brute force), duplicates included.
    rng = np.random.default_rng(seed)
    sites = [Point(52 + rng.normal(0, 0.3), 5 + rng.normal(0, 0.5)) for _ in range(700)]
    sites[5] = sites[9]  # two tanks at one place: nearest distance 0
    depots = [Point(52.0, 5.0), Point(52.3, 5.4)]
    fast = nearest_other(sites, depots, CircuityDistance())
    slow = nearest_other(sites, depots, Generic())
    full = CircuityDistance().matrix(sites, sites + depots)
    full[np.arange(700), np.arange(700)] = np.inf
    np.testing.assert_allclose(fast, full.min(axis=1), rtol=1e-9, atol=1e-9)
    np.testing.assert_allclose(slow, full.min(axis=1), rtol=1e-9, atol=1e-9)
    assert fast[5] == fast[9] == 0.0


def test_bound_is_the_eoq_cost_when_only_stops_and_holding_count():
    # One site, θ-terms zero: min over g in [1, U] of k / g + H g = 2 √(k H) at g = √(k / H) (Harris 1913 EOQ).
    value, _ = network_bound(np.array([2.0]), np.array([0.5]), np.array([8.0]), np.array([10.0]), np.zeros(1), np.zeros(1))
    assert value == pytest.approx(2 * np.sqrt(8.0 * 0.5))
    capped, _ = network_bound(np.array([2.0]), np.array([0.5]), np.array([8.0]), np.array([2.0]), np.zeros(1), np.zeros(1))
    assert capped == pytest.approx(8.0 / 2 + 0.5 * 2)  # the cap U = 2 < √16 = 4 binds
