"""Charts of a levgap run, drawn with matplotlib without touching its global state.

Every function builds a :class:`matplotlib.figure.Figure` with its own Agg canvas (no
``pyplot``, no backend switch at import), so the report can be rendered inside notebooks,
servers and tests without side effects. Figures become inline SVG for the HTML report
(:func:`figure_svg`) or files (:func:`plot_steps`). Values are shown in percentage points.

Text taken from the data (firm names, industry codes) is passed through :func:`_plain` so
that matplotlib's mathtext never interprets it and legend labels starting with ``_`` are not
dropped; matplotlib's SVG writer escapes ``<``, ``>`` and ``&`` in text elements.
"""

from __future__ import annotations

import io
import re
from collections.abc import Iterable, Sequence
from contextlib import AbstractContextManager
from pathlib import Path
from typing import TYPE_CHECKING, Any

import numpy as np
import pandas as pd

from levgap import glossary as g
from levgap.errors import ConfigError

if TYPE_CHECKING:
    from matplotlib.figure import Figure

#: Colours: levels, rises and falls of the step charts; a colour-blind-safe qualitative set.
LEVEL, RISE, FALL = "#3b4b66", "#d95f02", "#1b9e77"
PALETTE = ("#4477aa", "#ee6677", "#228833", "#ccbb44", "#66ccee", "#aa3377", "#bb5566",
           "#004488", "#997700")
OTHER = "#bbbbbb"
_RC = {
    "font.size": 9, "axes.titlesize": 10, "axes.labelsize": 9, "axes.spines.top": False,
    "axes.spines.right": False, "svg.fonttype": "none", "legend.frameon": False,
    "font.family": ["DejaVu Sans", "sans-serif"],
}
_PLOT_FORMATS = {".png": "png", ".svg": "svg"}


def _plain(text: object) -> str:
    """Data text as matplotlib must receive it to draw it literally."""
    s = str(text).replace("\\", "\\\\").replace("$", r"\$")
    return " " + s if s.startswith("_") else s


def _figure(width: float, height: float, *, layout: str | None = "constrained") -> Figure:
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure

    fig = Figure(figsize=(width, height), layout=layout)
    FigureCanvasAgg(fig)
    return fig


def _rc() -> AbstractContextManager[Any]:
    import matplotlib as mpl

    return mpl.rc_context(_RC)


def figure_svg(fig: Figure, *, key: str) -> str:
    """Serialise a figure as an inline ``<svg>`` element.

    Parameters
    ----------
    fig : matplotlib.figure.Figure
    key : str
        Unique name of the figure within a page; salts the element ids matplotlib writes,
        so that several inline SVGs never share an id.

    Returns
    -------
    str
        The ``<svg>`` element, without XML prolog or doctype.
    """
    import matplotlib as mpl

    buf = io.StringIO()
    with mpl.rc_context({**_RC, "svg.hashsalt": key}):
        fig.savefig(buf, format="svg", dpi=110, metadata={"Date": None, "Creator": None})
    svg = buf.getvalue()
    svg = svg[svg.index("<svg"):]
    # matplotlib numbers its group ids per figure (figure_1, axes_1, ...); prefix every id and
    # every reference to it so that ids stay unique when several charts share one page.
    prefix = re.sub(r"[^A-Za-z0-9_-]", "-", key) + "-"
    svg = re.sub(r'\bid="([^"]+)"', lambda m: f'id="{prefix}{m.group(1)}"', svg)
    svg = re.sub(r'url\(#([^)]+)\)', lambda m: f"url(#{prefix}{m.group(1)})", svg)
    svg = re.sub(r'href="#([^"]+)"', lambda m: f'href="#{prefix}{m.group(1)}"', svg)
    # Drop the fixed pt size so CSS can scale the chart to the column; keep the viewBox.
    return re.sub(r'<svg([^>]*?) width="[^"]*" height="[^"]*"', r"<svg\1", svg, count=1)


def _pp(values: pd.Series | np.ndarray) -> np.ndarray:
    return np.asarray(values, dtype=float) * 100.0


# ----------------------------------------------------------------------------- step chart

