"""A network plan's input snapshot (read from the database) and its conversion to the fleet core's inputs.

The snapshot is plain JSON stored with the job (``network_plan_jobs.inputs``): the active trucks
chosen (every field the core needs, their calendars and row ``version``), their depots, the products,
and the active sites currently on those trucks (parameters, place, product and ``version``). The job is
computed from the snapshot alone, and activation compares the versions with the rows of that moment.

:func:`fleet_inputs` is the one place a snapshot becomes the core's records, so fields the core learns
later (trucks' shift settings) are added here only.
"""

from __future__ import annotations

import datetime as dt
from collections.abc import Sequence
from typing import Any

from sqlalchemy.orm import Session

from service.persistence import fleet as fleet_store
from service.persistence import plans as plan_store
from service.persistence import repository as repo
from service.persistence.models import Site, Truck
from service.planning.fleet import Calendar, Depot, FleetSite, FleetTruck, Point, Product

#: The product code of a site that names none: only trucks without a product list (any product) take it.
UNSPECIFIED_PRODUCT = "(none)"


#: The truck's shift settings (issue 16; None: the day is not limited), passed to the core as they are.
SHIFT_FIELDS = ("shift_hours", "average_speed_kmh", "stop_minutes", "load_minutes")


def _truck(truck: Truck) -> dict[str, Any]:
    recorded = plan_store.snapshot(truck, [])["truck"]
    return recorded | {
        "depot": truck.depot,
        "cost_per_km": truck.cost_per_km,
        "compartments": truck.compartments,
        "products": truck.products,
        **{name: getattr(truck, name) for name in SHIFT_FIELDS},
    }


def _site(site: Site, truck_code: str) -> dict[str, Any]:
    recorded = plan_store.snapshot_site(site)
    return recorded | {
        "truck": truck_code,
        "product": site.product,
        "latitude": site.latitude,
        "longitude": site.longitude,
    }


def snapshot(session: Session, truck_codes: Sequence[str] | None = None) -> dict[str, Any]:
    """The active trucks (``truck_codes``, or all), their active sites, every depot and product.

    Raises ``repository.NotFound`` for an unknown truck code.
    """
    if truck_codes:
        trucks = [repo.truck_by_code(session, code) for code in sorted(set(truck_codes))]
        trucks = [t for t in trucks if t.active]
    else:
        trucks = repo.active_trucks(session)
    sites = [_site(s, t.code) for t in trucks for s in repo.active_sites(session, t)]
    return {
        "trucks": [_truck(t) for t in trucks],
        "sites": sorted(sites, key=lambda s: s["code"]),
        "depots": [
            {"code": d.code, "latitude": d.latitude, "longitude": d.longitude, "version": d.version}
            for d in fleet_store.all_depots(session)
        ],
        "products": [{"code": p.code, "safe_fill": p.safe_fill} for p in fleet_store.all_products(session)],
    }


def missing_places(inputs: dict[str, Any]) -> tuple[list[str], list[str]]:
    """Codes of the sites without coordinates and of the trucks without a depot."""
    sites = [s["code"] for s in inputs["sites"] if s["latitude"] is None or s["longitude"] is None]
    trucks = [t["code"] for t in inputs["trucks"] if t["depot"] is None]
    return sites, trucks


def fleet_inputs(
    inputs: dict[str, Any], start: dt.date
) -> tuple[list[FleetSite], list[FleetTruck], list[Depot], list[Product], dict[str, Calendar]]:
    """The core's ``plan_network`` arguments of a snapshot, for a plan starting on ``start``.

    A truck without compartments has one of its capacity; without a product list it carries every
    product (and sites that name none); each truck's calendar is its stored one with its holidays
    over the plan's horizon (as a one-truck plan's, ``working_calendar.plan_truck``).
    """
    all_products = [p["code"] for p in inputs["products"]] + [UNSPECIFIED_PRODUCT]
    products = [Product(p["code"], p["safe_fill"]) for p in inputs["products"]] + [Product(UNSPECIFIED_PRODUCT)]
    depots = [Depot(d["code"], Point(d["latitude"], d["longitude"])) for d in inputs["depots"]]
    sites = [
        FleetSite(
            site=plan_store.site_inputs([s])[0],
            location=None if s["latitude"] is None or s["longitude"] is None else Point(s["latitude"], s["longitude"]),
            product=s["product"] or UNSPECIFIED_PRODUCT,
        )
        for s in inputs["sites"]
    ]
    trucks, calendars = [], {}
    for t in inputs["trucks"]:
        trucks.append(
            FleetTruck(
                code=t["code"],
                depot=t["depot"],
                dispatch_cost=t["dispatch_cost"],
                cost_per_km=t["cost_per_km"],
                compartments=tuple(t["compartments"] or (t["capacity"],)),
                products=tuple(t["products"] if t["products"] is not None else all_products),
                max_stops=t["max_stops"],
                **{name: t.get(name) for name in SHIFT_FIELDS},
            )
        )
        one = plan_store.truck_input(t, start)
        calendars[t["code"]] = Calendar(one.working_days, one.trips_per_day, one.closed_dates)
    return sites, trucks, depots, products, calendars
