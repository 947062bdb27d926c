"""Deal scenarios: the keys of a ``[[scenario]]`` table as data, and their validation.

A scenario file is TOML: an optional ``[assumptions]`` table (rates and shares that every
scenario uses unless it sets its own) and one ``[[scenario]]`` table per scenario::

    [assumptions]
    tax_rate = 0.25
    interest_rate = 0.06

    [[scenario]]
    name = "bolt-on"
    debt_raised = 400.0
    acquire_price = 400.0
    acquire_assets = 310.0
    acquire_ppe = 150.0
    acquire_ebitda = 42.0
    acquire_ebit = 30.0

Every key is checked where it enters (type, range, how keys combine); an error is one line
naming the file, the scenario and the key. Money is in the results' money unit (the panel's,
after ``[units] scale`` and ``fx_rate``). This module imports nothing heavy: ``levgap
template`` writes the annotated example from :data:`KEYS`.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, fields
from typing import Any, Literal

from levgap.errors import ConfigError

KeyKind = Literal["text", "money", "signed_money", "rate"]
KeyGroup = Literal["scenario", "move", "acquisition", "merger", "assumption"]

BEFORE = "before"
"""Name of the firm's position before any scenario (reserved: no scenario may take it)."""
MAX_NAME = 60


@dataclass(frozen=True, slots=True)
class Key:
    """One key of a scenario table.

    Parameters
    ----------
    name : str
    kind : {"text", "money", "signed_money", "rate"}
        ``money`` is a non-negative amount, ``signed_money`` any amount, ``rate`` a number in
        ``[low, high]`` (``high_open``: ``high`` itself excluded).
    group : {"scenario", "move", "acquisition", "merger", "assumption"}
        Where the key belongs; only ``assumption`` keys may also appear in ``[assumptions]``.
    meaning : str
        One line for the template and the docs.
    low, high : float or None
        Range of a rate.
    high_open : bool
        Whether ``high`` is excluded.
    low_open : bool
        Whether ``low`` is excluded.
    """

    name: str
    kind: KeyKind
    group: KeyGroup
    meaning: str
    low: float | None = None
    high: float | None = None
    high_open: bool = True
    low_open: bool = False


KEYS: tuple[Key, ...] = (
    Key("name", "text", "scenario", "short name shown in every output (required, unique)"),
    Key("description", "text", "scenario", "one line for the deal memo"),
    Key("debt_raised", "money", "move", "new interest-bearing debt; the proceeds go to cash"),
    Key("debt_repaid", "money", "move", "debt repaid out of cash"),
    Key("equity_issued", "money", "move",
        "new shares sold at market value; the proceeds go to cash"),
    Key("equity_bought_back", "money", "move",
        "shares bought back at market value out of cash (book equity falls by the same amount)"),
    Key("expand_assets", "money", "move",
        "new assets in the firm's current mix, paid out of cash: PP&E, current assets, EBITDA, "
        "EBIT, revenue and R&D grow in proportion to total assets"),
    Key("acquire_price", "money", "acquisition",
        "price paid in cash for the assets below (needed with any acquire_ key)"),
    Key("acquire_assets", "money", "acquisition",
        "identifiable assets acquired, at fair value (including their PP&E and cash)"),
    Key("acquire_ppe", "money", "acquisition", "PP&E among the acquired assets"),
    Key("acquire_cash", "money", "acquisition", "cash among the acquired assets"),
    Key("acquire_current_assets", "money", "acquisition",
        "current assets among the acquired assets, cash included (default: acquire_cash)"),
    Key("acquire_debt", "money", "acquisition", "interest-bearing debt assumed"),
    Key("acquire_liabilities", "money", "acquisition", "other liabilities assumed"),
    Key("acquire_current_liabilities", "money", "acquisition",
        "current liabilities among the debt and liabilities assumed"),
    Key("acquire_ebitda", "signed_money", "acquisition", "EBITDA the acquired assets earn"),
    Key("acquire_ebit", "signed_money", "acquisition",
        "EBIT the acquired assets earn (needed for Altman scores when acquire_ebitda is set)"),
    Key("acquire_revenue", "money", "acquisition", "revenue the acquired assets bring"),
    Key("merge_with", "text", "merger",
        "firm_id of another firm of the panel: its latest row (up to the scenario's year) is "
        "combined with the firm's, line by line"),
    Key("merge_price", "money", "merger",
        "cash paid for the other firm's equity; its book equity and market value are then "
        "eliminated and the difference is goodwill (absent: a merger in shares, statements "
        "added line by line)"),
    Key("interest_rate", "rate", "assumption",
        "annual interest rate on new and assumed debt (EBITDA / interest after the scenario)",
        0.0, 1.0),
    Key("tax_rate", "rate", "assumption",
        "corporate tax rate t_c (tax-shield value; without it the trade-off is not computed)",
        0.0, 1.0),
    Key("personal_tax_equity", "rate", "assumption",
        "personal tax rate on equity income t_s (Miller 1977; give both personal rates or none)",
        0.0, 1.0),
    Key("personal_tax_debt", "rate", "assumption",
        "personal tax rate on interest income t_d (Miller 1977)", 0.0, 1.0),
    Key("distress_cost_share", "rate", "assumption",
        "share of firm value lost in distress (default 0.15, the middle of the 10-20% of "
        "Andrade and Kaplan 1998)", 0.0, 1.0, high_open=False, low_open=True),
    Key("asset_volatility", "rate", "assumption",
        "annual volatility of the firm's asset value (default: estimated from the firm's "
        "history of debt plus market equity, at least three years, flagged)",
        0.0, 5.0, high_open=False, low_open=True),
    Key("equity_volatility", "rate", "assumption",
        "annual volatility of the firm's equity: asset value and volatility are then solved "
        "from the Merton (1974) model", 0.0, 5.0, high_open=False, low_open=True),
    Key("risk_free_rate", "rate", "assumption",
        "one-year risk-free rate (Merton distance to default; without it no distress cost)",
        -0.1, 0.5, high_open=False),
)
"""Every key a ``[[scenario]]`` table may hold, in the order the template lists them."""

