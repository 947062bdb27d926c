"""Small inline SVG charts without a plotting library (the deal page renders in milliseconds).

A :class:`Canvas` maps data to pixels and collects SVG elements: lines, shaded areas between
two lines, bars, vertical markers, points, axes with round ticks and a legend. Every text is
escaped; the output is a ``<svg>`` element to embed in a page.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass, field
from html import escape

PALETTE = ("#3b4b66", "#d95f02", "#1b9e77", "#7570b3", "#e7298a", "#66a61e", "#a6761d")


def nice_ticks(lo: float, hi: float, count: int = 5) -> list[float]:
    """Round tick values covering ``[lo, hi]`` (steps of 1, 2 or 5 times a power of ten)."""
    if not (math.isfinite(lo) and math.isfinite(hi)):
        return []
    if hi <= lo:
        hi = lo + (abs(lo) or 1.0)
    raw = (hi - lo) / max(count, 1)
    power = 10.0 ** math.floor(math.log10(raw))
    step = next(m * power for m in (1.0, 2.0, 5.0, 10.0) if m * power >= raw)
    first, last = math.floor(lo / step + 1e-9), math.ceil(hi / step - 1e-9)
    return [round(k * step, 12) for k in range(first, last + 1)]


@dataclass(slots=True)
class Canvas:
    """A chart area with data ranges; call the drawing methods, then :meth:`svg`.

    Parameters
    ----------
    x_range, y_range : (float, float)
        Data ranges; widened to round ticks.
    width, height : int
        Pixels.
    title : str
        Accessible title (``<title>``) and caption above the plot.
    """

    x_range: tuple[float, float]
    y_range: tuple[float, float]
    width: int = 520
    height: int = 260
    title: str = ""
    margin: tuple[int, int, int, int] = (26, 14, 34, 62)  # top, right, bottom, left
    parts: list[str] = field(default_factory=list)
    legend: list[tuple[str, str, str]] = field(default_factory=list)

    def __post_init__(self) -> None:
        yt = nice_ticks(*self.y_range)
        if yt:
            self.y_range = (min(yt[0], self.y_range[0]), max(yt[-1], self.y_range[1]))

    def _legend_rows(self) -> list[list[tuple[int, tuple[str, str, str]]]]:
        rows: list[list[tuple[int, tuple[str, str, str]]]] = [[]]
        x = self.margin[3]
        for item in self.legend:
            size = 26 + 6 * len(item[2])
            if rows[-1] and x + size > self.width - self.margin[1]:
                rows.append([])
                x = self.margin[3]
            rows[-1].append((x, item))
            x += size
        return rows if rows[0] else []

    def x(self, v: float) -> float:
        """Pixel column of a data value."""
        lo, hi = self.x_range
        top, right, bottom, left = self.margin
        span = hi - lo or 1.0
        return left + (v - lo) / span * (self.width - left - right)

    def y(self, v: float) -> float:
        """Pixel row of a data value."""
        lo, hi = self.y_range
        top, right, bottom, left = self.margin
        span = hi - lo or 1.0
        return self.height - bottom - (v - lo) / span * (self.height - top - bottom)

    def _path(self, xs: Sequence[float], ys: Sequence[float]) -> str:
        pts = [f"{self.x(a):.1f},{self.y(b):.1f}" for a, b in zip(xs, ys, strict=True)
               if math.isfinite(a) and math.isfinite(b)]
        return " ".join(pts)

    def line(self, xs: Sequence[float], ys: Sequence[float], *, colour: str, label: str = "",
             dash: str = "", width: float = 2.0) -> None:
        """A line through the finite points."""
        pts = self._path(xs, ys)
        if not pts:
            return
        extra = f' stroke-dasharray="{dash}"' if dash else ""
        self.parts.append(f'<polyline fill="none" stroke="{colour}" stroke-width="{width}"'
                          f'{extra} points="{pts}"/>')
        if label:
            self.legend.append(("line", colour, label))

    def area(self, xs: Sequence[float], low: Sequence[float], high: Sequence[float], *,
             colour: str, label: str = "", opacity: float = 0.18) -> None:
        """A shaded area between two lines (points with a missing value are skipped)."""
        keep = [(a, lo, hi) for a, lo, hi in zip(xs, low, high, strict=True)
                if all(math.isfinite(v) for v in (a, lo, hi))]
        if not keep:
            return
        upper = " ".join(f"{self.x(a):.1f},{self.y(hi):.1f}" for a, _, hi in keep)
        lower = " ".join(f"{self.x(a):.1f},{self.y(lo):.1f}" for a, lo, _ in reversed(keep))
        self.parts.append(f'<polygon fill="{colour}" fill-opacity="{opacity}" stroke="none" '
                          f'points="{upper} {lower}"/>')
        if label:
            self.legend.append(("area", colour, label))

    def vspan(self, x0: float, x1: float, *, colour: str, label: str = "",
              opacity: float = 0.14) -> None:
        """A shaded vertical span between two x values, across the plot's height."""
        if not (math.isfinite(x0) and math.isfinite(x1)):
            return
        a, b = sorted((self.x(x0), self.x(x1)))
        top, _, bottom, _ = self.margin
        self.parts.append(f'<rect x="{a:.1f}" y="{top}" width="{max(b - a, 1.0):.1f}" '
                          f'height="{self.height - top - bottom}" fill="{colour}" '
                          f'fill-opacity="{opacity}"/>')
        if label:
            self.legend.append(("area", colour, label))

    def vline(self, v: float, *, colour: str, label: str = "", dash: str = "4 3") -> None:
        """A dashed vertical marker."""
        if not math.isfinite(v):
            return
        top, _, bottom, _ = self.margin
        self.parts.append(f'<line x1="{self.x(v):.1f}" x2="{self.x(v):.1f}" y1="{top}" '
                          f'y2="{self.height - bottom}" stroke="{colour}" stroke-width="1.5" '
                          f'stroke-dasharray="{dash}"/>')
        if label:
            self.legend.append(("line", colour, label))

    def point(self, x: float, y: float, *, colour: str, label: str = "", r: float = 4.0,
              tip: str = "") -> None:
        """A point with a hover text."""
        if not (math.isfinite(x) and math.isfinite(y)):
            return
        title = f"<title>{escape(tip)}</title>" if tip else ""
        self.parts.append(f'<circle cx="{self.x(x):.1f}" cy="{self.y(y):.1f}" r="{r}" '
                          f'fill="{colour}" stroke="#fff" stroke-width="1">{title}</circle>')
        if label:
            self.legend.append(("point", colour, label))

    def bar(self, x0: float, x1: float, y0: float, y1: float, *, colour: str,
            tip: str = "") -> None:
        """A bar from ``(x0, y0)`` to ``(x1, y1)`` with a hover text."""
        if not all(math.isfinite(v) for v in (x0, x1, y0, y1)):
            return
        a, b = sorted((self.x(x0), self.x(x1)))
        c, d = sorted((self.y(y0), self.y(y1)))
        title = f"<title>{escape(tip)}</title>" if tip else ""
        self.parts.append(f'<rect x="{a:.1f}" y="{c:.1f}" width="{max(b - a, 1.0):.1f}" '
                          f'height="{max(d - c, 1.0):.1f}" fill="{colour}">{title}</rect>')

    def svg(self, *, x_ticks: Sequence[float] | None = None,
            x_labels: Sequence[str] | None = None, y_format: str = "{:.0%}",
            x_format: str = "{:,.0f}", x_title: str = "", y_title: str = "",
            rotate: bool = False) -> str:
        """The chart as an ``<svg>`` element (axes, ticks, legend and the drawn parts).

        The legend wraps onto as many rows as it needs above the plot (the plot moves down);
        ``rotate`` slants the x labels so that long ones do not overlap.
        """
        rows = self._legend_rows()
        top, right, bottom, left = self.margin
        grow = 16 * max(len(rows) - 1, 0)  # the plot moves down below a legend of many rows
        w, h = self.width, self.height
        out = [f'<svg xmlns="http://www.w3.org/2000/svg" viewBox="0 0 {w} {h + grow}" '
               f'role="img" aria-label="{escape(self.title)}" font-size="11" '
               f'font-family="system-ui,sans-serif"><title>{escape(self.title)}</title>',
               f'<g transform="translate(0 {grow})">']
        for t in nice_ticks(*self.y_range):
            if self.y_range[0] - 1e-12 <= t <= self.y_range[1] + 1e-12:
                yy = self.y(t)
                out.append(f'<line x1="{left}" x2="{w - right}" y1="{yy:.1f}" y2="{yy:.1f}" '
                           f'stroke="#e3e7ec"/><text x="{left - 6}" y="{yy + 4:.1f}" '
                           f'text-anchor="end" fill="#5b6675">{escape(y_format.format(t))}'
                           "</text>")
        ticks = list(x_ticks) if x_ticks is not None else nice_ticks(*self.x_range)
        labels = list(x_labels) if x_labels is not None else [x_format.format(t) for t in ticks]
        for t, lab in zip(ticks, labels, strict=True):
            if self.x_range[0] - 1e-9 <= t <= self.x_range[1] + 1e-9:
                xx = self.x(t)
                if rotate:
                    yy = h - bottom + 12
                    out.append(f'<text x="{xx:.1f}" y="{yy}" text-anchor="end" fill="#5b6675" '
                               f'transform="rotate(-35 {xx:.1f} {yy})">{escape(lab)}</text>')
                else:
                    out.append(f'<text x="{xx:.1f}" y="{h - bottom + 15}" '
                               f'text-anchor="middle" fill="#5b6675">{escape(lab)}</text>')
        out.append(f'<line x1="{left}" x2="{w - right}" y1="{h - bottom}" y2="{h - bottom}" '
                   'stroke="#9aa3ad"/>')
        if x_title:
            out.append(f'<text x="{(left + w - right) / 2:.1f}" y="{h - 3}" '
                       f'text-anchor="middle" fill="#5b6675">{escape(x_title)}</text>')
        if y_title:
            out.append(f'<text x="12" y="{(top + h - bottom) / 2:.1f}" text-anchor="middle" '
                       f'fill="#5b6675" transform="rotate(-90 12 {(top + h - bottom) / 2:.1f})">'
                       f"{escape(y_title)}</text>")
        out.extend(self.parts)
        out.append("</g>")
        for r, row in enumerate(rows):
            y = 10 + 16 * r
            for x, (kind, colour, label) in row:
                mark = (f'<rect x="{x}" y="{y - 4}" width="12" height="8" fill="{colour}" '
                        'fill-opacity="0.35"/>' if kind == "area" else
                        f'<circle cx="{x + 6}" cy="{y}" r="4" fill="{colour}"/>'
                        if kind == "point" else
                        f'<line x1="{x}" x2="{x + 12}" y1="{y}" y2="{y}" stroke="{colour}" '
                        'stroke-width="2"/>')
                out.append(mark + f'<text x="{x + 16}" y="{y + 4}" fill="#1f2733">'
                           f"{escape(label)}</text>")
        out.append("</svg>")
        return "".join(out)