def steps_figure(steps: pd.DataFrame, *, title: str | None = None) -> Figure:
    """Horizontal step chart (waterfall) of :func:`levgap.report.terminal.driver_steps`.

    Parameters
    ----------
    steps : pandas.DataFrame
        Columns ``label``, ``kind``, ``delta``, ``start``, ``end`` (ratio units).
    title : str, optional
        Figure title, drawn literally.

    Returns
    -------
    matplotlib.figure.Figure
    """
    n = len(steps)
    labels = [_plain(s) for s in steps["label"]]
    # Fixed margins instead of constrained layout: a report draws many of these and the
    # layout solver costs more than the drawing; label widths are estimated from their length.
    width_in, height_in = 6.4, 0.95 + 0.3 * n
    left = (0.35 + 0.066 * max(map(len, labels), default=8)) / width_in
    with _rc():
        fig = _figure(width_in, height_in, layout=None)
        fig.subplots_adjust(left=min(left, 0.5), right=0.97, bottom=0.5 / height_in,
                            top=1 - (0.38 if title else 0.12) / height_in)
        ax = fig.add_subplot()
        y = np.arange(n)[::-1]
        start, end = _pp(steps["start"]), _pp(steps["end"])
        left = np.minimum(start, end)
        width = np.abs(end - start)
        colours = [LEVEL if k == "level" else (RISE if d > 0 else FALL)
                   for k, d in zip(steps["kind"], steps["delta"], strict=True)]
        ax.barh(y, width, left=left, color=colours, height=0.62)
        for yi, e in zip(y[:-1], end[:-1], strict=True):
            ax.plot([e, e], [yi - 0.31, yi - 0.69], color="#888888", lw=0.6)
        span = max(float(np.max(np.abs(np.r_[start, end, 0.0]))), 1e-9)
        for yi, (k, d, e, l0, w) in enumerate(zip(steps["kind"], _pp(steps["delta"]), end,
                                                  left, width, strict=True)):
            label = f"{e:.1f}" if k == "level" else f"{d:+.1f}"
            ax.text(l0 + w + span * 0.015, y[yi], label, va="center", fontsize=8)
        ax.set_yticks(y, labels)
        ax.axvline(0, color="#444444", lw=0.6)
        ax.set_xlabel("leverage, percentage points")
        lo, hi = min(0.0, float(left.min())), max(0.0, float((left + width).max()))
        ax.set_xlim(lo - 0.03 * (hi - lo or 1), hi + 0.14 * (hi - lo or 1))
        ax.grid(axis="x", color="#eeeeee", lw=0.6)
        ax.set_axisbelow(True)
        if title:
            ax.set_title(_plain(title), loc="left")
    return fig


def plot_steps(steps: pd.DataFrame, path: str | Path, *, title: str | None = None,
               inputs: Iterable[str | Path] = ()) -> Path:
    """Write the step chart of one firm-year to a PNG or SVG file (chosen by suffix).

    Parameters
    ----------
    steps : pandas.DataFrame
        Output of :func:`levgap.report.terminal.driver_steps`.
    path : str or pathlib.Path
        Destination ending in ``.png`` or ``.svg``.
    title : str, optional
        Chart title.
    inputs : iterable of path, default=()
        Files never replaced (the run's files and inputs).

    Returns
    -------
    pathlib.Path
        The file written.

    Raises
    ------
    ConfigError
        If the suffix is neither ``.png`` nor ``.svg``.
    OutputError
        If the path is an input or a file levgap did not write (``levgap.outputs``).
    """
    from levgap.outputs import atomic_write_bytes, check_replaceable

    p = Path(path)
    fmt = _PLOT_FORMATS.get(p.suffix.lower())
    if fmt is None:
        raise ConfigError(
            f"plot file must end in .png or .svg; got {p.name!r}. Choose a name like steps.png."
        )
    check_replaceable(p, inputs)  # before drawing
    fig = steps_figure(steps, title=title)
    buf = io.BytesIO()
    with _rc():
        fig.savefig(buf, format=fmt, dpi=150, metadata={"Date": None} if fmt == "svg" else None)
    atomic_write_bytes(p, buf.getvalue(), inputs=inputs)
    return p


# ----------------------------------------------------------------------------- scatter

