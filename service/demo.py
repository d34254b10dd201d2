"""Load the invented demo network in ``service/sample_data/`` (trucks.csv, then sites.csv via the CSV import)."""

from __future__ import annotations

import csv
from pathlib import Path

from sqlalchemy.orm import Session

from service.persistence import repository as repo
from service.sites_csv import import_sites

#: The demo network ships inside the package, so `ullage demo` works from an installed wheel.
SAMPLE_DATA = Path(__file__).resolve().parent / "sample_data"


def load_demo(session: Session, directory: Path, service_unit: str) -> tuple[int, int]:
    """Add the trucks and sites; returns how many of each. The caller commits."""
    with open(directory / "trucks.csv", encoding="utf-8", newline="") as handle:
        trucks = list(csv.DictReader(handle))
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
            },
        )
    result = import_sites(session, (directory / "sites.csv").read_bytes(), dry_run=False, service_unit=service_unit)
    return len(trucks), result["created"]
