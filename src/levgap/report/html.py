"""The self-contained HTML report of a levgap run.

:func:`write_report` renders ``report.html`` from the output tables and the run manifest
(the frames of an ``Analysis`` and its ``run.json``); :func:`build_report` rebuilds it from an
output folder written earlier. The page needs no network: styles are inline, charts are
inline SVG drawn by :mod:`levgap.report.plots`, and one small inline script makes the tables
sortable. All text from the data passes through Jinja2's autoescaping.

The screening sections (most over- and under-levered firms, industries, driver steps) show
the latest fiscal year in the outputs; the scatter and the gap distribution show every
firm-year (a deterministic sample above ``max_points``).
"""

from __future__ import annotations

import math
from collections.abc import Callable, Mapping
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import pandas as pd

from levgap import glossary as g
from levgap.errors import OutputError
from levgap.glossary import CLUSTERS

REPORT_NAME = "report.html"
CAUTION = (
    "levgap is a statistical peer benchmark, not investment, credit or legal advice. Targets "
    "and bands describe what peers with similar fundamentals carry; they do not say what a "
    "firm should borrow. Decisions belong with qualified professionals and must respect local "
    "rules (accounting standards, covenants, regulation)."
)
MODEL_TEXT = {
    "fractional": "fractional logit (Papke and Wooldridge 1996) with industry and year effects; "
    "targets between 0 and 1",
    "linear": "least squares with industry and year effects (targets can fall below 0)",
}
_REQUIRED = ("targets", "drivers", "coefficients", "model_fit", "exclusions")


@dataclass(frozen=True, slots=True)
class ReportOptions:
    """Choices of what the report shows.

    Parameters
    ----------
    top : int, default=10
        Firms listed as most over- and most under-levered, per measure.
    step_firms : int, default=3
        Firms at each end (over, under) that get a driver step chart, per measure.
    max_points : int, default=4000
        Points drawn in each scatter panel; above it a deterministic sample is shown.
    """

    top: int = 10
    step_firms: int = 3
    max_points: int = 4000


def write_report(
    tables: Mapping[str, pd.DataFrame],
    manifest: Mapping[str, Any],
    out_dir: str | Path,
    *,
    options: ReportOptions | None = None,
    progress: Callable[[str, int, int], None] | None = None,
) -> Path:
    """Render ``report.html`` into ``out_dir``.

    Parameters
    ----------
    tables : Mapping of str to pandas.DataFrame
        ``targets``, ``drivers``, ``coefficients``, ``model_fit`` and ``exclusions`` in the
        output contract v1.
    manifest : Mapping
        The run manifest (``run.json``).
    out_dir : str or pathlib.Path
        Folder to write into (created if missing).
    options : ReportOptions, optional
        What to show; defaults to :class:`ReportOptions`.
    progress : callable, optional
        ``progress("report", done, total)``, called as each chart is drawn.

    Returns
    -------
    pathlib.Path
        Path of the report written.

    Raises
    ------
    OutputError
        If a table is missing or the folder cannot be written.
    """
    from levgap.outputs import atomic_write_bytes

    html = render_report(tables, manifest, options=options, progress=progress)
    return atomic_write_bytes(Path(out_dir) / REPORT_NAME, html.encode("utf-8"))


