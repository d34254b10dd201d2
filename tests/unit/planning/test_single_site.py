"""EOQ worked examples, caps and binding, whole-day cycles of one site alone with the truck."""

import math

import pytest

from service.planning import SiteInput, TruckInput, single_site_cycle
from service.planning.cycle_cost import cycle_cost
from service.planning.single_site import _eoq

REL = 1e-9


def test_e1_snyder_shen_example_3_1():
    # E1: Snyder & Shen 2e, Example 3.1 (PUBLISHED, stockpyl tests/test_eoq.py), years
    T, Q, C = _eoq(8, 0.75 * 0.3, 1300)
    assert Q == pytest.approx(304.0467800264368, rel=REL)
    assert C == pytest.approx(68.41052550594829, rel=REL)
    assert T == pytest.approx(0.2338821, rel=1e-6)  # E1 recomputed T* (DERIVED)


def test_e2_snyder_shen_problem_3_1():
    # E2: Snyder & Shen, Problem 3.1 (PUBLISHED, stockpyl tests), years
    T, Q, C = _eoq(2250, 275, 500 * 365)
    assert Q == pytest.approx(1728.109844993551, rel=REL)
    assert C == pytest.approx(475230.2073732266, rel=REL)
    assert T == pytest.approx(0.0094691, rel=1e-4)


def test_e3_hillier_lieberman_speaker_example():
    # E3: Hillier & Lieberman 7e, PUBLISHED as quoted in R SCperf docs: Q 25298, 3.2 months, $7589.5; months
    T, Q, C = _eoq(12000, 0.30, 8000)
    assert round(Q) == 25298
    assert round(T, 1) == 3.2
    assert round(C, 1) == 7589.5


def test_e4_silver_pyke_peterson_midas():
    # E4: SPP MIDAS example (MEMORY; arithmetic recomputed): EOQ 400 units, T = 1/6 year, TRC 38.40 per year
    T, Q, C = _eoq(3.20, 0.40 * 0.24, 2400)
    assert Q == pytest.approx(400.0, rel=REL)
    assert T == pytest.approx(1 / 6, rel=REL)
    assert C == pytest.approx(38.40, rel=REL)


def test_e5_nahmias_pencil_example():
    # E5: Nahmias, pencil example (MEMORY: Q* ≈ 3870; recomputed 3869.8837), years
    T, Q, C = _eoq(12, 0.02 * 0.25, 60 * 52)
    assert round(Q, -1) == 3870
    assert Q == pytest.approx(3869.8837, rel=1e-7)
    assert C == pytest.approx(19.349419, rel=1e-7)
    assert T == pytest.approx(1.240347, rel=1e-6)


def test_e6_harris_formula_is_the_eoq():
    # E6: Harris (1913) X* = sqrt(24 M S / (R C)) (citation PUBLISHED; identity DERIVED: D = 12 M, h = R C)
    M, S, R, C = 500.0, 40.0, 0.1, 2.5
    assert _eoq(S, R * C, 12 * M)[1] == pytest.approx(math.sqrt(24 * M * S / (R * C)), rel=REL)


@pytest.mark.parametrize("x", [0.25, 0.5, 1 / math.sqrt(2), 1.0, 1.3, 2.0, 3.7])
def test_cost_ratio_off_by_factor_x(x):
    # 1b: cost ratio (x + 1/x)/2 (PUBLISHED as code: Rossi `sensitivity_to_Q`)
    a, H = 350.0, 1.2
    T = math.sqrt(a / H)
    assert float(cycle_cost(a, H, x * T) / cycle_cost(a, H, T)) == pytest.approx((x + 1 / x) / 2, rel=REL)


def test_cost_ratio_constants():
    # 1b: x = 2 gives 1.25 exactly; x = √2 gives 3/(2√2) = 1.0606601717798212 (DERIVED)
    assert float(cycle_cost(1.0, 1.0, 2.0) / cycle_cost(1.0, 1.0, 1.0)) == pytest.approx(1.25, rel=REL)
    assert float(cycle_cost(1.0, 1.0, math.sqrt(2)) / 2.0) == pytest.approx(1.0606601717798212, rel=REL)


def _site(demand, holding, usable, code="s"):
    return SiteInput(code, demand, holding, 0.0, usable, safe_fill=1.0)


