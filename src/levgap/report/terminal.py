"""Driver steps of one firm-year: from the peer median to the firm's actual ratio.

The steps split ``actual - peer_median`` into the peers' own offset
(``peer_target - peer_median``), each driver's contribution (these sum to
``target - peer_target``) and the unexplained gap (``actual - target``).
:func:`bridge_steps` builds them from plain values (``levgap explain`` imports no pandas);
:func:`driver_steps` from a ``drivers`` data frame. The same steps feed the terminal chart
here, the image in :func:`levgap.report.plots.plot_steps` and the HTML report. The charts take
columns by name: a dict of lists or a data frame.
"""

from __future__ import annotations

import math
from collections.abc import Iterable, Mapping, Sequence
from typing import TYPE_CHECKING, Any

from levgap import glossary as g
from levgap.errors import LevgapError

if TYPE_CHECKING:
    import pandas as pd

STEP_COLUMNS = ("step", "label", "kind", "delta", "start", "end")
_EIGHTHS = ("", "▏", "▎", "▍", "▌", "▋", "▊", "▉")
_TOLERANCE = 1e-6


def nansum(values: Iterable[float]) -> float:
    """The sum of the values that are not NaN (0 for none), as pandas' ``sum`` counts."""
    return math.fsum(v for v in map(float, values) if v == v)


def bridge_steps(target_row: Mapping[str, Any], drivers: Sequence[str],
                 contributions: Sequence[float]) -> dict[str, list[Any]]:
    """The steps from peer median to actual ratio of one firm-year and measure.

    Parameters
    ----------
    target_row : Mapping
        One row of ``targets`` (a dict or a pandas Series) with ``firm_id``, ``fiscal_year``,
        ``measure``, ``actual``, ``target``, ``peer_median`` and ``peer_target``.
    drivers, contributions : sequence
        Its drivers, in the order of the ``drivers`` table, and their contributions.

    Returns
    -------
    dict of str to list
        The columns ``STEP_COLUMNS``, one entry per step: ``step`` (0, 1, ...), ``label``,
        ``kind`` (``"level"`` for peer median, target and actual, which start at zero;
        ``"change"`` otherwise), ``delta`` (``end - start``), ``start`` and ``end``, in ratio
        units (0.05 = 5 percentage points). Steps: peer median, peers' offset, each driver,
        target, unexplained gap, actual.

    Raises
    ------
    LevgapError
        If the firm-year has no drivers, or their contributions do not add up to
        ``target - peer_target``.
    """
    firm, year, measure = target_row["firm_id"], target_row["fiscal_year"], target_row["measure"]
    if not len(drivers):
        raise LevgapError(
            f"drivers must hold rows for firm {firm!s} in {int(year)} ({measure}); got none. "
            "Re-run levgap analyze so that drivers and targets come from the same run."
        )
    peer_median = float(target_row["peer_median"])
    peer_target = float(target_row["peer_target"])
    target = float(target_row["target"])
    actual = float(target_row["actual"])
    total = nansum(contributions)
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
    for name, value in zip(drivers, contributions, strict=True):
        steps.append((str(name), "change", level, level + float(value)))
        level += float(value)
    steps += [
        (_cap("target"), "level", 0.0, target),
        (_cap("unexplained"), "change", target, actual),
        (_cap("actual"), "level", 0.0, actual),
    ]
    return {"step": list(range(len(steps))), "label": [s[0] for s in steps],
            "kind": [s[1] for s in steps], "delta": [s[3] - s[2] for s in steps],
            "start": [s[2] for s in steps], "end": [s[3] for s in steps]}


def driver_steps(target_row: Mapping[str, Any], drivers: pd.DataFrame) -> pd.DataFrame:
    """:func:`bridge_steps` of one firm-year and measure, from a ``drivers`` data frame.

    Parameters
    ----------
    target_row : Mapping
        One row of ``targets`` (see :func:`bridge_steps`).
    drivers : pandas.DataFrame
        The ``drivers`` table, whole or already cut to this firm-year and measure.

    Returns
    -------
    pandas.DataFrame
        One row per step, columns ``STEP_COLUMNS``.

    Raises
    ------
    LevgapError
        As :func:`bridge_steps`.
    """
    import pandas as pd

    firm, year, measure = target_row["firm_id"], target_row["fiscal_year"], target_row["measure"]
    rows = drivers[
        (drivers["firm_id"].astype(str) == str(firm))
        & (drivers["fiscal_year"].astype("int64") == int(year))
        & (drivers["measure"].astype(str) == str(measure))
    ]
    steps = bridge_steps(target_row, rows["driver"].astype(str).tolist(),
                         rows["contribution"].astype(float).tolist())
    return pd.DataFrame(steps, columns=list(STEP_COLUMNS))