BY_KEY: dict[str, Key] = {k.name: k for k in KEYS}
ASSUMPTIONS: tuple[str, ...] = tuple(k.name for k in KEYS if k.group == "assumption")
MOVES: tuple[str, ...] = tuple(k.name for k in KEYS if k.group in ("move", "acquisition",
                                                                    "merger"))
DEFAULT_COST_SHARE = 0.15


@dataclass(frozen=True, slots=True)
class Scenario:
    """One scenario: moves on the firm's statements and the assumptions that price them.

    Money is in the results' money unit; a move left out is zero. See :data:`KEYS` for the
    meaning of each field; ``source`` names the file (for messages).
    """

    name: str
    description: str = ""
    debt_raised: float = 0.0
    debt_repaid: float = 0.0
    equity_issued: float = 0.0
    equity_bought_back: float = 0.0
    expand_assets: float = 0.0
    acquire_price: float | None = None
    acquire_assets: float = 0.0
    acquire_ppe: float = 0.0
    acquire_cash: float = 0.0
    acquire_current_assets: float | None = None
    acquire_debt: float = 0.0
    acquire_liabilities: float = 0.0
    acquire_current_liabilities: float = 0.0
    acquire_ebitda: float = 0.0
    acquire_ebit: float | None = None
    acquire_revenue: float = 0.0
    merge_with: str | None = None
    merge_price: float | None = None
    interest_rate: float | None = None
    tax_rate: float | None = None
    personal_tax_equity: float | None = None
    personal_tax_debt: float | None = None
    distress_cost_share: float = DEFAULT_COST_SHARE
    asset_volatility: float | None = None
    equity_volatility: float | None = None
    risk_free_rate: float | None = None
    source: str = "<memory>"

    def __post_init__(self) -> None:
        where = _where(self.source, self.name)
        for f in fields(self):
            if f.name in ("source",):
                continue
            _check_value(BY_KEY[f.name], getattr(self, f.name), where)
        _check_combinations(self, where)

    @property
    def is_empty(self) -> bool:
        """Whether the scenario moves nothing (it then reproduces the firm as it is)."""
        return all(getattr(self, k) in (0.0, None) for k in MOVES)

    @property
    def acquires(self) -> bool:
        """Whether the scenario buys assets at a price."""
        return self.acquire_price is not None

    def where(self) -> str:
        """``"<file>: scenario '<name>'"``, the start of every message about this scenario."""
        return _where(self.source, self.name)

    def to_dict(self) -> dict[str, Any]:
        """The keys that differ from their defaults (as written back into ``proforma.json``)."""
        out: dict[str, Any] = {}
        for f in fields(self):
            v = getattr(self, f.name)
            if f.name != "source" and (f.name == "name" or v != f.default):
                out[f.name] = v
        return out


