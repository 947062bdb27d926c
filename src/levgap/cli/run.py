"""Commands that read a panel: ``demo``, ``analyze``, ``check``, ``template``."""

from __future__ import annotations

import json
from pathlib import Path
from typing import TYPE_CHECKING, Any

import typer

from levgap import glossary as g
from levgap.cli.app import app
from levgap.cli.common import (
    BIG_PANEL,
    TOP_DEFAULT,
    TOP_HELP,
    collect_notes,
    console,
    echo,
    err,
    guard,
    load_config,
    merge_notes,
    parse_measures,
    progress_bar,
    stepper,
)

if TYPE_CHECKING:
    from levgap.config import RunConfig

def _run_analysis(
    panel_path: Path,
    out: Path,
    *,
    config: RunConfig,
    fmt: str,
    force: bool,
    xlsx: bool,
    report: bool,
    quiet: bool,
    year_from: str = "--year",
    sample: bool = False,
) -> tuple[Any, Any]:
    from levgap.analysis import write_analysis
    from levgap.ingest import read_panel
    from levgap.pipeline import analyze

    notes: list[str] = []
    with collect_notes(notes):
        panel = read_panel(panel_path, config=config)
    if not quiet:
        for note in merge_notes(panel.warnings, notes):
            console(stderr=True).print(f"note: {note}")
    year = config.model.year
    if year is not None and len(panel.data) and year not in set(panel.data["fiscal_year"]):
        from levgap.errors import ConfigError

        years = panel.data["fiscal_year"]
        raise ConfigError(
            f"{year_from} must be a fiscal year of the panel; got {year}. The panel's usable "
            f"rows cover {int(years.min())}-{int(years.max())}."
        )
    show = not quiet and len(panel.data) >= BIG_PANEL
    with progress_bar(show) as bar:
        result = analyze(panel, config=config, progress=stepper(bar), sample=sample)
    inputs = (str(panel_path), *((config.source,) if config.source else ()),
              *(p for p in (config.input.peers, config.input.industry_names) if p))
    # The bar's refresh thread would compete with the writers for the interpreter: it is
    # shown again only while the report renders.
    write_notes: list[str] = []
    with progress_bar(show and report) as bar, collect_notes(write_notes):
        committed = write_analysis(result, out, fmt=fmt, force=force, report=report,
                                   xlsx=xlsx, inputs=inputs, progress=stepper(bar))
    if not quiet:
        for note in write_notes:
            console(stderr=True).print(f"note: {note}")
    return result, committed


def _summary(result: Any, out: Path) -> dict[str, Any]:
    counts = result.manifest["counts"]
    fits = result.model_fit.to_dict(orient="records")
    status = (
        result.targets.groupby(["measure", "status"]).size().unstack(fill_value=0).to_dict(
            orient="index")
    )
    return {
        "out": str(out),
        "rows_in": counts["rows_in"],
        "rows_used": counts["rows_used"],
        "rows_excluded": counts["rows_excluded"],
        "excluded_by_reason": counts["by_reason"],
        "measure_omissions": counts["measure_omissions"],
        "model_fit": fits,
        "status": status,
        "pooled_industries": [b["industry"] for b in result.manifest["pooled_industries"]],
    }


def _written_line(committed: Any) -> str:
    """The closing line: exactly the files this run wrote, and what it removed."""
    names = ", ".join(p.name for p in committed.written)
    line = f"Outputs written to {committed.folder}/ (run {committed.run_id}): {names}."
    if committed.removed:
        line += (f" Removed {', '.join(committed.removed)} of the previous run there "
                 "(levgap's own files, which this run does not rewrite).")
    return line


def _print_run(result: Any, committed: Any, top: int) -> None:
    from levgap.cli.screening import render_table

    con = console()
    counts = result.manifest["counts"]
    con.print(
        f"Read {g.count(counts['rows_in'], 'row')}: {counts['rows_used']:,} used, "
        f"{counts['rows_excluded']:,} {g.label('excluded')}."
    )
    for reason, n in counts["by_reason"].items():
        con.print(f"  {g.label('excluded')}, {reason}: {n:,}")
    for key, n in counts["measure_omissions"].items():
        measure, reason = key.split(":", 1)
        con.print(f"  {g.label('excluded')} from {g.MEASURES[measure]} only, {reason}: {n:,}")
    for b in result.manifest["pooled_industries"]:
        kept = ", ".join(f"{m} {100 * w:.0f}%" for m, w in b["weight"].items() if w is not None)
        con.print(f"  industry {b['industry']} ({g.count(b['firms'], 'firm')}) is pooled toward "
                  f"{b['parent']} (own level kept: {kept})")
    for f in result.model_fit.itertuples():
        con.print(f"{g.MEASURES[f.measure]}: {g.count(f.n_obs, 'firm-year')}, "
                  f"{g.count(f.n_firms, 'firm')}, {g.label('r2')} {g.number(f.r2, 3)}, "
                  f"{g.label('r2_oos')} {g.number(f.r2_oos, 3)}, {g.label('rmse_oos')} "
                  f"{g.number(100 * f.rmse_oos, 1)} {g.UNIT_PP}")
    t = result.targets
    latest = t[t["fiscal_year"] == t["fiscal_year"].max()]
    units = (result.manifest.get("options") or {}).get("units")
    money = g.money_unit(units) if g.money_unit(units) != g.money_unit({}) else ""
    for measure in latest["measure"].unique():
        m = latest[latest["measure"] == measure]
        year = int(m["fiscal_year"].max())
        over = m.sort_values("gap", ascending=False).head(top).to_dict(orient="records")
        under = m.sort_values("gap").head(top).to_dict(orient="records")
        for title, rows in (("Most over-levered", over), ("Most under-levered", under)):
            con.print(render_table(rows, f"{title} ({g.MEASURES[measure]}, {year})",
                                   con.width, money, fit=over + under))
    if not money:
        con.print(g.money_note(units))
    con.print(_written_line(committed))
    con.print("levgap is a statistical peer benchmark, not investment, credit or legal advice.")



