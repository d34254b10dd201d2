"""Safety stock and fill rate against the published formulas (Axsäter, Inventory Control, ch. 5)."""

import math

import pytest
from scipy import integrate, stats

from service.planning import PlanningInputError, safety_stock, safety_stock_for_fill_rate
from service.planning.consumption import normal_loss


def test_cycle_service_level_example():
    # Axsäter, Inventory Control, ch. 5; Silver, Pyke & Peterson (from memory): d = 100/day,
    # σ = 25 per √day, R = 7, L = 1, 95 % cycle service → SS 116.3087, fill rate 0.997889
    # (values recomputed with scipy.stats.norm as the reference library).
    s = safety_stock(100.0, 25.0, 7.0, 1.0, 0.95)
    assert s.sigma_protection == pytest.approx(70.7107, abs=5e-5)
    assert s.k == pytest.approx(1.644854, abs=5e-7)
    assert s.safety_stock == pytest.approx(116.3087, abs=5e-5)
    assert s.fill_rate == pytest.approx(0.997889, abs=5e-7)


def test_fill_rate_example_inverse():
    # Same source: a 99 % fill rate → k = 0.907847, SS = 64.1945, cycle service 0.8180.
    s = safety_stock_for_fill_rate(100.0, 25.0, 7.0, 1.0, 0.99)
    assert s.k == pytest.approx(0.907847, abs=5e-7)
    assert s.safety_stock == pytest.approx(64.1945, abs=5e-5)
    assert s.cycle_service_level == pytest.approx(0.8180, abs=5e-5)
    assert s.fill_rate == pytest.approx(0.99, abs=1e-12)


@pytest.mark.parametrize("k", [-2.0, 0.0, 0.5, 1.0, 3.0, 6.0, 9.0])
def test_normal_loss_is_the_expected_shortfall_by_quadrature(k):
    # G(0) = 0.398942 and G(1) = 0.083315 (C1); generally G(k) = ∫_k^∞ (z − k) φ(z) dz
    # (scipy.integrate.quad as the independent route).
    exact, _ = integrate.quad(lambda z: (z - k) * stats.norm.pdf(z), k, math.inf, epsabs=0, epsrel=1e-12)
    assert normal_loss(k) == pytest.approx(exact, rel=1e-9)
    assert normal_loss(0.0) == pytest.approx(0.398942, abs=5e-7)
    assert normal_loss(1.0) == pytest.approx(0.083315, abs=5e-7)


def test_round_trip_and_no_negative_safety_stock():
    for level in (0.5, 0.8, 0.95, 0.999):
        s = safety_stock(250.0, 60.0, 5.0, 2.0, level)
        back = safety_stock_for_fill_rate(250.0, 60.0, 5.0, 2.0, s.fill_rate)
        assert back.k == pytest.approx(s.k, abs=1e-7)
    low = safety_stock_for_fill_rate(100.0, 25.0, 7.0, 1.0, 0.5)
    assert low.k == 0.0 and low.safety_stock == 0.0 and low.fill_rate > 0.5


def test_bad_inputs_are_refused():
    with pytest.raises(PlanningInputError) as err:
        safety_stock(100.0, 25.0, 7.0, 1.0, 0.3)
    assert err.value.field == "service_level"
    with pytest.raises(PlanningInputError):
        safety_stock_for_fill_rate(100.0, 25.0, 0.0, 1.0, 0.99)
