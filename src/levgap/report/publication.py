"""Regression tables in the layout journals use: one or several runs side by side.

Each results folder (``levgap analyze`` or ``levgap estimate``) gives one column per measure
(and model); each driver's estimate with significance marks, its standard error in
parentheses below, and beside its label the sign the literature reports. The footer says
exactly what each column absorbed ("Industry effects: 12 own, 2 pooled"; "Year effects: 1
year, none absorbed"), how the drivers are dated, the estimator, the clustering, the number of
observations and firms, and the in-sample and cross-fitted out-of-sample R². A note states
what the parentheses, marks and expected signs mean and where the signs come from.

The cells are built here (:func:`build_table`); ``levgap.report.texttables`` writes them as
LaTeX (booktabs), Markdown or CSV.
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from typing import Any

import pandas as pd

from levgap import glossary as g
from levgap.definitions import DRIVERS, MEASURE_LABELS, NEGATIVE, POSITIVE, label
from levgap.errors import ConfigError

STARS: tuple[tuple[float, str], ...] = ((0.01, "***"), (0.05, "**"), (0.1, "*"))
"""Significance marks and their thresholds (the usual convention in economics journals)."""

EXPECTED = g.capital(g.label("expected_sign"))
"""The head of the column of expected signs."""
NOT_COMPUTED = "n/a"
"""What a footer cell shows for a statistic an estimator does not give."""


@dataclass(frozen=True, slots=True)
class RunTables:
    """One results folder's tables, as the table needs them.

    Parameters
    ----------
    coefficients : pandas.DataFrame
        ``measure``, ``model``, ``term``, ``estimate``, ``std_error``, ``p_value`` (and for
        Fama-MacBeth ``nw_lags``).
    model_fit : pandas.DataFrame
        ``measure``, ``model``, ``n_obs``, ``n_firms``, ``r2``, ``r2_oos``.
    manifest : Mapping
        ``run.json``: its ``specification`` (what was absorbed), or for older folders its
        ``counts``, ``pooled_industries`` and ``options``.
    """

    coefficients: pd.DataFrame
    model_fit: pd.DataFrame
    manifest: Mapping[str, Any]


Cell = tuple[float | None, float | None, float | None]


@dataclass(frozen=True, slots=True)
class Table:
    """The table as plain cells, before any format.

    Parameters
    ----------
    columns : list of str
        Each column's dependent variable.
    numbers : list of str
        ``(1)``, ``(2)``, ...
    body : list of (label, expected sign, cells)
        A term's readable label, ``positive``/``negative``/``""``, and per column
        (estimate, standard error, p-value).
    footer : list of (label, cells)
        Text cells, or floats (R²) that each format writes with its own minus sign.
    note : str
    """

    columns: list[str]
    numbers: list[str]
    body: list[tuple[str, str, list[Cell]]]
    footer: list[tuple[str, list[str | float]]]
    note: str


def _f(v: Any) -> float | None:
    try:
        x = float(v)
    except (TypeError, ValueError):
        return None
    return x if math.isfinite(x) else None


def stars(p: float | None) -> str:
    """The significance marks of a p-value (``""`` for none or a missing p)."""
    if p is None or not math.isfinite(p):
        return ""
    for cut, mark in STARS:
        if p < cut:
            return mark
    return ""


def specification(manifest: Mapping[str, Any]) -> dict[str, Any]:
    """What a run absorbed: its ``specification``, or one rebuilt from an older run.json."""
    spec = manifest.get("specification")
    if isinstance(spec, Mapping):
        return dict(spec)
    opts = manifest.get("options", {}) or {}
    model_opts = opts.get("model", {}) if isinstance(opts, Mapping) else {}
    counts = manifest.get("counts", {}) or {}
    industries = int(counts.get("industries", 0) or 0)
    pooled = len(manifest.get("pooled_industries", []) or [])
    years = counts.get("years", []) or []
    model = (manifest.get("model") or {}).get("name") if isinstance(
        manifest.get("model"), Mapping) else None
    return {
        "effects": "industry,year", "estimator": "pooled",
        "model": model or model_opts.get("model", "linear"),
        "absorbed": {"industry": {"levels": industries, "own": industries - pooled,
                                  "pooled": pooled},
                     "year": {"levels": years if isinstance(years, int) else len(years)}},
        "lag_drivers": bool(model_opts.get("lag_drivers", False)),
        "cluster": model_opts.get("cluster", ""),
        "legacy": True,
    }


def _effect_cells(spec: Mapping[str, Any], measure: str) -> dict[str, str]:
    absorbed = (spec.get("absorbed_by_measure") or {}).get(measure) or spec.get(
        "absorbed", {}) or {}
    fm = spec.get("estimator") == "fama-macbeth"
    out = {}
    ind = absorbed.get("industry")
    if ind is None:
        out["industry"] = "No"
    elif fm:
        out["industry"] = f"{int(ind.get('levels', 0)):,}, each year"
    else:
        own, pooled = int(ind.get("own", 0)), int(ind.get("pooled", 0))
        out["industry"] = f"{own:,} own, {pooled:,} pooled" if pooled else f"{own:,} own"
    yr = absorbed.get("year")
    if fm:
        out["year"] = "Each year"
    elif yr is None:
        out["year"] = "No"
    else:
        t = int(yr.get("levels", 0))
        out["year"] = f"{t:,} years" if t > 1 else f"{t} year, none absorbed"
    firm = absorbed.get("firm")
    out["firm"] = "No" if firm is None else f"{int(firm.get('levels', 0)):,} firms"
    return out


def _estimator_cell(spec: Mapping[str, Any], model: str) -> str:
    kind = str(spec.get("estimator", "pooled"))
    name = g.ESTIMATORS.get(f"{kind} {model}", g.ESTIMATORS.get(kind, model))
    return g.capital(name)


def _errors_cell(spec: Mapping[str, Any], coef: pd.DataFrame,
                 manifest: Mapping[str, Any]) -> str:
    """How the standard errors were computed: the clustering, or Fama-MacBeth's series."""
    if spec.get("estimator") == "fama-macbeth":
        opts = ((manifest.get("options") or {}).get("model") or {})
        if opts.get("fm_errors", "newey-west") == "newey-west" and "nw_lags" in coef:
            lags = sorted({int(v) for v in coef["nw_lags"] if _f(v) is not None})
            shown = "/".join(str(v) for v in lags) or "0"
            return f"Newey-West, {shown} lag{'' if lags == [1] else 's'}"
        return "Slopes' s.d."
    cluster = str(spec.get("cluster", ""))
    return f"By {g.CLUSTERS.get(cluster, cluster)}" if cluster else ""


