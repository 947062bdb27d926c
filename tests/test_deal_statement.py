"""Pro forma arithmetic: each move against a hand computation, the balance-sheet identity on
random scenarios, and statements that cannot exist refused on one line."""

from __future__ import annotations

import math
from dataclasses import replace

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from levgap.deal.scenario import Scenario
from levgap.deal.statement import LINES, Statement, apply_scenario
from levgap.errors import ConfigError

FIRM = Statement(
    firm_id="F1", fiscal_year=2023, industry="3312", total_assets=1000.0, total_debt=300.0,
    book_equity=450.0, ppe_net=400.0, ebitda=150.0, market_equity=900.0, cash=100.0,
    ebit=110.0, revenue=1200.0, interest_expense=18.0, current_assets=350.0,
    current_liabilities=200.0, total_liabilities=550.0, retained_earnings=250.0,
    rd_expense=20.0,
)
OTHER = Statement(
    firm_id="F2", fiscal_year=2023, industry="3312", total_assets=200.0, total_debt=50.0,
    book_equity=120.0, ppe_net=90.0, ebitda=30.0, market_equity=160.0, cash=20.0, ebit=20.0,
    revenue=260.0, interest_expense=3.0, current_assets=70.0, current_liabilities=30.0,
    total_liabilities=80.0, retained_earnings=60.0, rd_expense=2.0,
)


def _after(**moves) -> Statement:
    return apply_scenario(FIRM, Scenario(name="s", **moves)).after


def test_an_empty_scenario_changes_nothing():
    p = apply_scenario(FIRM, Scenario(name="s", tax_rate=0.3))
    assert p.after == FIRM and p.missing == {} and p.flags == ()


def test_debt_funding_new_assets_gives_d_plus_x_over_a_plus_x():
    x = 250.0
    after = _after(debt_raised=x, expand_assets=x, interest_rate=0.06)
    assert after.leverage("book") == (FIRM.total_debt + x) / (FIRM.total_assets + x)
    assert after.leverage("market") == (300.0 + x) / (300.0 + x + 900.0)
    # the new assets come in the firm's current mix: tangibility and profitability stay
    assert after.ppe_net / after.total_assets == pytest.approx(0.4, abs=1e-15)
    assert after.ebitda / after.total_assets == pytest.approx(0.15, abs=1e-15)
    assert after.cash == pytest.approx(100.0 + x * 0.1, abs=1e-12)
    assert after.interest_expense == pytest.approx(18.0 + 0.06 * x, abs=1e-12)
    assert after.book_equity == FIRM.book_equity and after.total_liabilities == 550.0 + x


def test_debt_raised_alone_sits_in_cash_and_recap_keeps_assets():
    after = _after(debt_raised=100.0)
    assert (after.total_assets, after.cash, after.current_assets) == (1100.0, 200.0, 450.0)
    recap = _after(debt_raised=100.0, equity_bought_back=100.0)
    assert recap.total_assets == 1000.0 and recap.cash == 100.0
    assert (recap.total_debt, recap.book_equity, recap.market_equity) == (400.0, 350.0, 800.0)
    assert recap.total_liabilities == 650.0
    # new debt without a stated rate: interest after the scenario is unknown, and says why
    p = apply_scenario(FIRM, Scenario(name="s", debt_raised=100.0))
    assert math.isnan(p.after.interest_expense) and p.missing == {
        "interest_expense": "interest_rate"}


def test_repayment_saves_the_average_rate_and_issuance_adds_equity():
    after = _after(equity_issued=120.0, debt_repaid=150.0)
    assert after.total_debt == 150.0 and after.cash == 70.0
    assert after.book_equity == 570.0 and after.market_equity == 1020.0
    assert after.interest_expense == pytest.approx(18.0 - 18.0 / 300.0 * 150.0, abs=1e-12)
    assert after.total_assets == 970.0 and after.total_liabilities == 400.0


