"""Result records: JSON form, infeasible results, truncated listings, the dispatch window."""

import dataclasses
import datetime as dt
import json
import math
import time

import pytest

from service.planning import (
    CycleResult,
    SiteInput,
    SitePlan,
    Status,
    Stop,
    Trip,
    TruckInput,
    joint,
    plan_joint,
    single_site_cycle,
    trips_between,
)

JOINT_FIELDS = [
    "status",
    "success",
    "message",
    "method",
    "base_days",
    "dispatch_interval_days",
    "repeat_days",
    "trips_per_repeat",
    "cost_per_day",
    "cost_breakdown",
    "lower_bound_per_day",
    "gap",
    "peak_load",
    "trips_truncated",
    "sites",
    "trips",
    "warnings",
    "start_date",
    "needed",
]
SITE_FIELDS = [
    "code",
    "cycle_days",
    "offset_days",
    "quantity",
    "cost_per_day",
    "binding",
    "period_days",
    "delivery_days",
    "longest_gap_days",
]


def _site(code, demand, usable, stop_cost=10.0, holding=0.0):
    return SiteInput(code, demand, holding, stop_cost, usable, safe_fill=1.0)


def _sites():
    return [
        SiteInput("farm-01", 1000, 0.002, 20, 20000),
        SiteInput("farm-02", 500, 0.002, 30, 20000),
        SiteInput("farm-03", 2000, 0.002, 10, 30000),
    ]


def test_records_are_frozen():
    result = plan_joint(_sites(), TruckInput(100.0))
    for record in (result, result.sites[0], result.trips[0], result.trips[0].stops[0]):
        with pytest.raises(dataclasses.FrozenInstanceError):
            record.code = "x"  # any attribute
    assert isinstance(result.sites[0], SitePlan) and isinstance(result.trips[0], Trip)
    assert isinstance(result.trips[0].stops[0], Stop)


def test_joint_to_dict_is_plain_json():
    result = plan_joint(_sites(), TruckInput(100.0, capacity=30000.0, max_stops=2))
    data = result.to_dict()
    assert list(data) == JOINT_FIELDS
    assert data["status"] in ("optimal", "feasible") and data["success"] is True
    assert set(data["cost_breakdown"]) == {"dispatch", "stops", "holding"}
    assert list(data["sites"][0]) == SITE_FIELDS
    assert list(data["trips"][0]) == ["day", "date", "trip", "load", "stops"] and list(data["trips"][0]["stops"][0]) == [
        "code",
        "quantity",
    ]
    text = json.dumps(data, allow_nan=False)
    assert json.loads(text) == data
    assert type(data["repeat_days"]) is int and type(data["sites"][0]["cycle_days"]) is float
    assert type(data["sites"][0]["period_days"]) is int and type(data["sites"][0]["delivery_days"][0]) is int
    assert data["start_date"] == result.start_date.isoformat() and data["needed"] is None
    assert type(data["cost_per_day"]) is float and type(data["sites"][0]["quantity"]) is float


def test_cycle_to_dict():
    data = single_site_cycle(_sites()[0], TruckInput(100.0)).to_dict()
    assert list(data) == [f.name for f in dataclasses.fields(CycleResult)]
    assert json.loads(json.dumps(data, allow_nan=False)) == data


def test_site_cost_share_and_breakdown():
    result = plan_joint(_sites(), TruckInput(100.0))
    for plan, site in zip(result.sites, _sites(), strict=True):
        H = site.holding_cost * site.demand_per_day / 2
        assert plan.cost_per_day == pytest.approx(site.stop_cost / plan.cycle_days + H * plan.cycle_days, rel=1e-12)
        assert plan.quantity == pytest.approx(site.demand_per_day * plan.cycle_days, rel=1e-12)
    assert result.cost_breakdown["stops"] + result.cost_breakdown["holding"] == pytest.approx(
        sum(p.cost_per_day for p in result.sites)
    )
    assert result.gap == pytest.approx(result.cost_per_day / result.lower_bound_per_day - 1, rel=1e-12)


def test_binding_names_the_cap_that_shortens_a_cycle():
    sites = [SiteInput("big", 1000, 0.002, 20, 100000), SiteInput("tiny", 100, 0.0001, 40, 300, safe_fill=1.0)]
    result = plan_joint(sites, TruckInput(100.0), method="integer")
    assert [(p.cycle_days, p.binding) for p in result.sites][1] == (3, "tank")
    assert result.sites[0].binding is None
    result = plan_joint([SiteInput("s", 100, 0.0001, 40, 5000, safe_fill=1.0)], TruckInput(100.0, capacity=300.0))
    assert (result.sites[0].cycle_days, result.sites[0].binding) == (3, "truck")