def build_report(out_dir: str | Path, *, options: ReportOptions | None = None,
                 accept_edits: bool = False) -> Path:
    """Rebuild ``report.html`` of the run in ``out_dir`` from the tables written there.

    The report joins the run: it is swapped in with the run's id, and ``run.json`` lists it.

    Parameters
    ----------
    out_dir : str or pathlib.Path
        Folder written by ``levgap analyze`` (CSV or Parquet tables and ``run.json``).
    options : ReportOptions, optional
    accept_edits : bool, default=False
        By default every file of the run must be the one the run wrote (``RunFolder.check``:
        an edited table, or one copied from another run, is refused). True accepts the files
        as they are now (still checked against the table contract) and re-records their size
        and SHA-256 in ``run.json``, so that later readers accept them too; a later
        ``levgap analyze`` there will not replace the edited files (levgap did not write
        them).

    Returns
    -------
    pathlib.Path
        Path of the report written.

    Raises
    ------
    OutputError
        The folder does not hold one complete run (``levgap.outputs.verify_run``), a table is
        missing or damaged, or ``report.html`` there is a file levgap did not write.
    """
    from levgap.outputs import RunWriter, new_run_id, verify_run
    from levgap.report.tables import read_table_file

    run = verify_run(out_dir, digests=not accept_edits)
    if not accept_edits:  # the files the report joins are the run's, not only the tables
        for name in run.files:
            if name != REPORT_NAME:
                run.check(name)
    tables = {name: read_table_file(p, name, legacy=run.run_id is None)
              for name, p in run.tables.items()}
    _check_tables(tables)
    html = render_report(tables, run.manifest, options=options)
    with RunWriter(out_dir, run_id=run.run_id or new_run_id(),
                   inputs=[p for p, _ in run.inputs()], force=True,
                   amend=[n for n in run.files if n != REPORT_NAME]) as writer:
        writer.add(REPORT_NAME, html.encode("utf-8"))
        writer.commit({k: v for k, v in run.manifest.items()
                       if k not in ("run_id", "files", "digests")})
    return Path(out_dir) / REPORT_NAME


# ----------------------------------------------------------------------------- content

def _check_tables(tables: Mapping[str, pd.DataFrame]) -> None:
    missing = [k for k in _REQUIRED if k not in tables or tables[k] is None]
    if missing:
        raise OutputError(
            f"report tables must include {list(_REQUIRED)}; got no {missing}. "
            "Re-run levgap analyze to write every output."
        )


def _measures(tables: Mapping[str, pd.DataFrame], manifest: Mapping[str, Any]) -> list[str]:
    present = list(dict.fromkeys(tables["targets"]["measure"].astype(str)))
    wanted = manifest.get("options", {}).get("model", {}).get("measures") or present
    return [m for m in wanted if m in present] + [m for m in present if m not in wanted]


def _num(v: Any) -> float | None:
    try:
        f = float(v)
    except (TypeError, ValueError):
        return None
    return f if math.isfinite(f) else None


def _firm_rows(frame: pd.DataFrame, names: Mapping[str, str]) -> list[dict[str, Any]]:
    from levgap.matching import unneutralise

    cols = ["firm_id", "firm_name", "industry", "fiscal_year", "actual", "target", "gap",
            "gap_z", "band_low", "band_high", "status", "debt_to_target", "flags"]
    cols = [c for c in cols if c in frame.columns]
    rows = frame[cols].to_dict("records")
    for r in rows:
        r["industry_name"] = names.get(unneutralise(str(r["industry"])), "")
        r["flags"] = str(r.get("flags") or "").replace(";", ", ")
    return rows


def universe_labels() -> dict[str, str]:
    """The words the firm table's script shows, from the glossary."""
    keys = ("driver", "firm_value", "peer_value", "peer_median", "peers_offset", "target",
            "unexplained", "actual", "raw_value", "gap_prev")
    labels = {k: g.label(k) for k in keys}
    labels["contribution"] = g.header("contribution")
    labels.update({
        "pp": g.UNIT_PP, "firm": g.plural("firm", 1), "firms": g.plural("firm", 2),
        "peer": g.plural("peer", 1), "peers": g.plural("peer", 2),
        "persistent": "persistent", "newly": "new outside the band",
        "few": "few peers, read the peer median with care", "years_in_row":
        "consecutive years", "winsorised": "winsorised", "showing": "Showing", "of": "of",
        "none": "No firm matches.", "bridge": "From peer median to actual",
        "history": "Over the years", "legend": "actual (dots), target (dashed), band (grey)",
        "unsupported": "This browser cannot unpack the firm table (it needs "
        "DecompressionStream, in every current browser).",
    })
    return labels