def _cap(key: str) -> str:
    label = g.label(key)
    return label[:1].upper() + label[1:]


def render_steps(steps: Mapping[str, Sequence[Any]], *, width: int = 40,
                 title: str | None = None) -> Any:
    """Draw driver steps as a horizontal bar chart for the terminal.

    Parameters
    ----------
    steps : mapping of str to sequence
        Output of :func:`bridge_steps` or :func:`driver_steps` (columns ``label``, ``kind``,
        ``delta``, ``start``, ``end``).
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

    ends = [float(v) for v in (*steps["start"], *steps["end"]) if v == v]
    lo = min(0.0, min(ends, default=0.0))
    hi = max(0.0, max(ends, default=0.0))
    scale = width / (hi - lo) if hi > lo else 1.0

    table = Table(title=Text(title) if title else None, show_edge=False, pad_edge=False)
    table.add_column(g.label("step"), no_wrap=True)
    table.add_column("", no_wrap=True, min_width=width + 1)
    table.add_column(g.UNIT_PP, justify="right", no_wrap=True)
    for label, kind, delta, start, end in zip(steps["label"], steps["kind"], steps["delta"],
                                              steps["start"], steps["end"], strict=True):
        if kind == "level":
            style, value = "bold blue", g.number(end * 100, 1)
        else:
            style = "red" if delta > 0 else "green"
            value = g.pp(delta)
        # The left edge sits on a character cell; the right edge is drawn to an eighth of one.
        left = int(round((min(start, end) - lo) * scale))
        size = (max(start, end) - lo) * scale - left
        full, eighths = divmod(max(int(round(size * 8)), 0), 8)
        bar = Text(" " * left)
        body = "█" * full + (_EIGHTHS[eighths] if eighths else "")
        if not body and delta != 0:
            body = "▏"  # a change too small to draw still shows where it sits
        bar.append(body or "│", style=style if body else "dim")
        table.add_row(Text(str(label)), bar, value)
    return table


def render_history(history: Mapping[str, Sequence[Any]], *, width: int = 24,
                   title: str | None = None, max_width: int | None = None) -> Any:
    """The firm's gap over its years as a terminal chart.

    Parameters
    ----------
    history : mapping of str to sequence
        The firm's rows of one measure, by fiscal year: the columns ``fiscal_year, actual,
        target, band_low, band_high, gap, status, years_outside`` (a dict of lists or a data
        frame).
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

    h = {k: list(history[k]) for k in ("fiscal_year", "status", "actual", "target",
                                       "band_low", "band_high", "gap", "years_outside")}
    cols = [("fiscal_year", g.header("fiscal_year"), [str(int(y)) for y in h["fiscal_year"]]),
            ("status", g.header("status"), [str(v) for v in h["status"]]),
            ("actual", g.header("actual"), [g.pct(v) for v in h["actual"]]),
            ("target", g.header("target"), [g.pct(v) for v in h["target"]]),
            ("band", g.header("band"), [f"{g.pct(lo)}-{g.pct(hi)}" for lo, hi in
                                        zip(h["band_low"], h["band_high"], strict=True)])]
    tail = [("gap", g.header("gap"), [g.pp(v) for v in h["gap"]]),
            ("years_outside", g.label("years_outside"), [years_out(v)
                                                         for v in h["years_outside"]])]

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
    gaps = [float(v) for v in h["gap"]]
    top = max(abs(v) for v in gaps if v == v) if any(map(math.isfinite, gaps)) else 0.0
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
    for i, gap in enumerate(gaps):
        size = abs(gap) * scale if math.isfinite(gap) else 0.0
        full, eighths = divmod(int(round(size * 8)), 8)
        body = "█" * full + (_EIGHTHS[eighths] if eighths else "")
        if gap < 0:
            bar = Text(" " * max(half - len(body), 0)).append(body, style="green")
            bar.append("│", style="dim")
        else:
            bar = Text(" " * half + "│", style="dim").append(body, style="red")
        table.add_row(*(c[2][i] for c in cols), bar, *(c[2][i] for c in tail))
    return table
