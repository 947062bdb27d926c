"""Descriptive statistics and the research commands on the command line."""

from __future__ import annotations

import csv
import io

import numpy as np
import pandas as pd
import pytest
from typer.testing import CliRunner

from levgap.cli import app
from levgap.describe import SUMMARY_COLUMNS, describe_sample, format_description
from levgap.estimation import sample_of


@pytest.fixture(scope="module")
def files(tmp_path_factory):
    from levgap.demo import make_panel

    root = tmp_path_factory.mktemp("describe")
    panel = make_panel(seed=43)
    panel = panel[panel["firm_id"].isin(sorted(panel["firm_id"].unique())[:120])]
    path = root / "panel.csv"
    panel.to_csv(path, index=False)
    return root, path, panel


def test_summary_equals_numpy(files) -> None:
    _, path, panel = files
    from levgap.ingest import read_panel

    sample = sample_of(read_panel(path))
    d = describe_sample(sample)
    assert tuple(d.summary.columns) == SUMMARY_COLUMNS
    s = d.summary.set_index(["variable", "version"])
    book = sample.loc[sample["in_book"] == 1, "book"].to_numpy()
    assert s.loc[("book", "as used"), "n"] == len(book)
    assert s.loc[("book", "as used"), "mean"] == pytest.approx(book.mean())
    assert s.loc[("book", "as used"), "p25"] == pytest.approx(np.percentile(book, 25))
    raw = sample["earnings_volatility_raw"].dropna().to_numpy()
    used = sample["earnings_volatility"].to_numpy()
    assert s.loc[("earnings_volatility", "raw"), "n"] == len(raw) < len(used)
    assert s.loc[("earnings_volatility", "raw"), "sd"] == pytest.approx(raw.std(ddof=1))
    assert s.loc[("earnings_volatility", "winsorised"), "p99"] == pytest.approx(
        np.percentile(used, 99))
    assert s.loc[("tangibility", "winsorised"), "max"] <= s.loc[("tangibility", "raw"), "max"]
    corr = sample[["book", "market", "tangibility"]].corr()
    assert d.correlations.loc["book", "tangibility"] == pytest.approx(
        corr.loc["book", "tangibility"])
    assert d.correlations.loc["market", "book"] == pytest.approx(corr.loc["market", "book"])


def test_formats(files) -> None:
    _, path, _ = files
    from levgap.ingest import read_panel

    d = describe_sample(sample_of(read_panel(path)))
    md = format_description(d, fmt="markdown")
    assert "| Tangibility | winsorised |" in md and "| Book leverage | as used |" in md
    assert "**Correlations**" in md and "&" not in md.replace("R&D", "")
    tex = format_description(d, fmt="latex")
    assert tex.count(r"\begin{tabular}") == 2 and r"\toprule" in tex
    rows = list(csv.reader(io.StringIO(format_description(d, fmt="csv"))))
    head = next(r for r in rows if r[:2] == ["Variable", "Version"])
    assert head[2:5] == ["N", "Mean", "SD"]
    prof = next(r for r in rows if r[:2] == ["Profitability", "raw"])
    float(prof[5])  # plain numbers, ASCII minus


def test_cli_research_commands(files) -> None:
    root, path, panel = files
    runner = CliRunner()
    out = root / "res"
    res = runner.invoke(app, ["analyze", str(path), "--out", str(out), "--sample", "--quiet",
                              "--no-report", "--model", "linear"])
    assert res.exit_code == 0, res.output
    sample = pd.read_csv(out / "sample.csv", dtype={"firm_id": str, "industry": str})
    excluded = pd.read_csv(out / "exclusions.csv", keep_default_na=False)
    assert len(sample) + (excluded["measure"] == "").sum() == len(panel)
    assert {"tangibility", "tangibility_raw", "in_book", "in_market"} <= set(sample.columns)
    from_run = runner.invoke(app, ["describe", str(out), "--format", "markdown"])
    from_panel = runner.invoke(app, ["describe", str(path), "--format", "markdown"])
    assert from_run.exit_code == 0 and from_panel.exit_code == 0, from_run.output
    assert from_run.output == from_panel.output
    # a folder without sample.csv: its input panel is read again, checked by its sha256
    out2 = root / "res2"
    assert runner.invoke(app, ["analyze", str(path), "--out", str(out2), "--quiet",
                               "--no-report", "--model", "linear"]).exit_code == 0
    again = runner.invoke(app, ["describe", str(out2)])
    assert again.exit_code == 0 and again.output == from_panel.output
    written = runner.invoke(app, ["describe", str(path), "--format", "latex", "-o",
                                  str(root / "d.tex")])
    assert written.exit_code == 0 and (root / "d.tex").read_text().count("tabular") == 4
    refused = runner.invoke(app, ["describe", str(path), "-o", str(path)])
    assert refused.exit_code == 2 and "Traceback" not in refused.output
    # analyze refuses firm effects and Fama-MacBeth in one line, naming levgap estimate
    fe = runner.invoke(app, ["analyze", str(path), "--out", str(root / "x"), "--effects",
                             "firm,year"])
    assert fe.exit_code == 2 and "levgap estimate" in fe.output
    assert len(fe.output.strip().splitlines()) == 1
    bad = runner.invoke(app, ["estimate", str(path), "--out", str(root / "y"), "--effects",
                              "firms"])
    assert bad.exit_code == 2 and "effects must be one of" in bad.output
    imr = runner.invoke(app, ["estimate", str(path), "--out", str(root / "z"), "--drivers",
                              "tangibility,industry_median_leverage"])
    assert imr.exit_code == 2
    assert "industry_median_leverage with industry effects" in imr.output
    ok = runner.invoke(app, ["estimate", str(path), "--out", str(root / "z"), "--drivers",
                             "tangibility,profitability,industry_median_leverage",
                             "--effects", "year", "--estimator", "fama-macbeth", "--sample"])
    assert ok.exit_code == 0, ok.output
    assert (root / "z" / "sample.csv").exists()
    coef = pd.read_csv(root / "z" / "coefficients.csv")
    assert coef["n_years"].min() >= 2 and set(coef["model"]) == {"fama-macbeth"}
    assert runner.invoke(app, ["adjust", str(root / "z")]).exit_code == 2
    for cmd in ("estimate", "describe", "adjust", "table"):
        assert "Example: levgap" in runner.invoke(app, [cmd, "--help"]).output
