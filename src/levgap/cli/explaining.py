"""``levgap explain``: why one firm's target differs from its peers', its history and peers.

The firm is found by its id (as typed, or ignoring case) or by part of its name, with "did you
mean" suggestions (``levgap.results``). The view: the drivers against the peers (a winsorised
value with its raw value beside it), the bridge from peer median to actual, the flags in
words, the gap over the firm's years (persistent or new), and with ``--peers`` the peers
themselves, whose median is the peer median.
"""

from __future__ import annotations

from pathlib import Path
from typing import Any

import typer

from levgap import glossary as g
from levgap.cli.app import app
from levgap.cli.common import console, guard, plain


@app.command()
def explain(
    out_dir: Path = typer.Argument(..., help="Folder written by levgap analyze."),
    firm_id: str = typer.Argument(..., help="The firm's firm_id (case ignored) or part of its "
                                  "name."),
    year: int = typer.Option(None, "--year", help="Fiscal year (default: the firm's latest)."),
    measure: str = typer.Option("book", "--measure", help="book or market."),
    peers: bool = typer.Option(False, "--peers", help="Also list the peers behind the peer "
                               "median, with their leverage and drivers."),
    plot: Path = typer.Option(None, "--plot", help="Also draw the steps to a PNG or SVG file."),
    add_debt: float = typer.Option(None, "--add-debt",
                                   help="Show before and after this change in debt."),
    fund_assets: bool = typer.Option(False, "--fund-assets",
                                     help="With --add-debt: the debt buys new assets."),
    panel: Path = typer.Option(None, "--panel",
                               help="With --add-debt: the run's input panel, if it has moved "
                               "(same file)."),
) -> None:
    """Show why a firm's target differs from its peers', driver by driver, with its gap
    history, its flags in words and (--peers) its peers.

    Example: levgap explain results/ TR0069 --year 2023 --peers --plot steps.svg
    """
    with guard():
        if add_debt is not None or fund_assets:  # the deal check's view of one change
            from levgap.cli.deal import explain_change

            if add_debt is None:
                raise typer.BadParameter("needs --add-debt X.", param_hint="--fund-assets")
            return explain_change(out_dir, firm_id, year, measure, add_debt, fund_assets,
                                  panel=panel)
        from levgap.cli.results import _refuse_run_files
        from levgap.firmview import firm_rows
        from levgap.report.terminal import nansum, render_history, render_steps
        from levgap.results import open_results

        if plot is not None and plot.suffix.lower() not in (".png", ".svg"):
            raise typer.BadParameter(f"must end in .png or .svg; got {plot.name!r}.",
                                     param_hint="--plot")
        if plot is not None:  # refused before anything is explained
            _refuse_run_files(out_dir, plot)
        res = open_results(out_dir)  # pandas-free: the firm's rows only, as plain values
        view = firm_rows(res.tables["targets"], res.tables["drivers"], firm_id, year=year,
                         measure=measure, names=res.industry_names, folder=res.folder)
        row = view.row
        steps = view.steps()  # drivers that do not add up are refused before anything is shown
        units = (res.manifest.get("options") or {}).get("units")
        con = console()
        who = f"{row['firm_id']}" + (f" ({row['firm_name']})" if row.get("firm_name") else "")
        con.print(_drivers_table(view, who))
        offset = row["peer_target"] - row["peer_median"]
        con.print(
            f"actual - peer median = {g.pp(row['actual'] - row['peer_median'])} pp = "
            f"{g.label('peers_offset')} {g.pp(offset)} pp + drivers "
            f"{g.pp(nansum(view.drivers['contribution']))} pp + {g.label('unexplained')} "
            f"{g.pp(row['gap'])} pp")
        money = g.money_unit(units)
        con.print(
            f"{g.label('status')}: {row['status']} ({g.label('band')} {g.pct(row['band_low'])} "
            f"to {g.pct(row['band_high'])}, {g.label('gap_z')} {g.signed(row['gap_z'])}); "
            f"{g.label('debt_to_target')}: {g.money(row['debt_to_target'])} ({money})")
        con.print(_peer_line(row, view.industry_name, res))
        con.print(_history_line(row))
        if view.flags:
            con.print(f"{g.label('flags')}:")
            for code, words in view.flags:
                con.print(f"  {code}: {words}")
        shown = {**steps, "label": [plain(label) for label in steps["label"]]}
        title = f"{row['firm_id']} {int(row['fiscal_year'])}, {g.MEASURES[measure]}"
        con.print(render_steps(shown, title=plain(title)))
        years = len(view.history["fiscal_year"])
        con.print(render_history(view.history, title=plain(
            f"{row['firm_id']}, {g.MEASURES[measure]} over {g.count(years, 'year')}"),
            max_width=con.width))
        if peers:
            _print_peers(con, res, row, measure)
        if plot is not None:
            import pandas as pd

            from levgap.report.plots import plot_steps

            plot_steps(pd.DataFrame(steps), plot, title=title,
                       inputs=_refuse_run_files(out_dir, plot))
            con.print(f"Chart written to {plot}.")


