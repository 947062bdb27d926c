"""Driver steps of one firm-year: from the peer median to the firm's actual ratio.

The steps split ``actual - peer_median`` into the peers' own offset
(``peer_target - peer_median``), each driver's contribution (these sum to
``target - peer_target``) and the unexplained gap (``actual - target``). The same frame feeds
the terminal chart here, the image in :func:`levgap.report.plots.plot_steps` and the HTML report.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from typing import Any

import numpy as np
import pandas as pd

from levgap import glossary as g
from levgap.errors import LevgapError

STEP_COLUMNS = ("step", "label", "kind", "delta", "start", "end")
_EIGHTHS = ("", "▏", "▎", "▍", "▌", "▋", "▊", "▉")
_TOLERANCE = 1e-6


def driver_steps(target_row: Mapping[str, Any], drivers: pd.DataFrame) -> pd.DataFrame:
    """Build the steps from peer median to actual ratio for one firm-year and measure.

    Parameters
    ----------
    target_row : Mapping
        One row of ``targets`` (a dict or a pandas Series) with ``firm_id``, ``fiscal_year``,
        ``measure``, ``actual``, ``target``, ``peer_median`` and ``peer_target``.
    drivers : pandas.DataFrame
        The ``drivers`` table, whole or already cut to this firm-year and measure.

    Returns
    -------
    pandas.DataFrame
        One row per step with columns ``step`` (0, 1, ...), ``label``, ``kind`` (``"level"``
        for peer median, target and actual, which start at zero; ``"change"`` otherwise),
        ``delta`` (``end - start``), ``start`` and ``end``, in ratio units (0.05 = 5
        percentage points). Rows: peer median, peers' offset, each driver in the order of
        ``drivers``, target, unexplained gap, actual.

    Raises
    ------
    LevgapError
        If the drivers of that firm-year and measure are missing, or their contributions do
        not add up to ``target - peer_target``.
    """
    firm, year, measure = target_row["firm_id"], target_row["fiscal_year"], target_row["measure"]
    rows = drivers[
        (drivers["firm_id"].astype(str) == str(firm))
        & (drivers["fiscal_year"].astype("int64") == int(year))
        & (drivers["measure"].astype(str) == str(measure))
    ]
    if rows.empty:
        raise LevgapError(
            f"drivers must hold rows for firm {firm!s} in {int(year)} ({measure}); got none. "
            "Re-run levgap analyze so that drivers and targets come from the same run."
        )
    peer_median = float(target_row["peer_median"])
    peer_target = float(target_row["peer_target"])
    target = float(target_row["target"])
    actual = float(target_row["actual"])
    total = float(rows["contribution"].sum())
    if math.isfinite(target) and abs(peer_target + total - target) > _TOLERANCE:
        raise LevgapError(
            f"driver contributions of firm {firm!s} in {int(year)} ({measure}) must sum to "
            f"target - peer_target = {target - peer_target:.6f}; got {total:.6f}. Re-run "
            "levgap analyze so that drivers and targets come from the same run."
        )
    steps: list[tuple[str, str, float, float]] = [
        (_cap("peer_median"), "level", 0.0, peer_median),
        (_cap("peers_offset"), "change", peer_median, peer_target),
    ]
    level = peer_target
    names, values = rows["driver"].astype(str), rows["contribution"].astype(float)
    for name, value in zip(names, values, strict=True):
        steps.append((name, "change", level, level + value))
        level += value
    steps += [
        (_cap("target"), "level", 0.0, target),
        (_cap("unexplained"), "change", target, actual),
        (_cap("actual"), "level", 0.0, actual),
    ]
    frame = pd.DataFrame(steps, columns=["label", "kind", "start", "end"])
    frame.insert(0, "step", range(len(frame)))
    frame.insert(3, "delta", frame["end"] - frame["start"])
    return frame[list(STEP_COLUMNS)]


def _cap(key: str) -> str:
    label = g.label(key)
    return label[:1].upper() + label[1:]


def render_steps(steps: pd.DataFrame, *, width: int = 40, title: str | None = None) -> Any:
    """Draw driver steps as a horizontal bar chart for the terminal.

    Parameters
    ----------
    steps : pandas.DataFrame
        Output of :func:`driver_steps`.
    width : int, default=40
        Characters of the bar column; bar ends are drawn to an eighth of a character.
    title : str, optional
        Table title (shown as plain text; rich markup in it is not interpreted).

    Returns
    -------
    rich.table.Table
        Label, bar and value in percentage points; levels in blue, rises in red, falls in
        green.
    """
    from rich.table import Table
    from rich.text import Text

    lo = min(0.0, float(steps[["start", "end"]].min().min()))
    hi = max(0.0, float(steps[["start", "end"]].max().max()))
    scale = width / (hi - lo) if hi > lo else 1.0

    table = Table(title=Text(title) if title else None, show_edge=False, pad_edge=False)
    table.add_column(g.label("step"), no_wrap=True)
    table.add_column("", no_wrap=True, min_width=width + 1)
    table.add_column(g.UNIT_PP, justify="right", no_wrap=True)
    for row in steps.itertuples(index=False):
        if row.kind == "level":
            style, value = "bold blue", g.number(row.end * 100, 1)
        else:
            style = "red" if row.delta > 0 else "green"
            value = g.pp(row.delta)
        # The left edge sits on a character cell; the right edge is drawn to an eighth of one.
        left = int(round((min(row.start, row.end) - lo) * scale))
        size = (max(row.start, row.end) - lo) * scale - left
        full, eighths = divmod(max(int(round(size * 8)), 0), 8)
        bar = Text(" " * left)
        body = "█" * full + (_EIGHTHS[eighths] if eighths else "")
        if not body and row.delta != 0:
            body = "▏"  # a change too small to draw still shows where it sits
        bar.append(body or "│", style=style if body else "dim")
        table.add_row(Text(str(row.label)), bar, value)
    return table


def render_history(history: pd.DataFrame, *, width: int = 24, title: str | None = None,
                   max_width: int | None = None) -> Any:
    """The firm's gap over its years as a terminal chart.

    Parameters
    ----------
    history : pandas.DataFrame
        The firm's rows of one measure, by fiscal year (``fiscal_year, actual, target,
        band_low, band_high, gap, status, years_outside``).
    width : int, default=24
        Characters of the bar column; bars start at its middle (zero gap) and run left for
        gaps under the target, right for gaps over it, to an eighth of a character.
    title : str, optional
    max_width : int, optional
        The terminal's width: the band, then the target, then the actual column are left out
        and the bars shortened (to 10 characters at least) until the chart fits; years,
        status, gap and years outside are never cut.

    Returns
    -------
    rich.table.Table
    """
    from rich.table import Table
    from rich.text import Text

    def years_out(v: Any) -> str:
        return str(int(v)) if v == v else ""

    rows = list(history.itertuples(index=False))
    cols = [("fiscal_year", g.header("fiscal_year"), [str(int(r.fiscal_year)) for r in rows]),
            ("status", g.header("status"), [str(r.status) for r in rows]),
            ("actual", g.header("actual"), [g.pct(r.actual) for r in rows]),
            ("target", g.header("target"), [g.pct(r.target) for r in rows]),
            ("band", g.header("band"),
             [f"{g.pct(r.band_low)}-{g.pct(r.band_high)}" for r in rows])]
    tail = [("gap", g.header("gap"), [g.pp(r.gap) for r in rows]),
            ("years_outside", g.label("years_outside"), [years_out(r.years_outside)
                                                         for r in rows])]

    def natural(col: tuple[str, str, list[str]]) -> int:
        return max([len(col[1]), *(len(c) for c in col[2])])

    if max_width is not None:
        for drop in ("band", "target", "actual"):
            fixed = sum(natural(c) + 3 for c in cols + tail)  # each column and its separator
            if fixed + width + 1 <= max_width:
                break
            if fixed + 11 <= max_width:  # shorter bars are enough
                width = max_width - fixed - 1
                break
            cols = [c for c in cols if c[0] != drop]
        else:
            fixed = sum(natural(c) + 3 for c in cols + tail)
            width = max(10, min(width, max_width - fixed - 1))
    gaps = history["gap"].astype(float).to_numpy()
    top = float(np.nanmax(np.abs(gaps))) if np.isfinite(gaps).any() else 0.0
    half = width // 2
    scale = half / top if top > 0 else 0.0
    table = Table(title=Text(title) if title else None, show_edge=False, pad_edge=False)
    for key, head, cells in cols:
        table.add_column(head, justify="left" if key in ("fiscal_year", "status") else "right",
                         no_wrap=True, min_width=max(len(c) for c in cells) if cells else None)
    table.add_column("", no_wrap=True, min_width=width + 1)
    for _key, head, cells in tail:
        table.add_column(head, justify="right", no_wrap=True,
                         min_width=max(len(c) for c in cells) if cells else None)
    for i, r in enumerate(rows):
        size = abs(float(r.gap)) * scale if math.isfinite(float(r.gap)) else 0.0
        full, eighths = divmod(int(round(size * 8)), 8)
        body = "█" * full + (_EIGHTHS[eighths] if eighths else "")
        if float(r.gap) < 0:
            bar = Text(" " * max(half - len(body), 0)).append(body, style="green")
            bar.append("│", style="dim")
        else:
            bar = Text(" " * half + "│", style="dim").append(body, style="red")
        table.add_row(*(c[2][i] for c in cols), bar, *(c[2][i] for c in tail))
    return table
