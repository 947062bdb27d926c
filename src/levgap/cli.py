"""Command-line interface (typer), a thin layer over the Python API.

Only this module prints or exits. Heavy libraries are imported inside the commands that need
them, so ``--help``, ``--version``, ``check``, ``screen``, ``explain`` and ``template`` answer
quickly. Exit codes: 0 done, 2 bad input or usage, 1 an internal error.
"""

from __future__ import annotations

import contextlib
import json
import sys
from collections.abc import Iterator
from pathlib import Path
from typing import TYPE_CHECKING, Any

import typer

import levgap
from levgap.errors import LevgapError

if TYPE_CHECKING:
    import pandas as pd

    from levgap.config import RunConfig

app = typer.Typer(
    add_completion=False,
    no_args_is_help=True,
    rich_markup_mode=None,
    help="levgap: is a company carrying more or less debt than its fundamentals justify "
    "against its industry peers? A statistical peer benchmark, not investment, credit or "
    "legal advice.\n\nExample: levgap analyze panel.csv --out results/",
)

MEASURE_CHOICES = ("book", "market", "both")
BIG_PANEL = 50_000  # rows above which a progress bar is shown


def _err(message: str) -> None:
    typer.echo(f"levgap: error: {' '.join(str(message).split())}", err=True)


@contextlib.contextmanager
def _guard() -> Iterator[None]:
    """Turn a levgap error (or an operating-system error on a named file) into one line."""
    try:
        yield
    except LevgapError as exc:
        _err(str(exc))
        raise typer.Exit(2) from None
    except OSError as exc:
        name = f"{exc.filename}: " if getattr(exc, "filename", None) else ""
        _err(f"{name}{exc.strerror or exc}")
        raise typer.Exit(2) from None


def _merge_notes(recorded: tuple[str, ...] | list[str], caught: list[str]) -> list[str]:
    """The panel's recorded notes, plus caught warnings that do not repeat one of them."""
    out = [" ".join(str(w).split()) for w in recorded]
    out += [c for c in caught if not any(c in r or r.endswith(c) for r in out)]
    return list(dict.fromkeys(out))


def _matches(column: Any, value: str) -> Any:
    """Rows whose text equals ``value`` as typed or as written neutralised (leading ')."""
    text = column.astype(str)
    return (text == value) | (text == "'" + value)


def _version(value: bool) -> None:
    if value:
        typer.echo(f"levgap {levgap.__version__}")
        raise typer.Exit()


@app.callback()
def _root(
    version: bool = typer.Option(
        False, "--version", callback=_version, is_eager=True, help="Print the version and exit."
    ),
) -> None:
    """levgap: leverage against industry peers, from a financial-statement panel.

    Example: levgap analyze panel.csv --out results/
    """


def _config(path: Path | None) -> RunConfig:
    from levgap.config import RunConfig

    return RunConfig.from_toml(path) if path is not None else RunConfig()


def _measures(measure: str) -> tuple[str, ...]:
    if measure not in MEASURE_CHOICES:
        raise typer.BadParameter(f"must be one of {', '.join(MEASURE_CHOICES)}; got {measure!r}.")
    return ("book", "market") if measure == "both" else (measure,)


def _console(stderr: bool = False) -> Any:
    from rich.console import Console

    # markup off: data and messages hold square brackets ([input], firm names) to show as is
    con = Console(stderr=stderr, highlight=False, soft_wrap=False, markup=False)
    if not con.is_terminal:
        # Piped or captured output: wide enough that tables are not cut to 80 columns.
        con = Console(stderr=stderr, highlight=False, soft_wrap=False, markup=False, width=160)
    return con


@contextlib.contextmanager
def _notes(collected: list[str]) -> Iterator[None]:
    """Collect data warnings as notes for the user instead of letting Python print them."""
    import warnings

    from levgap.errors import DataWarning

    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always", DataWarning)
        yield
    for c in caught:
        if issubclass(c.category, DataWarning):
            text = " ".join(str(c.message).split())
            if text not in collected:
                collected.append(text)
        else:
            warnings.warn_explicit(c.message, c.category, c.filename, c.lineno)


