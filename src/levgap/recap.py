"""Debt to target: the change in debt that brings a firm to its target in a recapitalisation.

The convention of ``targets.csv``'s ``debt_to_target`` and of the deal check's capacity under
recapitalisation (``levgap.deal.capacity``): debt replaces equity, or equity replaces debt.
"""

from __future__ import annotations

import numpy as np

RECAP_FLAGS: dict[str, str] = {
    "target_below_zero": "the target is below zero: debt to target repays all debt",
    "book_target_at_or_above_one": "a book target of 1 or more: debt to target finances every "
    "asset",
    "market_target_at_or_above_one": "a market target of 1 or more: debt to target replaces "
    "every share",
}
"""Flags of the edge cases (no NaN is ever returned for a row with the data)."""


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