def top_firms(
    targets: pd.DataFrame, measure: str, year: int, *, n: int = 10
) -> tuple[pd.DataFrame, pd.DataFrame]:
    """Most over- and most under-levered firms of one measure in one fiscal year.

    Parameters
    ----------
    targets : pandas.DataFrame
    measure : str
    year : int
    n : int, default=10

    Returns
    -------
    (pandas.DataFrame, pandas.DataFrame)
        The ``n`` largest positive gaps (descending) and the ``n`` largest negative gaps
        (most negative first); ties broken by ``firm_id``.
    """
    rows = targets[(targets["measure"] == measure) & (targets["fiscal_year"] == year)]
    rows = rows.dropna(subset=["gap"])
    over = rows[rows["gap"] > 0].sort_values(
        ["gap", "firm_id"], ascending=[False, True], kind="stable").head(n)
    under = rows[rows["gap"] < 0].sort_values(["gap", "firm_id"], kind="stable").head(n)
    return over, under


def industry_table(targets: pd.DataFrame, measure: str, year: int) -> pd.DataFrame:
    """Per industry in one year: firms, median actual and target, share over and under.

    Parameters
    ----------
    targets : pandas.DataFrame
    measure : str
    year : int

    Returns
    -------
    pandas.DataFrame
        Columns ``industry``, ``firms``, ``median_actual``, ``median_target``, ``median_gap``,
        ``share_over``, ``share_under``; largest industries first.
    """
    rows = targets[(targets["measure"] == measure) & (targets["fiscal_year"] == year)]
    status = rows["status"].astype(str)
    frame = pd.DataFrame({
        "industry": rows["industry"].astype(str), "firm_id": rows["firm_id"],
        "actual": rows["actual"], "target": rows["target"], "gap": rows["gap"],
        "over": (status == "over").astype(float), "under": (status == "under").astype(float),
    })
    out = frame.groupby("industry", sort=True).agg(
        firms=("firm_id", "nunique"), median_actual=("actual", "median"),
        median_target=("target", "median"), median_gap=("gap", "median"),
        share_over=("over", "mean"), share_under=("under", "mean"),
    ).reset_index()
    return out.sort_values(["firms", "industry"], ascending=[False, True], kind="stable",
                           ignore_index=True)


def _header(tables: Mapping[str, pd.DataFrame], manifest: Mapping[str, Any],
            measures: list[str]) -> dict[str, Any]:
    targets = tables["targets"]
    counts = dict(manifest.get("counts", {}))
    years = sorted({int(y) for y in targets["fiscal_year"].dropna().unique()})
    opts = manifest.get("options", {})
    model_opts = opts.get("model", {}) if isinstance(opts, Mapping) else {}
    fit = tables["model_fit"]
    fit_rows = []
    for m in measures:
        r = fit[fit["measure"].astype(str) == m]
        if len(r):
            fit_rows.append({k: r.iloc[0][k] for k in r.columns})
    excl = tables["exclusions"]
    measure = (excl["measure"].fillna("").astype(str) if "measure" in excl.columns
               else pd.Series("", index=excl.index))
    whole = excl[measure == ""]
    by_reason = whole["reason"].astype(str).value_counts().to_dict() if len(whole) else (
        counts.get("by_reason") or {})
    partial = excl[measure != ""]
    omissions = sorted(
        ((str(m), str(r), int(n)) for (m, r), n in
         partial.groupby([measure[measure != ""], partial["reason"].astype(str)]).size().items()),
        key=lambda t: (t[0], -t[2], t[1]),
    ) if len(partial) else []
    return {
        "inputs": [{"path": str(i.get("path", "")), "rows": i.get("rows"),
                    "sha256": str(i.get("sha256") or ""), "role": str(i.get("role", "file"))}
                   for i in manifest.get("inputs", []) or [] if isinstance(i, Mapping)],
        "firms": counts.get("firms", targets["firm_id"].nunique()),
        "industries": counts.get("industries", targets["industry"].nunique()),
        "years": years,
        "rows_in": counts.get("rows_in"),
        "rows_used": counts.get("rows_used"),
        "rows_excluded": counts.get("rows_excluded", len(tables["exclusions"])),
        "by_reason": sorted(by_reason.items(), key=lambda kv: (-int(kv[1]), str(kv[0]))),
        "omissions": omissions,
        "measures": measures,
        "model": model_opts.get("model", ",".join(sorted(set(fit["model"].astype(str))))),
        "model_text": MODEL_TEXT.get(str(model_opts.get("model")),
                                     str(model_opts.get("model", "not recorded"))),
        "cluster": CLUSTERS.get(model_opts.get("cluster"),
                                model_opts.get("cluster", "not recorded")),
        "absorbed": g.ABSORBED.get(str(model_opts.get("effects", "industry,year")),
                                   g.ABSORBED["industry,year"]),
        "coverage": _num(model_opts.get("coverage")),
        "folds": model_opts.get("folds"),
        "fit": fit_rows,
        "pooled": [_pooled(b) for b in manifest.get("pooled_industries", []) or []],
        "warnings": [str(w) for w in manifest.get("warnings", [])],
        "version": manifest.get("levgap_version", ""),
        "run_id": str(manifest.get("run_id") or ""),
    }


