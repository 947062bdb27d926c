"""Commands about the models themselves: ``compare``."""

from __future__ import annotations

from pathlib import Path

import typer

from levgap import glossary as g
from levgap.cli.app import app
from levgap.cli.common import console, guard, load_config, parse_measures


@app.command()
def compare(
    panel: Path = typer.Argument(..., help="Panel file (CSV, Parquet or XLSX) in schema v1."),
    config: Path = typer.Option(None, "--config", help="Run configuration (TOML)."),
    measure: str = typer.Option("both", "--measure", help="book, market or both."),
    out: Path = typer.Option(None, "--out", help="Also write the table to this CSV file."),
) -> None:
    """Compare the linear and fractional models with a gradient-boosting benchmark.

    Same drivers, same firm-grouped folds, the same band calibration: out-of-sample R² and
    RMSE, band coverage overall and across industries, share of targets outside [0, 1], and
    fit time.

    Example: levgap compare panel.csv --out comparison.csv
    """
    with guard():
        from dataclasses import replace

        from levgap.compare import compare_models
        from levgap.ingest import read_panel

        cfg = load_config(config)
        if measure != "both" or config is None:
            cfg = replace(cfg, model=replace(cfg.model, measures=parse_measures(measure)))
        data = read_panel(panel, config=cfg)
        con = console(stderr=True)
        table = compare_models(data, config=cfg, progress=lambda s: con.print(f"fitting {s}"))
        console().print(_table(table))
        if out is not None:
            from levgap.report.tables import write_table

            write_table(table, out, inputs=[panel])
            console().print(f"Comparison written to {out}.")


def _table(frame) -> object:  # noqa: ANN001 (a pandas frame; pandas is imported lazily)
    from rich.table import Table

    table = Table(title="Models compared on the same folds (out of sample)",
                  title_justify="left")
    keys = ("measure", "model", "r2_oos", "rmse_oos", "coverage", "coverage_range",
            "outside_unit_interval", "fit_seconds")
    for key in keys:
        table.add_column(g.header(key), justify="left" if key in ("measure", "model")
                         else "right")
    for r in frame.itertuples():
        spread = ("" if r.coverage_industry_min != r.coverage_industry_min else
                  f"{r.coverage_industry_min:.0%}-{r.coverage_industry_max:.0%}")
        table.add_row(r.measure, r.model, g.number(r.r2_oos, 3), g.number(100 * r.rmse_oos, 2),
                      g.pct(r.coverage), spread, g.pct(r.outside_unit_interval),
                      f"{r.fit_seconds:.2f}")
    return table
