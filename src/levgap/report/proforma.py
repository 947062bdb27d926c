"""The deal check's outputs: ``proforma.csv``, ``proforma.json``, ``proforma.html``, and the
compact terminal tables.

The page is self-contained like ``report.html`` (inline styles, inline SVG from
:mod:`levgap.report.svg`, no script, no network) and made for a deal memo: the firm's leverage,
target and band over its years, the scenarios side by side, the bridge from the peer median to
each scenario's target, the trade-off chart with the band marked, the pro forma statement
lines, the peers, the assumptions and the caution. Every text from the data or the scenario
file passes through Jinja2's autoescaping.
"""

from __future__ import annotations

import json
import math
from pathlib import Path
from typing import TYPE_CHECKING, Any

import pandas as pd

from levgap import glossary as g
from levgap.errors import OutputError
from levgap.outputs import atomic_write_bytes

if TYPE_CHECKING:
    from levgap.deal.result import DealCheck

NAMES = ("proforma.csv", "proforma.json", "proforma.html")
CAUTION = (
    "A statistical peer benchmark and an illustration of the trade-off under the stated "
    "assumptions, not investment, credit or legal advice. Targets and bands describe what peers "
    "with similar fundamentals carry; capacities, default probabilities and the best debt level "
    "follow from simple stated models, not from the firm's covenants, rating, refinancing "
    "calendar or strategy. Covenants, ratings and local rules (accounting standards, "
    "regulation) decide."
)


def write_proforma(check: DealCheck, out_dir: str | Path, *, force: bool = False) -> list[Path]:
    """Write the three deal-check files into ``out_dir``, atomically.

    A file of the same name that levgap did not write (or that changed since) is never
    replaced; each file written is recorded in the folder's output marker.

    Parameters
    ----------
    check : DealCheck
    out_dir : str or pathlib.Path
        Created if absent; may hold other files.
    force : bool, default=False
        Unused for files levgap did not write (those are never replaced); kept for symmetry
        with ``analyze``.

    Returns
    -------
    list of pathlib.Path

    Raises
    ------
    OutputError
        A file of the same name that levgap did not write, or a folder that cannot be written.
    """
    from levgap.outputs import neutralise

    del force
    out = Path(out_dir)
    check_destination(out)
    csv = neutralise(check.table).to_csv(index=False, lineterminator="\r\n")
    atomic_write_bytes(out / NAMES[0], csv.encode("utf-8"))
    body = json.dumps(proforma_json(check), indent=2, allow_nan=False, default=str)
    atomic_write_bytes(out / NAMES[1], (body + "\n").encode("utf-8"))
    atomic_write_bytes(out / NAMES[2], render_proforma(check).encode("utf-8"))
    return [out / n for n in NAMES]


def check_destination(out_dir: str | Path) -> None:
    """Refuse a destination that is a file or holds a deal-check file levgap did not write.

    Each file is checked as every single-file writer checks it (``levgap.outputs``): absent,
    or written by levgap there and unchanged since; never a file of a run.

    Raises
    ------
    OutputError
    """
    from levgap.outputs import check_replaceable

    out = Path(out_dir)
    if out.exists() and not out.is_dir():
        raise OutputError(f"{out}: --out must be a folder; got a file. Choose another --out.")
    for name in NAMES:
        check_replaceable(out / name)


def _clean(v: Any) -> Any:
    if isinstance(v, dict):
        return {str(k): _clean(x) for k, x in v.items()}
    if isinstance(v, list | tuple):
        return [_clean(x) for x in v]
    if hasattr(v, "item") and not isinstance(v, str):
        v = v.item()
    if isinstance(v, float) and not math.isfinite(v):
        return None if math.isnan(v) else ("inf" if v > 0 else "-inf")
    return v


def _records(frame: pd.DataFrame) -> list[dict[str, Any]]:
    return [_clean(r) for r in frame.to_dict("records")]


