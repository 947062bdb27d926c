"""Regression tables in the layout journals use, as LaTeX, Markdown or CSV.

One column per measure (and model, when a run holds several); each term's estimate with
significance marks, its standard error in parentheses below; then the fixed effects, the
clustering of the standard errors, the number of observations and firms, and the in-sample
and cross-fitted out-of-sample R². A note states what the parentheses and marks mean.

The LaTeX output is a plain ``tabular`` (``\\hline`` rules, no packages needed); text from the
data is escaped. Negative numbers use a true minus sign: ``$-$`` in LaTeX, U+2212 in Markdown
and CSV (which also keeps a spreadsheet from reading ``-0.35***`` as a formula).
"""

from __future__ import annotations

import csv
import io
import math
from collections.abc import Callable, Mapping
from dataclasses import dataclass
from typing import Any

import pandas as pd

from levgap.errors import ConfigError

STARS: tuple[tuple[float, str], ...] = ((0.01, "***"), (0.05, "**"), (0.1, "*"))
"""Significance marks and their thresholds (the usual convention in economics journals)."""

MEASURE_LABELS = {"book": "Book leverage", "market": "Market leverage"}
CLUSTER_LABELS = {"firm": "Firm", "firm-year": "Firm and year", "industry": "Industry"}
_FIXED_EFFECTS = ("industry", "year")


@dataclass(frozen=True, slots=True)
class _Table:
    """The table as plain cells, before any format: header, body rows, footer rows, note."""

    columns: list[str]
    numbers: list[str]
    body: list[tuple[str, list[tuple[float | None, float | None, float | None]]]]
    footer: list[tuple[str, list[str | float]]]
    note: str


def _stars(p: float | None) -> str:
    if p is None or not math.isfinite(p):
        return ""
    for cut, mark in STARS:
        if p < cut:
            return mark
    return ""


def _f(v: Any) -> float | None:
    try:
        x = float(v)
    except (TypeError, ValueError):
        return None
    return x if math.isfinite(x) else None


def _build(coefficients: pd.DataFrame, model_fit: pd.DataFrame,
           manifest: Mapping[str, Any]) -> _Table:
    coef = coefficients.copy()
    coef["measure"] = coef["measure"].astype(str)
    coef["model"] = coef["model"].astype(str) if "model" in coef else "linear"
    keys = list(dict.fromkeys(zip(coef["measure"], coef["model"], strict=True)))
    several_models = len({m for _, m in keys}) > 1
    columns = [MEASURE_LABELS.get(m, m) + (f" ({model})" if several_models else "")
               for m, model in keys]
    terms = list(dict.fromkeys(coef["term"].astype(str)))
    terms = [t for t in terms if t != "const"] + [t for t in terms if t == "const"]
    index = coef.set_index(["measure", "model", coef["term"].astype(str)])
    body = []
    for term in terms:
        cells = []
        for m, model in keys:
            if (m, model, term) in index.index:
                r = index.loc[(m, model, term)]
                r = r.iloc[0] if isinstance(r, pd.DataFrame) else r
                cells.append((_f(r["estimate"]), _f(r["std_error"]), _f(r.get("p_value"))))
            else:
                cells.append((None, None, None))
        body.append((term, cells))

    opts = manifest.get("options", {}) or {}
    model_opts = opts.get("model", {}) if isinstance(opts, Mapping) else {}
    cluster = str(model_opts.get("cluster", "")) or None
    fit = model_fit.copy()
    fit["measure"] = fit["measure"].astype(str)
    fit["model"] = fit["model"].astype(str) if "model" in fit else "linear"
    fits = {(m, mo): row for m, mo, row in zip(fit["measure"], fit["model"],
                                                fit.to_dict("records"), strict=True)}

    def stat(name: str, fmt: Callable[[Any], str | float]) -> list[str | float]:
        return [fmt(fits[k][name]) if k in fits and _f(fits[k].get(name)) is not None else ""
                for k in keys]

    footer = [
        ("Industry fixed effects", ["Yes" if "industry" in _FIXED_EFFECTS else "No"] * len(keys)),
        ("Year fixed effects", ["Yes" if "year" in _FIXED_EFFECTS else "No"] * len(keys)),
        ("Standard errors clustered by", [CLUSTER_LABELS.get(cluster or "", cluster or "")]
         * len(keys)),
        ("Observations", stat("n_obs", lambda v: f"{int(v):,}")),
        ("Firms", stat("n_firms", lambda v: f"{int(v):,}")),
        ("R2", stat("r2", float)),
        ("R2 out of sample", stat("r2_oos", float)),
    ]
    legend = ", ".join(f"{mark} p < {cut:g}" for cut, mark in STARS)
    dep = "; ".join(
        f"{MEASURE_LABELS[m].lower()} = {d}" for m, d in
        (("book", "total debt / total assets"),
         ("market", "total debt / (total debt + market value of equity)"))
        if m in {k[0] for k in keys})
    clustered = (f", clustered by {CLUSTER_LABELS.get(cluster, cluster).lower()}"
                 + (" (two-way)" if cluster == "firm-year" else "")) if cluster else ""
    note = (f"Standard errors in parentheses{clustered}. {legend}. Industry and year fixed "
            "effects absorbed. Out-of-sample R2 from targets cross-fitted by firm "
            f"(grouped folds). Dependent variables: {dep}.")
    return _Table(columns, [f"({i})" for i in range(1, len(keys) + 1)], body, footer, note)


