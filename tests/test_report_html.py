"""The HTML report: self-contained, escaped, complete, small and quick on large panels."""

from __future__ import annotations

import re
import xml.etree.ElementTree as ET
from html.parser import HTMLParser

import pandas as pd
import pytest
from _report_data import NASTY_NAMES, make_outputs

from levgap.errors import OutputError
from levgap.report.html import (
    CAUTION,
    ReportOptions,
    industry_table,
    render_report,
    top_firms,
    write_report,
)


@pytest.fixture(scope="module")
def outputs():
    return make_outputs(60, 4, seed=1)


@pytest.fixture(scope="module")
def page(outputs):
    tables, manifest = outputs
    return render_report(tables, manifest)


class _Tags(HTMLParser):
    def __init__(self) -> None:
        super().__init__()
        self.tags: list[tuple[str, dict]] = []
        self.text: list[str] = []

    def handle_starttag(self, tag, attrs):
        self.tags.append((tag, dict(attrs)))

    def handle_data(self, data):
        self.text.append(data)


def test_writes_report_html(tmp_path, outputs):
    tables, manifest = outputs
    path = write_report(tables, manifest, tmp_path / "out")
    assert path == tmp_path / "out" / "report.html"
    assert path.read_text(encoding="utf-8").startswith("<!DOCTYPE html>")
    # no temporary file left; the marker records the report as levgap's
    assert sorted(p.name for p in path.parent.iterdir()) == [".levgap-output", "report.html"]


def test_self_contained_no_network(page):
    parser = _Tags()
    parser.feed(page)
    for tag, attrs in parser.tags:
        assert tag not in {"link", "iframe", "object", "embed"}, tag
        for name in ("src", "href", "xlink:href"):
            value = attrs.get(name)
            if value is not None:
                assert value.startswith(("#", "data:")), (tag, name, value[:60])
    assert "@import" not in page
    assert not re.search(r"url\(\s*['\"]?https?:", page)


def test_at_least_five_charts_each_valid_svg(page):
    svgs = re.findall(r"<svg\b.*?</svg>", page, flags=re.S)
    assert len(svgs) >= 5
    assert page.count("<svg") == page.count("</svg>") == len(svgs)
    for svg in svgs:
        ET.fromstring(svg)  # every chart is well-formed XML: text inside is escaped
    ids = re.findall(r'\bid="([^"]+)"', page)
    assert len(ids) == len(set(ids)), "element ids must be unique across inline charts"


def test_text_from_data_is_escaped(page):
    # Our two scripts (sortable tables, the firm table) are the only ones that run; the firm
    # table's data sit in blocks of types a browser never runs. Markup in names and
    # industries shows as text.
    scripts = re.findall(r"<script([^>]*)>", page)
    assert sorted(scripts) == ['', '', ' type="application/json" id="u-labels"',
                               ' type="application/octet-stream" id="u-data"'], scripts
    data = re.search(r'id="u-data">([^<]*)</script>', page).group(1)
    assert re.fullmatch(r"[A-Za-z0-9+/=]+", data)  # base64 only: nothing to break out with
    assert "<script>document.title" not in page
    assert "<img src=x" not in page
    assert "<b>Retail</b>" not in page and "<b>dup</b>" not in page
    assert "&lt;script&gt;document.title=&#39;pwned&#39;&lt;/script&gt;" in page
    assert "Alpha &lt;/svg&gt; Beta &amp; Co" in page
    assert "&lt;b&gt;Retail&lt;/b&gt;" in page  # in the tables and in the SVG legend
    parser = _Tags()
    parser.feed(page)
    assert not any(tag == "img" for tag, _ in parser.tags)
    assert not any(tag == "b" for tag, _ in parser.tags)


def test_contents(outputs, page):
    tables, manifest = outputs
    text = re.sub(r"\s+", " ", page)
    assert CAUTION in text
    assert "not investment, credit or legal advice" in text
    for needle in ("panels/&lt;odd&gt; name.csv", "clustered by firm", "80% of cross-fitted",
                   "Most over-levered", "Most under-levered", "Industries", "Coefficients",
                   "95% confidence", "From peer median to actual", "*** p &lt; 0.01"):
        assert needle in text, needle
    fit = tables["model_fit"].iloc[0]
    assert f"{fit['r2']:.3f}" in text and f"{fit['r2_oos']:.3f}" in text
    for term in tables["coefficients"]["term"].unique():
        assert f"<td>{term}</td>" in page
    # The top over-levered firm of the latest year leads its table.
    over, _ = top_firms(tables["targets"], "book", 2018, n=10)
    first = over.iloc[0]
    assert f"{first['gap'] * 100:+.1f}" in page