def test_acquisition_at_a_price_books_goodwill():
    after = _after(debt_raised=400.0, acquire_price=400.0, acquire_assets=330.0,
                   acquire_ppe=150.0, acquire_current_assets=80.0, acquire_cash=15.0,
                   acquire_debt=40.0, acquire_liabilities=30.0,
                   acquire_current_liabilities=25.0, acquire_ebitda=45.0, acquire_ebit=33.0,
                   acquire_revenue=310.0, interest_rate=0.05)
    goodwill = 400.0 - (330.0 - 40.0 - 30.0)
    assert after.goodwill == goodwill == 140.0
    assert after.total_assets == 1000.0 + 400.0 + 330.0 + goodwill - 400.0
    assert after.total_debt == 300.0 + 400.0 + 40.0
    assert after.cash == 100.0 + 400.0 - 400.0 + 15.0
    assert after.current_assets == 350.0 + 80.0 + 0.0
    assert after.current_liabilities == 225.0
    assert after.ppe_net == 550.0 and after.ebitda == 195.0 and after.ebit == 143.0
    assert after.revenue == 1510.0 and after.book_equity == 450.0
    assert after.total_liabilities == 550.0 + 400.0 + 40.0 + 30.0
    assert after.interest_expense == pytest.approx(18.0 + 0.05 * 440.0, abs=1e-12)


def test_acquired_ebitda_without_ebit_leaves_ebit_unknown_and_bargains_are_flagged():
    p = apply_scenario(FIRM, Scenario(name="s", acquire_price=10.0, acquire_assets=50.0,
                                      acquire_ebitda=5.0))
    assert math.isnan(p.after.ebit) and p.missing["ebit"] == "acquire_ebit"
    # price 10 for net assets 50: a gain of 40 in equity, no goodwill
    assert p.flags == ("bargain_purchase_gain",)
    assert p.after.goodwill == 0.0 and p.after.book_equity == 490.0
    assert p.after.retained_earnings == 290.0 and p.after.total_assets == 1040.0


def test_merger_in_shares_adds_the_lines():
    p = apply_scenario(FIRM, Scenario(name="s", merge_with="F2"), partner=OTHER)
    for line in LINES[:-1]:
        assert getattr(p.after, line) == getattr(FIRM, line) + getattr(OTHER, line), line
    assert p.after.goodwill == 0.0 and p.flags == ()


def test_merger_for_cash_eliminates_the_partners_equity():
    p = apply_scenario(FIRM, Scenario(name="s", merge_with="F2", merge_price=200.0,
                                      debt_raised=150.0, interest_rate=0.05), partner=OTHER)
    a = p.after
    assert a.goodwill == 200.0 - 120.0
    assert a.total_assets == 1000.0 + 200.0 + 80.0 + 150.0 - 200.0
    assert (a.book_equity, a.market_equity, a.retained_earnings) == (450.0, 900.0, 250.0)
    assert a.total_debt == 500.0 and a.cash == 100.0 + 20.0 + 150.0 - 200.0
    assert a.total_liabilities == 550.0 + 80.0 + 150.0
    assert a.interest_expense == pytest.approx(18.0 + 3.0 + 0.05 * 150.0, abs=1e-12)


def test_a_merger_partner_without_an_item_makes_it_unknown_and_says_why():
    partner = replace(OTHER, current_assets=math.nan, fiscal_year=2022, industry="2011")
    p = apply_scenario(FIRM, Scenario(name="s", merge_with="F2"), partner=partner)
    assert math.isnan(p.after.current_assets)
    assert p.missing["current_assets"] == "the F2 row's current_assets"
    assert p.flags == ("merge_partner_year_differs", "merge_partner_other_industry")