def _drivers_table(view: Any, who: str) -> Any:
    from rich.table import Table

    row = view.row
    count = row["peer_count"]
    peers = "no peers" if count != count else g.count(count, "peer")
    table = Table(title=plain(
        f"{who}, {int(row['fiscal_year'])}, {g.MEASURES.get(row['measure'], row['measure'])}: "
        f"{g.label('actual')} {g.pct(row['actual'])}, {g.label('target')} "
        f"{g.pct(row['target'])}, {g.label('peer_target')} {g.pct(row['peer_target'])}, "
        f"{g.label('peer_median')} {g.pct(row['peer_median'])} ({peers})"), title_justify="left")
    for key in ("driver", "firm_value", "peer_value", "contribution"):
        table.add_column(g.header(key), justify="left" if key == "driver" else "right")
    d = view.drivers
    for driver, firm_value, raw_value, peer_value, contribution in zip(
            d["driver"], d["firm_value"], d["raw_value"], d["peer_value"], d["contribution"],
            strict=True):
        value = g.number(firm_value, 4)
        if raw_value == raw_value:  # winsorised: the raw value beside it
            value += f" (winsorised; {g.label('raw_value')} {g.number(raw_value, 4)})"
        table.add_row(plain(driver), value, g.number(peer_value, 4), g.pp(contribution, 2))
    return table


def _peer_line(row: Any, industry_name: str, res: Any) -> str:
    from levgap.matching import unneutralise

    industry = unneutralise(str(row["industry"]))
    named = f"{industry} ({industry_name})" if industry_name else industry
    n = row["peer_count"]
    flags = str(row["flags"]).split(";")
    basis = ("its own peer list" if "peers_listed" in flags else
             "its parent group" if "peers_from_parent" in flags else
             "every other firm of the year" if "peers_whole_year" in flags else
             "every other firm-year of the panel" if "peers_other_years" in flags else
             f"its peer group (industry {named})")
    if n != n or int(n) == 0:
        return f"{g.label('peer_count')}: none."
    warn = " Few peers: read the peer median with care." if "few_peers" in flags else ""
    return (f"{g.label('peer_count')}: {g.count(n, 'firm')} of {basis} in "
            f"{int(row['fiscal_year'])} (--peers lists them).{warn}")


def _history_line(row: Any) -> str:
    flags = str(row["flags"]).split(";")
    years = row["years_outside"]
    if "persistent" in flags:
        return (f"history: {row['status']} the band for {g.count(years, 'year')} in a row "
                f"({g.label('gap_mean_prior')} {g.pp(row['gap_mean_prior'])} pp): persistent, "
                "a standing policy rather than a new event.")
    if "newly_outside" in flags:
        return (f"history: moved {row['status']} the band this year ({g.label('gap_prev')} "
                f"{g.pp(row['gap_prev'])} pp, {g.label('gap_change')} "
                f"{g.pp(row['gap_change'])} pp): new.")
    if row["status"] == "within":
        return (f"history: within the band ({g.label('gap_prev')} {g.pp(row['gap_prev'])} pp,"
                f" {g.label('gap_mean_prior')} {g.pp(row['gap_mean_prior'])} pp).")
    return (f"history: {row['status']} the band for {g.count(years, 'year')} in a row "
            f"({g.label('gap_prev')} {g.pp(row['gap_prev'])} pp).")


def _print_peers(con: Any, res: Any, row: Any, measure: str) -> None:
    from rich.table import Table

    peers = res.peers(str(row["firm_id"]), year=int(row["fiscal_year"]), measure=measure)
    drivers = [c for c in peers.table.columns if c in peers.peer_values]
    table = Table(title=plain(f"{g.label('peer_count')} of {row['firm_id']} "
                              f"{int(row['fiscal_year'])} ({peers.basis}): "
                              f"{g.count(len(peers.table), 'firm')}"), title_justify="left")
    records = peers.table.to_dict("records")
    body = [[plain(r["firm_id"]), plain(r["firm_name"] or ""), g.pct(r["actual"]),
             *(g.number(r[d], 3) for d in drivers)] for r in records]
    body.append(["median", "", g.pct(peers.median),
                 *(g.number(peers.table[d].median(), 3) for d in drivers)])
    # ids and numbers are never cut: driver names break after "_" in the header, names
    # shorten, then go when the terminal has no room for them
    heads = [g.label("actual"), *(plain(d).replace("_", "_\n") for d in drivers)]
    widths = [max([len(row[i]) for row in body] + [max(map(len, heads[i - 2].split("\n")))
                                                    if i >= 2 else len(g.label("firm_id"))])
              for i in (0, *range(2, len(body[0])))]
    room = con.width - sum(w + 3 for w in widths) - 4
    table.add_column(g.label("firm_id"), no_wrap=True, min_width=widths[0])
    if room >= 8:
        table.add_column(g.label("firm_name"), max_width=min(room, 24), overflow="ellipsis",
                         no_wrap=True)
    else:
        body = [[row[0], *row[2:]] for row in body]
    for head, w in zip(heads, widths[1:], strict=True):
        table.add_column(head, justify="right", min_width=w, overflow="fold")
    for i, row in enumerate(body):
        table.add_row(*row, style="bold" if i == len(body) - 1 else None)
    con.print(table)
    con.print(f"{g.label('peer_median')} of the run: {g.pct(peers.peer_median, 2)}; median "
              f"of the peers listed: {g.pct(peers.median, 2)}.")