def test_infeasible_base_is_a_result_not_a_crash():
    sites = [_site("short", 100, 300), _site("long", 100, 3000)]
    result = plan_joint(sites, TruckInput(10.0), method="power_of_two", base_days=7)
    assert (result.status, result.success) == (Status.INFEASIBLE, False)
    assert result.message == "base_days 7 is longer than the longest whole-day cycle 3 of site `short`"
    assert result.sites == () and result.trips == () and result.cost_per_day == 0.0
    assert result.to_dict()["status"] == "infeasible"
    assert trips_between(result, TruckInput(10.0), 0, 10).trips == ()
    assert result.needed == {"trips_per_day": None, "remove_sites": ["short"]}
    best = plan_joint(sites, TruckInput(10.0), base_days=7)
    assert best.success and best.method == "integer" and best.base_days is None
    assert best.warnings[-1] == "power_of_two skipped: " + result.message


def test_week_base():
    sites = [_site("a", 100, 1400, holding=0.001), _site("b", 100, 4000, stop_cost=200.0, holding=0.0001)]
    result = plan_joint(sites, TruckInput(50.0), method="power_of_two", base_days=7)
    assert result.base_days == 7
    assert all(p.cycle_days in (7, 14, 28) for p in result.sites)


def test_zero_costs_give_zero_gap():
    result = plan_joint([_site("a", 100, 500, stop_cost=0.0)], TruckInput(0.0))
    assert (result.cost_per_day, result.lower_bound_per_day, result.gap) == (0.0, 0.0, 0.0)


def _prime_sites():
    # no holding cost: each site takes its longest cycle, a prime, so R = 1 · 53 · 59 · 61 · 67 · 71 · 73
    return [_site("daily", 10, 10)] + [_site(f"p{u}", 10, 10 * u) for u in (53, 59, 61, 67, 71, 73)]


def test_long_repeat_period_is_truncated_and_the_window_is_fast():
    truck = TruckInput(5.0)
    result = plan_joint(_prime_sites(), truck, method="integer")
    assert [p.cycle_days for p in result.sites] == [1, 53, 59, 61, 67, 71, 73]
    assert result.repeat_days == math.prod([53, 59, 61, 67, 71, 73])
    assert result.trips_truncated and result.trips[-1].day == joint.LISTED_DAYS - 1
    assert any(w.startswith("trips list days 0 to 3659 of the ") for w in result.warnings)
    start = 2_000_017  # far beyond the repeat period listed, still a representable date
    began = time.perf_counter()
    window = trips_between(result, truck, start, start + 91).trips
    assert time.perf_counter() - began < 0.5
    assert [t.day for t in window] == list(range(start, start + 92))
    for trip in window:  # exactly the policy's deliveries
        expected = [p.code for p in result.sites if (trip.day - p.offset_days) % p.cycle_days == 0]
        assert [s.code for s in trip.stops] == expected
    assert trips_between(result, truck, 0, 99).trips == result.trips[:100]


def test_listing_is_cut_at_whole_days_by_the_stop_limit(monkeypatch):
    monkeypatch.setattr(joint, "LISTED_STOPS", 3)
    sites = [_site("a", 10, 10)] + [_site(c, 10, 20, stop_cost=100.0) for c in "bc"]
    result = plan_joint(sites, TruckInput(1.0), method="integer")
    assert result.repeat_days == 2 and result.trips_truncated
    assert [len(t.stops) for t in result.trips] == [2] and result.trips[-1].day == 0
    assert result.trips_per_repeat == 2


def test_result_rebuilds_from_its_dict():
    # the persistence layer stores to_dict() and rebuilds the record from it
    truck = TruckInput(100.0, capacity=30000.0, max_stops=2)
    result = plan_joint(_sites(), truck)
    data = result.to_dict()
    data["status"] = Status[data["status"].upper()]
    data["sites"] = tuple(SitePlan(**{**s, "delivery_days": tuple(s["delivery_days"])}) for s in data["sites"])
    data["trips"] = tuple(
        Trip(t["day"], dt.date.fromisoformat(t["date"]), t["trip"], t["load"], tuple(Stop(**s) for s in t["stops"]))
        for t in data["trips"]
    )
    data["warnings"] = tuple(data["warnings"])
    data["start_date"] = dt.date.fromisoformat(data["start_date"])
    rebuilt = type(result)(**data)
    assert rebuilt == result
    assert trips_between(rebuilt, truck, 0, 60) == trips_between(result, truck, 0, 60)


def test_a_too_long_integer_repeat_with_a_load_limit_falls_back_to_nested_multiples():
    truck = TruckInput(5.0, capacity=1000.0)  # two prime-cycle deliveries on one day exceed 1000
    result = plan_joint(_prime_sites(), truck, method="integer")
    assert result.success and result.method == "integer"
    assert result.repeat_days <= 128  # cycles rounded down to 1, 32, 64
    assert all(p.cycle_days in (1, 32, 64) for p in result.sites)
    assert all(t.load <= 1000.0 for t in result.trips)
    assert len(result.trips) == result.trips_per_repeat
    assert result.cost_breakdown["dispatch"] == pytest.approx(
        5.0 * result.trips_per_repeat / result.repeat_days, rel=1e-12
    )
