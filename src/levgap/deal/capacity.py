"""Debt capacity: the change in debt that brings a firm to a leverage level, two conventions.

Two stated conventions for where the money goes (``x`` is the additional debt; negative
repays):

- ``funded`` (debt funds new assets): assets grow with the debt, in the firm's current mix
  (PP&E, current assets, cash, EBITDA, EBIT, revenue and R&D grow by ``x / total_assets``),
  equity is unchanged. Book leverage ``(D + x) / (A + x)``; market ``(D + x) / (D + x + E)``
  with market equity ``E`` unchanged. Size and market-to-book move, so the target moves too.
- ``recap`` (a recapitalisation: debt replaces equity, bought back at market value): book
  assets fixed, book leverage ``(D + x) / A``; debt plus market equity fixed, market leverage
  ``(D + x) / (D + E)``. No driver moves (market-to-book keeps its value because book and
  market equity fall by the same amount), so the target stays where it is.

With the target fixed the answer is closed form (:func:`closed_form`); where the target moves
with the drivers the answer is the root of ``leverage(x) - target(x)``, found by a bracketed
root search (``scipy.optimize.brentq``) over ``x`` from ``-D`` (no debt left) upward.
``target_of`` maps a statement to the level sought (the target, or the band's top) and is the
only link to the fitted model, so the solver can be tested with any target function.
"""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass, replace

import numpy as np

from levgap.deal.statement import Statement

CONVENTIONS: dict[str, str] = {
    "funded": "debt funds new assets in the firm's current mix (equity unchanged)",
    "recap": "recapitalisation: debt replaces equity bought back at market value (book assets "
    "fixed; debt plus market equity fixed)",
}
MIX_LINES = ("ppe_net", "cash", "current_assets", "ebitda", "ebit", "revenue", "rd_expense")
ROOT_TOL = 1e-13
"""A closed-form answer is kept when it leaves ``|leverage - level|`` at most this."""
FLAGS: dict[str, str] = {
    "target_below_zero": "the level sought is below zero: the capacity is to repay all debt",
    "market_target_at_or_above_one": "a market level of 1 or more: no amount of debt reaches "
    "it (funded) or every share is replaced by debt (recap)",
    "book_target_at_or_above_one": "a book level of 1 or more: all assets debt-financed",
    "unreachable": "no debt level up to a thousand times total assets reaches the level",
}

TargetFn = Callable[[Statement], float]


@dataclass(frozen=True, slots=True)
class Capacity:
    """Additional debt that brings a firm to a level, and how it was found.

    Parameters
    ----------
    amount : float
        Change in debt in the results' money unit (negative: repay); ``inf`` when no amount
        reaches the level (flagged).
    level : float
        The level (target or band top) at the answer.
    method : {"closed form", "root solve", "bound"}
    flag : str
        Empty or a key of :data:`FLAGS`.
    """

    amount: float
    level: float
    method: str
    flag: str = ""


def moved(s: Statement, convention: str, x: float) -> Statement:
    """The statement after ``x`` of additional debt under a convention (see module docstring).

    Parameters
    ----------
    s : Statement
    convention : {"funded", "recap"}
    x : float
        Additional debt (negative repays).

    Returns
    -------
    Statement
    """
    if convention == "recap":
        return replace(s, total_debt=s.total_debt + x, book_equity=s.book_equity - x,
                       market_equity=s.market_equity - x,
                       total_liabilities=s.total_liabilities + x)
    grow = x / s.total_assets
    mix = {c: getattr(s, c) * (1.0 + grow) for c in MIX_LINES}
    return replace(s, total_assets=s.total_assets + x, total_debt=s.total_debt + x,
                   total_liabilities=s.total_liabilities + x, **mix)


def closed_form(s: Statement, measure: str, convention: str, level: float) -> float:
    """Additional debt reaching ``level`` when the level does not move with the drivers.

    Book: funded ``(L A - D) / (1 - L)``, recap ``L A - D``. Market: funded
    ``L E / (1 - L) - D``, recap ``L (D + E) - D``. ``inf`` for a funded level of 1 or more.
    """
    d, a, e = s.total_debt, s.total_assets, s.market_equity
    if convention == "recap":
        base = a if measure == "book" else d + e
        return level * base - d
    if level >= 1.0:
        return math.inf
    if measure == "book":
        return (level * a - d) / (1.0 - level)
    return level * e / (1.0 - level) - d