def _industry_colours(industries: pd.Series, limit: int = len(PALETTE)) -> dict[str, str]:
    top = industries.value_counts(sort=True).index[:limit]
    return {str(ind): PALETTE[i] for i, ind in enumerate(sorted(map(str, top)))}


def sample_rows(frame: pd.DataFrame, max_rows: int, *, seed: int = 0) -> pd.DataFrame:
    """Deterministic sample of at most ``max_rows`` rows, keeping their order.

    Parameters
    ----------
    frame : pandas.DataFrame
    max_rows : int
    seed : int, default=0
        Seed of the draw; the same frame and seed give the same rows.

    Returns
    -------
    pandas.DataFrame
        ``frame`` itself when it is small enough, else the sampled rows in their order.
    """
    if len(frame) <= max_rows:
        return frame
    rng = np.random.default_rng(seed)
    keep = np.sort(rng.choice(len(frame), size=max_rows, replace=False))
    return frame.iloc[keep]


def scatter_figure(
    targets: pd.DataFrame, measures: Sequence[str], *, max_points: int = 4000
) -> Figure:
    """Actual against target leverage, one panel per measure, coloured by industry.

    The shaded strip is the band at the run's coverage (median offsets of ``band_low`` and
    ``band_high`` from the target); points above it are over-levered, below it under-levered.
    Above ``max_points`` rows a deterministic sample is drawn (and noted in the title), and
    points are rasterised inside the SVG so the file stays small.

    Parameters
    ----------
    targets : pandas.DataFrame
    measures : sequence of str
    max_points : int, default=4000

    Returns
    -------
    matplotlib.figure.Figure
    """
    colours = _industry_colours(targets["industry"].astype(str))
    with _rc():
        fig = _figure(4.1 * len(measures) + 1.6, 4.0)
        axes = fig.subplots(1, len(measures), squeeze=False)[0]
        for ax, measure in zip(axes, measures, strict=True):
            rows = targets[targets["measure"] == measure].dropna(subset=["actual", "target"])
            shown = sample_rows(rows, max_points)
            x, y = _pp(shown["target"]), _pp(shown["actual"])
            ind = shown["industry"].astype(str)
            c = ind.map(colours).fillna(OTHER).to_numpy()
            order = np.argsort(c != OTHER, kind="stable")  # grey points below coloured ones
            ax.scatter(x[order], y[order], s=7, c=c[order], alpha=0.75, linewidths=0,
                       rasterized=len(shown) > 1500)
            both = np.r_[x, y] if len(x) else np.array([0.0, 100.0])
            lo, hi = float(np.nanmin(both)), float(np.nanmax(both))
            pad = 0.04 * (hi - lo or 1)
            grid = np.array([lo - pad, hi + pad])
            if len(rows):
                off_lo = float(np.nanmedian(_pp(rows["band_low"] - rows["target"])))
                off_hi = float(np.nanmedian(_pp(rows["band_high"] - rows["target"])))
                ax.fill_between(grid, grid + off_lo, grid + off_hi, color="#999999",
                                alpha=0.18, lw=0, label="band")
            ax.plot(grid, grid, color="#444444", lw=0.8)
            ax.set_xlim(*grid)
            ax.set_ylim(*grid)
            ax.set_aspect("equal", adjustable="box")
            note = f" (sample of {len(shown):,} of {len(rows):,})" if len(shown) < len(rows) else ""
            ax.set_title(f"{_plain(measure)} leverage{note}", loc="left")
            ax.set_xlabel(f"{g.label('target')}, %")
            ax.set_ylabel(f"{g.label('actual')}, %")
            ax.grid(color="#eeeeee", lw=0.6)
            ax.set_axisbelow(True)
        from matplotlib.lines import Line2D
        from matplotlib.patches import Patch

        handles = [Line2D([], [], ls="", marker="o", ms=5, color=col, label=_plain(ind))
                   for ind, col in colours.items()]
        if targets["industry"].astype(str).nunique() > len(colours):
            handles.append(Line2D([], [], ls="", marker="o", ms=5, color=OTHER,
                                  label="other industries"))
        handles.append(Patch(color="#999999", alpha=0.3, label="band"))
        fig.legend(handles=handles, loc="outside right center", title="industry",
                   fontsize=8)
    return fig


