"""The trade-off in money: the tax shield of debt against the expected cost of distress.

- Present value of the interest tax shield of permanent debt ``D`` (Modigliani and Miller
  1963): ``t_c D``, so that ``V_L = V_U + t_c D``. With personal taxes on equity income
  ``t_s`` and on interest ``t_d`` (Miller 1977): ``[1 - (1 - t_c)(1 - t_s) / (1 - t_d)] D``.
- Expected distress cost = probability of default x cost share x firm value, the probability
  from the Merton (1974) model at a one-year horizon (:mod:`levgap.deal.merton`), the cost
  share a stated assumption (default 15%, the middle of the 10-20% of firm value that Andrade
  and Kaplan 1998 find distress costs).
- Over a grid of debt levels from zero to twice the band's top (asset value and volatility
  held as they are: debt replaces equity), the level that maximises tax shield minus expected
  distress cost. This illustrates the trade-off under the stated assumptions; it is not a
  recommendation.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from levgap.deal.merton import HORIZON, AssetValue, distance_to_default

GRID_POINTS = 201


def tax_shield_pv(
    debt: np.ndarray | float,
    tax_rate: float,
    personal_tax_equity: float | None = None,
    personal_tax_debt: float | None = None,
) -> np.ndarray:
    """Present value of the tax shield of permanent debt.

    Parameters
    ----------
    debt : float or numpy.ndarray
        Debt outstanding (permanent).
    tax_rate : float
        Corporate tax rate ``t_c``.
    personal_tax_equity, personal_tax_debt : float, optional
        Personal tax rates on equity income ``t_s`` and on interest ``t_d``; both or neither.

    Returns
    -------
    numpy.ndarray
        ``t_c D`` (Modigliani-Miller 1963), or ``[1 - (1 - t_c)(1 - t_s) / (1 - t_d)] D``
        (Miller 1977).
    """
    d = np.asarray(debt, dtype=float)
    return gain_per_unit(tax_rate, personal_tax_equity, personal_tax_debt) * d


def gain_per_unit(tax_rate: float, personal_tax_equity: float | None = None,
                  personal_tax_debt: float | None = None) -> float:
    """Value gained per unit of permanent debt (``t_c``, or Miller's bracket)."""
    if personal_tax_equity is None or personal_tax_debt is None:
        return float(tax_rate)
    return 1.0 - (1.0 - tax_rate) * (1.0 - personal_tax_equity) / (1.0 - personal_tax_debt)


def expected_distress_cost(probability: np.ndarray | float, cost_share: float,
                           firm_value: float) -> np.ndarray:
    """Probability of distress x share of value lost x firm value."""
    return np.asarray(probability, dtype=float) * cost_share * firm_value


@dataclass(frozen=True, slots=True)
class TradeOff:
    """Tax shield and expected distress cost over a grid of debt levels.

    Parameters
    ----------
    debt : numpy.ndarray
        Debt levels, from 0 to ``top``.
    tax_shield : numpy.ndarray
        PV of the tax shield at each level (NaN without a tax rate).
    default_probability : numpy.ndarray
        Merton one-year risk-neutral probability at each level (NaN without asset data).
    distress_cost : numpy.ndarray
        Expected distress cost at each level.
    net : numpy.ndarray
        ``tax_shield - distress_cost``.
    best_debt, best_net : float
        The level maximising ``net`` (refined between grid points) and its value; NaN when
        either side is missing.
    """

    debt: np.ndarray
    tax_shield: np.ndarray
    default_probability: np.ndarray
    distress_cost: np.ndarray
    net: np.ndarray
    best_debt: float
    best_net: float


def tradeoff_grid(
    top: float,
    *,
    assets: AssetValue | None,
    risk_free_rate: float | None,
    tax_rate: float | None,
    personal_tax_equity: float | None = None,
    personal_tax_debt: float | None = None,
    cost_share: float = 0.15,
    points: int = GRID_POINTS,
    horizon: float = HORIZON,
) -> TradeOff:
    """Tax shield, distress cost and their difference from zero debt to ``top``.

    Parameters
    ----------
    top : float
        Highest debt level of the grid (twice the band's top, in money).
    assets : AssetValue or None
        Asset value and volatility, held fixed over the grid; None: no distress cost.
    risk_free_rate : float or None
        None: no distress cost.
    tax_rate : float or None
        None: no tax shield.
    personal_tax_equity, personal_tax_debt : float, optional
        Miller (1977) personal tax rates.
    cost_share : float, default=0.15
    points : int, default=201
    horizon : float, default=1.0

    Returns
    -------
    TradeOff
    """
    debt = np.linspace(0.0, max(float(top), 0.0), points)
    shield = (tax_shield_pv(debt, tax_rate, personal_tax_equity, personal_tax_debt)
              if tax_rate is not None else np.full(points, np.nan))
    if assets is not None and risk_free_rate is not None:
        _, prob = distance_to_default(assets.value, debt, assets.volatility, risk_free_rate,
                                      horizon)
        cost = expected_distress_cost(prob, cost_share, assets.value)
    else:
        prob = cost = np.full(points, np.nan)
    net = shield - cost
    best_debt = best_net = math.nan
    if np.isfinite(net).all() and top > 0:
        best_debt, best_net = _refine(debt, net, assets, risk_free_rate, horizon, cost_share,
                                      gain_per_unit(tax_rate or 0.0, personal_tax_equity,
                                                    personal_tax_debt))
    return TradeOff(debt=debt, tax_shield=shield, default_probability=prob, distress_cost=cost,
                    net=net, best_debt=best_debt, best_net=best_net)


def _refine(debt: np.ndarray, net: np.ndarray, assets: AssetValue | None,
            rate: float | None, horizon: float, share: float,
            gain: float) -> tuple[float, float]:
    # The grid's best point, then a golden-section search between its neighbours (the net
    # benefit is smooth there; a fine direct search in the tests agrees).
    i = int(np.argmax(net))
    lo, hi = float(debt[max(i - 1, 0)]), float(debt[min(i + 1, len(debt) - 1)])
    if hi <= lo or assets is None or rate is None:
        return float(debt[i]), float(net[i])

    def value(d: float) -> float:
        prob = distance_to_default(assets.value, d, assets.volatility, rate, horizon)[1][0]
        return gain * d - prob * share * assets.value

    ratio = (math.sqrt(5.0) - 1.0) / 2.0
    a, b = lo, hi
    c, d = b - ratio * (b - a), a + ratio * (b - a)
    fc, fd = value(c), value(d)
    while b - a > 1e-10 * max(hi, 1.0):
        if fc >= fd:
            b, d, fd = d, c, fc
            c = b - ratio * (b - a)
            fc = value(c)
        else:
            a, c, fc = c, d, fd
            d = a + ratio * (b - a)
            fd = value(d)
    x = 0.5 * (a + b)
    best = value(x)
    if best >= net[i]:
        return x, best
    return float(debt[i]), float(net[i])