def _key_order(keys: list[str]) -> list[str]:
    known = [k for k in DRIVERS if k in keys]
    return known + [k for k in keys if k not in DRIVERS and k != "const"]


def build_table(runs: Sequence[RunTables]) -> Table:
    """The cells of a table with one column per run, measure and model.

    Raises
    ------
    ConfigError
        No run, or a run without coefficients.
    """
    if not runs:
        raise ConfigError("a table needs at least one results folder; got none.")
    columns: list[tuple[int, str, str]] = []
    for i, run in enumerate(runs):
        coef = run.coefficients
        if coef is None or coef.empty:
            raise ConfigError(
                "coefficients must hold at least one row; got none. Re-run levgap analyze.")
        models = coef["model"].astype(str) if "model" in coef else pd.Series(
            ["linear"] * len(coef))
        for key in dict.fromkeys(zip(coef["measure"].astype(str), models, strict=True)):
            columns.append((i, *key))
    several = len({(m, model) for _, m, model in columns}) != len(
        {m for _, m, _ in columns}) and len(runs) == 1
    heads = [MEASURE_LABELS.get(m, m) + (f" ({model})" if several else "")
             for _, m, model in columns]
    indexed = []
    for run in runs:
        c = run.coefficients.copy()
        c["model"] = c["model"].astype(str) if "model" in c else "linear"
        c["term"] = c["term"].astype(str)
        c["measure"] = c["measure"].astype(str)
        indexed.append(c.set_index(["measure", "model", "term"]))
    terms = _key_order(list(dict.fromkeys(t for c in indexed
                                          for t in c.index.get_level_values("term"))))
    body = []
    for term in terms:
        cells: list[Cell] = []
        for i, m, model in columns:
            idx = indexed[i]
            if (m, model, term) in idx.index:
                r = idx.loc[(m, model, term)]
                r = r.iloc[0] if isinstance(r, pd.DataFrame) else r
                cells.append((_f(r["estimate"]), _f(r["std_error"]), _f(r.get("p_value"))))
            else:
                cells.append((None, None, None))
        body.append((label(term), DRIVERS[term].sign if term in DRIVERS else "", cells))
    footer = _footer(runs, columns)
    return Table([*heads], [f"({i})" for i in range(1, len(columns) + 1)], body, footer,
                 _note(runs, columns, terms))


def _footer(runs: Sequence[RunTables], columns: list[tuple[int, str, str]]
            ) -> list[tuple[str, list[str | float]]]:
    specs = [specification(r.manifest) for r in runs]
    effects = [_effect_cells(specs[i], m) for i, m, _ in columns]
    fits = []
    for i, m, model in columns:
        fit = runs[i].model_fit
        fit = fit[(fit["measure"].astype(str) == m)
                  & ((fit["model"].astype(str) == model) if "model" in fit else True)]
        fits.append(fit.iloc[0].to_dict() if len(fit) else {})

    def stat(name: str, fmt: Any, fallback: str = "") -> list[str | float]:
        out: list[str | float] = []
        for f in fits:
            v = _f(f.get(name))
            out.append(fmt(v) if v is not None else fallback)
        return out

    rows: list[tuple[str, list[str | float]]] = [
        ("industry_effects", [e["industry"] for e in effects]),
        ("year_effects", [e["year"] for e in effects]),
    ]
    if any(e["firm"] != "No" for e in effects):
        rows.append(("firm_effects", [e["firm"] for e in effects]))
    rows += [
        ("drivers_dated", ["t-1 (lagged)" if specs[i].get("lag_drivers") else "t"
                           for i, _, _ in columns]),
        ("estimator", [_estimator_cell(specs[i], model) for i, _, model in columns]),
        ("errors", [_errors_cell(specs[i], _coef_of(runs[i], m, model),
                                 runs[i].manifest) for i, m, model in columns]),
        ("n_obs", stat("n_obs", lambda v: f"{int(v):,}")),
        ("n_firms", stat("n_firms", lambda v: f"{int(v):,}")),
        ("r2", stat("r2", float)),
        ("r2_oos", stat("r2_oos", float, NOT_COMPUTED)),
    ]
    return [(g.capital(g.label(key)), cells) for key, cells in rows]


