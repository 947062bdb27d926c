"""``levgap screen``: the firms furthest from their targets, as a table, CSV or JSON.

pandas-free: the targets table is read and filtered with pyarrow (``levgap.report.quick``), so
the answer comes at once. The table fits the terminal's width (80 columns and up) by dropping
the least needed columns; firm ids are never cut.
"""

from __future__ import annotations

import csv
import io
import json
import math
from collections.abc import Callable, Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import typer

from levgap import glossary as g
from levgap.cli.app import app
from levgap.cli.common import TOP_HELP, console, guard, plain

FORMATS = ("table", "csv", "json")
EXPORT_COLUMNS: tuple[str, ...] = (
    "firm_id", "firm_name", "industry", "industry_name", "fiscal_year", "measure", "actual",
    "target", "gap", "gap_z", "band_low", "band_high", "status", "debt_to_target", "gap_prev",
    "gap_change", "gap_mean_prior", "years_outside", "peer_median", "peer_count", "flags",
)
"""Columns of ``--format csv`` and ``json``, in order (the targets table's names)."""


@dataclass(frozen=True, slots=True)
class Column:
    """A column of the terminal table: what it shows and how much it matters."""

    key: str
    header: str
    cell: Callable[[dict[str, Any]], str]
    right: bool = True
    shrink: int = 0  # the width it can shrink to (0: never shrinks)


def _columns(money: str) -> list[Column]:
    """Table columns, most needed first (the layout drops from the end)."""
    return [
        Column("firm_id", g.label("firm_id"), lambda r: plain(r["firm_id"]), right=False),
        Column("status", g.label("status"), lambda r: plain(r["status"]), right=False),
        Column("gap", g.header("gap"), lambda r: g.pp(r["gap"])),
        Column("gap_z", g.header("gap_z"), lambda r: g.signed(r["gap_z"])),
        Column("debt_to_target", g.header("debt_to_target", money),
               lambda r: g.money(r["debt_to_target"])),
        Column("flags", g.label("flags"),
               lambda r: plain(str(r.get("flags") or "").replace(";", ", ")), right=False,
               shrink=14),
        Column("firm_name", g.label("firm_name"), lambda r: plain(r.get("firm_name") or ""),
               right=False, shrink=10),
        Column("actual", g.header("actual"), lambda r: g.pct(r["actual"])),
        Column("target", g.header("target"), lambda r: g.pct(r["target"])),
        Column("years_outside", g.label("years_outside"),
               lambda r: str(r["years_outside"]) if r.get("years_outside") is not None else ""),
        Column("gap_change", g.header("gap_change"), lambda r: g.pp(r.get("gap_change"))),
        Column("industry", g.label("industry"), lambda r: plain(r["industry"]), right=False),
        Column("band", g.header("band"),
               lambda r: f"{g.pct(r['band_low'])}-{g.pct(r['band_high'])}"),
    ]


def layout(rows: Sequence[dict[str, Any]], width: int, money: str,
           sort: str | None = None) -> list[tuple[Column, int]]:
    """The columns that fit ``width`` characters, each with its width.

    Columns are taken in order of need (the column the rows are sorted by comes fourth) while
    they fit at their natural width; the name and flags columns may shrink to fit (names get
    an ellipsis, flags wrap). Firm ids keep their whole width whatever the terminal's.
    """
    order = _columns(money)
    if sort is not None:
        order.sort(key=lambda c: (c.key != "firm_id", c.key != "status", c.key != "gap",
                                  c.key != sort))
    def natural(c: Column) -> int:
        return max([len(c.header), *(len(c.cell(r)) for r in rows)])

    chosen: list[tuple[Column, int]] = []
    used = 1  # the left border; each column adds its width, two of padding and a border
    for c in order:
        w = natural(c)
        if used + w + 3 <= width or not chosen:
            chosen.append((c, w))
            used += w + 3
        elif c.shrink and used + c.shrink + 3 <= width:
            chosen.append((c, width - used - 3))
            used = width
    return chosen


def render_table(rows: Sequence[dict[str, Any]], title: str, width: int, money: str,
                 sort: str | None = None,
                 fit: Sequence[dict[str, Any]] | None = None) -> Any:
    """The screen as a rich table no wider than ``width``; with ``fit``, the columns are
    those that fit these rows (tables printed together then show the same columns)."""
    from rich.table import Table

    cols = layout(rows if fit is None else fit, width, money, sort)
    table = Table(title=plain(title), title_justify="left", width=None)
    for c, w in cols:
        if c.key == "firm_id":
            table.add_column(c.header, no_wrap=True, min_width=w)
        elif c.shrink:
            table.add_column(c.header, max_width=w, no_wrap=c.key == "firm_name",
                             overflow="ellipsis" if c.key == "firm_name" else "fold")
        else:
            table.add_column(c.header, justify="right" if c.right else "left", no_wrap=True)
    for r in rows:
        table.add_row(*(c.cell(r) for c, _ in cols))
    return table


def _export_value(v: Any) -> Any:
    if isinstance(v, float) and not math.isfinite(v):
        return None
    return v


def export_csv(rows: Sequence[dict[str, Any]]) -> str:
    """Rows as CSV text (``EXPORT_COLUMNS``) for a terminal or a spreadsheet.

    Text cells go through ``plain`` as in the table view (escape sequences and control
    characters go; tabs and line breaks become spaces), then text a spreadsheet would run is
    neutralised; the csv writer quotes any delimiter or quote left.
    """
    from levgap.outputs.cells import is_formula_like

    buf = io.StringIO()
    writer = csv.writer(buf, lineterminator="\n")
    writer.writerow(EXPORT_COLUMNS)
    for r in rows:
        out = []
        for c in EXPORT_COLUMNS:
            v = _export_value(r.get(c))
            if isinstance(v, str):
                v = plain(v)
                if is_formula_like(v):
                    v = "'" + v
            out.append("" if v is None else v)
        writer.writerow(out)
    return buf.getvalue()


