"""service.routes: a listed trip's driving order from and back to the depot, with leg distances (issue 16)."""

from __future__ import annotations

import itertools
import random

import pytest
from haversine import Unit, haversine

from service.routes import NO_DEPOT, Point, point_of, route_json, trip_route

CIRCUITY = 1.3
DEPOT = Point(51.70, -3.35)


def road_km(a: Point, b: Point) -> float:
    # Reference: the `haversine` package (a general-purpose great-circle library, mean Earth radius),
    # times the circuity factor the service uses by default (1.3, common practice).
    return CIRCUITY * haversine((a.latitude, a.longitude), (b.latitude, b.longitude), unit=Unit.KILOMETERS)


def brute_force(stops: dict[str, Point]) -> float:
    """The shortest closed tour depot → every stop → depot, by enumerating every order."""
    best = float("inf")
    for order in itertools.permutations(stops):
        path = [DEPOT, *(stops[c] for c in order), DEPOT]
        best = min(best, sum(road_km(a, b) for a, b in itertools.pairwise(path)))
    return best


@pytest.mark.parametrize("n", range(1, 8))
@pytest.mark.parametrize("seed", range(3))
def test_driving_order_is_the_shortest_tour_found_by_enumeration(n, seed):
    rng = random.Random(100 * n + seed)
    stops = {f"S{i}": Point(51.6 + 0.2 * rng.random(), -3.5 + 0.3 * rng.random()) for i in range(n)}
    route = trip_route("D1", DEPOT, list(stops.items()))
    assert route.routed and route.reason is None and route.exact
    assert sorted(route.order) == sorted(stops)
    assert route.km == pytest.approx(brute_force(stops), abs=1e-3)
    # Legs chain from the depot through the order and back, each the reference road distance.
    names = ["D1", *route.order, "D1"]
    assert [(leg.start, leg.end) for leg in route.legs] == list(itertools.pairwise(names))
    places = {"D1": DEPOT, **stops}
    for leg in route.legs:
        assert leg.km == pytest.approx(road_km(places[leg.start], places[leg.end]), abs=1e-3)
    assert route.km == pytest.approx(sum(leg.km for leg in route.legs), abs=1e-2)
    assert [route.sequence(code) for code in route.order] == list(range(1, n + 1))
    assert route.points == (DEPOT, *(stops[c] for c in route.order))


def test_a_leg_matches_a_published_great_circle_distance():
    # Published example (Movable Type Scripts, "Calculate distance, bearing and more between
    # Latitude/Longitude points", C. Veness): Land's End 50°03′59″N 005°42′53″W to John o' Groats
    # 58°38′38″N 003°04′12″W is 968.9 km by haversine (R = 6 371 km; we use 6 371.0088 km, +0.0001 %) — recalled from memory.
    lands_end = Point(50 + 3 / 60 + 59 / 3600, -(5 + 42 / 60 + 53 / 3600))
    groats = Point(58 + 38 / 60 + 38 / 3600, -(3 + 4 / 60 + 12 / 3600))
    route = trip_route("LE", lands_end, [("JOG", groats)])
    assert route.legs[0].km == pytest.approx(CIRCUITY * 968.9, abs=CIRCUITY * 0.1)
    assert route.km == pytest.approx(2 * route.legs[0].km, abs=2e-3)


def test_without_depot_or_coordinates_the_plan_order_is_kept_and_the_reason_named():
    stops = [("A", Point(51.7, -3.3)), ("B", None), ("C", None)]
    no_depot = trip_route(None, None, stops)
    assert not no_depot.routed and no_depot.reason == NO_DEPOT and no_depot.order == ()
    assert no_depot.sequence("A") is None and route_json(no_depot) is None
    no_point = trip_route("D1", None, stops)
    assert not no_point.routed and "D1" in (no_point.reason or "")
    missing = trip_route("D1", DEPOT, stops)
    assert not missing.routed and "B, C" in (missing.reason or "") and missing.legs == ()


def test_route_json_shape():
    route = trip_route("D1", DEPOT, [("A", Point(51.75, -3.30)), ("B", Point(51.65, -3.40))])
    body = route_json(route)
    assert body is not None and set(body) == {"depot", "stops", "legs", "km", "exact"}
    assert body["legs"][0]["from"] == "D1" and body["legs"][-1]["to"] == "D1" and len(body["legs"]) == 3


def test_point_of_rejects_missing_or_out_of_range_coordinates():
    assert point_of(None, 1.0) is None and point_of(91.0, 0.0) is None and point_of(0.0, 181.0) is None
    assert point_of(51.5, -3.2) == Point(51.5, -3.2)