@app.command()
def demo(
    out: Path = typer.Option(Path("demo-out"), "--out", help="Folder for the demo's outputs."),
    force: bool = typer.Option(False, "--force", help="Write into a folder holding other files."),
    top: int = typer.Option(TOP_DEFAULT, "--top", min=1, help=TOP_HELP),
) -> None:
    """Run the whole job on the invented demo panel (the Tarrow Reach, a fictional region).

    Example: levgap demo --out demo-out
    """
    with guard():
        from levgap.demo import make_panel
        from levgap.outputs import refuse_foreign
        from levgap.report.tables import write_table

        if out.exists() and not out.is_dir():
            raise typer.BadParameter(f"must be a folder; got the file {out}.", param_hint="--out")
        if not force:  # refused before the demo's panel is written
            refuse_foreign(out)
        from dataclasses import replace

        from levgap.demo import industry_names

        panel_path = write_table(make_panel(), out / "demo_panel.csv")
        names_path = write_table(industry_names(), out / "demo_industries.csv")
        cfg = load_config(None)
        cfg = replace(cfg, input=replace(cfg.input, industry_names=str(names_path)),
                      units=replace(cfg.units, unit="millions"))  # the demo's money unit
        result, committed = _run_analysis(panel_path, out, config=cfg, fmt="csv",
                                          force=force, xlsx=False, report=True, quiet=False)
        _print_run(result, committed, top)
        echo(f"The demo's input panel is {panel_path}; its industry names {names_path}.")


@app.command()
def analyze(
    panel: Path = typer.Argument(..., help="Panel file (CSV, Parquet or XLSX) in schema v1."),
    out: Path = typer.Option(..., "--out", help="Output folder."),
    measure: str = typer.Option("both", "--measure", help="book, market or both."),
    model: str = typer.Option(
        None, "--model", help="Target model: fractional (default; targets in [0, 1]) or linear "
        "(replication)."),
    cluster: str = typer.Option(
        None, "--cluster", help="Clustering of standard errors: firm, firm-year or industry."),
    year: int = typer.Option(None, "--year", help="Report only this fiscal year."),
    effects: str = typer.Option(None, "--effects",
                                help="Fixed effects: industry,year (default), year or none "
                                "(firm effects: levgap estimate)."),
    industry_digits: int = typer.Option(None, "--industry-digits", min=0,
                                        help="Industry level: the code's first n characters."),
    drivers: str = typer.Option(None, "--drivers", help="Drivers, comma-separated (replaces "
                                "[model] drivers; see levgap estimate --help)."),
    input_drivers: str = typer.Option(None, "--input-drivers",
                                      help="Numeric input columns used as further drivers."),
    sample: bool = typer.Option(False, "--sample",
                                help="Also write sample.csv: the exact estimation sample."),
    config: Path = typer.Option(None, "--config", help="Run configuration (TOML)."),
    fmt: str = typer.Option("csv", "--format", help="Table format: csv or parquet."),
    xlsx: bool = typer.Option(False, "--xlsx", help="Also write workbook.xlsx."),
    no_report: bool = typer.Option(False, "--no-report", help="Skip report.html."),
    force: bool = typer.Option(False, "--force", help="Write into a folder holding other files."),
    quiet: bool = typer.Option(False, "--quiet", help="No progress bar or tables."),
    as_json: bool = typer.Option(False, "--json", help="Print a machine-readable summary."),
    top: int = typer.Option(TOP_DEFAULT, "--top", min=1, help=TOP_HELP),
    peers: Path = typer.Option(None, "--peers", help="A peer list (CSV: firm_id, peer_id): "
                               "these firms take their listed peers."),
    industry_names: Path = typer.Option(None, "--industry-names",
                                        help="Readable industry names (CSV: code, name)."),
) -> None:
    """Estimate targets, gaps and driver contributions for every firm-year of a panel.

    Example: levgap analyze panel.csv --out results/ --measure book --cluster firm-year
    """
    with guard():
        from dataclasses import replace

        if fmt not in ("csv", "parquet"):
            raise typer.BadParameter(f"must be csv or parquet; got {fmt!r}.",
                                     param_hint="--format")
        cfg = load_config(config)
        changes: dict[str, Any] = {}
        if measure != "both" or config is None:
            changes["measures"] = parse_measures(measure)
        if cluster is not None:
            changes["cluster"] = cluster
        if model is not None:
            changes["model"] = model
        if year is not None:
            changes["year"] = year
        from levgap.cli.research import spec_changes

        changes.update(spec_changes(effects=effects, industry_digits=industry_digits,
                                    drivers=drivers, input_drivers=input_drivers))
        if changes:
            cfg = replace(cfg, model=_with_options(cfg.model, changes))
        files = {k: str(v.resolve()) for k, v in (("peers", peers),
                                                  ("industry_names", industry_names)) if v}
        if files:
            cfg = replace(cfg, input=replace(cfg.input, **files))
        year_from = "--year" if year is not None else f"{config}: [model] year"
        result, committed = _run_analysis(panel, out, config=cfg, fmt=fmt, force=force,
                                          xlsx=xlsx, report=not no_report,
                                          quiet=quiet or as_json, year_from=year_from,
                                          sample=sample)
        if as_json:
            summary = {**_summary(result, out), "run_id": committed.run_id,
                       "written": [p.name for p in committed.written],
                       "removed": list(committed.removed)}
            typer.echo(json.dumps(summary, indent=2, default=str))
        elif not quiet:
            _print_run(result, committed, top)



