"""Great-circle distances against the ``haversine`` package (a general-purpose reference library)."""

import numpy as np
import pytest
from haversine import haversine
from hypothesis import given, settings
from hypothesis import strategies as st

from service.planning.errors import PlanningInputError
from service.planning.fleet.distance import CircuityDistance, Point, check_points, great_circle_km

lat = st.floats(-89.9, 89.9)
lon = st.floats(-179.9, 179.9)


@settings(max_examples=200, deadline=None)
@given(st.lists(st.tuples(lat, lon), min_size=1, max_size=6), st.lists(st.tuples(lat, lon), min_size=1, max_size=6))
def test_great_circle_matches_the_haversine_package(a, b):
    # Reference: the `haversine` package (mean Earth radius 6 371.0088 km).
    got = great_circle_km([Point(*p) for p in a], [Point(*q) for q in b])
    want = np.array([[haversine(p, q) for q in b] for p in a])
    np.testing.assert_allclose(got, want, rtol=1e-9, atol=1e-6)


def test_known_pair_and_circuity():
    # Lyon (45.7597, 4.8422) to Paris (48.8567, 2.3508): 392.2173 km by the `haversine` package.
    lyon, paris = Point(45.7597, 4.8422), Point(48.8567, 2.3508)
    assert great_circle_km([lyon], [paris])[0, 0] == pytest.approx(haversine((45.7597, 4.8422), (48.8567, 2.3508)))
    road = CircuityDistance().matrix([lyon], [paris])[0, 0]
    assert road == pytest.approx(1.3 * 392.2172595594006)  # default circuity 1.3 (common practice)
    assert CircuityDistance(1.2).matrix([lyon, paris], [lyon, paris]).diagonal().tolist() == [0.0, 0.0]


def test_bad_circuity_and_missing_coordinates_are_named():
    with pytest.raises(PlanningInputError, match="circuity"):
        CircuityDistance(0.5)
    with pytest.raises(PlanningInputError, match="`B`, `C`"):
        check_points([Point(1, 2), None, Point(95, 0)], ["A", "B", "C"], "sites")
