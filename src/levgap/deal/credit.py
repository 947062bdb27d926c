"""Credit context of a statement: leverage multiples, interest cover, Altman Z and Z''.

- ``net_debt_to_ebitda`` = (total_debt - cash) / EBITDA, ``debt_to_ebitda`` = total_debt /
  EBITDA (both only for positive EBITDA), ``ebitda_to_interest`` = EBITDA / interest_expense
  (only for positive interest); common practice in credit analysis.
- Altman Z (Altman 1968, JF 23(4), public manufacturers, SIC 2000-3999):
  ``Z = 1.2 X1 + 1.4 X2 + 3.3 X3 + 0.6 X4 + 1.0 X5`` with X1 = working capital / total
  assets, X2 = retained earnings / total assets, X3 = EBIT / total assets, X4 = market value of
  equity / total liabilities, X5 = revenue / total assets; distress below 1.81, grey to 2.99,
  safe above.
- Altman Z'' (Altman's revision for non-manufacturers, as in REFERENCES.md):
  ``Z'' = 6.56 X1 + 3.26 X2 + 6.72 X3 + 1.05 X4`` with X4 = book equity / total liabilities;
  distress below 1.10, grey to 2.60, safe above.

A ratio that cannot be computed says what it needs (``not computable: needs current_assets``),
naming the scenario key when the scenario made the line unknown (``acquire_ebit``).
"""

from __future__ import annotations

import math
from collections.abc import Callable, Mapping
from dataclasses import dataclass

from levgap.deal.statement import Statement

NAN = math.nan
Z_WEIGHTS = (1.2, 1.4, 3.3, 0.6, 1.0)
Z2_WEIGHTS = (6.56, 3.26, 6.72, 1.05)
ZONES: dict[str, tuple[float, float]] = {"Z": (1.81, 2.99), "Z''": (1.10, 2.60)}
"""Model -> (distress below, safe above); between them the grey zone."""
MANUFACTURING = (2000, 3999)


@dataclass(frozen=True, slots=True)
class Ratio:
    """A credit ratio and, when it has no value, why.

    Parameters
    ----------
    value : float
        NaN when not computable or not meaningful.
    note : str
        Empty, or ``"not computable: needs X"`` / ``"not meaningful: ..."``.
    """

    value: float
    note: str = ""


@dataclass(frozen=True, slots=True)
class Altman:
    """An Altman score.

    Parameters
    ----------
    model : {"Z", "Z''"}
        Z for manufacturers (SIC 2000-3999), Z'' for the others.
    score : float
        NaN when not computable.
    zone : {"safe", "grey", "distress", ""}
    note : str
        ``"not computable: needs ..."`` when the score has no value.
    parts : tuple of float
        X1 to X5 (Z) or X1 to X4 (Z'').
    """

    model: str
    score: float
    zone: str
    note: str = ""
    parts: tuple[float, ...] = ()


def credit_ratios(s: Statement, missing: Mapping[str, str] | None = None) -> dict[str, Ratio]:
    """Net debt / EBITDA, debt / EBITDA and EBITDA / interest of a statement.

    Parameters
    ----------
    s : Statement
    missing : mapping of str to str, optional
        Line -> what it needs (from :class:`~levgap.deal.statement.ProForma`); a missing line
        not listed needs its own column.

    Returns
    -------
    dict of str to Ratio
        ``net_debt_to_ebitda``, ``debt_to_ebitda``, ``ebitda_to_interest``.
    """
    need = _needs(s, missing or {})
    out: dict[str, Ratio] = {}
    for name, numer, lines in (
        ("net_debt_to_ebitda", s.total_debt - s.cash, ("cash", "ebitda")),
        ("debt_to_ebitda", s.total_debt, ("ebitda",)),
    ):
        gaps = need(lines)
        if gaps:
            out[name] = Ratio(NAN, gaps)
        elif s.ebitda <= 0:
            out[name] = Ratio(NAN, "not meaningful: EBITDA is zero or negative")
        else:
            out[name] = Ratio(numer / s.ebitda)
    gaps = need(("ebitda", "interest_expense"))
    if gaps:
        out["ebitda_to_interest"] = Ratio(NAN, gaps)
    elif s.interest_expense <= 0:
        out["ebitda_to_interest"] = Ratio(NAN, "not meaningful: no interest expense")
    else:
        out["ebitda_to_interest"] = Ratio(s.ebitda / s.interest_expense)
    return out


def is_manufacturer(industry: str) -> bool:
    """Whether an industry code is a four-digit SIC code in 2000-3999 (manufacturing)."""
    code = str(industry).strip()
    if code.endswith(".0"):
        code = code[:-2]
    return len(code) == 4 and code.isdigit() and MANUFACTURING[0] <= int(code) <= MANUFACTURING[1]


def altman_z(x1: float, x2: float, x3: float, x4: float, x5: float) -> float:
    """Altman (1968) Z from its five ratios (as fractions, not per cent)."""
    return sum(w * x for w, x in zip(Z_WEIGHTS, (x1, x2, x3, x4, x5), strict=True))


def altman_z2(x1: float, x2: float, x3: float, x4: float) -> float:
    """Altman Z'' (non-manufacturers) from its four ratios."""
    return sum(w * x for w, x in zip(Z2_WEIGHTS, (x1, x2, x3, x4), strict=True))


def zone(model: str, score: float) -> str:
    """``distress``, ``grey`` or ``safe`` by the published cut-offs ("" for NaN)."""
    if math.isnan(score):
        return ""
    low, high = ZONES[model]
    return "distress" if score < low else "safe" if score > high else "grey"


def altman(s: Statement, missing: Mapping[str, str] | None = None) -> Altman:
    """Altman Z for a manufacturer, Z'' otherwise, with its zone.

    Parameters
    ----------
    s : Statement
    missing : mapping of str to str, optional
        As in :func:`credit_ratios`.

    Returns
    -------
    Altman
    """
    manufacturer = is_manufacturer(s.industry)
    model = "Z" if manufacturer else "Z''"
    lines = ("current_assets", "current_liabilities", "retained_earnings", "ebit",
             "total_liabilities") + (("market_equity", "revenue") if manufacturer
                                     else ("book_equity",))
    gaps = _needs(s, missing or {})(lines)
    if gaps:
        return Altman(model, NAN, "", gaps)
    if s.total_liabilities <= 0:
        return Altman(model, NAN, "", "not meaningful: total_liabilities is zero")
    a = s.total_assets
    x1 = (s.current_assets - s.current_liabilities) / a
    x2, x3 = s.retained_earnings / a, s.ebit / a
    if manufacturer:
        parts: tuple[float, ...] = (x1, x2, x3, s.market_equity / s.total_liabilities,
                                    s.revenue / a)
        score = altman_z(*parts)
    else:
        parts = (x1, x2, x3, s.book_equity / s.total_liabilities)
        score = altman_z2(*parts)
    return Altman(model, score, zone(model, score), "", parts)


def _needs(s: Statement, missing: Mapping[str, str]) -> Callable[[tuple[str, ...]], str]:
    def need(lines: tuple[str, ...]) -> str:
        gaps = [missing.get(c, c) for c in lines if math.isnan(getattr(s, c))]
        return f"not computable: needs {', '.join(dict.fromkeys(gaps))}" if gaps else ""

    return need