# ----------------------------------------------------------------------------- formats

def _num(v: float | None, digits: int, minus: str) -> str:
    if v is None:
        return ""
    s = f"{v:.{digits}f}"
    return minus + s[1:] if s.startswith("-") else s


_LATEX_SPECIAL = {"\\": r"\textbackslash{}", "&": r"\&", "%": r"\%", "$": r"\$", "#": r"\#",
                  "_": r"\_", "{": r"\{", "}": r"\}", "~": r"\textasciitilde{}",
                  "^": r"\textasciicircum{}", "<": r"\textless{}", ">": r"\textgreater{}"}


def latex_escape(text: str) -> str:
    """Escape the characters LaTeX treats specially, so ``text`` prints as written."""
    return "".join(_LATEX_SPECIAL.get(ch, ch) for ch in str(text))


def _latex(t: _Table, digits: int) -> str:
    n = len(t.columns)
    out = [r"\begin{tabular}{l" + "c" * n + "}", r"\hline\hline"]
    out.append(" & " + " & ".join(t.numbers) + r" \\")
    out.append(" & " + " & ".join(latex_escape(c) for c in t.columns) + r" \\")
    out.append(r"\hline")
    for term, cells in t.body:
        est = []
        se = []
        for e, s, p in cells:
            if e is None:
                est.append("")
                se.append("")
                continue
            marks = _stars(p)
            sup = f"^{{{marks}}}" if marks else ""
            est.append(f"${_num(e, digits, '-')}{sup}$")
            se.append(f"$({_num(s, digits, '-')})$" if s is not None else "")
        out.append(latex_escape(term) + " & " + " & ".join(est) + r" \\")
        out.append(" & " + " & ".join(se) + r" \\")
    out.append(r"\hline")
    for label, cells in t.footer:
        label = latex_escape(label).replace("R2", "$R^2$")
        out.append(label + " & " + " & ".join(
            f"${_num(c, 3, '-')}$" if isinstance(c, float) else latex_escape(c) for c in cells)
            + r" \\")
    out.append(r"\hline\hline")
    note = latex_escape(t.note).replace("R2", "$R^2$")
    for cut, mark in STARS:
        note = note.replace(f"{mark} p \\textless{{}} {cut:g}", f"$^{{{mark}}}\\,p<{cut:g}$")
    out.append(rf"\multicolumn{{{n + 1}}}{{p{{{4 + 2.6 * n:.1f}cm}}}}{{\footnotesize {note}}} \\")
    out.append(r"\end{tabular}")
    return "\n".join(out) + "\n"


