"""Commands that read a results folder: ``screen``, ``explain``, ``report``, ``table``."""

from __future__ import annotations

from pathlib import Path
from typing import TYPE_CHECKING, Any

import typer

from levgap.cli.app import app
from levgap.cli.common import console, echo, guard, matches, plain, screen_table

if TYPE_CHECKING:
    import pandas as pd

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
    with guard():
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
        console().print(screen_table(rows, title))


@app.command()
def explain(
    out_dir: Path = typer.Argument(..., help="Folder written by levgap analyze."),
    firm_id: str = typer.Argument(..., help="The firm's firm_id."),
    year: int = typer.Option(None, "--year", help="Fiscal year (default: the firm's latest)."),
    measure: str = typer.Option("book", "--measure", help="book or market."),
    plot: Path = typer.Option(None, "--plot", help="Also draw the steps to a PNG or SVG file."),
    add_debt: float = typer.Option(None, "--add-debt",
                                   help="Show before and after this change in debt."),
    fund_assets: bool = typer.Option(False, "--fund-assets",
                                     help="With --add-debt: the debt buys new assets."),
) -> None:
    """Show why a firm's target differs from its peers', driver by driver.

    Example: levgap explain results/ TR0069 --year 2023 --plot steps.svg
    """
    with guard():
        if add_debt is not None or fund_assets:  # the deal check's view of one change
            from levgap.cli.deal import explain_change

            if add_debt is None:
                raise typer.BadParameter("needs --add-debt X.", param_hint="--fund-assets")
            return explain_change(out_dir, firm_id, year, measure, add_debt, fund_assets)
        from levgap.report.tables import read_outputs
        from levgap.report.terminal import driver_steps, render_steps

        if plot is not None and plot.suffix.lower() not in (".png", ".svg"):
            raise typer.BadParameter(f"must end in .png or .svg; got {plot.name!r}.",
                                     param_hint="--plot")
        if plot is not None:  # refused before anything is explained
            _refuse_run_files(out_dir, plot)
        tables, _ = read_outputs(out_dir, names=["targets", "drivers"])
        if "targets" not in tables or "drivers" not in tables:
            raise typer.BadParameter(f"{out_dir} holds no targets or drivers table.",
                                     param_hint="DIR")
        firm_rows = tables["targets"][matches(tables["targets"]["firm_id"], firm_id)]
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
        d = d[matches(d["firm_id"], firm_id) & (d["fiscal_year"] == yr)
              & (d["measure"] == measure)]
        con = console()
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
        shown = steps.assign(label=steps["label"].map(plain))
        con.print(render_steps(shown, title=plain(f"{firm_id} {yr}, {measure} leverage")))
        if plot is not None:
            from levgap.report.plots import plot_steps

            plot_steps(steps, plot, title=f"{firm_id} {yr}, {measure} leverage",
                       inputs=_refuse_run_files(out_dir, plot))
            con.print(f"Chart written to {plot}.")


def _explain_table(row: Any, drivers: pd.DataFrame) -> Any:
    from rich.table import Table

    name = f" ({row['firm_name']})" if str(row.get("firm_name", "")) else ""
    peers = row["peer_count"]
    peers = "no" if peers != peers else int(peers)
    table = Table(
        title=plain(
        f"{row['firm_id']}{name}, {int(row['fiscal_year'])}, {row['measure']} leverage: "
        f"actual {row['actual']:.1%}, target {row['target']:.1%}, peer target "
        f"{row['peer_target']:.1%}, peer median {row['peer_median']:.1%} "
        f"({peers} peers)"),
        title_justify="left",
    )
    for col in ("driver", "firm value", "peer value", "contribution pp"):
        table.add_column(col, justify="left" if col == "driver" else "right")
    for r in drivers.itertuples():
        table.add_row(plain(r.driver), f"{r.firm_value:.4f}", f"{r.peer_value:.4f}",
                      f"{100 * r.contribution:+.2f}")
    return table


@app.command()
def report(
    out_dir: Path = typer.Argument(..., help="Folder written by levgap analyze."),
) -> None:
    """Rebuild report.html from the outputs in a folder (after editing or copying them).

    Example: levgap report results/
    """
    with guard():
        from levgap.report.html import build_report

        path = build_report(out_dir)
        echo(f"Report written to {path}.")


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
    with guard():
        from levgap.report.publication import FORMATS, regression_table
        from levgap.report.tables import read_outputs

        if fmt not in FORMATS:
            raise typer.BadParameter(f"must be latex, markdown or csv; got {fmt!r}.",
                                     param_hint="--format")
        protected = _refuse_run_files(out_dir, output) if output is not None else []
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
            from levgap.outputs import atomic_write_bytes

            atomic_write_bytes(output, text.encode("utf-8"), inputs=protected)
            echo(f"Table written to {output}.")


def _refuse_run_files(out_dir: Path, target: Path) -> list[Path]:
    """Refuse an output path that is a file of the run or one of its inputs; return the inputs.

    Inputs are recognised by path (as recorded in run.json) and, for a file already at the
    target, by content (its SHA-256 equals a recorded input's), so a panel moved since the run
    is still never replaced.
    """
    from levgap.errors import OutputError
    from levgap.outputs import check_replaceable, file_digest, verify_run

    run = verify_run(out_dir)
    inputs = [p for p, _ in run.inputs()]
    if target.is_file():
        sha = file_digest(target)[1]
        for path, digest in run.inputs():
            if digest == sha:
                raise OutputError(
                    f"{target}: an output must never replace an input file; got a file with "
                    f"the content of the run's input {path}. Choose another output path."
                )
    check_replaceable(target, inputs)  # the run's own files: its marker says whose they are
    return inputs
