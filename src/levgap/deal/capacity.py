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
from levgap.recap import debt_to_target  # noqa: F401  (re-exported: the same convention)

CONVENTIONS: dict[str, str] = {
    "funded": "debt funds new assets in the firm's current mix (equity unchanged)",
    "recap": "recapitalisation: debt replaces equity bought back at market value (book assets "
    "fixed; debt plus market equity fixed)",
}
MIX_LINES = ("ppe_net", "cash", "current_assets", "ebitda", "ebit", "revenue", "rd_expense")
ROOT_TOL = 1e-10
"""A root search stops when ``|leverage - level|`` is at most this (fed back as a scenario,
a capacity lands on its level to 1e-9, as tested)."""
FLAGS: dict[str, str] = {
    "target_below_zero": "the level sought is below zero: the capacity is to repay all debt",
    "market_target_at_or_above_one": "a market level of 1 or more: no amount of debt reaches "
    "it (funded) or every share is replaced by debt (recap)",
    "book_target_at_or_above_one": "a book level of 1 or more: all assets debt-financed",
    "unreachable": "no debt level up to a thousand times total assets reaches the level",
    "no_market_equity_left": "market equity is zero: with the debt funding new assets, market "
    "leverage is 1 at any debt above zero, so no amount reaches the level (no figure given)",
}

TargetFn = Callable[[Statement], float]


