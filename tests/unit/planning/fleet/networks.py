"""Invented fleet networks (our own region around 52° N, 5° E) for tests and the benchmark."""

import numpy as np

from service.planning import SiteInput
from service.planning.fleet import Calendar, Depot, FleetSite, FleetTruck, Point, Product

PRODUCTS = (Product("diesel", 0.95), Product("heating_oil", 0.95), Product("lubricant", 0.9), Product("water_chem", 0.9))


def fleet(n_sites: int, n_trucks: int, n_depots: int, seed: int = 0, calendar: Calendar | None = None):
    """``sites, trucks, depots, products, calendars``: depots spread over a ~120 km region, sites around
    them, mostly diesel and heating oil; trucks with 2–4 compartments (33 m³ in all)."""
    rng = np.random.default_rng(seed)
    centre = np.array([52.0, 5.0])
    depots = [Depot(f"D{g + 1}", Point(*(centre + rng.uniform(-0.5, 0.5, 2)))) for g in range(n_depots)]
    product_codes = [p.code for p in PRODUCTS]
    sites = []
    for i in range(n_sites):
        home = depots[i % n_depots].location
        lat = home.latitude + rng.normal(0, 0.25)
        lon = home.longitude + rng.normal(0, 0.4)
        product = product_codes[int(rng.choice(4, p=[0.55, 0.3, 0.1, 0.05]))]
        demand = float(rng.uniform(0.2, 2.5))
        tank = float(demand * rng.uniform(8, 40))
        site = SiteInput(f"S{i + 1:05d}", demand, float(rng.uniform(0.01, 0.05)), float(rng.uniform(5, 20)), tank, 0.95)
        sites.append(FleetSite(site, Point(lat, lon), product))
    layouts = [(20.0, 13.0), (12.0, 12.0, 9.0), (9.0, 8.0, 8.0, 8.0)]
    trucks = []
    for t in range(n_trucks):
        comps = layouts[t % len(layouts)]
        carries = tuple(product_codes) if t % 2 == 0 else tuple(product_codes[:2])
        trucks.append(FleetTruck(f"T{t + 1:02d}", depots[t % n_depots].code, 120.0, 1.6, comps, carries, 8))
    calendars = {t.code: calendar for t in trucks} if calendar is not None else {}
    return sites, trucks, depots, PRODUCTS, calendars