def _title(measure: str, year: int, matched: int, status: str | None, new: bool,
           persistent: bool) -> str:
    what = [w for w, on in (("new outside the band", new), ("persistent", persistent)) if on]
    return (f"{g.MEASURES.get(measure, measure)}, fiscal {year}: {g.count(matched, 'firm')}"
            + (f" {status}" if status else "") + (f" ({', '.join(what)})" if what else ""))


def _legend(rows: Sequence[dict[str, Any]], width: int) -> list[str]:
    """The flags of the rows shown, in words, wrapped to ``width``."""
    import textwrap

    from levgap.codes import flag_words

    seen: dict[str, str] = {}
    for r in rows:
        for code, words in flag_words(r.get("flags")):
            seen.setdefault(code, words)
    lines = []
    for code, words in seen.items():
        lines += textwrap.wrap(f"{code}: {words}", width=max(width, 40),
                               initial_indent="  ", subsequent_indent="    ")
    return lines


@app.command()
def screen(
    out_dir: Path = typer.Argument(..., help="Folder written by levgap analyze."),
    measure: str = typer.Option("book", "--measure", help="book or market."),
    status: str = typer.Option(None, "--status", help="Keep only over, within or under."),
    industry: str = typer.Option(None, "--industry",
                                 help="Keep only this industry: a code or part of its name "
                                 "(case ignored)."),
    firm: str = typer.Option(None, "--firm",
                             help="Keep only this firm: its id or part of its name (case "
                             "ignored)."),
    firms: Path = typer.Option(None, "--firms",
                               help="A coverage list: a file of firm ids, one a line; only "
                               "these firms (all of them unless --top)."),
    new: bool = typer.Option(False, "--new",
                             help="Only firms that moved outside their band this year."),
    persistent: bool = typer.Option(False, "--persistent",
                                    help="Only firms outside on the same side for 3+ years."),
    year: int = typer.Option(None, "--year", help="Fiscal year (default: the latest)."),
    sort: str = typer.Option(None, "--sort",
                             help="Order by the size of: gap, gap_z, debt (debt to target) or "
                             "change (gap change); default gap with --status, else gap_z."),
    top: int = typer.Option(None, "--top", min=1, help=TOP_HELP + " Default: 10 in a table; "
                            "every firm in CSV or JSON and with --firms."),
    fmt: str = typer.Option("table", "--format", help="table, csv or json."),
) -> None:
    """List the firms furthest from their targets, or a coverage list, as a table, CSV or JSON.

    Example: levgap screen results/ --status over --top 10
    """
    with guard():
        from levgap.ingest.lists import read_firm_list
        from levgap.report.quick import SORTS, ScreenQuery, read_run_targets, screen_rows

        measure = measure.strip().casefold()  # option values in any case, as ids and names
        status = None if status is None else status.strip().casefold()
        if status is not None and status not in ("over", "under", "within"):
            raise typer.BadParameter(f"must be over, under or within; got {status!r}.",
                                     param_hint="--status")
        if fmt not in FORMATS:
            raise typer.BadParameter(f"must be table, csv or json; got {fmt!r}.",
                                     param_hint="--format")
        if sort is not None and sort not in SORTS:
            raise typer.BadParameter(f"must be one of {', '.join(SORTS)}; got {sort!r}.",
                                     param_hint="--sort")
        listed = tuple(read_firm_list(firms)) if firms is not None else ()
        if top is None and fmt == "table" and not listed:
            top = 10
        table, manifest = read_run_targets(out_dir)
        query = ScreenQuery(measure=measure, status=status, industry=industry, firm=firm,
                            firms=listed, year=year, new=new, persistent=persistent,
                            sort=sort, top=top)
        result = screen_rows(table, query, manifest.get("industry_names") or {})
        if result.year is None:
            raise typer.BadParameter(f"no {measure} leverage rows in {out_dir}.",
                                     param_hint="--measure")
        for wanted, hint in result.absent:
            console(stderr=True).print(
                f"note: firm {wanted} of {firms} has no {measure} leverage row in "
                f"{result.year}.{hint}")
        if fmt == "csv":
            typer.echo(export_csv(result.rows), nl=False)
            return
        if fmt == "json":
            body = {"measure": measure, "fiscal_year": result.year, "matched": result.matched,
                    "absent": [w for w, _ in result.absent],
                    "rows": [{c: _export_value(r.get(c)) for c in EXPORT_COLUMNS}
                             for r in result.rows]}
            typer.echo(json.dumps(body, indent=1))
            return
        if not result.rows:
            typer.echo("No firm matches those filters.")
            return
        con = console()
        units = (manifest.get("options") or {}).get("units")
        known = g.money_unit(units) != g.money_unit({})
        con.print(render_table(result.rows, _title(measure, result.year, result.matched,
                                                    status, new, persistent),
                               con.width, g.money_unit(units) if known else "",
                               SORTS[sort] if sort else None))
        if not known:
            import textwrap

            for line in textwrap.wrap(g.money_note(units), width=max(con.width, 40)):
                con.print(line)
        legend = _legend(result.rows, con.width)
        if legend:
            con.print("Flags:")
            for line in legend:
                con.print(line)