def _progress_bar(enabled: bool) -> Any:
    """A rich progress bar on stderr, or a no-op context when disabled."""
    if not enabled:
        return contextlib.nullcontext(None)
    from rich.progress import BarColumn, Progress, TextColumn, TimeElapsedColumn

    return Progress(TextColumn("{task.description}"), BarColumn(), TextColumn(
        "{task.completed}/{task.total}"), TimeElapsedColumn(), console=_console(stderr=True),
        transient=True)


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
) -> tuple[Any, list[Path]]:
    from levgap.ingest import read_panel
    from levgap.pipeline import analyze

    notes: list[str] = []
    with _notes(notes):
        panel = read_panel(panel_path, config=config)
    if not quiet:
        for note in _merge_notes(panel.warnings, notes):
            _console(stderr=True).print(f"note: {note}")
    show = not quiet and len(panel.data) >= BIG_PANEL
    with _progress_bar(show) as bar:
        result = analyze(panel, config=config, progress=_stepper(bar))
    # The bar's refresh thread would compete with the writers for the interpreter: it is
    # shown again only while the report renders.
    with _progress_bar(show and report) as bar:
        written = result.write(out, fmt=fmt, force=force, report=report, xlsx=xlsx,
                               inputs=(str(panel_path),), progress=_stepper(bar))
    return result, written


def _stepper(bar: Any) -> Any:
    """A ``progress(stage, done, total)`` callback drawing on ``bar`` (None: no callback)."""
    if bar is None:
        return None
    tasks: dict[str, Any] = {}

    def step(stage: str, done: int, total: int) -> None:
        if stage not in tasks:
            tasks[stage] = bar.add_task(stage, total=total)
        bar.update(tasks[stage], completed=done)

    return step


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
        "borrowed_industries": [b["industry"] for b in result.manifest["borrowed_industries"]],
    }


def _print_run(result: Any, out: Path, top: int) -> None:
    con = _console()
    counts = result.manifest["counts"]
    con.print(
        f"Read {counts['rows_in']} rows: {counts['rows_used']} used, "
        f"{counts['rows_excluded']} excluded."
    )
    for reason, n in counts["by_reason"].items():
        con.print(f"  excluded, {reason}: {n}")
    for key, n in counts["measure_omissions"].items():
        measure, reason = key.split(":", 1)
        con.print(f"  left out of {measure} leverage only, {reason}: {n}")
    for b in result.manifest["borrowed_industries"]:
        con.print(f"  industry {b['industry']} ({b['firms']} firms) borrows its effect from "
                  f"{b['borrowed_from']}")
    for f in result.model_fit.itertuples():
        con.print(f"{f.measure} leverage: {f.n_obs} firm-years, {f.n_firms} firms, "
                  f"R² {f.r2:.3f} in sample, {f.r2_oos:.3f} out of sample "
                  f"(RMSE {100 * f.rmse_oos:.1f} pp)")
    t = result.targets
    latest = t[t["fiscal_year"] == t["fiscal_year"].max()]
    for measure in latest["measure"].unique():
        m = latest[latest["measure"] == measure]
        year = int(m["fiscal_year"].max())
        over = m.sort_values("gap", ascending=False).head(top).to_dict(orient="records")
        under = m.sort_values("gap").head(top).to_dict(orient="records")
        con.print(_screen_table(over, f"Most over-levered ({measure}, {year})"))
        con.print(_screen_table(under, f"Most under-levered ({measure}, {year})"))
    con.print(f"Outputs written to {out}/ (targets, drivers, coefficients, model_fit, "
              "exclusions, run.json, report.html).")
    con.print("levgap is a statistical peer benchmark, not investment, credit or legal advice.")


