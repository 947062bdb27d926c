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
root search (the exact leverage against the level interpolated through the last two points,
kept inside the bracket found so far, bisection otherwise) over ``x``
from ``-D`` (no debt left) upward; many questions are solved in lockstep, so that the saved
model scores each round's statements in one batch (:func:`solve_capacities`).
``target_of`` maps a statement to the level sought (the target, or the band's top) and is the
only link to the fitted model, so the solver can be tested with any target function.
"""

from __future__ import annotations

import math
from collections.abc import Callable, Sequence
from dataclasses import dataclass, replace
from typing import Any

import numpy as np

from levgap.deal.statement import Statement

CONVENTIONS: dict[str, str] = {
    "funded": "debt funds new assets in the firm's current mix (equity unchanged)",
    "recap": "recapitalisation: debt replaces equity bought back at market value (book assets "
    "fixed; debt plus market equity fixed)",
}
MIX_LINES = ("ppe_net", "cash", "current_assets", "ebitda", "ebit", "revenue", "rd_expense")
ROOT_TOL = 1e-12
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


@dataclass(frozen=True, slots=True)
class Problem:
    """One capacity question: a statement, a measure and a convention.

    Parameters
    ----------
    statement : Statement
    measure : {"book", "market"}
    convention : {"funded", "recap"}
    key : object, optional
        The caller's tag (which level to compute, say), passed back to ``levels``.
    """

    statement: Statement
    measure: str
    convention: str
    key: Any = None


LevelsFn = Callable[[list[tuple[Problem, Statement]]], np.ndarray]
"""Problems and their moved statements -> the level sought for each (one batched call)."""
MAX_ROUNDS = 80


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
    def levels(items: list[tuple[Problem, Statement]]) -> np.ndarray:
        return np.array([target_of(m) for _, m in items], dtype=float)

    return solve_capacities([Problem(s, measure, convention)], levels)[0]


def solve_capacities(problems: Sequence[Problem], levels: LevelsFn, *,
                     start: Sequence[tuple[float, float]] | None = None) -> list[Capacity]:
    """Solve many capacity questions at once, one call of ``levels`` per round for all.

    Each question is the root of ``f(x) = leverage(x) - level(x)`` over ``x >= -D``. The first
    round evaluates ``x = 0`` and ``x = -D`` (a level below zero asks to repay everything).
    Each later round solves the exact leverage against the level interpolated linearly
    through the last two points (at first ``-D`` and ``0``; when the level did not move, no
    driver moves with the debt and this is the closed form, exact in one round: a
    recapitalisation), kept inside the bracket found so far (bisection when a step leaves it,
    doubling while no upper end is known), until
    ``|f| <= 1e-12`` or the bracket is narrower than ``1e-12`` of total assets.

    Parameters
    ----------
    problems : sequence of Problem
    levels : callable
        ``levels([(problem, moved statement), ...]) -> numpy.ndarray`` of levels; called once
        per round with every open question (the saved model scores them in one batch).
    start : sequence of (float, float), optional
        The levels at ``x = 0`` and ``x = -D`` of each problem when the caller has them
        already (scored with the scenario itself); the first round is then skipped.

    Returns
    -------
    list of Capacity
        In the order of ``problems``.
    """
    for p in problems:
        if p.convention not in CONVENTIONS:
            raise ValueError(f"convention must be one of {sorted(CONVENTIONS)}; got "
                             f"{p.convention!r}")
    n = len(problems)
    out: list[Capacity | None] = [None] * n
    if n == 0:
        return []
    if start is None:
        got = levels([(p, moved(p.statement, p.convention, x)) for p in problems
                      for x in (0.0, -p.statement.total_debt)])
        start = [(float(got[2 * i]), float(got[2 * i + 1])) for i in range(n)]
    states = []
    for i, p in enumerate(problems):
        s, lo = p.statement, -p.statement.total_debt
        level0, level_lo = start[i]
        f_lo = moved(s, p.convention, lo).leverage(p.measure) - level_lo
        top = _top(s, p.measure, p.convention)
        if f_lo > 0:
            out[i] = Capacity(lo, level_lo, "bound", "target_below_zero")
        elif level0 >= 1.0 and (p.measure == "market" or p.convention == "recap"):
            flag = f"{p.measure}_target_at_or_above_one"
            out[i] = Capacity(math.inf if p.convention == "funded" else top, level0, "bound",
                              flag)
        else:
            f0 = s.leverage(p.measure) - level0
            x1 = closed_form(s, p.measure, p.convention, level0)
            st = _State(i, p, lo=lo, f_lo=f_lo, top=top, prev=(lo, f_lo, level_lo),
                        next_x=0.0)
            settled = st.absorb(0.0, f0, level0)
            if settled is not None:
                out[i] = Capacity(0.0, level0, "closed form", settled.flag)
                continue
            if level_lo == level0 or not math.isfinite(st.next_x):
                # no driver moves with the debt: the closed form is the answer
                st.next_x = min(max(x1, lo), top) if math.isfinite(x1) else (
                    top if math.isfinite(top) else max(s.total_assets, 1.0))
            states.append(st)
    for rounds in range(MAX_ROUNDS):
        open_ = [st for st in states if out[st.i] is None]
        if not open_:
            break
        got = levels([(st.p, moved(st.p.statement, st.p.convention, st.next_x))
                      for st in open_])
        for st, level in zip(open_, got, strict=True):
            x = st.next_x
            f = moved(st.p.statement, st.p.convention, x).leverage(st.p.measure) - float(level)
            done = st.absorb(x, f, float(level))
            if done is not None:
                method = "closed form" if rounds == 0 and done.method == "root solve" \
                    else done.method
                out[st.i] = Capacity(done.amount, done.level, method, done.flag)
    for st in states:  # a question the rounds did not settle: the bracket's best point
        if out[st.i] is None:
            out[st.i] = Capacity(st.best[0], st.best[2], "root solve")
    return [c for c in out if c is not None]


@dataclass(slots=True)
class _State:
    """Bracket and last point of one open question."""

    i: int
    p: Problem
    lo: float
    f_lo: float
    top: float
    prev: tuple[float, float, float]
    next_x: float
    hi: float = math.inf
    f_hi: float = math.nan
    best: tuple[float, float, float] = (math.nan, math.inf, math.nan)

    def absorb(self, x: float, f: float, level: float) -> Capacity | None:
        """Take a new point; return the answer once settled, else set the next point."""
        if abs(f) < abs(self.best[1]):
            self.best = (x, f, level)
        scale = max(self.p.statement.total_assets, 1.0)
        if abs(f) <= ROOT_TOL:
            return Capacity(x, level, "root solve")
        if f < 0:
            self.lo, self.f_lo = max(self.lo, x), f
            if x >= self.top:  # the whole range is below the level
                return Capacity(self.top, level, "bound", "unreachable")
            if self.hi == math.inf and x > 1e3 * scale:
                return Capacity(math.inf, level, "bound", "unreachable")
        else:
            self.hi, self.f_hi = min(self.hi, x), f
        if self.hi - self.lo <= 1e-12 * scale:
            return Capacity(self.best[0], self.best[2], "root solve")
        px, _, plevel = self.prev
        self.prev = (x, f, level)
        step = self._step(px, plevel, x, level) if x != px else math.nan
        if self.hi == math.inf:
            grow = max(2.0 * abs(x), scale) if x >= 0 else 0.0
            inside = math.isfinite(step) and step > self.lo
            self.next_x = step if inside else min(grow, self.top)
        elif math.isfinite(step) and self.lo < step < self.hi:
            self.next_x = step
        else:
            self.next_x = 0.5 * (self.lo + self.hi)
        if self.next_x > self.top:
            self.next_x = self.top
        return None

    def _step(self, x0: float, level0: float, x1: float, level1: float) -> float:
        # The leverage side is known exactly; only the level is interpolated (linearly through
        # the last two points), so the step is exact when the level moves linearly.
        s, conv, measure = self.p.statement, self.p.convention, self.p.measure
        slope = (level1 - level0) / (x1 - x0)

        def g(z: float) -> float:
            return moved(s, conv, z).leverage(measure) - (level1 + slope * (z - x1))

        hi = self.hi if math.isfinite(self.hi) else min(self.top, max(4.0 * abs(x1), 4.0 *
                                                                       s.total_assets))
        return bracketed_root(g, self.lo, hi, xtol=1e-14 * max(s.total_assets, 1.0))


def bracketed_root(g: Callable[[float], float], lo: float, hi: float, *,
                   xtol: float) -> float:
    """Root of a cheap continuous function between ``lo`` and ``hi`` (NaN without a sign
    change): false position with the Illinois modification, bisection as a fallback."""
    g_lo, g_hi = g(lo), g(hi)
    if not (math.isfinite(g_lo) and math.isfinite(g_hi)) or g_lo * g_hi > 0:
        return math.nan
    if g_lo == 0.0:
        return lo
    side = 0
    for _ in range(200):
        if g_hi == 0.0 or hi - lo <= xtol:
            break
        x = (lo * g_hi - hi * g_lo) / (g_hi - g_lo)
        if not lo < x < hi:
            x = 0.5 * (lo + hi)
        gx = g(x)
        if gx == 0.0:
            return x
        if (gx > 0) == (g_hi > 0):
            hi, g_hi = x, gx
            if side == 1:
                g_lo *= 0.5
            side = 1
        else:
            lo, g_lo = x, gx
            if side == -1:
                g_hi *= 0.5
            side = -1
    return hi if abs(g_hi) <= abs(g_lo) else lo


def _top(s: Statement, measure: str, convention: str) -> float:
    if convention == "funded":
        return math.inf
    # a recapitalisation cannot replace more than all the equity (market) or finance more
    # than all the assets with debt (book)
    return s.total_assets - s.total_debt if measure == "book" else s.market_equity


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
