"""The deal check: ``proforma``, and the single change of ``explain --add-debt``."""

from __future__ import annotations

from pathlib import Path
from typing import Any

import typer

from levgap import glossary as g
from levgap.cli.app import app
from levgap.cli.common import console, guard


@app.command()
def proforma(
    results: Path = typer.Argument(..., help="Folder written by levgap analyze."),
    firm_id: str = typer.Argument(..., help="The firm's firm_id."),
    scenario: Path = typer.Option(..., "--scenario",
                                  help="Scenario file (TOML); `levgap template` writes one."),
    year: int = typer.Option(None, "--year", help="Fiscal year (default: the firm's latest)."),
    out: Path = typer.Option(None, "--out",
                             help="Write proforma.csv, proforma.json and proforma.html here."),
    panel: Path = typer.Option(None, "--panel",
                               help="The run's input panel, if it has moved (same file)."),
) -> None:
    """Score deal scenarios (new debt, buy-backs, acquisitions, a merger) for one firm against
    the saved peer model, with debt capacity, credit ratios and the trade-off in money.

    Example: levgap proforma results/ TR0069 --scenario deal.toml --out deal-out/
    """
    with guard():
        from levgap.deal.api import proforma as run
        from levgap.report.proforma import check_destination

        if out is not None:
            check_destination(out)  # before any work: a foreign file there stops the run
        check = run(results, firm_id, scenario, year=year, panel=panel)
        _print_check(check)
        if out is not None:
            written = check.write(out)
            console().print(f"Written: {', '.join(str(p) for p in written)}.")
        else:
            console().print("Add --out DIR to write proforma.csv, proforma.json and "
                            "proforma.html (a one-firm page for a deal memo).")


def _print_check(check: Any) -> None:
    from levgap.report.proforma import CAUTION, terminal_tables

    con = console()
    for table in terminal_tables(check):
        con.print(table)
    for r in check.table.to_dict("records"):
        if r["notes"]:
            con.print(f"  {r['scenario']}, {r['measure']}: {r['notes']}")
    con.print("Capacity: additional debt to the band's top; recap = debt replaces equity "
              "bought back at market value, funded = debt buys new assets in the current mix.")
    con.print(FULL_SAMPLE_NOTE)
    con.print(f"Caution: {CAUTION}")


FULL_SAMPLE_NOTE = (
    "Targets here come from the saved model's full-sample fit (targets.csv's target_full), so "
    "'before' can differ a little from the cross-fitted target and status that screen and "
    "explain show."
)


def explain_change(out_dir: Path, firm_id: str, year: int | None, measure: str, x: float,
                   fund_assets: bool) -> None:
    """``levgap explain --add-debt X [--fund-assets]``: before and after for one change."""
    from rich.table import Table

    from levgap.deal.api import proforma as run
    from levgap.deal.scenario import debt_change
    from levgap.report.proforma import CAUTION
    from levgap.report.proforma_page import money, num, pct, pp

    check = run(out_dir, firm_id, [debt_change(x, fund_assets=fund_assets)], year=year)
    rows = check.table[check.table["measure"] == measure].to_dict("records")
    if not rows:
        raise typer.BadParameter(f"firm {firm_id} has no {measure} leverage row.",
                                 param_hint="--measure")
    before, after = rows
    table = Table(title=f"{firm_id} {check.fiscal_year}, {measure} leverage: {after['scenario']}",
                  title_justify="left")
    for col in ("", "before", "after"):
        table.add_column(col, justify="left" if not col else "right")
    for col, fmt in (("total_debt", money), ("total_assets", money), ("actual", pct),
                     ("target", pct), ("band_low", pct), ("band_high", pct), ("status", str),
                     ("gap", pp), ("gap_z", num), ("capacity_to_band_top_recap", money),
                     ("net_debt_to_ebitda", num)):
        table.add_row(g.header(col), fmt(before[col]), fmt(after[col]))
    c = check.contributions[check.contributions["measure"] == measure]
    for d in dict.fromkeys(c["driver"]):
        b = c[(c["scenario"] == before["scenario"]) & (c["driver"] == d)].iloc[0]
        a = c[(c["scenario"] == after["scenario"]) & (c["driver"] == d)].iloc[0]
        table.add_row(f"{d} ({g.header('contribution')})",
                      f"{b['value']:.4f} ({pp(b['contribution'])})",
                      f"{a['value']:.4f} ({pp(a['contribution'])})")
    con = console()
    con.print(table)
    flags = after["flags"]
    if flags:
        con.print(f"flags after: {flags.replace(';', ', ')}")
    con.print(f"Caution: {CAUTION}")
