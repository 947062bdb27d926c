"""Driver steps (report.terminal) and the charts (report.plots)."""

from __future__ import annotations

import xml.etree.ElementTree as ET

import matplotlib
import numpy as np
import pandas as pd
import pytest
from _report_data import make_outputs
from rich.console import Console

from levgap.errors import ConfigError, LevgapError
from levgap.report import plots
from levgap.report.terminal import STEP_COLUMNS, driver_steps, render_steps


@pytest.fixture(scope="module")
def outputs():
    return make_outputs(30, 3, seed=5)


def _row(tables, firm="F00007", year=2017, measure="book"):
    t = tables["targets"]
    return t[(t["firm_id"] == firm) & (t["fiscal_year"] == year)
             & (t["measure"] == measure)].iloc[0]


@pytest.mark.parametrize("seed", [0, 1, 2])
def test_driver_steps_add_up(seed):
    tables, _ = make_outputs(20, 3, seed=seed)
    for _, row in tables["targets"].sample(8, random_state=seed).iterrows():
        steps = driver_steps(row, tables["drivers"])
        assert tuple(steps.columns) == STEP_COLUMNS
        assert list(steps["step"]) == list(range(len(steps)))
        labels = list(steps["label"])
        assert labels[:2] == ["Peer median", "Peers' offset"]
        assert labels[-3:] == ["Target", "Unexplained gap", "Actual"]
        assert labels[2:-3] == ["tangibility", "profitability", "earnings_volatility", "size",
                                "market_to_book"]
        np.testing.assert_allclose(steps["end"] - steps["start"], steps["delta"], atol=1e-15)
        levels = steps[steps["kind"] == "level"]
        assert (levels["start"] == 0).all()
        changes = steps[steps["kind"] == "change"]
        # Each change starts where the previous step ended: a chain from median to actual.
        ends = steps["end"].to_numpy()
        for i in changes.index:
            assert steps.loc[i, "start"] == pytest.approx(ends[i - 1], abs=1e-12)
        assert steps.loc[1, "start"] == pytest.approx(row["peer_median"])
        assert steps.iloc[-4]["end"] == pytest.approx(row["target"], abs=1e-9)
        assert changes["delta"].sum() == pytest.approx(row["actual"] - row["peer_median"],
                                                       abs=1e-9)
        assert steps.iloc[-2]["delta"] == pytest.approx(row["gap"], abs=1e-12)


def test_driver_steps_errors(outputs):
    tables, _ = outputs
    row = _row(tables)
    with pytest.raises(LevgapError, match=r"drivers must hold rows for firm F00007 in 2017 "
                                          r"\(book\); got none"):
        driver_steps(row, tables["drivers"].iloc[:0])
    broken = tables["drivers"].copy()
    broken["contribution"] += 0.01
    with pytest.raises(LevgapError, match=r"must sum to target - peer_target"):
        driver_steps(row, broken)


def test_render_steps_in_the_terminal(outputs):
    tables, _ = outputs
    row = _row(tables)
    steps = driver_steps(row, tables["drivers"])
    console = Console(record=True, width=110, color_system=None)
    console.print(render_steps(steps, title="[bold]F00007[/bold] <b>"))
    text = console.export_text()
    assert "[bold]F00007[/bold] <b>" in text  # markup in titles is shown, not interpreted
    for label in steps["label"]:
        assert label in text
    assert f"{row['actual'] * 100:.1f}" in text
    assert f"{row['gap'] * 100:+.1f}" in text
    assert "█" in text


def test_plot_steps_png_and_svg(outputs, tmp_path):
    tables, _ = outputs
    steps = driver_steps(_row(tables), tables["drivers"])
    png = plots.plot_steps(steps, tmp_path / "s.PNG", title="Cost $5$ Ltd")
    assert png.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    svg = plots.plot_steps(steps, tmp_path / "s.svg", title="Alpha </svg> & $x$ _co")
    text = svg.read_text(encoding="utf-8")
    root = ET.fromstring(text)  # well-formed: the title's markup is escaped
    strings = " ".join(t.text or "" for t in root.iter("{http://www.w3.org/2000/svg}text"))
    assert "Alpha </svg> & $x$ _co" in strings  # drawn literally, not as mathtext
    with pytest.raises(ConfigError, match=r"plot file must end in .png or .svg; got 's.pdf'"):
        plots.plot_steps(steps, tmp_path / "s.pdf")
    assert not (tmp_path / "s.pdf").exists()


def test_charts_leave_matplotlib_state_alone(outputs):
    tables, _ = outputs
    before = dict(matplotlib.rcParams)
    backend = matplotlib.get_backend()
    plots.figure_svg(plots.scatter_figure(tables["targets"], ["book", "market"]), key="a")
    plots.figure_svg(plots.gap_figure(tables["targets"], ["book"]), key="b")
    plots.figure_svg(plots.coefficient_figure(tables["coefficients"]), key="c")
    assert matplotlib.get_backend() == backend
    assert dict(matplotlib.rcParams) == before


def test_figure_svg_prefixes_ids(outputs):
    tables, _ = outputs
    a = plots.figure_svg(plots.gap_figure(tables["targets"], ["book"]), key="one")
    b = plots.figure_svg(plots.gap_figure(tables["targets"], ["book"]), key="two")
    assert a.startswith("<svg") and b.startswith("<svg")
    ids_a = {e.get("id") for e in ET.fromstring(a).iter() if e.get("id")}
    ids_b = {e.get("id") for e in ET.fromstring(b).iter() if e.get("id")}
    assert ids_a and not ids_a & ids_b
    assert all(i.startswith("one-") for i in ids_a)
    assert 'clip-path="url(#one-' in a or "url(#" not in a


def test_scatter_samples_deterministically():
    frame = pd.DataFrame({"x": np.arange(10_000)})
    a = plots.sample_rows(frame, 500)
    b = plots.sample_rows(frame, 500)
    assert len(a) == 500 and a.index.equals(b.index)
    assert a["x"].is_monotonic_increasing
    assert plots.sample_rows(frame, 20_000) is frame


def test_industry_labels_starting_with_underscore_stay_in_legend(outputs):
    tables, _ = outputs
    t = tables["targets"].copy()
    t["industry"] = np.where(t["industry"] == "2834", "_pharma", t["industry"])
    svg = plots.figure_svg(plots.scatter_figure(t, ["book"]), key="u")
    assert "_pharma" in svg


def test_svg_text_cannot_break_out(outputs):
    tables, _ = outputs
    t = tables["targets"].copy()
    hostile = "x --> <!-- y ]]> <![CDATA[ z </svg><script>alert(1)</script>"
    t["industry"] = t["industry"].replace({"2834": hostile})
    svg = plots.figure_svg(plots.scatter_figure(t, ["book"]), key="h")
    root = ET.fromstring(svg)  # still one well-formed element
    assert root.tag == "{http://www.w3.org/2000/svg}svg"
    assert "<script" not in svg and "<!--" not in svg and "<![CDATA[" not in svg
    texts = [e.text for e in root.iter("{http://www.w3.org/2000/svg}text")]
    assert hostile in texts