def capacity(s: Statement, measure: str, convention: str, target_of: TargetFn) -> Capacity:
    """Additional debt that brings ``measure`` leverage to ``target_of`` of the moved statement.

    Parameters
    ----------
    s : Statement
        The (pro forma) statement to start from.
    measure : {"book", "market"}
    convention : {"funded", "recap"}
    target_of : callable
        Statement -> the level sought (a target or the band's top from the fitted model,
        whose drivers are computed from the statement).

    Returns
    -------
    Capacity
        Exact to the root search's tolerance: fed back as a scenario, the amount lands on the
        level (tested to 1e-9).
    """
    if convention not in CONVENTIONS:
        raise ValueError(f"convention must be one of {sorted(CONVENTIONS)}; got {convention!r}")

    def gap(x: float) -> tuple[float, float]:
        m = moved(s, convention, x)
        level = target_of(m)
        return m.leverage(measure) - level, level

    level0 = target_of(s)
    lo = -s.total_debt
    f_lo, level_lo = gap(lo)
    if f_lo > 0:
        return Capacity(lo, level_lo, "bound", "target_below_zero")
    top = _top(s, measure, convention)
    if level0 >= 1.0 and (measure == "market" or convention == "recap"):
        flag = f"{measure}_target_at_or_above_one"
        if convention == "funded":
            return Capacity(math.inf, level0, "bound", flag)
        return Capacity(top, gap(top)[1], "bound", flag)
    x0 = closed_form(s, measure, convention, level0)
    if math.isfinite(x0) and lo <= x0 <= top:
        f0, level = gap(x0)
        if abs(f0) <= ROOT_TOL:
            return Capacity(x0, level, "closed form")
    return _solve(gap, lo, top, s)


def _top(s: Statement, measure: str, convention: str) -> float:
    if convention == "funded":
        return math.inf
    # a recapitalisation cannot replace more than all the equity (market) or finance more
    # than all the assets with debt (book)
    return s.total_assets - s.total_debt if measure == "book" else s.market_equity


def _solve(gap: Callable[[float], tuple[float, float]], lo: float, top: float,
           s: Statement) -> Capacity:
    from scipy.optimize import brentq

    scale = max(s.total_assets, 1.0)
    if math.isfinite(top):
        f_hi, level_hi = gap(top)
        if f_hi < 0:
            return Capacity(top, level_hi, "bound", "unreachable")
        hi = top
    else:
        hi = max(scale, 2.0 * s.total_debt)
        while True:
            f_hi, level_hi = gap(hi)
            if f_hi >= 0:
                break
            if hi > 1e3 * scale:
                return Capacity(math.inf, level_hi, "bound", "unreachable")
            lo = hi
            hi *= 4.0
    if f_hi == 0.0:
        return Capacity(hi, level_hi, "root solve")
    x = float(brentq(lambda v: gap(v)[0], lo, hi, xtol=1e-12 * scale,
                     rtol=4 * np.finfo(float).eps, maxiter=200))
    return Capacity(x, gap(x)[1], "root solve")


def debt_to_target(
    measure: str,
    debt: np.ndarray,
    assets: np.ndarray,
    market_equity: np.ndarray,
    target: np.ndarray,
) -> tuple[np.ndarray, np.ndarray]:
    """Change in debt that brings each row to its target in a recapitalisation.

    The convention of ``targets.csv``'s ``debt_to_target``: debt replaces equity (or equity
    replaces debt), so book assets stay fixed and, for market leverage, debt plus market
    equity stays fixed. Book: ``T A - D``; market: ``T (D + E) - D``. A target below zero asks
    for no debt (``-D``, flagged ``target_below_zero``); a market target of 1 or more asks to
    replace every share (``E``, flagged ``market_target_at_or_above_one``), never NaN; a book
    target of 1 or more finances all assets (``A - D``, flagged).

    Parameters
    ----------
    measure : {"book", "market"}
    debt, assets, market_equity, target : numpy.ndarray
        Per row, money in the output's unit (``market_equity`` unused for book; NaN where a
        row has none, which gives NaN for market).

    Returns
    -------
    amount : numpy.ndarray of float
    flag : numpy.ndarray of object
        ``""`` or a key of :data:`FLAGS`.
    """
    d = np.asarray(debt, dtype=float)
    t = np.asarray(target, dtype=float)
    base = np.asarray(assets, dtype=float) if measure == "book" else \
        d + np.asarray(market_equity, dtype=float)
    amount = np.clip(t, 0.0, 1.0) * base - d
    flag = np.full(t.shape, "", dtype=object)
    flag[t < 0.0] = "target_below_zero"
    flag[t >= 1.0] = f"{measure}_target_at_or_above_one"
    return amount, flag