def test_c1_cap_in_days_tank_binding():
    # C1: E1 with Q ≤ 250 (DERIVED; stockpyl test_order_quantity): capped cost 69.725 per year
    d, h = 1300 / 365, 0.225 / 365  # years → days: demand and h per unit divided by 365
    result = single_site_cycle(_site(d, h, 250.0), TruckInput(8.0))
    assert result.cycle_days_continuous == pytest.approx(250 / d, rel=REL)
    assert result.cost_per_day_continuous == pytest.approx(69.725 / 365, rel=REL)
    assert result.binding == "tank"
    # whole days: U = 70.19 days, so T = 70 (cost convex, below the cap)
    assert result.cycle_days == 70
    assert result.cost_per_day == pytest.approx(8 / 70 + h * d / 2 * 70, rel=REL)
    assert result.quantity == pytest.approx(70 * d, rel=REL)


def test_c1_truck_capacity_binding():
    # C1 again, the 250 cap coming from the truck (DERIVED)
    d, h = 1300 / 365, 0.225 / 365
    result = single_site_cycle(_site(d, h, 1000.0), TruckInput(8.0, capacity=250.0))
    assert result.binding == "truck"
    assert result.cost_per_day_continuous == pytest.approx(69.725 / 365, rel=REL)


def test_c2_depot_in_days():
    # C2: DERIVED: T* = 17.078251, cap U = 16.666667, capped cost 41.000000, whole-day T = 16 at 41.075
    result = single_site_cycle(SiteInput("depot", 1200, 0.002, 50, 20000, safe_fill=1.0), TruckInput(300))
    assert result.cycle_days_continuous == pytest.approx(20000 / 1200, rel=REL)
    assert result.cost_per_day_continuous == pytest.approx(41.0, rel=REL)
    assert result.cycle_days == 16
    assert result.cost_per_day == pytest.approx(41.075, rel=REL)
    assert result.quantity == pytest.approx(19200, rel=REL)
    assert result.binding == "tank"


def test_free_optimum_not_binding_and_whole_day_rounding():
    # C2 without the cap: T* = 17.078 days (DERIVED); whole days compares 17 and 18
    result = single_site_cycle(SiteInput("depot", 1200, 0.002, 50, 40000, safe_fill=1.0), TruckInput(300))
    assert result.binding is None
    assert result.cycle_days_continuous == pytest.approx(math.sqrt(350 / 1.2), rel=REL)
    assert result.cost_per_day_continuous == pytest.approx(2 * math.sqrt(350 * 1.2), rel=REL)
    assert result.cycle_days == 17
    assert result.cost_per_day == pytest.approx(min(350 / 17 + 1.2 * 17, 350 / 18 + 1.2 * 18), rel=REL)


def test_both_caps_below_free_optimum_the_smaller_binds():
    tank_smaller = single_site_cycle(
        SiteInput("s", 100, 0.0001, 50, 1000, safe_fill=1.0), TruckInput(300, capacity=1500)
    )
    truck_smaller = single_site_cycle(
        SiteInput("s", 100, 0.0001, 50, 2000, safe_fill=1.0), TruckInput(300, capacity=1500)
    )
    assert (tank_smaller.binding, tank_smaller.cycle_days) == ("tank", 10)
    assert (truck_smaller.binding, truck_smaller.cycle_days) == ("truck", 15)


def test_no_holding_cost_takes_the_longest_cycle():
    result = single_site_cycle(SiteInput("s", 100, 0.0, 50, 1250, safe_fill=1.0), TruckInput(300))
    assert result.cycle_days_continuous == 12.5
    assert result.cycle_days == 12
    assert result.binding == "tank"
    assert result.cost_per_day == pytest.approx(350 / 12, rel=REL)


def test_all_costs_zero_takes_the_longest_cycle_at_zero_cost():
    result = single_site_cycle(SiteInput("s", 100, 0.0, 0.0, 1250, safe_fill=1.0), TruckInput(0.0))
    assert (result.cycle_days, result.cost_per_day, result.binding) == (12, 0.0, None)


def test_no_ordering_cost_delivers_daily():
    result = single_site_cycle(SiteInput("s", 100, 0.01, 0.0, 1250, safe_fill=1.0), TruckInput(0.0))
    assert (result.cycle_days_continuous, result.cost_per_day_continuous) == (0.0, 0.0)
    assert result.cycle_days == 1
    assert result.cost_per_day == pytest.approx(0.5, rel=REL)


def test_safety_stock_and_safe_fill_reduce_usable_stock():
    # usable = 10000 × 0.9 − 1000 = 8000 L = 8 days at 1000 L/day
    result = single_site_cycle(
        SiteInput("s", 1000, 0.0001, 10, 10000, safe_fill=0.9, safety_stock=1000), TruckInput(200)
    )
    assert result.cycle_days_continuous == pytest.approx(8.0, rel=REL)
    assert result.cycle_days == 8
