"""The weekly trips of a truck with compartments: one product per compartment (issue 16).

``service.schedule`` lists a plan's trips with the core's ``trips_between``, packed by capacity and
``max_stops``; for a truck with ``compartments`` this module splits them with the core's
``split_for_compartments`` (each site's current product; a site naming none shares the pseudo-product
the network plans use, ``network_inputs.UNSPECIFIED_PRODUCT``), gives the projection each product's
space on each trip (``PlannedTrip.spaces``), and loads each corrected trip into the compartments for
the stops' ``compartments`` (``[compartment number from 1, quantity]`` pieces, as a network plan's
stops show them). A truck without compartments is left exactly as before.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass

from service.network_inputs import UNSPECIFIED_PRODUCT
from service.persistence.models import Site, Truck
from service.planning.fleet.compartments import load_trip
from service.planning.projection import TOLERANCE, CorrectedTrip
from service.planning.results import Trip
from service.planning.trip_loading import split_for_compartments

#: A stop's load in the compartments: ``(compartment number from 1, quantity)`` pieces.
Pieces = tuple[tuple[int, float], ...]


@dataclass(frozen=True)
class Listed:
    """The trips to project, each product's space on each (empty without compartments), warnings."""

    trips: tuple[Trip, ...]
    spaces: tuple[tuple[tuple[tuple[str, ...], float], ...], ...]
    warnings: tuple[str, ...]


def products_of(sites: Mapping[str, Site]) -> dict[str, str]:
    """Each site's product code, by site code (``UNSPECIFIED_PRODUCT`` when it names none)."""
    return {code: site.product or UNSPECIFIED_PRODUCT for code, site in sites.items()}


def listed(trips: Sequence[Trip], truck: Truck, sites: Mapping[str, Site], trips_per_day: int | None) -> Listed:
    """``trips`` (only served sites' stops, none empty) split to load into ``truck``'s compartments."""
    if not truck.compartments:
        return Listed(tuple(trips), tuple(() for _ in trips), ())
    products = products_of(sites)
    capacities = [float(c) for c in truck.compartments]
    loaded = split_for_compartments(trips, products, capacities, trips_per_day)
    spaces = []
    for trip, loading in zip(loaded.trips, loaded.loadings, strict=True):
        spaces.append(
            tuple(
                (tuple(s.code for s in trip.stops if products[s.code] == product), sum(capacities[c] for c in given))
                for product, given in sorted(loading.compartments.items())
            )
        )
    return Listed(loaded.trips, tuple(spaces), loaded.warnings)


def pieces(trip: CorrectedTrip, truck: Truck, sites: Mapping[str, Site]) -> tuple[Pieces | None, ...]:
    """Each stop's compartments on the corrected ``trip`` (``None`` for every stop without
    compartments, or when recorded deliveries exceed them); a stop with nothing to load has none."""
    if not truck.compartments:
        return tuple(None for _ in trip.stops)
    products = products_of(sites)
    loading_stops = [s for s in trip.stops if s.quantity > TOLERANCE]
    loading = load_trip([(products[s.site], s.quantity) for s in loading_stops], [float(c) for c in truck.compartments])
    if loading is None:
        return tuple(None for _ in trip.stops)
    of = {s.site: tuple((c + 1, q) for c, q in piece) for s, piece in zip(loading_stops, loading.stops, strict=True)}
    return tuple(of.get(s.site, ()) for s in trip.stops)
