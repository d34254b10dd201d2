"""Every input check raises PlanningInputError naming the site and the field."""

import math
import re

import pytest

from service.planning import (
    JointResult,
    PlanningInputError,
    SiteInput,
    TruckInput,
    lower_bound,
    plan_joint,
    single_site_cycle,
    trips_between,
)

GOOD = SiteInput("farm-01", 100.0, 0.001, 20.0, 2000.0)
TRUCK = TruckInput(100.0)


@pytest.mark.parametrize(
    "changes, field, message",
    [
        (
            {"demand_per_day": 0.0},
            "demand_per_day",
            "site `farm-03`: demand_per_day must be a finite number > 0, got 0.0",
        ),
        (
            {"demand_per_day": math.nan},
            "demand_per_day",
            "site `farm-03`: demand_per_day must be a finite number > 0, got nan",
        ),
        (
            {"demand_per_day": "95"},
            "demand_per_day",
            "site `farm-03`: demand_per_day must be a finite number > 0, got '95'",
        ),
        ({"holding_cost": -0.1}, "holding_cost", "site `farm-03`: holding_cost must be a finite number >= 0, got -0.1"),
        ({"stop_cost": math.inf}, "stop_cost", "site `farm-03`: stop_cost must be a finite number >= 0, got inf"),
        ({"tank_capacity": 0}, "tank_capacity", "site `farm-03`: tank_capacity must be a finite number > 0, got 0"),
        ({"safe_fill": 1.2}, "safe_fill", "site `farm-03`: safe_fill must be a number in (0, 1], got 1.2"),
        ({"safe_fill": 0.0}, "safe_fill", "site `farm-03`: safe_fill must be a number in (0, 1], got 0.0"),
        ({"safety_stock": -1.0}, "safety_stock", "site `farm-03`: safety_stock must be a finite number >= 0, got -1.0"),
        (
            {"demand_per_day": 95.0, "tank_capacity": 100.0, "safe_fill": 0.9, "safety_stock": 10.0},
            "tank_capacity",
            "site `farm-03`: usable stock 80 holds less than one day of demand 95 "
            "(tank_capacity × safe_fill − safety_stock, capped by truck capacity)",
        ),
    ],
)
def test_site_field_errors(changes, field, message):
    fields = {**GOOD.__dict__, "code": "farm-03", **changes}
    sites = [GOOD, SiteInput("farm-02", 50.0, 0.001, 5.0, 900.0), SiteInput(**fields)]
    for call in (lambda: plan_joint(sites, TRUCK), lambda: lower_bound(sites, TRUCK)):
        with pytest.raises(PlanningInputError, match=re.escape(message)) as info:
            call()
        assert (info.value.field, info.value.index, info.value.code) == (field, 2, "farm-03")
        assert isinstance(info.value, ValueError)


def test_truck_capacity_below_one_day_of_demand():
    with pytest.raises(
        PlanningInputError, match=re.escape("site `farm-01`: usable stock 60 holds less than one day of demand 100")
    ) as info:
        single_site_cycle(GOOD, TruckInput(100.0, capacity=60.0))
    assert (info.value.field, info.value.index, info.value.code) == ("tank_capacity", 0, "farm-01")


@pytest.mark.parametrize(
    "truck, field, message",
    [
        (TruckInput(-1.0), "dispatch_cost", "truck: dispatch_cost must be a finite number >= 0, got -1.0"),
        (TruckInput(math.nan), "dispatch_cost", "truck: dispatch_cost must be a finite number >= 0, got nan"),
        (TruckInput(1.0, capacity=0.0), "capacity", "truck: capacity must be a finite number > 0 or null, got 0.0"),
        (
            TruckInput(1.0, capacity=math.inf),
            "capacity",
            "truck: capacity must be a finite number > 0 or null, got inf",
        ),
        (TruckInput(1.0, max_stops=0), "max_stops", "truck: max_stops must be an integer >= 1 or null, got 0"),
        (TruckInput(1.0, max_stops=2.5), "max_stops", "truck: max_stops must be an integer >= 1 or null, got 2.5"),
        (TruckInput(1.0, max_stops=True), "max_stops", "truck: max_stops must be an integer >= 1 or null, got True"),
    ],
)
def test_truck_errors(truck, field, message):
    with pytest.raises(PlanningInputError, match=re.escape(message)) as info:
        plan_joint([GOOD], truck)
    assert (info.value.field, info.value.index, info.value.code) == (field, None, None)


def test_duplicate_and_missing_codes_and_empty_list():
    with pytest.raises(PlanningInputError, match=re.escape("site `farm-01`: code is a duplicate of site #0")) as info:
        plan_joint([GOOD, GOOD], TRUCK)
    assert (info.value.field, info.value.index, info.value.code) == ("code", 1, "farm-01")
    with pytest.raises(PlanningInputError, match=re.escape("site #1: code must be a non-empty string, got ''")) as info:
        plan_joint([GOOD, SiteInput("", 1.0, 0.0, 0.0, 10.0)], TRUCK)
    assert (info.value.field, info.value.index) == ("code", 1)
    with pytest.raises(PlanningInputError, match=re.escape("sites: at least one site is required")) as info:
        plan_joint([], TRUCK)
    assert info.value.field == "sites"


@pytest.mark.parametrize(
    "kwargs, field, message",
    [
        ({"method": "silver"}, "method", "method must be one of best, power_of_two, integer, got 'silver'"),
        ({"base_days": 0}, "base_days", "base_days must be an integer >= 1 or null, got 0"),
        ({"base_days": 2.0}, "base_days", "base_days must be an integer >= 1 or null, got 2.0"),
        ({"base_days": True}, "base_days", "base_days must be an integer >= 1 or null, got True"),
        (
            {"method": "integer", "base_days": 7},
            "base_days",
            "base_days applies to methods power_of_two and best, not integer",
        ),
    ],
)
def test_option_errors(kwargs, field, message):
    with pytest.raises(PlanningInputError, match=re.escape(message)) as info:
        plan_joint([GOOD], TRUCK, **kwargs)
    assert info.value.field == field


def test_trips_between_errors():
    result = plan_joint([GOOD], TRUCK)
    assert isinstance(result, JointResult)
    with pytest.raises(PlanningInputError, match=re.escape("last_day 3 is before first_day 5")) as info:
        trips_between(result, TRUCK, 5, 3)
    assert info.value.field == "last_day"
    with pytest.raises(PlanningInputError, match=re.escape("first_day must be an integer, got 1.5")):
        trips_between(result, TRUCK, 1.5, 3)
    with pytest.raises(PlanningInputError, match=re.escape("truck: max_stops must be an integer >= 1 or null, got 0")):
        trips_between(result, TruckInput(1.0, max_stops=0), 0, 3)
