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
}
"""Every term users see, by key (output columns use their column name as key)."""

CLUSTERS: dict[str, str] = {"firm": "firm", "firm-year": "firm and year (two-way)",
                            "industry": "industry"}
"""What each clustering of the standard errors is called."""

MEASURES: dict[str, str] = {"book": "book leverage", "market": "market leverage"}
"""Each measure's name."""

_PLURALS = {"industry": "industries"}  # the others take an "s"


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