def parse_scenarios(raw: dict[str, Any], *, source: str = "<memory>") -> tuple[Scenario, ...]:
    """Build scenarios from a parsed scenario file, checking every table and key.

    Parameters
    ----------
    raw : dict
        The parsed TOML: ``[assumptions]`` (optional) and ``[[scenario]]`` (one or more).
    source : str, default="<memory>"
        File name for messages.

    Returns
    -------
    tuple of Scenario
        In file order.

    Raises
    ------
    ConfigError
        One line naming the file, the scenario and the key: an unknown table or key, a value
        of the wrong type or outside its range, keys that do not combine, a missing or
        repeated name.
    """
    if not isinstance(raw, dict):
        raise ConfigError(f"{source}: a scenario file must be a TOML document; got {raw!r}.")
    unknown = sorted(set(raw) - {"scenario", "assumptions"})
    if unknown:
        raise ConfigError(
            f"{source}: unknown table [{unknown[0]}]; a scenario file holds [assumptions] and "
            "[[scenario]] tables only."
        )
    shared = raw.get("assumptions", {})
    if not isinstance(shared, dict):
        raise ConfigError(f"{source}: [assumptions] must be a table of keys; got {shared!r}.")
    bad = sorted(set(shared) - set(ASSUMPTIONS))
    if bad:
        raise ConfigError(
            f"{source}: unknown key {bad[0]!r} in [assumptions]; allowed keys are "
            f"{', '.join(ASSUMPTIONS)}."
        )
    tables = raw.get("scenario")
    if tables is None:
        raise ConfigError(
            f"{source}: the file must hold at least one [[scenario]] table; got none. "
            "`levgap template` writes an annotated example, deal.toml."
        )
    if not isinstance(tables, list) or not all(isinstance(t, dict) for t in tables):
        raise ConfigError(
            f"{source}: scenarios must be [[scenario]] tables (double brackets); got "
            f"{type(tables).__name__}."
        )
    seen: dict[str, int] = {}
    out = []
    for i, table in enumerate(tables, start=1):
        label = table.get("name")
        where = _where(source, label if isinstance(label, str) and label.strip() else f"#{i}")
        bad = sorted(set(table) - set(BY_KEY))
        if bad:
            raise ConfigError(
                f"{where}: unknown key {bad[0]!r}; allowed keys are {', '.join(BY_KEY)}."
            )
        if "name" not in table:
            raise ConfigError(f"{where}: key name is required; give each scenario a short name.")
        values = {**{k: shared[k] for k in shared}, **table}
        scenario = _build(values, source, where)
        key = scenario.name.casefold()
        if key in seen:
            raise ConfigError(
                f"{where}: key name must be unique; got {scenario.name!r} again (first in "
                f"scenario #{seen[key]})."
            )
        seen[key] = i
        check_name_free(scenario)
        out.append(scenario)
    return tuple(out)


def debt_change(x: float, *, fund_assets: bool = False) -> Scenario:
    """The scenario of one change in debt (``levgap explain --add-debt X``).

    Parameters
    ----------
    x : float
        Additional debt (negative repays).
    fund_assets : bool, default=False
        The debt buys new assets in the firm's current mix (``expand_assets``); otherwise a
        recapitalisation: shares bought back (or, for a repayment, issued) at market value.

    Returns
    -------
    Scenario

    Raises
    ------
    ConfigError
        A repayment with ``fund_assets`` (selling assets is not a scenario move).
    """
    name = f"debt {x:+,.6g}" + (" into assets" if fund_assets else " (recap)")
    if fund_assets:
        if x < 0:
            raise ConfigError(
                f"--add-debt must be >= 0 with --fund-assets; got {x:g}. Repay debt without "
                "--fund-assets (shares are issued to repay it)."
            )
        return Scenario(name=name, debt_raised=x, expand_assets=x, source="--add-debt")
    if x >= 0:
        return Scenario(name=name, debt_raised=x, equity_bought_back=x, source="--add-debt")
    return Scenario(name=name, debt_repaid=-x, equity_issued=-x, source="--add-debt")


def check_name_free(scenario: Scenario) -> None:
    """Refuse a scenario named like the firm's position before any scenario.

    Raises
    ------
    ConfigError
    """
    if scenario.name.strip().casefold() == BEFORE:
        raise ConfigError(
            f"{scenario.where()}: key name must not be {BEFORE!r}, which names the firm's "
            "position before any scenario; choose another name."
        )


def _build(values: dict[str, Any], source: str, where: str) -> Scenario:
    kwargs: dict[str, Any] = {}
    for name, v in values.items():
        key = BY_KEY[name]
        _check_type(key, v, where)
        kwargs[name] = v.strip() if isinstance(v, str) else (
            float(v) if key.kind != "text" else v)
    return Scenario(**kwargs, source=source)


def _where(source: str, name: Any) -> str:
    label = name if isinstance(name, str) and name.startswith("#") else f"{name!r}"
    return f"{source}: scenario {label}"


