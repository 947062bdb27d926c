"""Merton (1974) distance to default: the firm's assets as a lognormal value against its debt.

With asset value ``V``, asset volatility ``sigma``, debt face value ``F`` due at the horizon
``T`` (one year here) and risk-free rate ``r``::

    d1 = (ln(V / F) + (r + sigma^2 / 2) T) / (sigma sqrt(T)),   d2 = d1 - sigma sqrt(T)
    equity E = V N(d1) - F exp(-r T) N(d2)
    equity volatility sigma_E = N(d1) sigma V / E
    distance to default = d2, risk-neutral probability of default = N(-d2)

All of the firm's interest-bearing debt is taken as due at the horizon (a stated, cautious
simplification). Asset value and volatility come, in this order of preference, from the
scenario (``asset_volatility``, with ``V = debt + market equity``), from the equity value and
volatility by solving the two equations above (``equity_volatility``), or from the firm's
history of debt plus market equity (the standard deviation of its annual log changes, at least
three years of levels), flagged as an estimate.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

HORIZON = 1.0
HISTORY_MIN_YEARS = 3
HISTORY_MAX_YEARS = 6
"""Levels of debt plus market equity used for the history estimate: at least 3, at most the
last 6 fiscal years (five annual changes)."""


@dataclass(frozen=True, slots=True)
class AssetValue:
    """Asset value and volatility for the Merton model, and where they came from.

    Parameters
    ----------
    value : float
        Asset value V.
    volatility : float
        Annual asset volatility.
    source : {"scenario", "equity_volatility", "history"}
    """

    value: float
    volatility: float
    source: str


def norm_cdf(x: np.ndarray | float) -> np.ndarray:
    """Standard normal distribution function (through ``erfc``, exact in the tails)."""
    arr = np.atleast_1d(np.asarray(x, dtype=float))
    return np.array([0.5 * math.erfc(-v / math.sqrt(2.0)) for v in arr.ravel()]).reshape(
        arr.shape)


def distance_to_default(
    value: float, debt: np.ndarray | float, volatility: float, rate: float,
    horizon: float = HORIZON,
) -> tuple[np.ndarray, np.ndarray]:
    """Distance to default ``d2`` and risk-neutral default probability ``N(-d2)``.

    Parameters
    ----------
    value : float
        Asset value V (> 0).
    debt : float or numpy.ndarray
        Debt face value(s) due at the horizon; 0 gives an infinite distance and probability 0.
    volatility : float
        Annual asset volatility (> 0).
    rate : float
        Risk-free rate (continuous compounding).
    horizon : float, default=1.0
        Years.

    Returns
    -------
    (numpy.ndarray, numpy.ndarray)
        ``d2`` and ``N(-d2)``, shaped like ``debt``.
    """
    f = np.atleast_1d(np.asarray(debt, dtype=float))
    scale = volatility * math.sqrt(horizon)
    with np.errstate(divide="ignore"):
        d2 = (np.log(value / f) + (rate - 0.5 * volatility**2) * horizon) / scale
    return d2, norm_cdf(-d2)


def merton_equity(value: float, debt: float, volatility: float, rate: float,
                  horizon: float = HORIZON) -> tuple[float, float]:
    """Equity value and equity volatility the model gives for an asset value and volatility
    (the volatility is infinite where the equity is worth nothing)."""
    scale = volatility * math.sqrt(horizon)
    d1 = (math.log(value / debt) + (rate + 0.5 * volatility**2) * horizon) / scale
    n1, n2 = float(norm_cdf(d1)[0]), float(norm_cdf(d1 - scale)[0])
    equity = value * n1 - debt * math.exp(-rate * horizon) * n2
    return equity, (n1 * volatility * value / equity if equity > 0 else math.inf)


def solve_assets(equity: float, equity_volatility: float, debt: float, rate: float,
                 horizon: float = HORIZON) -> AssetValue:
    """Asset value and volatility implied by the equity value and volatility.

    Solves the model's two equations (module docstring) by nested bracketed root searches
    (``scipy.optimize.brentq``): for a trial asset volatility the equity equation fixes the
    asset value in ``[E, E + F exp(-rT)]``; the volatility equation is then solved over
    ``(0, sigma_E]``, where it changes sign (``N(d1) V >= E``).

    Parameters
    ----------
    equity : float
        Market value of equity (> 0).
    equity_volatility : float
        Annual equity volatility (> 0).
    debt : float
        Debt face value due at the horizon (> 0).
    rate : float
    horizon : float, default=1.0

    Returns
    -------
    AssetValue
        ``source="equity_volatility"``.
    """
    from scipy.optimize import brentq

    pv_debt = debt * math.exp(-rate * horizon)

    def value_at(sigma: float) -> float:
        def gap(v: float) -> float:
            return merton_equity(v, debt, sigma, rate, horizon)[0] - equity

        hi = equity + pv_debt
        if gap(hi) <= 0.0:  # volatility so small the equity is the forward payoff
            return hi
        return float(brentq(gap, equity, hi, xtol=1e-14 * hi, rtol=4 * np.finfo(float).eps))

    def vol_gap(sigma: float) -> float:
        v = value_at(sigma)
        return merton_equity(v, debt, sigma, rate, horizon)[1] * equity - equity_volatility \
            * equity

    sigma = float(brentq(vol_gap, 1e-6, equity_volatility, xtol=1e-15,
                         rtol=4 * np.finfo(float).eps))
    return AssetValue(value=value_at(sigma), volatility=sigma, source="equity_volatility")


def volatility_from_history(years: Sequence[int], values: Sequence[float]) -> float:
    """Sample standard deviation (ddof 1) of annual log changes of a value series.

    Parameters
    ----------
    years : sequence of int
        Fiscal years, one per value.
    values : sequence of float
        Debt plus market equity in each year (non-positive or missing values are skipped).

    Returns
    -------
    float
        NaN when fewer than :data:`HISTORY_MIN_YEARS` usable levels or fewer than two changes
        between consecutive fiscal years remain among the last :data:`HISTORY_MAX_YEARS`.
    """
    pairs = sorted((int(y), float(v)) for y, v in zip(years, values, strict=True)
                   if v is not None and math.isfinite(float(v)) and float(v) > 0)
    pairs = pairs[-HISTORY_MAX_YEARS:]
    if len(pairs) < HISTORY_MIN_YEARS:
        return math.nan
    changes = [math.log(b / a) for (ya, a), (yb, b) in zip(pairs, pairs[1:], strict=False)
               if yb - ya == 1]
    if len(changes) < 2:
        return math.nan
    return float(np.std(changes, ddof=1))