def _pooled(item: Any) -> str:
    if not isinstance(item, Mapping):
        return str(item)
    industry = item.get("industry", "?")
    firms = f" ({item['firms']} firms)" if item.get("firms") is not None else ""
    source = item.get("parent")
    weights = item.get("weight") or {}
    kept = ", ".join(f"{m} {100 * w:.0f}%" for m, w in weights.items()
                     if isinstance(w, int | float))
    return (f"{industry}{firms}" + (f" toward {source}" if source else "")
            + (f", own level kept: {kept}" if kept else ""))


def _step_title(row: Mapping[str, Any]) -> str:
    name = row.get("firm_name")
    name = "" if name is None or (isinstance(name, float) and math.isnan(name)) else str(name)
    who = f"{name} ({row['firm_id']})" if name else str(row["firm_id"])
    return f"{who}, {int(row['fiscal_year'])}, {row['measure']}: {row['status']}"


def render_report(
    tables: Mapping[str, pd.DataFrame],
    manifest: Mapping[str, Any],
    *,
    options: ReportOptions | None = None,
    progress: Callable[[str, int, int], None] | None = None,
) -> str:
    """The report as an HTML string, without writing it.

    Parameters
    ----------
    tables : Mapping of str to pandas.DataFrame
        The five contract tables (see :func:`write_report`).
    manifest : Mapping
        The run manifest.
    options : ReportOptions, optional
    progress : callable, optional
        ``progress("report", done, total)`` after each chart.

    Returns
    -------
    str
        A complete, self-contained HTML document.
    """
    from levgap.report import plots
    from levgap.report.terminal import driver_steps

    opts = options or ReportOptions()
    _check_tables(tables)
    targets, drivers = tables["targets"], tables["drivers"]
    measures = _measures(tables, manifest)
    header = _header(tables, manifest, measures)
    year = int(targets["fiscal_year"].max()) if len(targets) else None
    total = 3 + 2 * opts.step_firms * len(measures)
    drawn = [0]

    def svg(fig: Any, key: str) -> str:
        out = plots.figure_svg(fig, key=key)
        drawn[0] += 1
        if progress is not None:
            progress("report", min(drawn[0], total), total)
        return out

    charts: dict[str, str] = {}
    if len(targets):
        charts["scatter"] = svg(
            plots.scatter_figure(targets, measures, max_points=opts.max_points), "scatter")
        charts["gaps"] = svg(plots.gap_figure(targets, measures), "gaps")
    coefficients = tables["coefficients"]
    if len(coefficients):
        charts["coefficients"] = svg(plots.coefficient_figure(coefficients), "coefficients")

    sections = []
    names = dict(manifest.get("industry_names") or {})
    units = (manifest.get("options") or {}).get("units") or {}
    universe = ""
    if year is not None and len(targets):
        from levgap.report.universe import encode, firm_payload

        universe = encode(firm_payload(targets, drivers, manifest, year))
    # Driver rows of the focus year only, indexed once, so each step chart is a cheap lookup.
    focus_drivers = drivers[drivers["fiscal_year"] == year] if year is not None else drivers
    for measure in measures:
        over, under = top_firms(targets, measure, year, n=opts.top) if year else (
            targets.iloc[:0], targets.iloc[:0])
        steps = []
        picks = pd.concat([over.head(opts.step_firms), under.head(opts.step_firms)])
        measure_drivers = focus_drivers[focus_drivers["measure"] == measure]
        for i, row in enumerate(picks.to_dict("records")):
            frame = driver_steps(row, measure_drivers)
            steps.append({
                "title": _step_title(row),
                "svg": svg(plots.steps_figure(frame), f"steps-{measure}-{i}"),
                "rows": frame.to_dict("records"),
            })
        sections.append({
            "measure": measure,
            "over": _firm_rows(over, names),
            "under": _firm_rows(under, names),
            "industries": [{**r, "industry_name": names.get(str(r["industry"]), "")}
                           for r in industry_table(targets, measure, year).to_dict("records")]
            if year else [],
            "steps": steps,
        })
    if progress is not None:
        progress("report", total, total)
    coef_rows = coefficients.to_dict("records")
    sources: dict[str, str] = {}
    for c in coef_rows:
        if str(c.get("sign_source") or "") and str(c.get("term")) not in sources:
            sources[str(c["term"])] = str(c["sign_source"])
    n_charts = len(charts) + sum(len(s["steps"]) for s in sections)
    return _environment().get_template("report.html.j2").render(
        h=header, year=year, sections=sections, charts=charts, coefficients=coef_rows,
        sign_sources=list(sources.items()),
        caution=CAUTION, n_charts=n_charts, options=opts, g=g, universe=universe,
        u_labels=universe_labels(), money=g.money_unit(units),
        money_known=g.money_unit(units) != g.money_unit({}), money_note=g.money_note(units),
        sampled={m: int((targets["measure"] == m).sum()) > opts.max_points for m in measures},
    )