# ----------------------------------------------------------------------------- histogram

def gap_figure(targets: pd.DataFrame, measures: Sequence[str], *, bins: int = 40) -> Figure:
    """Distribution of gaps (actual - target) per measure, with the band's median edges.

    Parameters
    ----------
    targets : pandas.DataFrame
    measures : sequence of str
    bins : int, default=40

    Returns
    -------
    matplotlib.figure.Figure
    """
    with _rc():
        fig = _figure(4.1 * len(measures) + 1.6, 2.9)
        axes = fig.subplots(1, len(measures), squeeze=False)[0]
        for ax, measure in zip(axes, measures, strict=True):
            rows = targets[targets["measure"] == measure]
            gap = _pp(rows["gap"].dropna())
            if len(gap):
                counts, edges = np.histogram(gap, bins=bins)
                ax.stairs(counts, edges, fill=True, color="#7f9cc0", alpha=0.85)
                lo = float(np.nanmedian(_pp(rows["band_low"] - rows["target"])))
                hi = float(np.nanmedian(_pp(rows["band_high"] - rows["target"])))
                for edge in (lo, hi):
                    ax.axvline(edge, color=LEVEL, lw=0.9, ls="--")
                status = rows["status"].astype(str).value_counts(normalize=True)
                ax.text(0.98, 0.95,
                        "\n".join(f"{s} {status.get(s, 0.0) * 100:.0f}%"
                                  for s in ("over", "within", "under")),
                        transform=ax.transAxes, ha="right", va="top", fontsize=8)
            ax.set_title(f"{_plain(measure)}: {g.label('gap')}, {g.count(len(gap), 'firm-year')}",
                         loc="left")
            ax.set_xlabel(f"{g.label('gap')} = {g.label('actual')} - {g.label('target')}, "
                          "percentage points")
            ax.set_ylabel(g.label("n_obs"))
            ax.grid(axis="y", color="#eeeeee", lw=0.6)
            ax.set_axisbelow(True)
    return fig


# ----------------------------------------------------------------------------- coefficients

def coefficient_figure(coefficients: pd.DataFrame) -> Figure:
    """Estimates with 95% confidence intervals: one small panel per term, measures as rows.

    Each term has its own horizontal scale, because drivers are measured in different units
    (``size`` is a log, the others are ratios).

    Parameters
    ----------
    coefficients : pandas.DataFrame
        Columns ``measure``, ``term``, ``estimate``, ``ci_low``, ``ci_high``.

    Returns
    -------
    matplotlib.figure.Figure
    """
    coef = coefficients[coefficients["term"].astype(str) != "const"]
    terms = list(dict.fromkeys(coef["term"].astype(str)))
    measures = list(dict.fromkeys(coef["measure"].astype(str)))
    colour = {m: PALETTE[i % len(PALETTE)] for i, m in enumerate(measures)}
    with _rc():
        fig = _figure(6.4, 0.45 + (0.28 * len(measures) + 0.42) * max(len(terms), 1))
        axes = fig.subplots(max(len(terms), 1), 1, squeeze=False)[:, 0]
        for ax, term in zip(axes, terms, strict=False):  # no terms: one empty panel
            rows = coef[coef["term"].astype(str) == term]
            ys = np.arange(len(measures))[::-1]
            for yi, m in zip(ys, measures, strict=True):
                r = rows[rows["measure"].astype(str) == m]
                if r.empty:
                    continue
                est, lo, hi = (float(r[c].iloc[0]) for c in ("estimate", "ci_low", "ci_high"))
                ax.plot([lo, hi], [yi, yi], color=colour[m], lw=2.2, solid_capstyle="butt")
                ax.plot([est], [yi], "o", color=colour[m], ms=5, mec="white", mew=0.8)
            ax.axvline(0, color="#444444", lw=0.6)
            ax.set_yticks(ys, [_plain(m) for m in measures])
            ax.set_ylim(-0.7, len(measures) - 0.3)
            ax.set_title(_plain(term), loc="left", fontsize=9)
            ax.grid(axis="x", color="#eeeeee", lw=0.6)
            ax.set_axisbelow(True)
            ax.tick_params(axis="both", labelsize=8)
    return fig
