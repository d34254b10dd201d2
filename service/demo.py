"""Load the invented demo network in ``service/sample_data/`` (products.csv, depots.csv, trucks.csv,
then sites.csv via the CSV import) and, for ``ullage demo``, some invented recent
history (:func:`load_history`)."""

from __future__ import annotations

import csv
import datetime as dt
import math
from pathlib import Path

from sqlalchemy.orm import Session

from service.persistence import deliveries as delivery_store
from service.persistence import fleet
from service.persistence import repository as repo
from service.persistence import weather as weather_store
from service.persistence.models import Site
from service.sites_csv import import_sites

#: The demo network ships inside the package, so `ullage demo` works from an installed wheel.
SAMPLE_DATA = Path(__file__).resolve().parent / "sample_data"


def _rows(path: Path) -> list[dict[str, str]]:
    """The rows of a CSV file with a header; none if the file is absent (a directory of an older
    demo may have only trucks.csv and sites.csv)."""
    if not path.exists():
        return []
    with open(path, encoding="utf-8", newline="") as handle:
        return list(csv.DictReader(handle))


def _words(cell: str | None) -> list[str]:
    return (cell or "").split()


def load_demo(session: Session, directory: Path, service_unit: str) -> tuple[int, int]:
    """Add the products, depots, trucks and sites; returns how many trucks and sites. The caller commits.

    products.csv (code, name, safe_fill) and depots.csv (code, name, latitude, longitude) are
    optional (loaded first, so sites.csv's ``product`` column can name them); trucks.csv may carry
    depot, cost_per_km, compartments and products (lists separated by spaces)."""
    for row in _rows(directory / "products.csv"):
        fleet.add_product(session, {"code": row["code"], "name": row["name"], "safe_fill": float(row["safe_fill"])})
    for row in _rows(directory / "depots.csv"):
        fleet.add_depot(
            session,
            {
                "code": row["code"],
                "name": row["name"],
                "latitude": float(row["latitude"]),
                "longitude": float(row["longitude"]),
            },
        )
    trucks = _rows(directory / "trucks.csv")
    for row in trucks:
        repo.add_truck(
            session,
            {
                "code": row["code"],
                "name": row["name"],
                "dispatch_cost": float(row["dispatch_cost"]),
                "capacity": float(row["capacity"]),
                "max_stops": int(row["max_stops"]) if row["max_stops"] else None,
                "working_days": [int(day) for day in row["working_days"].split()],
                "trips_per_day": int(row["trips_per_day"]),
                "holiday_region": row["holiday_region"] or None,
                "depot": row.get("depot") or None,
                "cost_per_km": float(row.get("cost_per_km") or 0),
                "compartments": [float(c) for c in _words(row.get("compartments"))] or None,
                "products": _words(row.get("products")) or None,
            },
        )
    result = import_sites(session, (directory / "sites.csv").read_bytes(), dry_run=False, service_unit=service_unit)
    return len(trucks), result["created"]


#: The demo's weather region (the heating sites' ``weather_region`` in sites.csv) and the invented
#: sites with a few weeks of readings and recorded deliveries.
DEMO_REGION = "HV-VALLEY"
HISTORY_SITES = ("HV-GAR-02", "HV-FRM-05", "HV-HTG-06", "HV-HTG-16")
#: Days (back from now) of the demo's readings, and of the deliveries made two hours after a reading
#: (``None``: the last one, a day ago, after the latest reading).
READING_DAYS = (35, 28, 21, 14, 7, 3)
DELIVERY_DAYS: tuple[int | None, ...] = (28, 14, None)


def demo_temperature(day: dt.date) -> float:
    """An invented daily mean temperature (°C) of the demo valley: a yearly swing between about
    4 °C in mid-January and 17 °C in mid-July, plus a deterministic day-to-day wobble."""
    season = 10.5 - 6.5 * math.cos(2 * math.pi * (day.timetuple().tm_yday - 15) / 365.25)
    return round(season + 2.0 * math.sin(day.toordinal() * 1.7) + 1.0 * math.sin(day.toordinal() * 0.45), 1)


def _daily_use(site: Site, day: dt.date) -> float:
    """The invented use of a demo site on ``day``: a heating site a quarter of its stored demand as
    base load plus the rest scaled by degree days (8 degree days use the stored demand), the others
    their stored demand ± 10 %."""
    if site.weather_region is None:
        return site.demand_per_day * (1 + 0.1 * math.sin(day.toordinal() * 2.3))
    dd = max(0.0, site.base_temperature - demo_temperature(day))
    return site.demand_per_day * (0.25 + 0.75 * dd / 8)


def load_history(session: Session, now: dt.datetime) -> tuple[int, int, int]:
    """Invented recent history for the demo (after :func:`load_demo`): two years of the valley's
    daily temperatures and a week of forecast, and some sites' weekly readings with deliveries.
    Returns how many temperature days, readings and deliveries. The caller commits."""
    today = now.date()
    days = [today - dt.timedelta(days=k) for k in range(730, -7, -1)]
    weather_store.post_days(
        session,
        DEMO_REGION,
        [(d, demo_temperature(d), "observed" if d < today else "forecast") for d in days],
        "demo",
    )
    sites = delivery_store.sites_by_codes(session, HISTORY_SITES)
    readings: list[tuple[int, float, dt.datetime]] = []
    delivered: list[dict] = []
    for code in HISTORY_SITES:
        site = sites[code]
        top = site.safe_fill * site.tank_capacity
        at, level = now - dt.timedelta(days=36), 0.7 * top
        events = [(now - dt.timedelta(days=k), "reading") for k in READING_DAYS]
        events += [
            (now - dt.timedelta(days=1) if k is None else now - dt.timedelta(days=k, hours=-2), "delivery")
            for k in DELIVERY_DAYS
        ]
        for when, kind in sorted(events):
            level = max(0.0, level - _daily_use(site, when.date()) * (when - at).total_seconds() / 86400)
            at = when
            if kind == "reading":
                readings.append((site.id, round(level, 1), when))
            else:
                quantity = round(0.9 * top - level, 1)
                delivered.append(
                    {"site_id": site.id, "truck_id": site.truck_id, "quantity": quantity, "delivered_at": when}
                )
                level += quantity
    delivery_store.add_readings(session, readings, "demo")
    delivery_store.add_deliveries(session, delivered, "demo")
    return len(days), len(readings), len(delivered)
