"""The realistic network generator: reproducible, within its stated ranges, feasible by construction."""

from __future__ import annotations

import datetime as dt

import pytest

from .drivable_networks import CALENDARS, longest_closed_stretch, network, trip_rate, witness_plan
from .drivable_oracle import reference_bound, whole_day_cap


def test_the_same_seed_gives_the_same_network():
    assert network(42, classified=False) == network(42, classified=False)
    assert network(42, classified=False) != network(43, classified=False)


def test_longest_closed_stretch_counts_weekends_and_holidays():
    monday = dt.date(2026, 12, 21)
    assert longest_closed_stretch((1, 2, 3, 4, 5), (), monday, horizon=14) == 2
    assert longest_closed_stretch((1, 2, 3, 4, 5, 6, 7), (), monday, horizon=14) == 0
    # Friday 25 and Saturday 26 December closed next to the weekend: Friday to Sunday, 3 days
    assert longest_closed_stretch((1, 2, 3, 4, 5), (dt.date(2026, 12, 25),), monday, horizon=14) == 3


@pytest.mark.parametrize("seed", range(12))
def test_networks_are_within_their_ranges_and_drivable_by_construction(seed):
    net = network(seed, classified=False)
    truck = net.truck
    assert 3 <= len(net.sites) <= 150
    assert 20_000 <= truck.capacity <= 38_000 and 6 <= truck.max_stops <= 12 and 150 <= truck.dispatch_cost <= 400
    assert truck.working_days == CALENDARS[net.calendar] and 1 <= truck.trips_per_day <= 3
    assert all(0.90 <= s.safe_fill <= 0.95 and s.safety_stock < s.tank_capacity * s.safe_fill for s in net.sites)
    stretch = longest_closed_stretch(truck.working_days, truck.closed_dates, net.start_date)
    assert all(whole_day_cap(s, truck) >= stretch + 1 for s in net.sites)
    assert trip_rate(net.sites, truck) <= 0.75 * truck.trips_per_day * len(truck.working_days) / 7
    witness = witness_plan(net.sites, truck, net.start_date)  # a drivable plan exists
    assert witness is not None
    # the witness is a drivable plan, so the reference bound lies below it (rule 4, docs/planning.md "The plain bound")
    assert reference_bound(net.sites, truck, primal=False).value <= witness * (1 + 1e-9)