def _screen_table(rows: list[dict[str, Any]], title: str) -> Any:
    from rich.table import Table

    table = Table(title=title, title_justify="left")
    for col, just in (("firm", "left"), ("name", "left"), ("industry", "left"),
                      ("year", "right"), ("actual", "right"), ("target", "right"),
                      ("gap pp", "right"), ("gap z", "right"), ("band", "right"),
                      ("status", "left")):
        table.add_column(col, justify=just)  # type: ignore[arg-type]
    for r in rows:
        z = r["gap_z"]
        table.add_row(
            str(r["firm_id"]), str(r["firm_name"] or ""), str(r["industry"]),
            str(r["fiscal_year"]), f"{r['actual']:.1%}", f"{r['target']:.1%}",
            f"{100 * r['gap']:+.1f}", "" if z is None or z != z else f"{z:+.2f}",
            f"{r['band_low']:.1%} to {r['band_high']:.1%}", str(r["status"]),
        )
    return table


@app.command()
def demo(
    out: Path = typer.Option(Path("demo-out"), "--out", help="Folder for the demo's outputs."),
    force: bool = typer.Option(False, "--force", help="Write into a folder holding other files."),
    top: int = typer.Option(5, "--top", min=1, help="Firms listed at each end."),
) -> None:
    """Run the whole job on the invented demo panel (the Tarrow Reach, a fictional region).

    Example: levgap demo --out demo-out
    """
    with _guard():
        from levgap.demo import make_panel
        from levgap.report.tables import write_tables

        if out.exists() and not out.is_dir():
            raise typer.BadParameter(f"must be a folder; got the file {out}.", param_hint="--out")
        out.mkdir(parents=True, exist_ok=True)
        panel_path = out / "demo_panel.csv"
        write_tables({"demo_panel": make_panel()}, {"what": "the invented demo panel"}, out,
                     fmt="csv", force=force, also=_previous_outputs(out))
        result, _ = _run_analysis(panel_path, out, config=_config(None), fmt="csv",
                                  force=True, xlsx=False, report=True, quiet=False)
        _print_run(result, out, top)
        typer.echo(f"The demo's input panel is {panel_path}.")


def _previous_outputs(out: Path) -> list[str]:
    from levgap.report.files import MARKER

    marker = out / MARKER
    return marker.read_text(encoding="utf-8").split() if marker.is_file() else []


@app.command()
def analyze(
    panel: Path = typer.Argument(..., help="Panel file (CSV, Parquet or XLSX) in schema v1."),
    out: Path = typer.Option(..., "--out", help="Output folder."),
    measure: str = typer.Option("both", "--measure", help="book, market or both."),
    cluster: str = typer.Option(
        None, "--cluster", help="Clustering of standard errors: firm, firm-year or industry."),
    year: int = typer.Option(None, "--year", help="Report only this fiscal year."),
    config: Path = typer.Option(None, "--config", help="Run configuration (TOML)."),
    fmt: str = typer.Option("csv", "--format", help="Table format: csv or parquet."),
    xlsx: bool = typer.Option(False, "--xlsx", help="Also write workbook.xlsx."),
    no_report: bool = typer.Option(False, "--no-report", help="Skip report.html."),
    force: bool = typer.Option(False, "--force", help="Write into a folder holding other files."),
    quiet: bool = typer.Option(False, "--quiet", help="No progress bar or tables."),
    as_json: bool = typer.Option(False, "--json", help="Print a machine-readable summary."),
    top: int = typer.Option(5, "--top", min=1, help="Firms listed at each end."),
) -> None:
    """Estimate targets, gaps and driver contributions for every firm-year of a panel.

    Example: levgap analyze panel.csv --out results/ --measure book --cluster firm-year
    """
    with _guard():
        from dataclasses import replace

        if fmt not in ("csv", "parquet"):
            raise typer.BadParameter(f"must be csv or parquet; got {fmt!r}.",
                                     param_hint="--format")
        cfg = _config(config)
        changes: dict[str, Any] = {}
        if measure != "both" or config is None:
            changes["measures"] = _measures(measure)
        if cluster is not None:
            changes["cluster"] = cluster
        if year is not None:
            changes["year"] = year
        if changes:
            cfg = replace(cfg, model=replace(cfg.model, **changes))
        result, _ = _run_analysis(panel, out, config=cfg, fmt=fmt, force=force, xlsx=xlsx,
                                  report=not no_report, quiet=quiet or as_json)
        if as_json:
            typer.echo(json.dumps(_summary(result, out), indent=2, default=str))
        elif not quiet:
            _print_run(result, out, top)


