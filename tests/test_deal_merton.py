"""Merton (1974) distance to default: a textbook worked example, exact round trips, the
history estimate of asset volatility."""

from __future__ import annotations

import math

import numpy as np
import pytest

from levgap.deal.merton import (
    distance_to_default,
    merton_equity,
    norm_cdf,
    solve_assets,
    volatility_from_history,
)


@pytest.mark.reference
def test_hull_worked_example():
    # Merton (1974) model, worked example in Hull, Options, Futures, and Other Derivatives
    # (recalled from memory, REFERENCES.md: assert to two significant digits): equity 3,
    # equity volatility 0.80, debt 10 due in one year, r = 5% -> assets about 12.40,
    # asset volatility about 0.212, risk-neutral default probability about 12.7%.
    a = solve_assets(3.0, 0.80, 10.0, 0.05)
    assert f"{a.value:.3g}" == "12.4"
    assert f"{a.volatility:.2g}" == "0.21"
    _, prob = distance_to_default(a.value, 10.0, a.volatility, 0.05)
    assert f"{prob[0]:.2g}" == "0.13"
    assert a.source == "equity_volatility"


@pytest.mark.parametrize(("equity", "vol", "debt", "rate"),
                         [(3.0, 0.8, 10.0, 0.05), (50.0, 0.3, 20.0, 0.02),
                          (1.0, 1.2, 30.0, 0.0), (500.0, 0.25, 450.0, 0.04)])
def test_solved_assets_reproduce_the_equity_exactly(equity, vol, debt, rate):
    a = solve_assets(equity, vol, debt, rate)
    e, s = merton_equity(a.value, debt, a.volatility, rate)
    assert e == pytest.approx(equity, rel=1e-10)
    assert s == pytest.approx(vol, rel=1e-9)


def test_distance_to_default_by_hand():
    d2, prob = distance_to_default(120.0, np.array([0.0, 60.0, 100.0]), 0.3, 0.02)
    expect = (math.log(120.0 / 60.0) + (0.02 - 0.045)) / 0.3
    assert d2[1] == pytest.approx(expect, abs=1e-14)
    assert prob[1] == pytest.approx(0.5 * math.erfc(expect / math.sqrt(2)), abs=1e-16)
    assert d2[0] == math.inf and prob[0] == 0.0
    assert prob[2] > prob[1]
    # the normal distribution function at known points
    assert norm_cdf(np.array([0.0, 1.959963984540054]))[1] == pytest.approx(0.975, abs=1e-12)


def test_asset_volatility_from_history():
    years = [2016, 2017, 2018, 2019, 2020, 2021, 2022]
    values = [100.0, 110.0, 99.0, 120.0, math.nan, 130.0, 125.0]
    # the last six levels with a value: 2016-2019, 2021, 2022 -> changes between consecutive
    # years only: 2016-17, 2017-18, 2018-19, 2021-22
    changes = [math.log(1.1), math.log(99 / 110), math.log(120 / 99), math.log(125 / 130)]
    assert volatility_from_history(years, values) == pytest.approx(np.std(changes, ddof=1),
                                                                   abs=1e-15)
    assert math.isnan(volatility_from_history([2020, 2021], [1.0, 2.0]))
    assert math.isnan(volatility_from_history([2018, 2020, 2022], [1.0, 2.0, 3.0]))