@dataclass(frozen=True, slots=True)
class Capacity:
    """Additional debt that brings a firm to a level, and how it was found.

    Parameters
    ----------
    amount : float
        Change in debt in the results' money unit (negative: repay); ``inf`` when no amount
        reaches the level, NaN when no figure means anything (both flagged).
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
LADDER = (-0.3, -0.2, -0.1, -0.05, -0.02, -0.005, 0.0, 0.005, 0.02, 0.05, 0.1, 0.15, 0.2,
          0.3, 0.4, 0.5, 0.65, 0.8, 1.0, 1.25, 1.5, 2.0, 3.0)
"""Offsets (in total assets) around the first step at which the first round scores the
level: the interpolation between the two that bracket the root is close from the start."""
LEVEL_EPS = 1e-15
"""Levels closer than this at ``-D`` and ``0`` did not move (rounding in the drivers)."""


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

    See :class:`CapacitySearch` for the method.

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
    search = CapacitySearch(problems, start=start)
    while not search.done:
        search.feed(levels(search.pending()))
    return search.results()


class CapacitySearch:
    """Capacity questions solved in lockstep, so that each round is one batch for the model.

    Each question is the root of ``f(x) = leverage(x) - level(x)`` over ``x >= -D``. It starts
    from the levels at ``x = 0`` and ``x = -D`` (a level below zero at ``-D`` asks to repay
    everything). Each round then solves the exact leverage against the level interpolated
    linearly through two points: at first ``-D`` and ``0`` (when the level did not move there,
    no driver moves with the debt and this is the closed form, exact in one round: a
    recapitalisation); the first round scores a ladder of points around that step and the
    next step goes through the two that bracket the root; afterwards each round scores the
    step and a point a millionth of total assets beyond it (a Newton step with the level's
    slope measured where the search is). Steps stay inside the bracket found so far
    (bisection when one leaves it, doubling while no upper end is known), until
    ``|f| <= ROOT_TOL`` or the bracket is narrower than ``1e-12`` of total assets.

    Use: ``pending()`` lists the (problem, moved statement) pairs whose levels the next round
    needs; ``feed(levels)`` takes their levels in that order; ``results()`` once ``done``.
    """

    def __init__(self, problems: Sequence[Problem], *,
                 start: Sequence[tuple[float, float]] | None = None) -> None:
        for p in problems:
            if p.convention not in CONVENTIONS:
                raise ValueError(f"convention must be one of {sorted(CONVENTIONS)}; got "
                                 f"{p.convention!r}")
        self.problems = list(problems)
        self.out: list[Capacity | None] = [None] * len(self.problems)
        self.states: list[_State] = []
        self.rounds = 0
        self._open: list[_State] = []
        self._points: list[list[float]] = []
        self._needs_start = start is None
        if start is not None:
            self._begin(start)

    @property
    def done(self) -> bool:
        """Whether every question is settled (or the rounds are spent)."""
        if self._needs_start:
            return False
        return self.rounds >= MAX_ROUNDS or all(self.out[st.i] is not None
                                                for st in self.states)

    def pending(self) -> list[tuple[Problem, Statement]]:
        """The statements whose levels the next round needs, in the order ``feed`` expects."""
        if self._needs_start:
            return [(p, moved(p.statement, p.convention, x)) for p in self.problems
                    for x in (0.0, -p.statement.total_debt)]
        self._open = [st for st in self.states if self.out[st.i] is None]
        self._points = [st.points() for st in self._open]
        return [(st.p, moved(st.p.statement, st.p.convention, x))
                for st, xs in zip(self._open, self._points, strict=True) for x in xs]

    def feed(self, levels: Sequence[float] | np.ndarray) -> None:
        """Take the levels of the statements :meth:`pending` listed."""
        got = [float(v) for v in levels]
        if self._needs_start:
            self._needs_start = False
            self._begin([(got[2 * i], got[2 * i + 1]) for i in range(len(self.problems))])
            return
        k = 0
        for st, xs in zip(self._open, self._points, strict=True):
            done = st.absorb_round(xs, got[k:k + len(xs)])
            k += len(xs)
            if done is not None:
                method = "closed form" if self.rounds == 0 and not st.pair and \
                    done.method == "root solve" else done.method
                self.out[st.i] = Capacity(done.amount, done.level, method, done.flag)
        self.rounds += 1

    def results(self) -> list[Capacity]:
        """One answer per problem (a question the rounds did not settle: its best point)."""
        for st in self.states:
            if self.out[st.i] is None:
                self.out[st.i] = Capacity(st.best[0], st.best[2], "root solve")
        return [c for c in self.out if c is not None]

    def _begin(self, start: Sequence[tuple[float, float]]) -> None:
        for i, p in enumerate(self.problems):
            s, lo = p.statement, -p.statement.total_debt
            level0, level_lo = start[i]
            if p.measure == "market" and p.convention == "funded" and not s.market_equity > 0:
                self.out[i] = Capacity(math.nan, level0, "bound", "no_market_equity_left")
                continue
            f_lo = moved(s, p.convention, lo).leverage(p.measure) - level_lo
            top = _top(s, p.measure, p.convention)
            if f_lo > 0:
                self.out[i] = Capacity(lo, level_lo, "bound", "target_below_zero")
                continue
            if level0 >= 1.0 and (p.measure == "market" or p.convention == "recap"):
                flag = f"{p.measure}_target_at_or_above_one"
                self.out[i] = Capacity(math.inf if p.convention == "funded" else top, level0,
                                       "bound", flag)
                continue
            f0 = s.leverage(p.measure) - level0
            st = _State(i, p, lo=lo, f_lo=f_lo, top=top, prev=(lo, f_lo, level_lo),
                        next_x=0.0)
            settled = st.absorb(0.0, f0, level0)
            if settled is not None:
                self.out[i] = Capacity(0.0, level0, "closed form", settled.flag)
                continue
            still = abs(level_lo - level0) <= LEVEL_EPS
            chord = st._step(lo, level_lo, 0.0, level0) if not still else math.nan
            if math.isfinite(chord):
                st.next_x = chord
            else:
                # no driver moves with the debt: the closed form is the answer (and where
                # the chord through -D and 0 misses, the closed form starts the search)
                x1 = closed_form(s, p.measure, p.convention, level0)
                st.next_x = min(max(x1, lo), top) if math.isfinite(x1) else (
                    top if math.isfinite(top) else max(s.total_assets, 1.0))
            st.pair = not still
            self.states.append(st)


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
    pair: bool = True
    ladder: bool = True
    third: tuple[float, float] | None = None

    def points(self) -> list[float]:
        """The points of the next round: at first a ladder around the first step (the level
        is scored along it in the same batch), then the step and one beside it (the level's
        slope where the search is)."""
        scale = max(self.p.statement.total_assets, 1.0)
        if not self.pair:
            return [self.next_x]
        if self.ladder:
            self.ladder = False
            pts = {min(max(self.next_x + scale * t, self.lo), self.top) for t in LADDER}
            return sorted(x for x in pts if math.isfinite(x))
        h = 1e-6 * scale
        beside = self.next_x + h if self.next_x + h <= self.top else self.next_x - h
        return [self.next_x, beside]

    def absorb_round(self, xs: list[float], levels: list[float]) -> Capacity | None:
        """Take a round's points: the step goes through the two that bracket the root (else
        the best point and its neighbour)."""
        pts = sorted((x, moved(self.p.statement, self.p.convention, x).leverage(self.p.measure)
                      - lv, lv) for x, lv in zip(xs, levels, strict=True))
        if len(pts) == 1:
            return self.absorb(*pts[0])
        best = min(range(len(pts)), key=lambda j: abs(pts[j][1]))
        cross = [j for j in range(1, len(pts)) if (pts[j - 1][1] < 0) != (pts[j][1] < 0)]
        j = min(cross, key=lambda c: min(abs(pts[c][1]), abs(pts[c - 1][1]))) if cross else \
            max(best, 1)
        anchor = j if abs(pts[j][1]) <= abs(pts[j - 1][1]) else j - 1
        other = j - 1 if anchor == j else j
        for k, (x, f, lv) in enumerate(pts):
            if k not in (anchor,):
                self._bracket(x, f, lv)
        self.prev = pts[other]
        near = [k for k in (min(anchor, other) - 1, max(anchor, other) + 1)
                if 0 <= k < len(pts)]
        if near:
            k = min(near, key=lambda k: abs(pts[k][0] - pts[anchor][0]))
            self.third = (pts[k][0], pts[k][2])
        return self.absorb(*pts[anchor])

    def _bracket(self, x: float, f: float, level: float) -> None:
        if abs(f) < abs(self.best[1]):
            self.best = (x, f, level)
        if f < 0:
            self.lo, self.f_lo = max(self.lo, x), f
        else:
            self.hi, self.f_hi = min(self.hi, x), f

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
        # The leverage side is known exactly; only the level is interpolated: linearly through
        # the last two points (exact when the level moves linearly), or through a third one
        # too when the round scored a ladder (a parabola: close from the first round).
        s, conv, measure = self.p.statement, self.p.convention, self.p.measure
        slope = (level1 - level0) / (x1 - x0)
        third, self.third = self.third, None
        curve = 0.0
        if third is not None and third[0] not in (x0, x1):
            x2, level2 = third
            curve = ((level2 - level1) / (x2 - x1) - slope) / (x2 - x0)

        def g(z: float) -> float:
            level = level1 + slope * (z - x1) + curve * (z - x1) * (z - x0)
            return moved(s, conv, z).leverage(measure) - level

        # the root of g nearest the last point, within the bracket known so far
        lo, hi = self.lo, min(self.hi, self.top)
        scale = max(s.total_assets, 1.0)
        g1 = g(x1)
        if g1 == 0.0:
            return x1
        d = max(abs(x1 - x0), 1e-9 * scale)
        while d <= 1e4 * scale:
            for z in (min(x1 + d, hi), max(x1 - d, lo)):
                if z != x1 and (g(z) > 0) != (g1 > 0):
                    a, b = sorted((x1, z))
                    return bracketed_root(g, a, b, xtol=1e-14 * scale)
            d *= 4.0
        return math.nan


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
