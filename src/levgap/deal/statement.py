"""Pro forma statement lines: the firm's row of one fiscal year, after a scenario's moves.

Arithmetic (money in the results' unit; every move is additive, and the checks run on the
end result, so the order below is only the order of the explanation):

1. **Merger** (``merge_with``): the other firm's row is added line by line (a merger in
   shares). With ``merge_price`` the firm pays that price in cash instead: the other firm's
   book equity, retained earnings and market value are eliminated and
   ``goodwill = merge_price - its book equity``.
2. **Acquisition** (``acquire_*`` at ``acquire_price``): assets, PP&E, current assets, debt,
   liabilities, EBITDA, EBIT and revenue are added; ``goodwill = price - (assets - debt -
   liabilities)``. A negative goodwill (a bargain purchase) is a gain booked in equity and
   retained earnings, flagged.
3. **Mix**: ``expand_assets`` buys assets in the proportions of the firm's statement before
   the scenario (PP&E, current assets and cash to total assets; EBITDA, EBIT, revenue and R&D
   to total assets), so that on their own they leave tangibility and profitability as they
   are.
4. **Financing**: ``debt_raised`` and ``equity_issued`` (at market value) add cash;
   ``acquire_price``, ``merge_price``, ``debt_repaid``, ``equity_bought_back`` (at market
   value, from book equity too) and ``expand_assets`` spend it.
5. **Interest**: ``interest_rate`` on debt raised and assumed; repaid debt saves the firm's
   average rate (interest_expense / total_debt); the other firm's interest is added.

Total liabilities move with assets minus book equity; new debt is long-term (current
liabilities change only with what is assumed). A line the panel does not give stays missing
(never zero), and the reason is kept so that a ratio can say what it needs.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass, replace
from typing import Any

from levgap.deal.scenario import Scenario
from levgap.errors import ConfigError

NAN = math.nan
LINES: tuple[str, ...] = (
    "total_assets", "total_debt", "book_equity", "market_equity", "cash", "ppe_net", "ebitda",
    "ebit", "revenue", "interest_expense", "current_assets", "current_liabilities",
    "total_liabilities", "retained_earnings", "rd_expense", "goodwill",
)
"""Statement lines, in the order the outputs show them (``goodwill``: added by the scenario)."""
PANEL_LINES: tuple[str, ...] = LINES[:-1]
"""Lines read from a schema-v1 row (the panel has no goodwill column)."""
TOLERANCE = 1e-9
"""Relative slack of the end checks (a cash balance of -1e-12 after exact funding is zero)."""


@dataclass(frozen=True, slots=True)
class Statement:
    """One firm-year's statement lines (NaN where the panel gives none).

    Parameters
    ----------
    firm_id, industry : str
    fiscal_year : int
    total_assets, total_debt, book_equity, market_equity, cash, ppe_net, ebitda, ebit,
    revenue, interest_expense, current_assets, current_liabilities, total_liabilities,
    retained_earnings, rd_expense : float
        Schema-v1 lines in the results' money unit.
    goodwill : float, default=0.0
        Goodwill added by a scenario.
    firm_name : str, default=""
    """

    firm_id: str
    fiscal_year: int
    industry: str
    total_assets: float
    total_debt: float
    book_equity: float
    ppe_net: float
    ebitda: float
    market_equity: float = NAN
    cash: float = NAN
    ebit: float = NAN
    revenue: float = NAN
    interest_expense: float = NAN
    current_assets: float = NAN
    current_liabilities: float = NAN
    total_liabilities: float = NAN
    retained_earnings: float = NAN
    rd_expense: float = NAN
    goodwill: float = 0.0
    firm_name: str = ""

    @classmethod
    def from_row(cls, row: Mapping[str, Any]) -> Statement:
        """A statement from a validated panel row (a mapping of schema-v1 columns)."""
        def num(col: str) -> float:
            v = row.get(col)
            try:
                f = float(v)  # type: ignore[arg-type]
            except (TypeError, ValueError):
                return NAN
            return f if math.isfinite(f) else NAN

        name = row.get("firm_name")
        return cls(
            firm_id=str(row["firm_id"]), fiscal_year=int(row["fiscal_year"]),
            industry=str(row["industry"]),
            firm_name="" if name is None or name != name else str(name),
            **{c: num(c) for c in PANEL_LINES},
        )

    def lines(self) -> dict[str, float]:
        """Line name -> value, in :data:`LINES` order."""
        return {c: getattr(self, c) for c in LINES}

    def row(self) -> dict[str, Any]:
        """The statement as a schema-v1 row (for scoring with the saved model)."""
        out: dict[str, Any] = {"firm_id": self.firm_id, "fiscal_year": self.fiscal_year,
                               "industry": self.industry, "firm_name": self.firm_name}
        out.update({c: getattr(self, c) for c in PANEL_LINES})
        return out

    def leverage(self, measure: str) -> float:
        """Book (debt / assets) or market (debt / (debt + market equity)) leverage."""
        if measure == "book":
            return self.total_debt / self.total_assets
        denom = self.total_debt + self.market_equity
        return self.total_debt / denom if denom > 0 else NAN


@dataclass(frozen=True, slots=True)
class ProForma:
    """A scenario applied to a firm-year.

    Parameters
    ----------
    scenario : Scenario
    before, after : Statement
    partner : Statement or None
        The other firm's row, for a merger.
    missing : dict of str to str
        Line -> what it needs, for each line of ``after`` that is missing (``"cash"``: the
        panel gives no cash; ``"interest_rate"``: new debt without a stated rate; ...).
    flags : tuple of str
        Notes on the arithmetic (``bargain_purchase_gain``, ``merge_partner_year_differs``,
        ``merge_partner_other_industry``).
    """

    scenario: Scenario
    before: Statement
    after: Statement
    partner: Statement | None = None
    missing: dict[str, str] | None = None
    flags: tuple[str, ...] = ()


def apply_scenario(
    before: Statement, scenario: Scenario, partner: Statement | None = None
) -> ProForma:
    """The pro forma statement of ``before`` after ``scenario`` (see the module docstring).

    Parameters
    ----------
    before : Statement
        The firm's row of the scenario's fiscal year.
    scenario : Scenario
    partner : Statement, optional
        The row of ``scenario.merge_with`` (its latest up to that year); required for a merger.

    Returns
    -------
    ProForma

    Raises
    ------
    ConfigError
        One line naming the file, scenario and key: a merger with the firm itself or without
        the partner's row, a move paid out of cash the panel does not give, or a statement that
        cannot exist after the moves (assets not positive, debt or cash or market value below
        zero, debt above assets).
    """
    s = scenario
    where = s.where()
    v = {c: getattr(before, c) for c in LINES}
    missing = {c: c for c in PANEL_LINES if math.isnan(v[c])}
    flags: list[str] = []
    if s.merge_with is not None:
        _merge(v, missing, flags, before, s, partner, where)
    # after the merger, liabilities move with assets minus book equity (the balance-sheet
    # identity, change by change): the other firm brings its own total liabilities
    assets0 = v["total_assets"] - (s.merge_price or 0.0)  # the price leaves with the cash
    equity0 = v["book_equity"]
    if s.acquires:
        _acquire(v, missing, flags, s)
    if s.expand_assets:
        _expand(v, before, s.expand_assets)
    _finance(v, before, s, where)
    _interest(v, missing, before, s)
    v["total_liabilities"] += (v["total_assets"] - assets0) - (v["book_equity"] - equity0)
    after = replace(before, **v)
    _check_after(after, before, s, where)
    return ProForma(scenario=s, before=before, after=after, partner=partner,
                    missing={c: missing[c] for c in LINES if c in missing}, flags=tuple(flags))


def _add(v: dict[str, float], missing: dict[str, str], line: str, amount: float,
         why: str) -> None:
    if amount == 0.0:
        return
    v[line] = v[line] + amount
    if math.isnan(v[line]) and line not in missing:
        missing[line] = why


def _merge(v: dict[str, float], missing: dict[str, str], flags: list[str], before: Statement,
           s: Scenario, partner: Statement | None, where: str) -> None:
    if s.merge_with == before.firm_id:
        raise ConfigError(
            f"{where}: key merge_with must name another firm; got the firm itself "
            f"({before.firm_id!r})."
        )
    if partner is None or partner.firm_id != s.merge_with:
        raise ConfigError(
            f"{where}: key merge_with must name a firm of the panel with a row up to fiscal "
            f"{before.fiscal_year}; got {s.merge_with!r}, which has none."
        )
    if partner.fiscal_year != before.fiscal_year:
        flags.append("merge_partner_year_differs")
    if partner.industry != before.industry:
        flags.append("merge_partner_other_industry")
    why = f"the {s.merge_with} row's "
    eliminated = ("book_equity", "retained_earnings", "market_equity")
    for c in PANEL_LINES:
        if s.merge_price is not None and c in eliminated:
            continue
        p = getattr(partner, c)
        if math.isnan(p):
            if not math.isnan(v[c]):
                missing[c] = why + c
            v[c] = NAN
        else:
            v[c] = v[c] + p
    if s.merge_price is not None:
        goodwill = s.merge_price - partner.book_equity
        # assets: the partner's assets plus goodwill; the price leaves with the cash (below)
        _goodwill(v, flags, goodwill)


def _goodwill(v: dict[str, float], flags: list[str], goodwill: float) -> None:
    if goodwill >= 0.0:
        v["goodwill"] += goodwill
        v["total_assets"] += goodwill
        return
    # A bargain purchase: the gain is booked in equity (IFRS 3 and ASC 805, common practice).
    flags.append("bargain_purchase_gain")
    v["book_equity"] += -goodwill
    v["retained_earnings"] += -goodwill


def _acquire(v: dict[str, float], missing: dict[str, str], flags: list[str],
             s: Scenario) -> None:
    current = s.acquire_current_assets if s.acquire_current_assets is not None else \
        s.acquire_cash
    for line, amount in (("total_assets", s.acquire_assets), ("ppe_net", s.acquire_ppe),
                         ("cash", s.acquire_cash), ("current_assets", current),
                         ("total_debt", s.acquire_debt),
                         ("current_liabilities", s.acquire_current_liabilities),
                         ("ebitda", s.acquire_ebitda), ("revenue", s.acquire_revenue)):
        _add(v, missing, line, amount, line)
    if s.acquire_ebit is not None:
        _add(v, missing, "ebit", s.acquire_ebit, "ebit")
    elif s.acquire_ebitda != 0.0 and not math.isnan(v["ebit"]):
        v["ebit"] = NAN
        missing["ebit"] = "acquire_ebit"
    price = s.acquire_price if s.acquire_price is not None else 0.0
    _goodwill(v, flags, price - (s.acquire_assets - s.acquire_debt - s.acquire_liabilities))


def _expand(v: dict[str, float], before: Statement, x: float) -> None:
    # New assets in the firm's current mix; total assets grow here, and the cash paid leaves
    # in _finance, so that assets end unchanged until financing brings the money in.
    share = x / before.total_assets
    for line in ("ppe_net", "cash", "current_assets", "ebitda", "ebit", "revenue",
                 "rd_expense"):
        v[line] += share * getattr(before, line)
    v["total_assets"] += x


def _finance(v: dict[str, float], before: Statement, s: Scenario, where: str) -> None:
    raised = s.debt_raised + s.equity_issued
    spent = {"acquire_price": s.acquire_price or 0.0, "merge_price": s.merge_price or 0.0,
             "debt_repaid": s.debt_repaid, "equity_bought_back": s.equity_bought_back,
             "expand_assets": s.expand_assets}
    paid = [k for k, amount in spent.items() if amount > 0]
    if paid and math.isnan(v["cash"]):
        raise ConfigError(
            f"{where}: key {paid[0]} is paid out of cash, but the firm's {before.fiscal_year} "
            "row (or the other firm's) has no cash; add cash to the panel."
        )
    net = raised - sum(spent.values())
    v["cash"] += net
    v["total_assets"] += net
    if not math.isnan(v["current_assets"]):
        v["current_assets"] += net
    v["total_debt"] += s.debt_raised - s.debt_repaid
    v["book_equity"] += s.equity_issued - s.equity_bought_back
    v["market_equity"] += s.equity_issued - s.equity_bought_back


def _interest(v: dict[str, float], missing: dict[str, str], before: Statement,
              s: Scenario) -> None:
    new_debt = s.debt_raised + s.acquire_debt
    if new_debt > 0:
        if s.interest_rate is None:
            if not math.isnan(v["interest_expense"]):
                missing["interest_expense"] = "interest_rate"
            v["interest_expense"] = NAN
        else:
            v["interest_expense"] += s.interest_rate * new_debt
    if s.debt_repaid > 0 and not math.isnan(v["interest_expense"]):
        if before.total_debt > 0 and not math.isnan(before.interest_expense):
            v["interest_expense"] -= before.interest_expense / before.total_debt * s.debt_repaid
        else:
            missing["interest_expense"] = "interest_expense"
            v["interest_expense"] = NAN


def _check_after(after: Statement, before: Statement, s: Scenario, where: str) -> None:
    slack = TOLERANCE * max(abs(before.total_assets), 1.0)
    if not after.total_assets > 0:
        raise ConfigError(
            f"{where}: total_assets after the scenario must be > 0; got "
            f"{after.total_assets:,.6g}. {_culprits(s, 'assets')}"
        )
    if after.total_debt < -slack:
        raise ConfigError(
            f"{where}: key debt_repaid must not exceed the debt outstanding "
            f"({before.total_debt + s.debt_raised + s.acquire_debt:,.6g} with the debt raised "
            f"and assumed); got {s.debt_repaid:,.6g}."
        )
    if after.cash < -slack:
        raise ConfigError(
            f"{where}: cash after the scenario must be >= 0; got {after.cash:,.6g}: "
            f"{_culprits(s, 'cash')} Raise more (debt_raised, equity_issued) or spend less."
        )
    if after.market_equity < -slack:
        raise ConfigError(
            f"{where}: key equity_bought_back must not exceed the market value of equity "
            f"({before.market_equity + s.equity_issued:,.6g}); got {s.equity_bought_back:,.6g}."
        )
    if after.total_debt > after.total_assets * (1.0 + TOLERANCE):
        raise ConfigError(
            f"{where}: total_debt after the scenario must not exceed total_assets (book "
            f"leverage above 1 lies outside every fitted model); got debt "
            f"{after.total_debt:,.6g} and assets {after.total_assets:,.6g}."
        )
    if s.equity_volatility is not None and math.isnan(after.market_equity):
        raise ConfigError(
            f"{where}: key equity_volatility needs the firm's market_equity, which its "
            f"{before.fiscal_year} row lacks; give asset_volatility instead."
        )
    limit = SCALE_LIMIT * max(abs(before.total_assets), 1.0)
    for line, value in after.lines().items():
        if not (math.isnan(value) or abs(value) <= limit):
            raise ConfigError(
                f"{where}: the pro forma {line} must stay within {SCALE_LIMIT:,.0f} times the "
                f"firm's total assets ({before.total_assets:,.6g}); got {value:,.6g}. A figure "
                "that large is almost surely in the wrong unit: the scenario's amounts are in "
                "the results' money unit."
            )


SCALE_LIMIT = 1e6
"""A pro forma line beyond this multiple of the firm's total assets is refused as a unit error
(and keeps every figure far from overflow)."""


def _culprits(s: Scenario, what: str) -> str:
    keys = ("debt_repaid", "equity_bought_back", "acquire_price", "merge_price", "expand_assets")
    used = [f"{k} {getattr(s, k):,.6g}" for k in keys if getattr(s, k)]
    if not used:
        return ""
    return f"The scenario spends {', '.join(used)}."

