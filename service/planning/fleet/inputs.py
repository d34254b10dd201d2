"""Input records of the fleet level: depots, products, sites with places and products, trucks with
compartments, and the trucks' working calendars."""

from __future__ import annotations

import datetime as dt
from dataclasses import dataclass

from service.planning.fleet.distance import Point
from service.planning.inputs import ALL_WEEKDAYS, SiteInput


@dataclass(frozen=True)
class Depot:
    """Where trucks load and return: ``code`` and ``location``."""

    code: str
    location: Point


@dataclass(frozen=True)
class Product:
    """A liquid the service plans for, with its default safe fill (share of the tank that may be filled;
    e.g. LPG 0.80–0.85, liquid fuels 0.90–0.95). The core plans with each site's own ``safe_fill``; the
    service fills it from the product's default when the site has none."""

    code: str
    safe_fill: float = 0.9


@dataclass(frozen=True)
class FleetSite:
    """A tank site: the one-truck planner's :class:`SiteInput`, its ``location`` (``None`` when unknown),
    its ``product`` and, optionally, the only ``depot`` that may serve it."""

    site: SiteInput
    location: Point | None
    product: str
    depot: str | None = None

    @property
    def code(self) -> str:
        return self.site.code


@dataclass(frozen=True)
class FleetTruck:
    """A truck based at ``depot``: cost per trip (``dispatch_cost``) and per kilometre, its compartments
    (capacities; the truck's capacity is their sum), the products it may carry, and a stop limit."""

    code: str
    depot: str
    dispatch_cost: float
    cost_per_km: float
    compartments: tuple[float, ...]
    products: tuple[str, ...]
    max_stops: int | None = None

    @property
    def capacity(self) -> float:
        return float(sum(self.compartments))


@dataclass(frozen=True)
class Calendar:
    """A truck's working calendar (as :class:`service.planning.TruckInput`'s fields of the same names)."""

    working_days: tuple[int, ...] = ALL_WEEKDAYS
    trips_per_day: int | None = None
    closed_dates: tuple[dt.date, ...] = ()
