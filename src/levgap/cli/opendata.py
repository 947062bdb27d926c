"""Open-data commands: ``import-sec``."""

from __future__ import annotations

from pathlib import Path

import typer

from levgap.cli.app import app
from levgap.cli.common import console, guard


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
    with guard():
        from levgap.ingest.sec import import_sec, write_sec_import
        from levgap.outputs import refuse_inputs

        sources = out.with_name(out.stem + ".sources.csv")  # as write_sec_import names it
        refuse_inputs([out, sources], [*quarters, *([prices] if prices else [])])
        result = import_sec(quarters, forms=tuple(forms.split(",")),
                            restated=not as_first_filed, prices=prices,
                            exclude_sic=exclude_sic)
        panel_path, sources_path = write_sec_import(result, out)
        con = console()
        p = result.panel
        con.print(f"{panel_path}: {len(p)} firm-years of {p['firm_id'].nunique()} firms; "
                  f"sources in {sources_path}.")
        if result.n_excluded_firms:
            con.print(f"  excluded by SIC: {result.n_excluded_firms} firms, "
                      f"{int(result.excluded['firm_years'].sum())} firm-years")
        for w in result.warnings:
            con.print(f"  note: {w}")
