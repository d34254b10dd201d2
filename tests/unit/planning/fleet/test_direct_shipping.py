"""Direct shipping on networks of large economic lots (Gallego & Simchi-Levi 1990, *Management Science* 36(2)).

GSL: when every site's economic lot size is at least 71 % of the vehicle capacity, sending the truck to
each site alone is at least 94 % effective against every inventory-routing strategy. So a plan that
costs no more than direct shipping is within 1/0.94 of the optimum there. Checked here: on generated
networks meeting the 71 % condition the network plan costs at most the direct-shipping plan computed
independently below (each site alone on its best whole-day cycle), and at least the network lower bound.
The bound itself cannot certify the 94 % (docs/fleet.md, "Direct shipping"): the ratio is printed.
"""

import datetime as dt
import math

import numpy as np
import pytest

from service.planning import SiteInput
from service.planning.fleet import Depot, FleetSite, FleetTruck, Point, Product, plan_network
from service.planning.fleet.distance import CircuityDistance

CAPACITY = 33.0


def _network(seed: int, dispatch: float, stop: float):
    rng = np.random.default_rng(seed)
    depot = Depot("D", Point(52.0, 5.0))
    sites, lots = [], []
    for i in range(12):
        angle, reach = rng.uniform(0, 2 * math.pi), rng.uniform(0.2, 0.7)
        place = Point(52.0 + reach * math.sin(angle), 5.0 + reach * math.cos(angle) / 0.62)
        r = CircuityDistance().matrix([depot.location], [place])[0, 0]
        d = float(rng.uniform(2, 8))
        fixed = dispatch + stop + 2 * r  # a direct trip's cost (cost per km 1)
        H = fixed / (0.71 * CAPACITY / d) ** 2 * rng.uniform(0.3, 1.0)  # lot d √(fixed / H) ≥ 0.71 W
        lots.append(d * math.sqrt(fixed / H))
        sites.append(FleetSite(SiteInput(f"S{i}", d, 2 * H / d, stop, 3 * CAPACITY, 1.0), place, "fuel"))
    truck = FleetTruck("T", "D", dispatch, 1.0, (CAPACITY,), ("fuel",))
    return sites, [truck], [depot], [Product("fuel", 1.0)], lots


def _direct_cost(sites, depot, dispatch):
    total = 0.0
    for s in sites:
        r = CircuityDistance().matrix([depot.location], [s.location])[0, 0]
        d, H = s.site.demand_per_day, s.site.holding_cost * s.site.demand_per_day / 2
        longest = int(min(s.site.tank_capacity, CAPACITY) / d)
        total += min((dispatch + s.site.stop_cost + 2 * r) / T + H * T for T in range(1, longest + 1))
    return total


@pytest.mark.parametrize("seed", range(4))
@pytest.mark.parametrize(("dispatch", "stop"), [(0.0, 0.0), (50.0, 5.0)])
def test_plan_is_at_most_direct_shipping_when_lots_are_large(seed, dispatch, stop):
    sites, trucks, depots, products, lots = _network(seed, dispatch, stop)
    assert min(lots) >= 0.71 * CAPACITY  # GSL's condition
    result = plan_network(sites, trucks, depots, products, start_date=dt.date(2026, 1, 5))
    direct = _direct_cost(sites, depots[0], dispatch)
    assert result.cost_per_day <= direct * (1 + 1e-9)
    assert result.lower_bound_per_day <= result.cost_per_day
    print(f"seed {seed}: bound / cost = {result.lower_bound_per_day / result.cost_per_day:.3f}")