# ----------------------------------------------------------------------------- jinja

def _pct(v: Any, digits: int = 1) -> str:
    return g.pct(v, digits)


def _pp(v: Any, digits: int = 1) -> str:
    return g.pp(v, digits)


def _fmt(v: Any, digits: int = 3) -> str:
    f = _num(v)
    if f is None:
        return "–"
    if f != 0 and (abs(f) < 10 ** -digits or abs(f) >= 1e6):
        return f"{f:.{digits}g}" if abs(f) < 1e6 else f"{f:,.0f}"
    return f"{f:,.{digits}f}"


def _pvalue(v: Any) -> str:
    f = _num(v)
    return "–" if f is None else "<0.001" if f < 0.001 else f"{f:.3f}"


def _money(v: Any) -> str:
    return g.money(v)


def _sortkey(v: Any) -> str:
    f = _num(v)
    return "" if f is None else repr(f)


def _stars(p: Any) -> str:
    f = _num(p)
    if f is None:
        return ""
    return "***" if f < 0.01 else "**" if f < 0.05 else "*" if f < 0.1 else ""


def _environment() -> Any:
    import jinja2

    env = jinja2.Environment(
        loader=jinja2.FileSystemLoader(Path(__file__).with_name("templates")),
        autoescape=True,
        undefined=jinja2.StrictUndefined,
        trim_blocks=True,
        lstrip_blocks=True,
    )
    env.filters.update(pct=_pct, pp=_pp, fmt=_fmt, money=_money, sortkey=_sortkey, stars=_stars,
                       pvalue=_pvalue)
    env.policies["json.dumps_kwargs"] = {"sort_keys": True, "ensure_ascii": False}
    return env
