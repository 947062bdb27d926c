"""Inline SVG charts of the deal page: round ticks, escaped text, wrapping legends."""

from __future__ import annotations

import math
import xml.etree.ElementTree as ET

from levgap.report.svg import Canvas, nice_ticks


def test_nice_ticks_cover_the_range_in_round_steps():
    assert nice_ticks(0.0, 0.537) == [0.0, 0.2, 0.4, 0.6]
    assert nice_ticks(-3.0, 917.0) == [-200.0, 0.0, 200.0, 400.0, 600.0, 800.0, 1000.0]
    assert nice_ticks(0.2, 0.2) == [0.2, 0.25, 0.3, 0.35, 0.4]
    assert nice_ticks(math.nan, 1.0) == []


def test_canvas_escapes_text_and_wraps_its_legend():
    c = Canvas((0.0, 10.0), (0.0, 1.0), width=300, title="<script>x</script> & co")
    for i in range(6):
        c.line([0.0, 10.0], [0.1 * i, 0.5], colour="#000", label=f"<b>series {i}</b>")
    c.point(5.0, math.nan, colour="#000", label="skipped")  # a missing value draws nothing
    svg = c.svg()
    root = ET.fromstring(svg)  # well-formed XML
    assert "<script>" not in svg and "&lt;script&gt;x&lt;/script&gt; &amp; co" in svg
    assert "&lt;b&gt;series 5&lt;/b&gt;" in svg and "skipped" not in svg
    # six entries do not fit one row of 300 pixels: the plot moves down below them
    assert root.attrib["viewBox"] != "0 0 300 260"
    assert 'transform="translate(0 ' in svg