@app.command()
def screen(
    out_dir: Path = typer.Argument(..., help="Folder written by levgap analyze."),
    measure: str = typer.Option("book", "--measure", help="book or market."),
    status: str = typer.Option(None, "--status", help="Keep only over or under."),
    industry: str = typer.Option(None, "--industry", help="Keep only this industry code."),
    year: int = typer.Option(None, "--year", help="Fiscal year (default: the latest)."),
    top: int = typer.Option(20, "--top", min=1, help="Rows to show."),
) -> None:
    """List the firms furthest from their targets.

    Example: levgap screen results/ --status over --top 10
    """
    with _guard():
        from levgap.report.quick import read_targets, screen_rows

        if status is not None and status not in ("over", "under", "within"):
            raise typer.BadParameter(f"must be over, under or within; got {status!r}.",
                                     param_hint="--status")
        table = read_targets(out_dir)
        rows, matched, yr = screen_rows(table, measure=measure, status=status,
                                        industry=industry, year=year, top=top)
        if yr is None:
            raise typer.BadParameter(f"no {measure} leverage rows in {out_dir}.",
                                     param_hint="--measure")
        if not rows:
            typer.echo("No firm matches those filters.")
            return
        title = f"{measure} leverage, fiscal {yr}: {matched} firms" + (
            f" {status}" if status else "")
        _console().print(_screen_table(rows, title))


@app.command()
def explain(
    out_dir: Path = typer.Argument(..., help="Folder written by levgap analyze."),
    firm_id: str = typer.Argument(..., help="The firm's firm_id."),
    year: int = typer.Option(None, "--year", help="Fiscal year (default: the firm's latest)."),
    measure: str = typer.Option("book", "--measure", help="book or market."),
    plot: Path = typer.Option(None, "--plot", help="Also draw the steps to a PNG or SVG file."),
) -> None:
    """Show why a firm's target differs from its peers', driver by driver.

    Example: levgap explain results/ TR0069 --year 2023 --plot steps.svg
    """
    with _guard():
        from levgap.report.tables import read_outputs
        from levgap.report.terminal import driver_steps, render_steps

        if plot is not None and plot.suffix.lower() not in (".png", ".svg"):
            raise typer.BadParameter(f"must end in .png or .svg; got {plot.name!r}.",
                                     param_hint="--plot")
        tables, _ = read_outputs(out_dir, names=["targets", "drivers"])
        if "targets" not in tables or "drivers" not in tables:
            raise typer.BadParameter(f"{out_dir} holds no targets or drivers table.",
                                     param_hint="DIR")
        firm_rows = tables["targets"][_matches(tables["targets"]["firm_id"], firm_id)]
        if firm_rows.empty:
            raise typer.BadParameter(f"no firm {firm_id!r} in {out_dir}.", param_hint="FIRM_ID")
        t = firm_rows[firm_rows["measure"] == measure]
        yr = int((t if len(t) else firm_rows)["fiscal_year"].max()) if year is None else year
        row_df = t[t["fiscal_year"] == yr]
        if row_df.empty:
            other = firm_rows[firm_rows["fiscal_year"] == yr]
            if len(other):
                raise typer.BadParameter(
                    f"firm {firm_id} {yr} has no {measure} leverage row (it was left out of "
                    f"that measure; see exclusions); try --measure {other['measure'].iloc[0]}.",
                    param_hint="--measure")
            years = ", ".join(str(int(y)) for y in sorted(firm_rows["fiscal_year"].unique()))
            raise typer.BadParameter(f"firm {firm_id} has no fiscal year {yr}; it has {years}.",
                                     param_hint="--year")
        row = row_df.iloc[0]
        d = tables["drivers"]
        d = d[_matches(d["firm_id"], firm_id) & (d["fiscal_year"] == yr)
              & (d["measure"] == measure)]
        con = _console()
        con.print(_explain_table(row, d))
        offset = row["peer_target"] - row["peer_median"]
        drivers_sum = float(d["contribution"].sum())
        con.print(
            f"actual - peer median = {100 * (row['actual'] - row['peer_median']):+.1f} pp "
            f"= peers' offset {100 * offset:+.1f} pp + drivers {100 * drivers_sum:+.1f} pp "
            f"+ unexplained gap {100 * row['gap']:+.1f} pp"
        )
        con.print(
            f"status: {row['status']} (band {row['band_low']:.1%} to {row['band_high']:.1%}, "
            f"gap z {row['gap_z']:+.2f}); debt change to reach target: "
            f"{row['debt_to_target']:+,.1f} (input money units)"
        )
        steps = driver_steps(row, d)
        con.print(render_steps(steps, title=f"{firm_id} {yr}, {measure} leverage"))
        if plot is not None:
            from levgap.report.plots import plot_steps

            plot_steps(steps, plot, title=f"{firm_id} {yr}, {measure} leverage")
            con.print(f"Chart written to {plot}.")