def _check_type(key: Key, v: Any, where: str) -> None:
    if key.kind == "text":
        if not isinstance(v, str):
            raise ConfigError(f"{where}: key {key.name} must be text in quotes; got {v!r}.")
        return
    if isinstance(v, bool) or not isinstance(v, int | float):
        raise ConfigError(f"{where}: key {key.name} must be a number; got {v!r}.")


def _check_value(key: Key, v: Any, where: str) -> None:
    if v is None:
        return
    if key.kind == "text":
        if not isinstance(v, str):
            raise ConfigError(f"{where}: key {key.name} must be text; got {v!r}.")
        if any(ord(c) < 32 or ord(c) == 127 for c in v):
            raise ConfigError(f"{where}: key {key.name} must not hold control characters; got "
                              f"{v!r}.")
        if key.name == "name":
            if not v.strip():
                raise ConfigError(f"{where}: key name must not be blank.")
            if len(v) > MAX_NAME:
                raise ConfigError(f"{where}: key name must be at most {MAX_NAME} characters; got "
                                  f"{len(v)}.")
        if key.name == "merge_with" and not v.strip():
            raise ConfigError(f"{where}: key merge_with must be a firm_id; got a blank.")
        return
    if isinstance(v, bool) or not isinstance(v, int | float) or not math.isfinite(v):
        raise ConfigError(f"{where}: key {key.name} must be a finite number; got {v!r}.")
    if key.kind == "money" and v < 0:
        raise ConfigError(
            f"{where}: key {key.name} must be a number >= 0; got {v:g}."
            + (" Use debt_repaid to repay debt." if key.name == "debt_raised" else "")
            + (" Use equity_bought_back to buy back shares." if key.name == "equity_issued"
               else "")
        )
    if key.kind == "rate":
        low = -math.inf if key.low is None else key.low
        high = math.inf if key.high is None else key.high
        too_low = v <= low if key.low_open else v < low
        too_high = v >= high if key.high_open else v > high
        if too_low or too_high:
            lo = "(" if key.low_open else "["
            hi = ")" if key.high_open else "]"
            raise ConfigError(
                f"{where}: key {key.name} must lie in {lo}{low:g}, {high:g}{hi} (a "
                f"fraction: 0.25 for 25%); got {v:g}."
            )


def _check_combinations(s: Scenario, where: str) -> None:
    acquisition = [k.name for k in KEYS if k.group == "acquisition" and k.name != "acquire_price"
                   and getattr(s, k.name) not in (0.0, None)]
    if acquisition and s.acquire_price is None:
        raise ConfigError(
            f"{where}: key acquire_price is needed with {acquisition[0]}; state the price paid "
            "(0 for a gift)."
        )
    current = s.acquire_current_assets
    if current is not None and s.acquire_cash > current:
        raise ConfigError(
            f"{where}: key acquire_cash must not exceed acquire_current_assets (cash is a "
            f"current asset); got {s.acquire_cash:g} > {current:g}."
        )
    parts = s.acquire_ppe + (current if current is not None else s.acquire_cash)
    if parts > s.acquire_assets:
        raise ConfigError(
            f"{where}: key acquire_assets must be at least acquire_ppe plus the acquired current "
            f"assets; got {s.acquire_assets:g} < {parts:g}."
        )
    if s.acquire_current_liabilities > s.acquire_debt + s.acquire_liabilities:
        raise ConfigError(
            f"{where}: key acquire_current_liabilities must not exceed acquire_debt plus "
            f"acquire_liabilities; got {s.acquire_current_liabilities:g}."
        )
    if s.merge_price is not None and s.merge_with is None:
        raise ConfigError(f"{where}: key merge_price needs merge_with, the firm_id of the firm "
                          "bought.")
    if s.merge_with is not None and s.acquires:
        raise ConfigError(
            f"{where}: key merge_with cannot be combined with acquire_price; write the "
            "acquisition of assets and the merger as two scenarios."
        )
    if (s.personal_tax_equity is None) != (s.personal_tax_debt is None):
        missing = "personal_tax_debt" if s.personal_tax_debt is None else "personal_tax_equity"
        raise ConfigError(
            f"{where}: key {missing} is needed too: Miller (1977) uses both personal tax rates "
            "(give both, or neither for Modigliani-Miller 1963)."
        )
    if s.asset_volatility is not None and s.equity_volatility is not None:
        raise ConfigError(
            f"{where}: key equity_volatility cannot be combined with asset_volatility; give "
            "one (asset volatility is then taken as given or solved from equity volatility)."
        )
