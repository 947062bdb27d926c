"""Credit ratios and Altman scores against hand computations and Altman's published values."""

from __future__ import annotations

import math
from dataclasses import replace

import pytest

from levgap.deal.credit import altman, altman_z, altman_z2, credit_ratios, is_manufacturer, zone
from levgap.deal.scenario import Scenario
from levgap.deal.statement import Statement, apply_scenario

# Built so that X1 = .10, X2 = .20, X3 = .08, X4 = 1.5 (market equity / liabilities, and book
# equity / liabilities), X5 = 1.2: the worked values of REFERENCES.md.
WORKED = Statement(
    firm_id="W", fiscal_year=2020, industry="3312", total_assets=1000.0, total_debt=250.0,
    book_equity=600.0, ppe_net=300.0, ebitda=130.0, market_equity=600.0, cash=40.0, ebit=80.0,
    revenue=1200.0, interest_expense=20.0, current_assets=300.0, current_liabilities=200.0,
    total_liabilities=400.0, retained_earnings=200.0,
)


@pytest.mark.reference
def test_altman_z_worked_value():
    # Altman (1968) JF 23(4): Z = 1.2 X1 + 1.4 X2 + 3.3 X3 + 0.6 X4 + 1.0 X5; with
    # X = (.10, .20, .08, 1.5, 1.2) Z = 2.764 (REFERENCES.md, "Trade-off arithmetic")
    assert altman_z(0.10, 0.20, 0.08, 1.5, 1.2) == pytest.approx(2.764, abs=1e-12)
    z = altman(WORKED)
    assert z.model == "Z" and z.score == pytest.approx(2.764, abs=1e-12)
    assert z.parts == pytest.approx((0.10, 0.20, 0.08, 1.5, 1.2), abs=1e-15)
    # Altman (1968) zones: distress < 1.81, grey 1.81-2.99, safe > 2.99
    assert z.zone == "grey"


@pytest.mark.reference
def test_altman_z2_worked_value():
    # Altman's Z'' for non-manufacturers (Altman 2000 revision; 6.56 and the cut-offs partly
    # from memory, REFERENCES.md): 6.56 X1 + 3.26 X2 + 6.72 X3 + 1.05 X4 = 3.4206
    assert altman_z2(0.10, 0.20, 0.08, 1.5) == pytest.approx(3.4206, abs=1e-12)
    z = altman(replace(WORKED, industry="7372"))
    assert z.model == "Z''" and z.score == pytest.approx(3.4206, abs=1e-12)
    assert z.zone == "safe"  # Z'' zones: distress < 1.10, safe > 2.60


def test_zones_at_the_cut_offs():
    assert [zone("Z", v) for v in (1.80, 1.81, 2.99, 3.0)] == ["distress", "grey", "grey",
                                                              "safe"]
    assert [zone("Z''", v) for v in (1.09, 1.10, 2.60, 2.61)] == ["distress", "grey", "grey",
                                                                 "safe"]
    assert zone("Z", math.nan) == ""


def test_manufacturers_are_sic_2000_to_3999():
    assert [is_manufacturer(c) for c in ("2000", "3999", "3711.0", "1999", "4000", "0100",
                                         "371", "Retail", "311111")] == [
        True, True, True, False, False, False, False, False, False]


def test_not_computable_says_what_it_needs():
    z = altman(replace(WORKED, current_assets=math.nan, retained_earnings=math.nan))
    assert math.isnan(z.score) and z.zone == ""
    assert z.note == "not computable: needs current_assets, retained_earnings"
    # a scenario that makes EBIT unknown names its own key
    p = apply_scenario(WORKED, Scenario(name="s", acquire_price=30.0, acquire_assets=30.0,
                                        acquire_ebitda=8.0))
    assert altman(p.after, p.missing).note == "not computable: needs acquire_ebit"
    zpp = altman(replace(WORKED, industry="5411", total_liabilities=math.nan))
    assert zpp.model == "Z''" and zpp.note == "not computable: needs total_liabilities"


def test_credit_ratios_by_hand():
    r = credit_ratios(WORKED)
    assert r["net_debt_to_ebitda"].value == pytest.approx((250.0 - 40.0) / 130.0, abs=1e-15)
    assert r["debt_to_ebitda"].value == pytest.approx(250.0 / 130.0, abs=1e-15)
    assert r["ebitda_to_interest"].value == pytest.approx(130.0 / 20.0, abs=1e-15)
    assert all(v.note == "" for v in r.values())
    bad = credit_ratios(replace(WORKED, ebitda=-5.0, interest_expense=0.0, cash=math.nan))
    assert bad["net_debt_to_ebitda"].note == "not computable: needs cash"
    assert bad["debt_to_ebitda"].note == "not meaningful: EBITDA is zero or negative"
    assert bad["ebitda_to_interest"].note == "not meaningful: no interest expense"
    p = apply_scenario(WORKED, Scenario(name="s", debt_raised=100.0))
    after = credit_ratios(p.after, p.missing)
    assert after["ebitda_to_interest"].note == "not computable: needs interest_rate"
    assert after["net_debt_to_ebitda"].value == pytest.approx(210.0 / 130.0, abs=1e-15)