def test_top_firms_and_industry_table_by_hand():
    targets = pd.DataFrame({
        "firm_id": ["a", "b", "c", "d", "e", "a"],
        "fiscal_year": [2020, 2020, 2020, 2020, 2020, 2019],
        "measure": "book",
        "industry": ["x", "x", "x", "y", "y", "x"],
        "actual": [0.5, 0.25, 0.5, 0.125, 0.375, 0.875],
        "target": [0.25, 0.5, 0.5, 0.375, 0.125, 0.125],
        "status": ["over", "under", "within", "within", "over", "over"],
    })
    targets["gap"] = targets["actual"] - targets["target"]
    over, under = top_firms(targets, "book", 2020, n=2)
    assert list(over["firm_id"]) == ["a", "e"]  # +0.25 twice: ties broken by firm_id
    assert list(under["firm_id"]) == ["b", "d"]  # -0.25 twice
    ind = industry_table(targets, "book", 2020).set_index("industry")
    assert ind.loc["x", "firms"] == 3 and ind.loc["y", "firms"] == 2
    assert ind.loc["x", "median_actual"] == pytest.approx(0.5)
    assert ind.loc["x", "share_over"] == pytest.approx(1 / 3)
    assert ind.loc["x", "share_under"] == pytest.approx(1 / 3)
    assert ind.loc["y", "median_target"] == pytest.approx(0.25)


def test_deterministic(outputs, page):
    tables, manifest = outputs
    assert render_report(tables, manifest) == page  # `page` rendered the same tables before


def test_missing_table_is_an_output_error(outputs):
    tables, manifest = outputs
    partial = {k: v for k, v in tables.items() if k != "drivers"}
    with pytest.raises(OutputError, match=r"report tables must include .*got no \['drivers'\]"):
        render_report(partial, manifest)


def test_names_with_markup_reach_the_step_charts(outputs):
    tables, manifest = outputs
    targets = tables["targets"].copy()
    # Make the firm with the markup name the most over-levered one in the latest year.
    mask = targets["firm_name"] == NASTY_NAMES[1]
    targets.loc[mask, "actual"] += 0.9
    targets.loc[mask, "gap"] += 0.9
    page = render_report({**tables, "targets": targets}, manifest,
                         options=ReportOptions(step_firms=1))
    assert "<figcaption>Alpha &lt;/svg&gt; Beta &amp; Co" in page


@pytest.mark.slow
def test_large_panel_is_capped_and_small(tmp_path):
    # Speed is measured in benchmark/, not here (about 2.5 s for this size on 2 cores).
    tables, manifest = make_outputs(10_000, 10, seed=2)  # 100k firm-years, 1M driver rows
    path = write_report(tables, manifest, tmp_path)
    size = path.stat().st_size
    page = path.read_text(encoding="utf-8")
    assert "sample of 4,000 of 100,000" in page
    data = len(re.search(r'id="u-data">([^<]*)</script>', page).group(1))
    assert size - data < 1_500_000, size - data  # the page around the firm table's data


def test_build_report_from_written_outputs(tmp_path, outputs):
    from levgap.report.html import build_report
    from levgap.report.tables import write_tables

    tables, manifest = outputs
    out = tmp_path / "run"
    write_tables(tables, manifest, out)
    path = build_report(out)
    assert path == out / "report.html"
    page = path.read_text(encoding="utf-8")
    # Read back from CSV, the neutralised formula keeps its apostrophe and markup stays text.
    assert "&lt;script&gt;document.title" in page and "<script>document.title" not in page
    assert page.count("<svg") >= 5
    # The report joined the run; a later run into the folder that writes no report removes
    # it (it would describe the previous run), instead of refusing it as a foreign file.
    import json

    run = json.loads((out / "run.json").read_text(encoding="utf-8"))
    assert "report.html" in run["files"]
    assert f'<meta name="levgap-run-id" content="{run["run_id"]}">' in page
    write_tables(tables, manifest, out)
    assert not (out / "report.html").exists()