def _explain_table(row: Any, drivers: pd.DataFrame) -> Any:
    from rich.table import Table

    name = f" ({row['firm_name']})" if str(row.get("firm_name", "")) else ""
    table = Table(
        title=f"{row['firm_id']}{name}, {int(row['fiscal_year'])}, {row['measure']} leverage: "
        f"actual {row['actual']:.1%}, target {row['target']:.1%}, peer target "
        f"{row['peer_target']:.1%}, peer median {row['peer_median']:.1%} "
        f"({int(row['peer_count'])} peers)",
        title_justify="left",
    )
    for col in ("driver", "firm value", "peer value", "contribution pp"):
        table.add_column(col, justify="left" if col == "driver" else "right")
    for r in drivers.itertuples():
        table.add_row(str(r.driver), f"{r.firm_value:.4f}", f"{r.peer_value:.4f}",
                      f"{100 * r.contribution:+.2f}")
    return table


@app.command()
def report(
    out_dir: Path = typer.Argument(..., help="Folder written by levgap analyze."),
) -> None:
    """Rebuild report.html from the outputs in a folder (after editing or copying them).

    Example: levgap report results/
    """
    with _guard():
        from levgap.report.html import build_report

        path = build_report(out_dir)
        typer.echo(f"Report written to {path}.")


@app.command()
def table(
    out_dir: Path = typer.Argument(..., help="Folder written by levgap analyze."),
    fmt: str = typer.Option("latex", "--format", help="latex, markdown or csv."),
    digits: int = typer.Option(3, "--digits", min=0, max=8,
                               help="Decimals of estimates and standard errors."),
    output: Path = typer.Option(None, "--output", "-o",
                                help="Write the table to this file instead of printing it."),
) -> None:
    """Print the regression table of a run: one column per measure, standard errors in
    parentheses, significance marks, N, R², fixed effects and clustering.

    Example: levgap table results/ --format latex -o table.tex
    """
    with _guard():
        from levgap.report.publication import FORMATS, regression_table
        from levgap.report.tables import read_outputs

        if fmt not in FORMATS:
            raise typer.BadParameter(f"must be latex, markdown or csv; got {fmt!r}.",
                                     param_hint="--format")
        tables, manifest = read_outputs(out_dir, names=["coefficients", "model_fit"])
        missing = [n for n in ("coefficients", "model_fit") if n not in tables]
        if missing:
            raise typer.BadParameter(f"{out_dir} holds no {missing[0]} table.",
                                     param_hint="DIR")
        text = regression_table(tables["coefficients"], tables["model_fit"], manifest,
                                fmt=fmt, digits=digits)
        if output is None:
            typer.echo(text, nl=False)
        else:
            from levgap.report.html import atomic_write_bytes

            atomic_write_bytes(output, text.encode("utf-8"))
            typer.echo(f"Table written to {output}.")