def _coef_of(run: RunTables, measure: str, model: str) -> pd.DataFrame:
    c = run.coefficients
    keep = c["measure"].astype(str) == measure
    if "model" in c:
        keep &= c["model"].astype(str) == model
    return c[keep]


def _note(runs: Sequence[RunTables], columns: list[tuple[int, str, str]],
          terms: list[str]) -> str:
    specs = [specification(r.manifest) for r in runs]
    legend = ", ".join(f"{mark} p < {cut:g}" for cut, mark in STARS)
    parts = [f"Standard errors in parentheses (clustered as stated). {legend}."]
    kinds = {specs[i].get("estimator", "pooled") for i, _, _ in columns}
    if "fama-macbeth" in kinds:
        parts.append("Fama-MacBeth: the mean of one least-squares cross-section a year (each "
                     "with its own constant), standard errors from the time series of the "
                     "slopes; its R2 in sample is the mean of the yearly R2; a driver without "
                     "cross-sectional variation in a year is left out of that year "
                     "(coefficients.csv: n_years).")
    if "within" in kinds:
        parts.append("Within: least squares with firm effects absorbed by the within "
                     "transformation; its R2 in sample includes them.")
    if any(s.get("estimator", "pooled") == "pooled" for s in specs):
        parts.append("Out-of-sample R2 from targets cross-fitted by firm (grouped folds); "
                     f"{NOT_COMPUTED} where an estimator cannot predict a firm it has not "
                     "seen.")
    if any((s.get("absorbed") or {}).get("industry", {}).get("pooled") for s in specs):
        parts.append("Pooled industries (fewer firms than [model] min_industry_firms) take "
                     "their parent group's effect plus a share of their own, shrunk by "
                     "empirical Bayes.")
    signed = [t for t in terms if t in DRIVERS and DRIVERS[t].sign]
    if signed:
        by_source: dict[str, list[str]] = {}
        for t in signed:
            by_source.setdefault(DRIVERS[t].source, []).append(label(t))
        cites = "; ".join(f"{', '.join(labs)}: {src}" for src, labs in by_source.items())
        parts.append(f"{EXPECTED}: the sign the literature reports ({cites}).")
    dep = "; ".join(f"{MEASURE_LABELS[m].lower()} = {d}" for m, d in
                    (("book", "total debt / total assets"),
                     ("market", "total debt / (total debt + market value of equity)"))
                    if m in {c[1] for c in columns})
    if dep:
        parts.append(f"Dependent variables: {dep}.")
    return " ".join(parts)


def sign_symbol(sign: str) -> str:
    """``+`` or ``-`` for an expected sign (``""`` for none)."""
    return {POSITIVE: "+", NEGATIVE: "-"}.get(sign, "")


def regression_table(
    coefficients: pd.DataFrame,
    model_fit: pd.DataFrame,
    manifest: Mapping[str, Any],
    *,
    fmt: str = "latex",
    digits: int = 3,
) -> str:
    """A regression table of one run, one column per measure (see :func:`comparison_table`).

    Raises
    ------
    ConfigError
        If ``fmt`` is not one of the formats, or the coefficients table is empty.

    Examples
    --------
    >>> print(regression_table(result.coefficients, result.model_fit, result.manifest,
    ...                        fmt="markdown"))  # doctest: +SKIP
    """
    return comparison_table([RunTables(coefficients, model_fit, manifest)], fmt=fmt,
                            digits=digits)


def comparison_table(runs: Sequence[RunTables], *, fmt: str = "latex", digits: int = 3) -> str:
    """Several runs side by side, one column per run, measure and model.

    Parameters
    ----------
    runs : sequence of RunTables
        Each results folder's coefficients, model fit and manifest, in column order.
    fmt : {"latex", "markdown", "csv"}, default="latex"
        LaTeX needs ``\\usepackage{booktabs}``; Markdown is a pipe table without HTML
        entities; CSV holds plain numbers (ASCII minus) with the marks in cells of their own.
    digits : int, default=3
        Decimals of estimates and standard errors (a value that rounds to zero never prints
        a minus sign).

    Returns
    -------
    str

    Raises
    ------
    ConfigError
        An unknown format, no run, or a run without coefficients.
    """
    from levgap.report.texttables import FORMATS

    writer = FORMATS.get(fmt)
    if writer is None:
        raise ConfigError(f"format must be one of {sorted(FORMATS)}; got {fmt!r}.")
    return writer(build_table(runs), digits)
