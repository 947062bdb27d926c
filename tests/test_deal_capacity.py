"""Debt capacity under both conventions: closed forms by hand, root solves that land on the
level when fed back as a scenario, and debt_to_target's stated convention."""

from __future__ import annotations

import math
from dataclasses import replace

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from levgap.deal.capacity import capacity, closed_form, debt_to_target, moved
from levgap.deal.scenario import Scenario
from levgap.deal.statement import Statement, apply_scenario

FIRM = Statement(
    firm_id="F1", fiscal_year=2023, industry="2421", total_assets=800.0, total_debt=120.0,
    book_equity=380.0, ppe_net=420.0, ebitda=96.0, market_equity=700.0, cash=60.0,
    interest_expense=14.0,
)


def drivers(s: Statement) -> np.ndarray:
    """The drivers as DESIGN.md defines them, from a statement."""
    a = s.total_assets
    return np.array([s.ppe_net / a, s.ebitda / a, math.log(a),
                     (a - s.book_equity + s.market_equity) / a])


BETA = np.array([0.30, -0.55, 0.025, -0.02])


def linear_target(s: Statement) -> float:
    return float(0.02 + drivers(s) @ BETA)


def logit_target(s: Statement) -> float:
    return float(1.0 / (1.0 + math.exp(-(-1.9 + drivers(s) @ (4 * BETA)))))


def band_top(s: Statement) -> float:
    return logit_target(s) + 0.11


def test_closed_forms_by_hand():
    d, a, e, t = 120.0, 800.0, 700.0, 0.35
    assert closed_form(FIRM, "book", "recap", t) == pytest.approx(t * a - d, abs=1e-12)
    assert closed_form(FIRM, "book", "funded", t) == pytest.approx((t * a - d) / (1 - t),
                                                                   abs=1e-12)
    assert closed_form(FIRM, "market", "recap", t) == pytest.approx(t * (d + e) - d, abs=1e-12)
    assert closed_form(FIRM, "market", "funded", t) == pytest.approx(t * e / (1 - t) - d,
                                                                     abs=1e-12)
    assert closed_form(FIRM, "market", "funded", 1.0) == math.inf


def test_funded_book_leverage_is_d_plus_x_over_a_plus_x():
    for x in (-120.0, -10.0, 0.0, 55.5, 1e4):
        m = moved(FIRM, "funded", x)
        assert m.leverage("book") == (120.0 + x) / (800.0 + x)
        assert m.ppe_net / m.total_assets == pytest.approx(420.0 / 800.0, abs=1e-15)
    r = moved(FIRM, "recap", 100.0)
    assert (r.total_assets, r.leverage("book")) == (800.0, 220.0 / 800.0)
    assert r.leverage("market") == 220.0 / 820.0


@pytest.mark.parametrize("measure", ["book", "market"])
@pytest.mark.parametrize("level_of", [linear_target, logit_target, band_top])
def test_capacity_fed_back_as_a_scenario_lands_on_the_level(measure, level_of):
    funded = capacity(FIRM, measure, "funded", level_of)
    recap = capacity(FIRM, measure, "recap", level_of)
    # the target moves with size and market-to-book when debt buys assets: a root solve;
    # a recapitalisation moves no driver: the closed form is exact
    assert funded.method == "root solve" and recap.method == "closed form"
    for cap, moves in ((funded, {"expand_assets": funded.amount}),
                       (recap, {"equity_bought_back": recap.amount})):
        assert cap.amount > 0 and cap.flag == ""
        after = apply_scenario(FIRM, Scenario(name="cap", debt_raised=cap.amount,
                                              **moves)).after
        assert after.leverage(measure) - level_of(after) == pytest.approx(0.0, abs=1e-9)
        assert cap.level == pytest.approx(level_of(after), abs=1e-9)


@settings(max_examples=60, deadline=None)
@given(debt=st.floats(0.0, 700.0), ppe=st.floats(0.0, 800.0), me=st.floats(1.0, 5000.0),
       shift=st.floats(-0.3, 0.4))
def test_root_solve_lands_on_random_firms(debt, ppe, me, shift):
    s = replace(FIRM, total_debt=debt, ppe_net=ppe, market_equity=me)

    def level(m: Statement) -> float:
        return logit_target(m) + shift

    for measure in ("book", "market"):
        for convention in ("funded", "recap"):
            cap = capacity(s, measure, convention, level)
            m = moved(s, convention, cap.amount)
            if cap.flag == "":
                assert m.leverage(measure) - level(m) == pytest.approx(0.0, abs=1e-9)
            elif cap.flag == "target_below_zero":
                assert cap.amount == -debt and level(moved(s, convention, -debt)) < 0
            else:
                assert cap.flag == "unreachable" and convention == "recap"
                assert m.leverage(measure) < level(m)


def test_levels_out_of_reach_are_flagged_not_nan():
    below = capacity(FIRM, "book", "funded", lambda s: -0.05)
    assert (below.amount, below.flag) == (-120.0, "target_below_zero")
    high = capacity(FIRM, "market", "funded", lambda s: 1.2)
    assert (high.amount, high.flag) == (math.inf, "market_target_at_or_above_one")
    recap = capacity(FIRM, "market", "recap", lambda s: 1.0)
    assert (recap.amount, recap.flag) == (700.0, "market_target_at_or_above_one")


def test_no_funded_market_capacity_once_market_equity_is_gone():
    # Market leverage D / (D + 0) is 1 at any positive debt: no funded amount reaches a level
    # below 1; a figure would be wrong (it was, before: +447.6 that landed nowhere).
    gone = replace(FIRM, market_equity=0.0)
    for level in (0.3, 0.7):
        cap = capacity(gone, "market", "funded", lambda s, v=level: v)
        assert math.isnan(cap.amount) and cap.flag == "no_market_equity_left"
    recap = capacity(gone, "market", "recap", lambda s: 0.5)  # equity replaces debt: reachable
    assert recap.amount == pytest.approx(0.5 * FIRM.total_debt - FIRM.total_debt)


def test_debt_to_target_recapitalisation_convention():
    debt = np.array([100.0, 100.0, 100.0, 0.0, 50.0])
    assets = np.array([500.0, 500.0, 500.0, 200.0, 400.0])
    equity = np.array([300.0, 300.0, 300.0, 100.0, np.nan])
    target = np.array([0.30, -0.10, 1.05, 0.20, 0.40])
    book, book_flag = debt_to_target("book", debt, assets, equity, target)
    assert book.tolist() == [0.30 * 500 - 100, -100.0, 400.0, 40.0, 0.40 * 400 - 50]
    assert book_flag.tolist() == ["", "target_below_zero", "book_target_at_or_above_one", "",
                                  ""]
    market, flag = debt_to_target("market", debt, assets, equity, target)
    # debt plus market equity fixed: T (D + E) - D; a target of 1 or more replaces every share
    assert market[:4].tolist() == pytest.approx([0.30 * 400 - 100, -100.0, 300.0, 20.0],
                                                abs=1e-12)
    assert flag.tolist() == ["", "target_below_zero", "market_target_at_or_above_one", "", ""]
    assert np.isnan(market[4])  # no market equity: no market row to begin with
    # the same answer as the general solver with the target held fixed
    for i in range(4):
        s = replace(FIRM, total_debt=debt[i], total_assets=assets[i], market_equity=equity[i],
                    book_equity=assets[i] / 2)
        cap = capacity(s, "market", "recap", lambda m, t=target[i]: t)
        assert cap.amount == pytest.approx(market[i], abs=1e-9)