@app.command()
def check(
    panel: Path = typer.Argument(..., help="Panel file (CSV, Parquet or XLSX)."),
    config: Path = typer.Option(None, "--config", help="Run configuration (TOML)."),
    ledger: Path = typer.Option(None, "--ledger", help="Write the exclusion ledger to this CSV."),
) -> None:
    """Validate a panel without fitting anything: what would be used and what left out.

    Example: levgap check panel.csv --ledger exclusions.csv
    """
    with _guard():
        from levgap.ingest import read_panel

        notes: list[str] = []
        with _notes(notes):
            p = read_panel(panel, config=_config(config))
        con = _console()
        data = p.data
        whole = p.exclusions
        con.print(f"{panel}: {p.n_input_rows} rows; {len(data)} usable, {len(whole)} excluded.")
        if len(data):
            years = data["fiscal_year"]
            con.print(f"  {data['firm_id'].nunique()} firms, {data['industry'].nunique()} "
                      f"industries, fiscal years {int(years.min())}-{int(years.max())}")
            no_mkt = int(data["market_equity"].isna().sum()) if "market_equity" in data else 0
            if no_mkt:
                con.print(f"  {no_mkt} rows have no market equity (book leverage only)")
        for reason, n in whole["reason"].value_counts().sort_index().items():
            con.print(f"  excluded, {reason}: {n}")
        for w in _merge_notes(p.warnings, notes):
            con.print(f"  note: {w}")
        if ledger is not None:
            from levgap.report.tables import write_table

            write_table(whole, ledger, inputs=[panel])
            con.print(f"Exclusion ledger written to {ledger}.")
        if len(data) == 0:
            _err(f"{panel}: the panel must keep at least one usable row; got none.")
            raise typer.Exit(2)


@app.command()
def template(
    out: Path = typer.Option(Path("."), "--out", help="Folder for the template files."),
) -> None:
    """Write an empty panel template, its column guide and an annotated run configuration.

    Example: levgap template --out my-panel/
    """
    with _guard():
        from levgap.report.files import write_template

        for path in write_template(out):
            typer.echo(f"wrote {path}")


@app.command("import-sec")
def import_sec_command(
    quarters: list[Path] = typer.Argument(
        ..., help="Quarterly zips or extracted folders of the SEC Financial Statement Data Sets."),
    out: Path = typer.Option(
        ..., "--out", help="Panel file to write (.csv or .parquet); the tag or formula behind "
        "every number goes beside it as PANEL.sources.csv."),
    forms: str = typer.Option(
        "10-K", "--forms", help="Forms kept, comma-separated: 10-K, 10-K/A, 10-KT."),
    as_first_filed: bool = typer.Option(
        False, "--as-first-filed",
        help="Keep the first filed report per firm and period (default: the latest, restated)."),
    prices: Path = typer.Option(
        None, "--prices", help="CSV of cik, date, price for market equity (default: the "
        "cover-page public float, flagged as a proxy)."),
    exclude_sic: str = typer.Option(
        None, "--exclude-sic", help="SIC ranges to leave out, e.g. 6000-6999,4900-4999."),
) -> None:
    """Build a schema-v1 peer panel from quarters of the SEC's Financial Statement Data Sets.

    Example: levgap import-sec 2010q1.zip 2010q2.zip --out panel.csv --exclude-sic 6000-6999
    """
    with _guard():
        from levgap.ingest.sec import import_sec, write_sec_import

        result = import_sec(quarters, forms=tuple(forms.split(",")),
                            restated=not as_first_filed, prices=prices,
                            exclude_sic=exclude_sic)
        panel_path, sources_path = write_sec_import(result, out)
        con = _console()
        p = result.panel
        con.print(f"{panel_path}: {len(p)} firm-years of {p['firm_id'].nunique()} firms; "
                  f"sources in {sources_path}.")
        if result.n_excluded_firms:
            con.print(f"  excluded by SIC: {result.n_excluded_firms} firms, "
                      f"{int(result.excluded['firm_years'].sum())} firm-years")
        for w in result.warnings:
            con.print(f"  note: {w}")


def main() -> None:
    """Console entry point: no traceback ever reaches the user."""
    try:
        app()
    except SystemExit:
        raise
    except KeyboardInterrupt:
        _err("interrupted.")
        sys.exit(130)
    except Exception as exc:  # last line of defence: an internal error, not the user's
        _err(f"internal error ({type(exc).__name__}: {exc}). This is a bug in levgap; please "
             "report it with the command you ran.")
        sys.exit(1)