@pytest.mark.parametrize(
    ("moves", "partner", "pattern"),
    [
        ({"debt_repaid": 1500.0}, None,
         r"deal\.toml: scenario 's': total_assets after the scenario must be > 0; got -500\. "
         r"The scenario spends debt_repaid 1,500\."),
        ({"debt_repaid": 350.0, "equity_issued": 300.0}, None,
         r"key debt_repaid must not exceed the debt outstanding \(300 with the debt raised"),
        ({"acquire_price": 500.0, "acquire_assets": 400.0}, None,
         r"cash after the scenario must be >= 0; got -400: The scenario spends acquire_price "
         r"500\. Raise more"),
        ({"equity_bought_back": 1000.0, "debt_raised": 1000.0}, None,
         r"key equity_bought_back must not exceed the market value of equity \(900\)"),
        ({"debt_raised": 800.0, "equity_bought_back": 800.0}, None,
         r"total_debt after the scenario must not exceed total_assets"),
        ({"merge_with": "F1"}, None, r"key merge_with must name another firm; got the firm "
         r"itself \('F1'\)"),
        ({"merge_with": "F9"}, None, r"key merge_with must name a firm of the panel with a row "
         r"up to fiscal 2023; got 'F9', which has none"),
    ],
)
def test_statements_that_cannot_exist_are_refused(moves, partner, pattern):
    with pytest.raises(ConfigError, match=pattern) as info:
        apply_scenario(FIRM, Scenario(name="s", source="deal.toml", **moves), partner=partner)
    assert "\n" not in str(info.value)


def test_moves_needing_a_missing_item_are_refused():
    no_cash = replace(FIRM, cash=math.nan)
    with pytest.raises(ConfigError, match=r"scenario 's': key acquire_price is paid out of "
                       r"cash, but the firm's 2023 row \(or the other firm's\) has no cash; "
                       r"add cash to the panel"):
        apply_scenario(no_cash, Scenario(name="s", acquire_price=5.0, acquire_assets=5.0))
    private = replace(FIRM, market_equity=math.nan)
    with pytest.raises(ConfigError, match=r"key equity_volatility needs the firm's "
                       r"market_equity, which its 2023 row lacks"):
        apply_scenario(private, Scenario(name="s", equity_volatility=0.4))
    # raising cash needs no cash line: it stays unknown
    assert math.isnan(apply_scenario(no_cash, Scenario(name="s", debt_raised=5.0)).after.cash)


money = st.floats(min_value=0.0, max_value=300.0, allow_nan=False)


@settings(max_examples=200, deadline=None)
@given(raised=money, repaid=st.floats(0.0, 250.0), issued=money, back=st.floats(0.0, 200.0),
       expand=st.floats(0.0, 100.0), price=st.floats(0.0, 150.0), assets=money,
       debt=st.floats(0.0, 50.0), liab=st.floats(0.0, 50.0), merge=st.booleans(),
       merge_price=st.one_of(st.none(), st.floats(0.0, 200.0)))
def test_balance_sheet_identity_on_random_scenarios(raised, repaid, issued, back, expand, price,
                                                    assets, debt, liab, merge, merge_price):
    """Assets minus book equity minus total liabilities (the other claims) never moves, and
    the cash ledger balances: every scenario that passes its checks is a real balance sheet."""
    moves = {"debt_raised": raised, "debt_repaid": repaid, "equity_issued": issued,
             "equity_bought_back": back, "expand_assets": expand, "interest_rate": 0.05}
    if merge:
        moves.update(merge_with="F2", merge_price=merge_price)
    else:
        moves.update(acquire_price=price, acquire_assets=assets, acquire_debt=debt,
                     acquire_liabilities=liab)
    try:
        p = apply_scenario(FIRM, Scenario(name="s", **moves), partner=OTHER)
    except ConfigError:
        return
    a = p.after
    other_claims = FIRM.total_assets - FIRM.book_equity - FIRM.total_liabilities
    assert a.total_assets - a.book_equity - a.total_liabilities == pytest.approx(
        other_claims, abs=1e-9)
    spent = back + repaid + expand + ((merge_price or 0.0) if merge else price)
    cash_in = raised + issued + (OTHER.cash if merge else 0.0)
    assert a.cash == pytest.approx(FIRM.cash + cash_in - spent + expand * 0.1, abs=1e-9)
    assert a.total_assets > 0 and a.cash >= -1e-6 and a.total_debt <= a.total_assets * (1 + 1e-9)