def test_build_report_without_outputs_is_an_output_error(tmp_path):
    from levgap.report.html import build_report

    with pytest.raises(OutputError, match="run.json"):
        build_report(tmp_path)


def test_cli_report_rebuilds_and_records_the_file(tmp_path, outputs):
    from typer.testing import CliRunner

    from levgap.cli import app
    from levgap.outputs import read_marker
    from levgap.report.tables import write_tables

    tables, manifest = outputs
    out = tmp_path / "run"
    write_tables(tables, manifest, out)  # a run written without its report
    result = CliRunner().invoke(app, ["report", str(out)])
    assert result.exit_code == 0, result.output
    assert "Report written to" in result.output
    assert (out / "report.html").stat().st_size > 10_000
    marker = read_marker(out)
    assert marker.records["report.html"].kind == "output"
    write_tables(tables, manifest, out)  # a later run into the folder is not refused
    missing = CliRunner().invoke(app, ["report", str(tmp_path / "nothing")])
    assert missing.exit_code == 2
    assert "must be a folder written by `levgap analyze`; got no such folder" in missing.output
    assert "Traceback" not in missing.output
    help_text = CliRunner().invoke(app, ["report", "--help"]).output
    assert "Example: levgap report" in help_text


def test_progress_reaches_its_total(outputs):
    tables, manifest = outputs
    calls = []
    render_report(tables, manifest, progress=lambda stage, done, total: calls.append(
        (stage, done, total)))
    assert calls and all(stage == "report" for stage, _, _ in calls)
    dones = [d for _, d, _ in calls]
    assert dones == sorted(dones) and calls[-1][1] == calls[-1][2]


def test_one_measure_blank_names_and_missing_values():
    tables, manifest = make_outputs(12, 2, seed=8, measures=("book",))
    targets = tables["targets"].copy()
    targets["firm_name"] = ""
    targets.loc[targets.index[:3], ["gap", "gap_z", "debt_to_target"]] = float("nan")
    manifest = {k: v for k, v in manifest.items() if k not in ("counts", "options", "inputs")}
    page = render_report({**tables, "targets": targets}, manifest)
    assert "Book leverage, fiscal year 2016" in page and "Market leverage" not in page
    assert "in-memory panel" in page and "clustered by not recorded" in page
    assert page.count("<svg") >= 5
    empty = {**tables, "targets": targets.iloc[:0], "drivers": tables["drivers"].iloc[:0],
             "coefficients": tables["coefficients"].iloc[:0]}
    assert "Leverage against industry peers" in render_report(empty, manifest)


def test_fabricated_outputs_use_the_real_codes(outputs):
    from levgap.codes import ANALYSIS_FLAGS, ANALYSIS_REASONS, FLAGS, REASONS

    tables, manifest = outputs
    assert set(tables["exclusions"]["reason"]) <= {*REASONS, *ANALYSIS_REASONS,
                                                   "no_market_equity"}
    flags = {f for cell in tables["targets"]["flags"] for f in cell.split(";") if f}
    assert flags and flags <= {*FLAGS, *ANALYSIS_FLAGS}
    assert set(manifest["counts"]["by_reason"]) <= set(REASONS)


@pytest.mark.slow
def test_every_firm_of_50000_fits_a_page_under_10_mb():
    """Issue 13's size goal: 50,000 firms of the reported year, ten years of history and both
    measures (500,000 firm-years, 5 million driver rows), with every firm in the table."""
    from levgap.report.universe import decode, unpack

    tables, manifest = make_outputs(50_000, 10, seed=4)
    page = render_report(tables, manifest)
    size = len(page.encode("utf-8"))
    assert size < 10_000_000, size
    data = decode(re.search(r'id="u-data">([^<]*)</script>', page).group(1))
    assert len(data["ids"]) == 50_000
    for measure in ("book", "market"):
        part = data["m"][measure]
        assert len(unpack(part["a"])) == 50_000
        assert sum(unpack(part["hn"])) == 500_000  # every firm's ten years
