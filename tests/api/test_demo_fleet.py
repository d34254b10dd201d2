"""Issue 16 acceptance: the demo is a small fleet — 2 depots, 4 trucks, a product list, and every
site with coordinates and a product its truck may carry (all invented, service/sample_data/)."""

from __future__ import annotations

import math

from sqlalchemy import select

from service.persistence.models import Depot, Product, Site, Truck


def test_the_demo_is_a_small_fleet(demo, db_session):
    depots = {d.code for d in db_session.scalars(select(Depot))}
    trucks = list(db_session.scalars(select(Truck)))
    products = {p.code: p.safe_fill for p in db_session.scalars(select(Product))}
    sites = list(db_session.scalars(select(Site)))
    assert len(depots) == 2 and len(trucks) == 4 and len(sites) == 16
    # Default safe fills, common practice: LPG 0.80–0.85 (room for the liquid to expand), liquid
    # fuels 0.90–0.95; the demo's values lie in those ranges.
    assert 0.80 <= products["LPG"] <= 0.85
    assert all(0.90 <= products[code] <= 0.95 for code in ("DSL", "HTO"))
    assert {t.depot for t in trucks} == depots
    assert len({t.capacity for t in trucks}) == 4 and len({len(t.compartments or []) for t in trucks}) > 1
    for truck in trucks:
        assert math.isclose(math.fsum(truck.compartments or []), truck.capacity), truck.code
    by_id = {t.id: t for t in trucks}
    for site in sites:
        assert site.latitude is not None and site.longitude is not None, site.code
        assert site.product in (by_id[site.truck_id].products or []), site.code
        assert site.product in products
    assert {t.code for t in trucks} == {by_id[s.truck_id].code for s in sites}, "every truck has sites"
