"""Request bodies of the API tests: two products, a truck and a site on it (issue 16's fleet tests),
the routes they are posted to, and trucks and sites by code. Products and rows are invented."""

from __future__ import annotations

PRODUCTS = "/api/v1/products"
TRUCKS = "/api/v1/trucks"
SITES = "/api/v1/sites"
# Safe fills: liquid fuels 0.90–0.95, LPG 0.80–0.85 (International Fire Code 5704.2.9.7.5 and
# 40 CFR 280.20(c) for liquid fuels; OSHA 1910.110 and NFPA 58 practice for LPG).
DIESEL = {"code": "DSL", "name": "Diesel", "safe_fill": 0.95}
LPG = {"code": "LPG", "name": "Propane", "safe_fill": 0.8}
TRUCK = {"code": "T1", "name": "Truck one", "dispatch_cost": 150.0, "capacity": 18000.0}
SITE = {
    "code": "S1",
    "name": "Site one",
    "truck": "T1",
    "demand_per_day": 300.0,
    "holding_cost": 0.001,
    "stop_cost": 30.0,
    "tank_capacity": 10000.0,
}


def truck(code: str = "T1", **extra) -> dict:
    """A truck body named after ``code`` (capacity 18 000, at most 6 stops), ``extra`` fields added."""
    return {"code": code, "name": f"Truck {code}", "dispatch_cost": 150.0, "capacity": 18000.0, "max_stops": 6} | extra


def site(code: str, truck_code: str = "T1", **extra) -> dict:
    """:data:`SITE` named after ``code``, on ``truck_code``, ``extra`` fields added."""
    return SITE | {"code": code, "name": f"Site {code}", "truck": truck_code} | extra
