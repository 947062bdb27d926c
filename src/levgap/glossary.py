"""One vocabulary: the terms, units and labels every user-facing surface reads (pandas-free).

The command line, the HTML report, the workbook, the terminal tables and the README show a
quantity under the label this module gives it, with its unit, and format its numbers here:
percentages with one decimal, gaps in percentage points with a sign, money with its unit and
currency, counts with the right plural, and never a negative zero. ``tests/test_glossary.py``
searches ``src/`` and finds each label written once, here.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass
from typing import Any


@dataclass(frozen=True, slots=True)
class Term:
    """A quantity or field as users see it.

    Parameters
    ----------
    label : str
        Short label for a column header or a field name.
    unit : str, default=""
        ``"%"`` (a ratio shown as a percentage), ``"pp"`` (percentage points),
        ``"money"`` (the run's money unit and currency), ``"years"`` or empty.
    meaning : str, default=""
        One sentence: what it is.
    """

    label: str
    unit: str = ""
    meaning: str = ""


UNIT_PP = "pp"
"""The unit of gaps and contributions: percentage points."""

UNITS: dict[str, str] = {
    "%": "percent of the denominator of the measure (total assets, or debt plus market equity)",
    "pp": "percentage points: differences of two percentages",
    "money": "the panel's money unit after [units] scale and fx_rate, in [units] currency",
    "years": "fiscal years",
}
"""What each unit means."""

TERMS: dict[str, Term] = {
    # identity
    "firm_id": Term("firm", "", "the firm's identifier as given in the panel"),
    "firm_name": Term("name", "", "the firm's display name"),
    "industry": Term("industry", "", "the industry code or label as given"),
    "industry_name": Term("industry name", "", "readable name of the industry: from "
                          "[industries], the industry_names file, or the SEC's SIC titles"),
    "fiscal_year": Term("year", "", "fiscal year of the statements"),
    "measure": Term("measure", "", "book (debt / assets) or market (debt / (debt + market "
                    "equity)) leverage"),
    # the benchmark
    "actual": Term("actual", "%", "the firm's leverage ratio"),
    "target": Term("target", "%", "the leverage the model expects from the firm's drivers, "
                   "industry and year, from a fit that never saw the firm"),
    "gap": Term("gap", "pp", "actual minus target"),
    "gap_z": Term("gap z", "", "the gap over the industry's residual scale (robust standard "
                  "units)"),
    "band": Term("band", "%", "the range around the target that holds the stated share of "
                 "firm-years"),
    "band_low": Term("band low", "%", "lower edge of the band"),
    "band_high": Term("band high", "%", "upper edge of the band"),
    "status": Term("status", "", "over, within or under the band"),
    "peer_median": Term("peer median", "%", "median leverage of the firm's peers that year"),
    "peer_count": Term("peers", "", "how many peers the peer median and profile rest on"),
    "peer_target": Term("peer target", "%", "the model's target at the peers' median drivers"),
    "debt_to_target": Term("debt to target", "money", "change in debt that brings the firm to "
                           "its target in a recapitalisation (book: assets fixed; market: debt "
                           "plus market equity fixed)"),
    "target_full": Term("full-sample target", "%", "target from the fit on every firm"),
    "fold": Term("fold", "", "the cross-fit fold whose fit gave the target"),
    "flags": Term("flags", "", "caveats on the row, as codes (explained in words in the "
                  "report, the workbook and explain)"),
    # history
    "gap_prev": Term("previous gap", "pp", "the gap of the firm's previous fiscal year"),
    "gap_change": Term("gap change", "pp", "gap minus the previous year's gap"),
    "gap_mean_prior": Term("mean earlier gap", "pp", "mean gap over the firm's earlier "
                           "fiscal years: its standing deviation"),
    "years_outside": Term("years outside", "years", "consecutive fiscal years, ending with "
                          "this one, outside the band on the same side"),
    # drivers
    "driver": Term("driver", "", "a determinant of leverage in the model"),
    "firm_value": Term("firm value", "", "the driver's value used for the firm (after "
                       "winsorising)"),
    "raw_value": Term("raw value", "", "the driver's value before winsorising, where "
                      "winsorising changed it"),
    "peer_value": Term("peer value", "", "the peers' median value of the driver"),
    "contribution": Term("contribution", "pp", "the driver's exact share of target minus "
                         "peer target"),
    # model fit
    "n_obs": Term("firm-years", "", "firm-years in the fit"),
    "n_firms": Term("firms", "", "distinct firms in the fit"),
    "r2": Term("R² in sample", "", "share of variance explained by the full-sample fit"),
    "r2_oos": Term("R² out of sample", "", "share of variance explained by the cross-fitted "
                   "targets"),
    "rmse_oos": Term("RMSE out of sample", "pp", "root mean squared cross-fitted error"),
    "coverage": Term("in band", "%", "share of firm-years inside their band"),
    "coverage_range": Term("in band by industry", "%", "range of that share across "
                           "industries with at least 100 firm-years"),
    "coverage_out_of_time": Term("in band out of time", "%", "that share for the last fiscal "
                                 "year, the model fitted without it"),
    # coefficients
    "term": Term("term", "", "a driver's coefficient"),
    "estimate": Term("estimate", "", "the coefficient"),
    "std_error": Term("standard error", "", "cluster-robust standard error"),
    "ci": Term("95% interval", "", "95% confidence interval"),
    "p_value": Term("p", "", "two-sided p-value"),
    "expected_sign": Term("expected sign", "", "the direction of the driver's effect on "
                          "leverage that the literature reports"),
    "agrees": Term("agrees", "", "yes when the estimate has the expected sign, no when not"),
    "sign_source": Term("sign source", "", "where the expected sign comes from"),
    # replication: the regression table, Fama-MacBeth, the speed of adjustment
    "industry_effects": Term("industry effects", "", "industries whose effect was absorbed: "
                             "with an effect of their own, and pooled toward a parent group"),
    "year_effects": Term("year effects", "", "fiscal years whose effect was absorbed"),
    "firm_effects": Term("firm effects", "", "firms whose own effect was absorbed (within "
                         "transformation)"),
    "drivers_dated": Term("drivers dated", "", "t: the drivers of the same fiscal year; t-1: "
                          "of the previous one ([model] lag_drivers)"),
    "estimator": Term("estimator", "", "how the coefficients were estimated"),
    "errors": Term("standard errors", "", "how the standard errors were computed: the "
                   "clustering, or the time series of Fama-MacBeth's yearly slopes"),
    "n_years": Term("years averaged", "years", "Fama-MacBeth: the fiscal years whose "
                    "cross-sections a slope averages"),
    "speed": Term("speed of adjustment", "", "share of the gap to target a firm closes in a "
                  "year"),
    "half_life": Term("half-life", "years", "years until half of a gap is closed: "
                      "ln(0.5) / ln(1 - speed)"),
    "bias": Term("bias", "", "the direction the literature finds an estimator biased, or "
                 "corrected"),
    # steps from the peer median to the actual ratio
    "step": Term("step", "", "a step of the bridge from peer median to actual"),
    "peers_offset": Term("peers' offset", "pp", "peer target minus peer median"),
    "unexplained": Term("unexplained gap", "pp", "actual minus target"),
    # industries
    "firms": Term("firms", "", "distinct firms"),
    "median_actual": Term("median actual", "%", ""),
    "median_target": Term("median target", "%", ""),
    "median_gap": Term("median gap", "pp", ""),
    "share_over": Term("share over", "%", "share of firms over their band"),
    "share_under": Term("share under", "%", "share of firms under their band"),
    # ledger
    "excluded": Term("excluded", "", "rows left out of every measure, with their reason"),
    "excluded_measure": Term("excluded from one measure", "", "rows used for one measure only"),
    # the deal check (proforma.csv, its page and the terminal)
    "scenario": Term("scenario", "", "a deal scenario, or before: the firm as it is"),
    "capacity_to_target_recap": Term(
        "debt to target (recapitalisation)", "money", "change in debt that brings the "
        "scenario to its target when debt replaces equity (book: assets fixed; market: debt "
        "plus market equity fixed)"),
    "capacity_to_band_top_recap": Term(
        "debt to band top (recapitalisation)", "money", "the same, to the top of the band"),
    "capacity_to_target_funded": Term(
        "debt to target (debt funds new assets)", "money", "change in debt that brings the "
        "scenario to its target when the new debt buys assets in the firm's mix"),
    "capacity_to_band_top_funded": Term(
        "debt to band top (debt funds new assets)", "money", "the same, to the top of the band"),
    "net_debt_to_ebitda": Term("net debt / EBITDA", "", "debt less cash, over EBITDA"),
    "debt_to_ebitda": Term("debt / EBITDA", "", "total debt over EBITDA"),
    "ebitda_to_interest": Term("EBITDA / interest", "", "EBITDA over interest expense"),
    "altman_score": Term("Altman score", "", "Altman Z (or Z'' without market equity), its "
                         "model and zone"),
    "asset_value": Term("asset value (Merton)", "money", "market value of the firm's assets "
                        "in the Merton model"),
    "asset_volatility": Term("asset volatility", "%", "annual volatility of the asset value, "
                             "with its source"),
    "distance_to_default": Term("distance to default", "", "standard deviations of asset "
                                "value between the assets and the default point"),
    "default_probability": Term("default probability, 1 year", "%", "the Merton model's "
                                "probability of default within a year"),
    "tax_shield_pv": Term("tax shield PV", "money", "present value of the tax saved by the "
                          "debt (with personal taxes where the scenario gives them)"),
    "expected_distress_cost": Term("expected distress cost", "money", "default probability "
                                   "times the distress cost share times firm value"),
    "tradeoff_best_debt": Term("trade-off best debt", "money", "the debt, on a grid to twice "
                               "the band top, where tax shield less distress cost is largest"),
    "total_debt": Term("total debt", "money"),
    "total_assets": Term("total assets", "money"),
    "debt_now": Term("debt now", "money"),
    "debt_at_target": Term("debt at the target (recapitalisation)", "money"),
    "debt_at_band_top": Term("debt at the band's top (recapitalisation)", "money"),
    # models compared (levgap compare)
    "model": Term("model", "", "the model fitted: linear, fractional logit or the "
                  "gradient-boosting benchmark"),
    "outside_unit_interval": Term("targets outside [0, 1]", "%", "share of targets below 0 or "
                                  "above 1"),
    "fit_seconds": Term("seconds", "", "seconds the fit took"),
}
"""Every term users see, by key (output columns use their column name as key)."""

def _cap(text: str) -> str:
    return text[:1].upper() + text[1:]


STATEMENT: dict[str, str] = {
    "total_assets": _cap(TERMS["total_assets"].label),
    "total_debt": _cap(TERMS["total_debt"].label), "book_equity": "Book equity",
    "market_equity": "Market equity", "cash": "Cash", "ppe_net": "PP&E, net",
    "ebitda": "EBITDA", "ebit": "EBIT", "revenue": "Revenue",
    "interest_expense": "Interest expense", "current_assets": "Current assets",
    "current_liabilities": "Current liabilities", "total_liabilities": "Total liabilities",
    "retained_earnings": "Retained earnings", "rd_expense": "R&D expense",
    "goodwill": "Goodwill added",
}
"""Statement lines of the deal check as its page names them."""

CLUSTERS: dict[str, str] = {"firm": "firm", "firm-year": "firm and year (two-way)",
                            "industry": "industry"}
"""What each clustering of the standard errors is called."""

MEASURES: dict[str, str] = {"book": "book leverage", "market": "market leverage"}
"""Each measure's name."""

ESTIMATORS: dict[str, str] = {
    "pooled linear": "pooled OLS",
    "pooled fractional": "fractional logit",
    "within": "within (OLS)",
    "fama-macbeth": "Fama-MacBeth",
}
"""What each estimator is called (``estimator`` and, for pooled fits, ``model``)."""

ABSORBED: dict[str, str] = {
    "industry,year": "industry and year effects are absorbed and not shown",
    "firm,year": "firm and year effects are absorbed and not shown",
    "year": "year effects are absorbed and not shown",
    "none": "no fixed effects are absorbed",
}
"""What a specification's ``[model] effects`` absorbed, in words."""

_PLURALS = {"industry": "industries"}  # the others take an "s"


def capital(text: str) -> str:
    """``text`` with its first letter capitalised, for a table's row label or a sentence."""
    return text[:1].upper() + text[1:]


def label(key: str) -> str:
    """The short label of a term (its key when the glossary has none)."""
    term = TERMS.get(key)
    return term.label if term is not None else key


def header(key: str, money: str | None = None) -> str:
    """A column header: the label with its unit where the cells do not show it, e.g.
    ``gap (pp)``, ``debt to target (EUR millions)``; percentages carry their ``%`` sign in
    each cell, so their header is the label alone.

    Parameters
    ----------
    key : str
    money : str, optional
        The run's money unit (:func:`money_unit`); without it a money header is the label
        alone and the page or table names the unit once (:func:`money_note`).
    """
    term = TERMS.get(key)
    if term is None:
        return key
    unit = {"money": money or "", "years": "", "%": ""}.get(term.unit, term.unit)
    return f"{term.label} ({unit})" if unit else term.label


def money_unit(units: Mapping[str, Any] | None) -> str:
    """The run's money unit in words, from its ``[units]`` options (``run.json``).

    Examples
    --------
    >>> money_unit({"currency": "EUR", "unit": "millions"})
    'EUR millions'
    >>> money_unit({})
    'money units of the panel'
    """
    units = units or {}
    parts = [str(units[k]) for k in ("currency", "unit") if units.get(k)]
    return " ".join(parts) if parts else "money units of the panel"


def money_note(units: Mapping[str, Any] | None) -> str:
    """One sentence naming the money unit of a run's figures."""
    unit = money_unit(units)
    if unit == money_unit({}):
        return ("Money is in the panel's own unit after [units] scale; name it with [units] "
                "currency and unit.")
    return f"Money is in {unit}."


def plural(noun: str, n: int | float) -> str:
    """``noun`` in the plural unless ``n`` is 1."""
    if n == 1:
        return noun
    return _PLURALS.get(noun, noun + "s")


def count(n: int | float, noun: str) -> str:
    """``1 firm``, ``2 firms``, ``1,200 firm-years``."""
    return f"{int(n):,} {plural(noun, n)}"


def _finite(v: Any) -> float | None:
    try:
        f = float(v)
    except (TypeError, ValueError):
        return None
    return f if math.isfinite(f) else None


def _signed(value: float, digits: int, sign: bool) -> str:
    text = f"{value:+,.{digits}f}" if sign else f"{value:,.{digits}f}"
    stripped = text.lstrip("+-").replace(",", "").replace(".", "")
    if set(stripped) <= {"0"}:  # no negative (or signed) zero
        return text.lstrip("+-")
    return text


MISSING = "–"
"""What a missing number shows as."""


def pct(v: Any, digits: int = 1) -> str:
    """A ratio as a percentage: ``0.1234`` -> ``12.3%``."""
    f = _finite(v)
    return MISSING if f is None else _signed(100 * f, digits, False) + "%"


def pp(v: Any, digits: int = 1) -> str:
    """A difference of ratios in percentage points, signed: ``0.023`` -> ``+2.3``."""
    f = _finite(v)
    return MISSING if f is None else _signed(100 * f, digits, True)


def signed(v: Any, digits: int = 2) -> str:
    """A signed number: ``1.234`` -> ``+1.23``."""
    f = _finite(v)
    return MISSING if f is None else _signed(f, digits, True)


def number(v: Any, digits: int = 3) -> str:
    """A plain number with thousands separators."""
    f = _finite(v)
    return MISSING if f is None else _signed(f, digits, False)


def money(v: Any, digits: int = 1) -> str:
    """Money, signed, with thousands separators: ``-1234.5`` -> ``-1,234.5``."""
    f = _finite(v)
    return MISSING if f is None else _signed(f, digits, True)


def glossary_markdown() -> str:
    """The glossary as a Markdown table (the template README and README.md carry it)."""
    lines = ["| label | unit | meaning |", "|---|---|---|"]
    for term in TERMS.values():
        if term.meaning:
            unit = {"money": "money", "": "-"}.get(term.unit, term.unit)
            lines.append(f"| {term.label} | {unit} | {term.meaning} |")
    lines += ["", "Units: " + "; ".join(f"{k}: {v}" for k, v in UNITS.items()) + "."]
    return "\n".join(lines) + "\n"
