"""The fleet level of the planning core: depots, road distances, routed trips, compartments, and the
network plan that assigns sites to trucks (``docs/fleet.md``). numpy, scipy and the standard library
only, like the rest of :mod:`service.planning`."""

from service.planning.fleet.distance import CircuityDistance, DistanceSource, Point, great_circle_km
from service.planning.fleet.inputs import Calendar, Depot, FleetSite, FleetTruck, Product
from service.planning.fleet.network import plan_network
from service.planning.fleet.results import NetworkResult, RoutedTrip, RouteStop, TruckPlan, UnservedSite

__all__ = [
    "Calendar",
    "CircuityDistance",
    "Depot",
    "DistanceSource",
    "FleetSite",
    "FleetTruck",
    "NetworkResult",
    "Point",
    "Product",
    "RouteStop",
    "RoutedTrip",
    "TruckPlan",
    "UnservedSite",
    "great_circle_km",
    "plan_network",
]