def _md_cell(text: str) -> str:
    return str(text).replace("\\", "\\\\").replace("|", r"\|").replace("*", r"\*") \
        .replace("_", r"\_").replace("<", "&lt;").replace(">", "&gt;")


def _markdown(t: _Table, digits: int) -> str:
    minus = "\u2212"
    head = ["", *[f"{num} {col}" for num, col in zip(t.numbers, t.columns, strict=True)]]
    lines = ["| " + " | ".join(_md_cell(h) for h in head) + " |",
             "|:---|" + "---:|" * len(t.columns)]
    for term, cells in t.body:
        est = [(_num(e, digits, minus) + _stars(p)) if e is not None else "" for e, _, p in cells]
        se = [f"({_num(s, digits, minus)})" if s is not None else "" for _, s, _ in cells]
        lines.append("| " + " | ".join(_md_cell(c) for c in [term, *est]) + " |")
        lines.append("| " + " | ".join(_md_cell(c) for c in ["", *se]) + " |")
    for label, cells in t.footer:
        label = label.replace("R2", "R²")
        cells = [_num(c, 3, minus) if isinstance(c, float) else c for c in cells]
        lines.append("| " + " | ".join(_md_cell(c) for c in [label, *cells]) + " |")
    return "\n".join(lines) + "\n\n" + _md_cell(t.note.replace("R2", "R²")) + "\n"


def _csv(t: _Table, digits: int) -> str:
    from levgap.report.tables import neutralise

    minus = "\u2212"
    rows = [["", *t.numbers], ["", *t.columns]]
    for term, cells in t.body:
        rows.append([term, *[(_num(e, digits, minus) + _stars(p)) if e is not None else ""
                             for e, _, p in cells]])
        rows.append(["", *[f"({_num(s, digits, minus)})" if s is not None else ""
                           for _, s, _ in cells]])
    rows += [[label.replace("R2", "R²"),
              *[_num(c, 3, minus) if isinstance(c, float) else c for c in cells]]
             for label, cells in t.footer]
    rows.append([t.note.replace("R2", "R²")])
    width = max(len(r) for r in rows)
    frame = pd.DataFrame([r + [""] * (width - len(r)) for r in rows], dtype=object)
    frame = neutralise(frame)
    buf = io.StringIO()
    csv.writer(buf, lineterminator="\n").writerows(frame.itertuples(index=False))
    return buf.getvalue()


FORMATS: dict[str, Callable[[_Table, int], str]] = {
    "latex": _latex, "markdown": _markdown, "csv": _csv,
}


def regression_table(
    coefficients: pd.DataFrame,
    model_fit: pd.DataFrame,
    manifest: Mapping[str, Any],
    *,
    fmt: str = "latex",
    digits: int = 3,
) -> str:
    """A regression table of a run, one column per measure.

    Parameters
    ----------
    coefficients : pandas.DataFrame
        The ``coefficients`` table (``measure``, ``model``, ``term``, ``estimate``,
        ``std_error``, ``p_value``).
    model_fit : pandas.DataFrame
        The ``model_fit`` table (``n_obs``, ``n_firms``, ``r2``, ``r2_oos``).
    manifest : Mapping
        The run manifest; ``options.model.cluster`` names the clustering.
    fmt : {"latex", "markdown", "csv"}, default="latex"
    digits : int, default=3
        Decimals of estimates and standard errors.

    Returns
    -------
    str
        The table: a LaTeX ``tabular``, a Markdown pipe table with its note, or CSV text.

    Raises
    ------
    ConfigError
        If ``fmt`` is not one of the formats, or the coefficients table is empty.

    Examples
    --------
    >>> print(regression_table(result.coefficients, result.model_fit, result.manifest,
    ...                        fmt="markdown"))  # doctest: +SKIP
    """
    writer = FORMATS.get(fmt)
    if writer is None:
        raise ConfigError(f"format must be one of {sorted(FORMATS)}; got {fmt!r}.")
    if coefficients is None or coefficients.empty:
        raise ConfigError(
            "coefficients must hold at least one row; got none. Re-run levgap analyze."
        )
    return writer(_build(coefficients, model_fit, manifest), digits)
