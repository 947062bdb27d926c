"""What each driver is: its readable label, how it is built, and the sign the literature reports.

One table as data (no pandas: the quick commands and the template use it). The drivers'
table of the template README, the report, ``coefficients.csv`` (``expected_sign``,
``agrees``, ``sign_source``) and the regression table are all built from :data:`DRIVERS`.

Signs are those of REFERENCES.md ("Direction of the drivers"): Rajan and Zingales (1995),
Frank and Goyal (2009), Titman and Wessels (1988). A sign marked *memory* was recalled, not
re-read; a sign the literature calls unreliable for a measure still counts in ``agrees`` but
the source says so.
"""

from __future__ import annotations

from dataclasses import dataclass

from levgap.glossary import MEASURES, capital

POSITIVE = "positive"
NEGATIVE = "negative"
MEASURE_LABELS = {k: capital(v) for k, v in MEASURES.items()}
"""Each measure's name as a column head (``levgap.glossary.MEASURES``)."""

_RZ_FG = ("Rajan and Zingales (1995) JF 50(5) Table IX (memory); Frank and Goyal (2009) FM "
          "38(1), abstract")


@dataclass(frozen=True, slots=True)
class DriverInfo:
    """One driver of the model.

    Parameters
    ----------
    name : str
        The driver's name in every output (``tangibility``).
    label : str
        Readable row label of tables (``Tangibility``).
    built : str
        How the driver is built from the panel's columns.
    sign : {"positive", "negative", ""}
        Sign of its effect on leverage that the literature reports ("" for none).
    source : str
        Where that sign comes from.
    unreliable_for : tuple of str, default=()
        Measures for which the literature calls the sign unreliable.
    """

    name: str
    label: str
    built: str
    sign: str = ""
    source: str = ""
    unreliable_for: tuple[str, ...] = ()


DRIVERS: dict[str, DriverInfo] = {d.name: d for d in (
    DriverInfo("tangibility", "Tangibility", "ppe_net / total_assets", POSITIVE, _RZ_FG),
    DriverInfo("profitability", "Profitability", "ebitda / total_assets", NEGATIVE, _RZ_FG),
    DriverInfo("earnings_volatility", "Earnings volatility",
               "standard deviation (ddof 1) of profitability over the firm's trailing five "
               "fiscal years, at least three; else the industry-year median (flagged "
               "volatility_imputed)", NEGATIVE,
               "common practice in the trade-off literature; mixed evidence (Titman and "
               "Wessels 1988 find no support)"),
    DriverInfo("size", "Size (log assets)", "ln(total_assets)", POSITIVE,
               _RZ_FG + "; not reliable for book leverage", ("book",)),
    DriverInfo("market_to_book", "Market-to-book",
               "(total_assets - book_equity + market_equity) / total_assets; without market "
               "equity the industry-year median (flagged mtb_imputed)", NEGATIVE,
               _RZ_FG + "; not reliable for book leverage", ("book",)),
    DriverInfo("rd_intensity", "R&D intensity",
               "rd_expense / total_assets, a blank rd_expense counted as zero (with "
               "rd_missing beside it, common practice)", NEGATIVE,
               "Titman and Wessels (1988) JF 43(1), uniqueness (memory for the sign)"),
    DriverInfo("rd_missing", "R&D not reported",
               "1 where rd_expense is blank, else 0 (the indicator beside rd_intensity)"),
    DriverInfo("log_revenue", "Size (log revenue)",
               "ln(revenue); a row without revenue > 0 is left out (reason driver_missing)",
               POSITIVE, "Frank and Goyal (2009) FM 38(1), abstract (size as log sales); "
               "Rajan and Zingales (1995) (memory); not reliable for book leverage",
               ("book",)),
    DriverInfo("industry_median_leverage", "Industry median leverage",
               "median of the measure among the other firms of the firm's industry (at "
               "[model] industry_digits) in the same fiscal year, the firm itself left out; "
               "with no other firm there, the median of the year's other firms (flagged "
               "industry_median_imputed); not winsorised; not with industry effects",
               POSITIVE, "Frank and Goyal (2009) FM 38(1), abstract"),
    DriverInfo("dividend_payer", "Dividend payer",
               "1 where dividends_paid > 0, else 0; a blank dividends_paid counts as not "
               "paying (flagged dividends_missing); not winsorised", NEGATIVE,
               "Frank and Goyal (2009) FM 38(1) (memory; not in REFERENCES.md)"),
)}
"""Every driver levgap builds, by name."""

DERIVED: tuple[str, ...] = ("rd_intensity", "log_revenue", "industry_median_leverage",
                            "dividend_payer")
"""Drivers a run adds on request (``[model] drivers``), beside the five default ones."""

NOT_WINSORISED: frozenset[str] = frozenset({"rd_missing", "dividend_payer",
                                            "industry_median_leverage"})
"""Drivers left as built: indicators (clipping a 0/1 column at its 1st percentile could make
it constant) and a median of leverage (bounded, no outliers of its own)."""

MEASURE_SPECIFIC: frozenset[str] = frozenset({"industry_median_leverage"})
"""Drivers whose value depends on the measure being explained (one column per measure)."""

INPUT_DRIVER_BUILT = ("the input column {name}, as given (after [units] scale and fx_rate for "
                      "money columns)")


def info(name: str) -> DriverInfo:
    """The driver's entry; a driver taken from an input column gets a plain one."""
    found = DRIVERS.get(name)
    if found is not None:
        return found
    return DriverInfo(name, label(name), INPUT_DRIVER_BUILT.format(name=name))


def label(name: str) -> str:
    """Readable label of a driver or term (``market_to_book`` -> ``Market-to-book``)."""
    found = DRIVERS.get(name)
    if found is not None:
        return found.label
    if name in MEASURE_LABELS:
        return MEASURE_LABELS[name]
    for measure, text in MEASURE_LABELS.items():
        stem = name.removesuffix("_" + measure)
        if stem != name and stem in DRIVERS:
            return f"{DRIVERS[stem].label} ({text.split()[0].lower()})"
    if name == "const":
        return "Constant"
    words = str(name).replace("_", " ").strip()
    return words[:1].upper() + words[1:]


def expected(name: str, measure: str) -> tuple[str, str]:
    """Expected sign (``positive``, ``negative`` or ``""``) and its source, for a measure."""
    d = DRIVERS.get(name)
    if d is None or not d.sign:
        return "", ""
    return d.sign, d.source


def agrees(name: str, estimate: float) -> str:
    """``yes`` when the estimate has the expected sign, ``no`` when not, ``""`` without one."""
    d = DRIVERS.get(name)
    if d is None or not d.sign or estimate != estimate or estimate == 0:
        return ""
    return "yes" if (estimate > 0) == (d.sign == POSITIVE) else "no"