_OPTION_OF = {"measures": "--measure", "cluster": "--cluster", "model": "--model",
              "year": "--year", "drivers": "--drivers"}


def _with_options(spec: Any, changes: dict[str, Any]) -> Any:
    """The model spec with the command line's values, each refusal naming its option (a value
    from the command line is not said to come from ``[model]`` of a configuration file)."""
    from dataclasses import replace

    from levgap.errors import ConfigError

    for key, value in changes.items():
        try:
            spec = replace(spec, **{key: value})
        except ConfigError as exc:
            text = str(exc)
            head = f"[model] {key} "
            if text.startswith(head):
                text = f"{_OPTION_OF.get(key, key)} {text[len(head):]}"
            raise ConfigError(text) from None
    return spec


@app.command()
def check(
    panel: Path = typer.Argument(..., help="Panel file (CSV, Parquet or XLSX)."),
    config: Path = typer.Option(None, "--config", help="Run configuration (TOML)."),
    ledger: Path = typer.Option(None, "--ledger", help="Write the exclusion ledger to this CSV."),
) -> None:
    """Validate a panel without fitting anything: what would be used, what excluded, and why
    (whole rows; `analyze` also leaves rows out of one measure and lists them too).

    Example: levgap check panel.csv --ledger exclusions.csv
    """
    with guard():
        from levgap.ingest import read_panel

        notes: list[str] = []
        cfg = load_config(config)
        if ledger is not None:  # refused before the panel is read
            from levgap.outputs import check_replaceable

            check_replaceable(ledger, [panel, *([config] if config else [])])
        with collect_notes(notes):
            p = read_panel(panel, config=cfg)
        # from the columns: no pandas unless a ledger is written; plain lines, so echo (rich
        # is not loaded either)
        s = p.summary()
        echo(f"{panel}: {g.count(s.input_rows, 'row')}; {s.kept} usable, "
             f"{sum(s.excluded.values())} excluded.")
        if s.years is not None:
            echo(f"  {g.count(s.firms, 'firm')}, {g.count(s.industries, 'industry')}, "
                 f"fiscal years {s.years[0]}-{s.years[1]}")
            if s.no_market_equity:
                echo(f"  {g.count(s.no_market_equity, 'row')} "
                     f"{'has' if s.no_market_equity == 1 else 'have'} no "
                     "market equity (book leverage only)")
        for reason, n in s.excluded.items():
            echo(f"  {g.label('excluded')}, {reason}: {n}")
        for w in merge_notes(p.warnings, notes):
            echo(f"  note: {w}")
        if ledger is not None:
            from levgap.report.tables import write_table

            write_table(p.exclusions, ledger, inputs=[panel, *([config] if config else [])])
            echo(f"Exclusion ledger written to {ledger} (whole rows; `analyze` also "
                 "leaves rows out of one measure, e.g. no_market_equity, and lists them "
                 "in its exclusions.csv).")
        if s.kept == 0:
            err(f"{panel}: the panel must keep at least one usable row; got none.")
            raise typer.Exit(2)


@app.command()
def template(
    out: Path = typer.Option(Path("."), "--out", help="Folder for the template files."),
    force: bool = typer.Option(False, "--force",
                               help="Write the template files that can be written and leave "
                               "the others (files levgap did not write, or that you changed)."),
) -> None:
    """Write an empty panel template, its column guide, an annotated run configuration and a
    deal scenario file.

    Example: levgap template --out my-panel/
    """
    with guard():
        from levgap.report.files import write_template

        written, kept = write_template(out, force=force)
        for path in written:
            echo(f"wrote {path}")
        for path in kept:
            echo(f"kept {path} (levgap did not write it, or it was changed since)")