def proforma_json(check: DealCheck) -> dict[str, Any]:
    """Everything the page shows, as JSON-ready data (NaN as null, infinity as text)."""
    grids: dict[str, dict[str, Any]] = {}
    for (scenario, measure), grid in check.tradeoff.groupby(["scenario", "measure"],
                                                             sort=False):
        grids.setdefault(str(scenario), {})[str(measure)] = {
            c: _clean(grid[c].tolist()) for c in ("debt", "tax_shield", "default_probability",
                                               "distress_cost", "net")}
    import levgap

    return {
        "levgap_version": levgap.__version__,
        "run_id": check.run_id,
        "firm_id": check.firm_id,
        "firm_name": check.firm_name,
        "industry": check.industry,
        "fiscal_year": check.fiscal_year,
        "scenarios": [_clean(s.to_dict()) for s in check.scenarios],
        "rows": _records(check.table),
        "contributions": _records(check.contributions),
        "tradeoff": grids,
        "history": _records(check.history),
        "peers": _records(check.peers),
        "assumptions": _clean(check.assumptions),
        "notes": list(check.notes),
        "caution": CAUTION,
    }


# ----------------------------------------------------------------------------- page

def render_proforma(check: DealCheck) -> str:
    """The deal page as an HTML string.

    Parameters
    ----------
    check : DealCheck

    Returns
    -------
    str
        A complete, self-contained HTML document.
    """
    from levgap.report.proforma_page import page_context

    return _environment().get_template("proforma.html.j2").render(**page_context(check),
                                                                    caution=CAUTION)


def _environment() -> Any:
    import jinja2

    return jinja2.Environment(
        loader=jinja2.FileSystemLoader(Path(__file__).with_name("templates")),
        autoescape=True, undefined=jinja2.StrictUndefined, trim_blocks=True,
        lstrip_blocks=True,
    )


# ----------------------------------------------------------------------------- terminal

def terminal_tables(check: DealCheck) -> list[Any]:
    """One compact rich table per measure: each scenario's position, capacity and credit."""
    from rich.table import Table
    from rich.text import Text

    from levgap.report.proforma_page import money, pct, pp, ratio

    tables = []
    for measure, rows in check.table.groupby("measure", sort=False):
        t = Table(title=Text(f"{check.firm_id} {check.fiscal_year}, {measure} leverage; debt "
                             "to the band's top in the results' money unit"),
                  title_justify="left")
        width = min(max(len(str(x)) for x in rows["scenario"]), 24)
        keys = ("actual", "target", "band", "status", "gap", "capacity_to_band_top_recap",
                "capacity_to_band_top_funded", "net_debt_to_ebitda", "ebitda_to_interest",
                "altman_score", "default_probability")
        body = []
        for r in rows.to_dict("records"):
            z = "" if not math.isfinite(r["altman_score"]) else \
                f"{r['altman_model']} {r['altman_score']:.2f} {r['altman_zone']}"
            body.append([pct(r["actual"]), pct(r["target"]),
                         f"{pct(r['band_low'])}-{pct(r['band_high'])}", str(r["status"]),
                         pp(r["gap"]), money(r["capacity_to_band_top_recap"]),
                         money(r["capacity_to_band_top_funded"]),
                         ratio(r["net_debt_to_ebitda"]), ratio(r["ebitda_to_interest"]),
                         z or "-", pct(r["default_probability"], 2)])
        t.add_column(g.label("scenario"), min_width=width, no_wrap=True, overflow="ellipsis")
        for i, key in enumerate(keys):  # figures whole; the glossary's labels wrap above them
            cells = max(len(row[i]) for row in body)
            t.add_column(g.header(key), justify="left" if key in ("status", "altman_score")
                         else "right", min_width=cells, overflow="fold")
        for r, row in zip(rows.to_dict("records"), body, strict=True):
            t.add_row(Text(str(r["scenario"])), *row)
        tables.append(t)
    return tables
