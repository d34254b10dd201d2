"""A plan's listed trips split so that each loads into the truck's compartments (issue 16).

The listing (:func:`service.planning.trips_between`) packs a date's deliveries by the truck's capacity
``W`` and ``max_stops`` only. With compartments of capacities ``C_1 … C_m`` (``Σ C_c = W``) a trip's
loads by product ``L_p`` must also fit with one product per compartment: disjoint sets ``S_p`` with
``Σ_{c ∈ S_p} C_c ≥ L_p`` (:func:`service.planning.fleet.compartments.load_trip`, exact). A trip that
does not load is split: its stops, largest first (ties: listed order), go first-fit into the sub-trips
that still load with them added (a new sub-trip when none does) — first-fit decreasing, the bin-packing
heuristic of Johnson et al., "Worst-case performance bounds for simple one-dimensional packing
algorithms", SIAM J. Comput. 3(4), 1974, with "fits" meaning "loads". Each sub-trip keeps the listed
stop order, so a sub-trip of a packed trip keeps its capacity and ``max_stops``. A stop that does not
load even alone (more than all compartments hold; the listing clips to ``W``) gets every compartment.

Each resulting trip carries its loading: the compartments (0-based) given to each product, so later
corrections of the quantities (service.planning.projection) can keep each product within them. When
a date then needs more than ``trips_per_day`` trips, a warning names the date and its sites (in
backticks, as the listing's calendar warnings do).
"""

from __future__ import annotations

import dataclasses
from collections.abc import Mapping, Sequence
from dataclasses import dataclass

from service.planning.fleet.compartments import Loading, load_trip
from service.planning.results import Trip


@dataclass(frozen=True)
class LoadedTrips:
    """``trips`` renumbered within their dates, ``loadings[k]`` the loading of ``trips[k]``, the
    number of listed trips that were split, and the warnings of dates above ``trips_per_day``."""

    trips: tuple[Trip, ...]
    loadings: tuple[Loading, ...]
    split: int
    warnings: tuple[str, ...]


def _items(trip: Trip, products: Mapping[str, str]) -> list[tuple[str, float]]:
    return [(products[s.code], s.quantity) for s in trip.stops]


def _alone(product: str, capacities: Sequence[float]) -> Loading:
    """A stop too large for the compartments: every compartment is its product's."""
    return Loading({product: tuple(range(len(capacities)))}, ((),))


def _split(trip: Trip, products: Mapping[str, str], capacities: Sequence[float]) -> list[tuple[Trip, Loading]]:
    """``trip`` as trips that each load (first-fit decreasing, module docstring)."""
    whole = load_trip(_items(trip, products), capacities)
    if whole is not None:
        return [(trip, whole)]
    order = sorted(range(len(trip.stops)), key=lambda k: -trip.stops[k].quantity)  # stable
    groups: list[list[int]] = []
    for k in order:
        for group in groups:
            trial = sorted([*group, k])
            items = [(products[trip.stops[j].code], trip.stops[j].quantity) for j in trial]
            if load_trip(items, capacities) is not None:
                group[:] = trial
                break
        else:
            groups.append([k])
    out = []
    for group in sorted(groups):
        stops = tuple(trip.stops[j] for j in group)
        part = dataclasses.replace(trip, load=float(sum(s.quantity for s in stops)), stops=stops)
        loading = load_trip(_items(part, products), capacities)
        if loading is None:  # a single stop larger than every compartment together
            loading = _alone(products[stops[0].code], capacities)
        out.append((part, loading))
    return out


def split_for_compartments(
    trips: Sequence[Trip], products: Mapping[str, str], capacities: Sequence[float], trips_per_day: int | None
) -> LoadedTrips:
    """Split ``trips`` (date order) so each loads into ``capacities``; ``products`` maps every
    stop's site code to its product code (module docstring)."""
    out: list[Trip] = []
    loadings: list[Loading] = []
    split = 0
    per_day: dict[int, list[Trip]] = {}
    for trip in trips:
        parts = _split(trip, products, capacities)
        split += len(parts) > 1
        for part, loading in parts:
            per_day.setdefault(trip.day, []).append(part)
            out.append(dataclasses.replace(part, trip=len(per_day[trip.day])))
            loadings.append(loading)
    warnings = []
    for listed in per_day.values():
        if trips_per_day is not None and len(listed) > trips_per_day:
            codes = sorted({s.code for t in listed for s in t.stops})
            warnings.append(
                f"compartments: {listed[0].date.isoformat()} needs {len(listed)} trips to load one product per "
                f"compartment, more than trips_per_day {trips_per_day}; sites {', '.join(f'`{c}`' for c in codes)}"
            )
    return LoadedTrips(tuple(out), tuple(loadings), split, tuple(warnings))
