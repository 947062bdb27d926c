"""Open-data commands: ``import-sec``."""

from __future__ import annotations

from pathlib import Path

import typer

from levgap.cli.app import app
from levgap.cli.common import console, guard

_DEFAULT_EXCLUDE = "6000-6999,4900-4999"


@app.command("import-sec")
def import_sec_command(
    quarters: list[Path] = typer.Argument(
        ..., help="Quarterly zips or extracted folders of the SEC Financial Statement Data Sets."),
    out: Path = typer.Option(
        ..., "--out", help="Panel file to write (.csv or .parquet); the tag or formula behind "
        "every number goes beside it as PANEL.sources.csv, the firm-years left out as "
        "PANEL.excluded.csv."),
    forms: str = typer.Option(
        "10-K", "--forms", help="Forms kept, comma-separated: 10-K, 10-K/A, 10-KT."),
    as_first_filed: bool = typer.Option(
        False, "--as-first-filed",
        help="Keep the first filed figure per firm, year and item (default: the latest, "
        "restated)."),
    prices: Path = typer.Option(
        None, "--prices", help="CSV of cik, date, price for market equity (default: the "
        "cover-page public float, flagged as a proxy)."),
    exclude_sic: str = typer.Option(
        None, "--exclude-sic", help=f"SIC ranges to leave out (default {_DEFAULT_EXCLUDE}: "
        "financials and utilities)."),
    all_industries: bool = typer.Option(
        False, "--all-industries", help="Keep every industry (no SIC range left out)."),
    fx_rates: Path = typer.Option(
        None, "--fx-rates", help="CSV of currency, date, rate (U.S. dollars per unit) to keep "
        "filers reporting in other currencies (default: they are left out)."),
    drop_subsidiaries: bool = typer.Option(
        False, "--drop-subsidiaries", help="Leave out firm-years whose total assets equal "
        "another filer's (default: flag them)."),
    workers: int = typer.Option(
        None, "--workers", help="Processes reading quarters in parallel (default: quarters "
        "or CPUs, whichever is fewer)."),
) -> None:
    """Build a schema-v1 peer panel from quarters of the SEC's Financial Statement Data Sets.

    Example: levgap import-sec 2010q1.zip 2010q2.zip --out panel.csv --exclude-sic 6000-6999
    """
    with guard():
        from levgap.errors import ConfigError
        from levgap.ingest.sec import import_sec, write_sec_import
        from levgap.outputs import refuse_inputs

        if all_industries and exclude_sic is not None:
            raise ConfigError(
                "--all-industries and --exclude-sic must not be given together; got both. "
                "Keep one."
            )
        ranges = None if all_industries else (exclude_sic or _DEFAULT_EXCLUDE)
        sources = out.with_name(out.stem + ".sources.csv")  # as write_sec_import names them
        excluded = out.with_name(out.stem + ".excluded.csv")
        refuse_inputs([out, sources, excluded], [*quarters, *([prices] if prices else []),
                                                 *([fx_rates] if fx_rates else [])])
        result = import_sec(quarters, forms=tuple(forms.split(",")),
                            restated=not as_first_filed, prices=prices, exclude_sic=ranges,
                            fx_rates=fx_rates, drop_subsidiaries=drop_subsidiaries,
                            workers=workers)
        panel_path, sources_path, excluded_path = write_sec_import(result, out)
        con = console()
        p = result.panel
        con.print(f"{panel_path}: {len(p)} firm-years of {p['firm_id'].nunique()} firms; "
                  f"sources in {sources_path}.")
        left = result.excluded_by_reason()
        if left:
            parts = ", ".join(f"{reason} {n}" for reason, n in left.items())
            con.print(f"  left out: {len(result.excluded)} firm-years ({parts}); listed in "
                      f"{excluded_path}")
        for w in result.warnings:
            con.print(f"  note: {w}")
