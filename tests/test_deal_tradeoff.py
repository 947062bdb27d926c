"""Tax shield and expected distress cost against the published formulas; the grid's best
debt level against a direct search."""

from __future__ import annotations

import math

import numpy as np
import pytest

from levgap.deal.merton import AssetValue, distance_to_default
from levgap.deal.tradeoff import expected_distress_cost, tax_shield_pv, tradeoff_grid


@pytest.mark.reference
def test_modigliani_miller_example():
    # Modigliani and Miller (1963) AER 53(3): V_L = V_U + t_c D; V_U 6,000, D 1,000, t_c 0.40
    # gives 6,400 (REFERENCES.md)
    assert 6000.0 + float(tax_shield_pv(1000.0, 0.40)) == pytest.approx(6400.0, abs=1e-9)


@pytest.mark.reference
def test_miller_formula():
    # Miller (1977) JF 32(2): gain = [1 - (1 - t_c)(1 - t_s) / (1 - t_d)] D
    d, tc, ts, td = 1000.0, 0.35, 0.15, 0.40
    assert float(tax_shield_pv(d, tc, ts, td)) == pytest.approx(
        (1 - (1 - tc) * (1 - ts) / (1 - td)) * d, abs=1e-9)
    # zero when (1 - t_c)(1 - t_s) = 1 - t_d
    assert float(tax_shield_pv(d, 0.35, 0.10, 1 - 0.65 * 0.90)) == pytest.approx(0.0, abs=1e-9)
    # equal personal rates give back Modigliani-Miller's t_c D
    assert float(tax_shield_pv(d, 0.30, 0.25, 0.25)) == pytest.approx(300.0, abs=1e-9)


def test_grid_is_shield_minus_probability_times_share_times_value():
    assets = AssetValue(value=1000.0, volatility=0.3, source="scenario")
    t = tradeoff_grid(900.0, assets=assets, risk_free_rate=0.03, tax_rate=0.25,
                      cost_share=0.2, points=91)
    assert t.debt[0] == 0.0 and t.debt[-1] == 900.0 and len(t.debt) == 91
    _, prob = distance_to_default(1000.0, t.debt, 0.3, 0.03)
    assert np.array_equal(t.default_probability, prob)
    assert np.allclose(t.distress_cost, prob * 0.2 * 1000.0, rtol=0, atol=1e-12)
    assert np.allclose(t.net, 0.25 * t.debt - t.distress_cost, rtol=0, atol=1e-12)
    assert float(expected_distress_cost(0.1, 0.15, 2000.0)) == pytest.approx(30.0, abs=1e-12)
    # the best level beats every grid point and a fine direct search to 1e-6 of the value
    assert t.best_net >= t.net.max() - 1e-12
    fine = np.linspace(0.0, 900.0, 200_001)
    _, p = distance_to_default(1000.0, fine, 0.3, 0.03)
    net = 0.25 * fine - p * 0.2 * 1000.0
    assert t.best_debt == pytest.approx(fine[np.argmax(net)], abs=0.01)
    assert t.best_net == pytest.approx(net.max(), abs=1e-6)
    assert 0.0 < t.best_debt < 900.0


def test_missing_assumptions_leave_that_side_out():
    assets = AssetValue(value=1000.0, volatility=0.3, source="scenario")
    no_tax = tradeoff_grid(500.0, assets=assets, risk_free_rate=0.03, tax_rate=None)
    assert np.isnan(no_tax.tax_shield).all() and np.isfinite(no_tax.distress_cost).all()
    assert math.isnan(no_tax.best_debt)
    no_assets = tradeoff_grid(500.0, assets=None, risk_free_rate=0.03, tax_rate=0.2)
    assert np.isfinite(no_assets.tax_shield).all() and np.isnan(no_assets.distress_cost).all()
    assert math.isnan(no_assets.best_net)
