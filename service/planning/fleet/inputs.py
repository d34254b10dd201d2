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
    (capacities; the truck's capacity is their sum), the products it may carry, and a stop limit.

    Optional shift (``docs/fleet.md`` §6a; ``None`` = not limited): a trip lasts
    ``route_km / average_speed_kmh + stops × stop_minutes / 60 + load_minutes / 60`` hours, and when
    ``shift_hours`` is set each day's trips together last at most ``shift_hours``. ``shift_hours`` needs
    ``average_speed_kmh``; ``stop_minutes`` and ``load_minutes`` count as 0 when ``None``."""

    code: str
    depot: str
    dispatch_cost: float
    cost_per_km: float
    compartments: tuple[float, ...]
    products: tuple[str, ...]
    max_stops: int | None = None
    shift_hours: float | None = None
    average_speed_kmh: float | None = None
    stop_minutes: float | None = None
    load_minutes: float | None = None

    @property
    def capacity(self) -> float:
        return float(sum(self.compartments))

    def trip_hours(self, route_km: float, stops: int) -> float | None:
        """A trip's duration in hours, ``None`` without an average speed."""
        if self.average_speed_kmh is None:
            return None
        return (
            float(route_km) / float(self.average_speed_kmh)
            + stops * float(self.stop_minutes or 0.0) / 60.0
            + float(self.load_minutes or 0.0) / 60.0
        )


@dataclass(frozen=True)
class Calendar:
    """A truck's working calendar (as :class:`service.planning.TruckInput`'s fields of the same names)."""

    working_days: tuple[int, ...] = ALL_WEEKDAYS
    trips_per_day: int | None = None
    closed_dates: tuple[dt.date, ...] = ()
