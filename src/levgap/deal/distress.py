"""Distress context of one pro forma statement: asset value and volatility, distance to
default, tax shield and expected distress cost at the scenario's debt, and the trade-off grid.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass

from levgap import glossary as g
from levgap.deal.merton import (
    AssetValue,
    distance_to_default,
    solve_assets,
    volatility_from_history,
)
from levgap.deal.scenario import Scenario
from levgap.deal.statement import Statement
from levgap.deal.tradeoff import TradeOff, gain_per_unit, tradeoff_grid

NAN = math.nan


@dataclass(frozen=True, slots=True)
class Distress:
    """Merton distance to default and the money of the trade-off at a statement's debt.

    Parameters
    ----------
    assets : AssetValue or None
        None when not computable (``notes`` says why).
    distance_to_default, default_probability : float
    tax_shield_pv, expected_distress_cost : float
    notes : tuple of str
        ``"<what>: not computable: needs X"`` for each figure left empty.
    flags : tuple of str
        ``asset_volatility_estimated`` when the volatility comes from the firm's history.
    """

    assets: AssetValue | None
    distance_to_default: float
    default_probability: float
    tax_shield_pv: float
    expected_distress_cost: float
    notes: tuple[str, ...] = ()
    flags: tuple[str, ...] = ()


def asset_value(after: Statement, scenario: Scenario, years: Sequence[int],
                values: Sequence[float]) -> tuple[AssetValue | None, str]:
    """Asset value and volatility of a pro forma statement, and a note when not computable.

    Parameters
    ----------
    after : Statement
    scenario : Scenario
        ``asset_volatility`` (taken as given, with ``V = debt + market equity``) or
        ``equity_volatility`` (asset value and volatility solved from the Merton model).
    years, values : sequence
        The firm's history of debt plus market equity (its own, or combined with the other
        firm of a merger), for the estimate when the scenario gives no volatility.

    Returns
    -------
    (AssetValue or None, str)
    """
    if math.isnan(after.market_equity):
        return None, "not computable: needs market_equity"
    value = after.total_debt + after.market_equity
    if value <= 0:
        return None, "not meaningful: no debt and no market value"
    if scenario.asset_volatility is not None:
        return AssetValue(value, scenario.asset_volatility, "scenario"), ""
    if scenario.equity_volatility is not None:
        if after.total_debt == 0:
            return AssetValue(value, scenario.equity_volatility, "equity_volatility"), ""
        if scenario.risk_free_rate is None or after.market_equity <= 0:
            return None, "not computable: needs risk_free_rate" if scenario.risk_free_rate \
                is None else "not meaningful: market equity is zero"
        return solve_assets(after.market_equity, scenario.equity_volatility, after.total_debt,
                            scenario.risk_free_rate), ""
    sigma = volatility_from_history(years, values)
    if math.isnan(sigma) or sigma <= 0:
        return None, ("not computable: needs asset_volatility (the firm has fewer than three "
                      "fiscal years of debt plus market equity)")
    return AssetValue(value, sigma, "history"), ""


def distress_at(after: Statement, scenario: Scenario, assets: AssetValue | None,
                asset_note: str) -> Distress:
    """Distance to default, tax shield and expected distress cost at the statement's debt."""
    notes, flags = [], []
    if assets is not None and assets.source == "history":
        flags.append("asset_volatility_estimated")
    debt = after.total_debt
    dd = prob = cost = NAN
    if assets is None:
        notes.append(f"{g.label('distance_to_default')}: {asset_note}")
    elif scenario.risk_free_rate is None:
        notes.append(f"{g.label('distance_to_default')}: not computable: needs risk_free_rate")
    else:
        d2, p = distance_to_default(assets.value, debt, assets.volatility,
                                    scenario.risk_free_rate)
        dd, prob = float(d2[0]), float(p[0])
        cost = prob * scenario.distress_cost_share * assets.value
    shield = NAN
    if scenario.tax_rate is None:
        notes.append("tax shield: not computable: needs tax_rate")
    else:
        shield = gain_per_unit(scenario.tax_rate, scenario.personal_tax_equity,
                               scenario.personal_tax_debt) * debt
    return Distress(assets=assets, distance_to_default=dd, default_probability=prob,
                    tax_shield_pv=shield, expected_distress_cost=cost, notes=tuple(notes),
                    flags=tuple(flags))


def grid(scenario: Scenario, assets: AssetValue | None, band_top_debt: float) -> TradeOff:
    """The trade-off from zero debt to twice the debt at the band's top."""
    return tradeoff_grid(
        2.0 * max(band_top_debt, 0.0), assets=assets, risk_free_rate=scenario.risk_free_rate,
        tax_rate=scenario.tax_rate, personal_tax_equity=scenario.personal_tax_equity,
        personal_tax_debt=scenario.personal_tax_debt,
        cost_share=scenario.distress_cost_share)
