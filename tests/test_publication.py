"""Publication tables: every driver with a readable label and its expected sign, standard
errors in parentheses, marks with their legend, what each column absorbed, N and R²;
LaTeX (booktabs) that pdflatex compiles, Markdown without HTML entities, CSV with numbers."""

from __future__ import annotations

import csv
import io
import re
import shutil
import subprocess

import pandas as pd
import pytest
from _report_data import DRIVERS, make_outputs
from typer.testing import CliRunner

from levgap.cli import app
from levgap.definitions import label
from levgap.errors import ConfigError
from levgap.report.publication import RunTables, comparison_table, regression_table
from levgap.report.texttables import latex_escape, markdown_escape, number


@pytest.fixture(scope="module")
def run():
    tables, manifest = make_outputs(30, 3, seed=6)
    return tables["coefficients"], tables["model_fit"], manifest


def _split_latex_row(line: str) -> list[str]:
    body = line.rstrip()
    assert body.endswith(r"\\"), line
    return re.split(r"(?<!\\)&", body[:-2])


def test_latex_is_a_booktabs_tabular_with_every_driver(run):
    coef, fit, manifest = run
    tex = regression_table(coef, fit, manifest, fmt="latex")
    lines = tex.strip().splitlines()
    assert lines[0].startswith("%") and "booktabs" in lines[0]
    assert lines[1] == r"\begin{tabular}{llcc}" and lines[-1] == r"\end{tabular}"
    assert [ln for ln in lines if ln.startswith("\\") and "rule" in ln] == [
        r"\toprule", r"\midrule", r"\midrule", r"\bottomrule"]
    assert r"\hline" not in tex
    for line in lines[2:-1]:
        if line.startswith(("\\toprule", "\\midrule", "\\bottomrule", r"\multicolumn")):
            continue
        assert len(_split_latex_row(line)) == 4, line  # label, expected, two measures
    for driver in DRIVERS:
        assert latex_escape(label(driver)) + " & $" in tex
    assert "Tangibility & $+$ &" in tex and "Profitability & $-$ &" in tex
    assert not re.search(r"(?<!\\)_", tex.replace("R^2", "").replace("$", ""))
    assert not re.search(r"(?<!\\)%", "\n".join(lines[1:]))
    # an older run.json (no specification): the counts say what was absorbed
    for needle in ("Book leverage", "Market leverage", "Industry effects & & 6 own, 1 pooled",
                   "Year effects & & 3 years & 3 years", "Standard errors & & By firm",
                   "Estimator & & Pooled OLS", "Drivers dated & & t & t",
                   "Firm-years & & 90 & 90", r"$R^2$ in sample & & $0.410$",
                   r"$^{***}\,p<0.01$", r"$^{**}\,p<0.05$", r"$^{*}\,p<0.1$",
                   "Standard errors in parentheses", "Frank and Goyal (2009)"):
        assert needle in tex, needle


def test_estimates_marks_and_parentheses(run):
    coef, fit, manifest = run
    md = regression_table(coef, fit, manifest, fmt="markdown", digits=4)
    rows = [r for r in md.splitlines() if r.startswith("|")]
    for _, c in coef.iterrows():
        p = c["p_value"]
        marks = "***" if p < 0.01 else "**" if p < 0.05 else "*" if p < 0.1 else ""
        est = f"{c['estimate']:.4f}".replace("-", "\u2212") + marks.replace("*", r"\*")
        se = f"({c['std_error']:.4f})"
        i = next(k for k, r in enumerate(rows)
                 if r.startswith(f"| {markdown_escape(label(c['term']))} |"))
        col = 2 if c["measure"] == "book" else 3
        assert [x.strip() for x in rows[i].strip("|").split(" | ")][col] == est
        assert [x.strip() for x in rows[i + 1].strip("|").split(" | ")][col] == se


def test_markdown_is_a_pipe_table_without_html_entities(run):
    coef, fit, manifest = run
    md = regression_table(coef, fit, manifest, fmt="markdown")
    rows = [r for r in md.splitlines() if r.startswith("|")]
    assert rows[1] == "|:---|:---:|---:|---:|"
    assert all(r.endswith("|") and r.count(" | ") == 3 for r in rows if r != rows[1])
    assert "| Market-to-book | \u2212 |" in md and "| Tangibility | + |" in md
    assert "| Firm-years |  | 90 | 90 |" in md and "| R² in sample |" in md
    assert r"\*\*\* p \< 0.01" in md
    assert not re.search(r"&(lt|gt|amp|quot|#\d+);", md)


def test_csv_holds_numbers_with_an_ascii_minus(run):
    coef, fit, manifest = run
    text = regression_table(coef, fit, manifest, fmt="csv")
    rows = list(csv.reader(io.StringIO(text)))
    assert rows[0] == ["", "expected_sign", "(1)", "", "(2)", ""]
    assert rows[1] == ["", "", "Book leverage", "", "Market leverage", ""]
    prof = next(r for r in rows if r[0] == "Profitability")
    assert prof[1] == "negative" and float(prof[2]) < 0 and prof[2].startswith("-")
    assert prof[3] in ("", "*", "**", "***")
    se = next(r for r in rows if r[0] == "Profitability (s.e.)")
    assert float(se[2]) > 0
    for r in rows:
        for cell in r:
            assert "\u2212" not in cell
            if cell.startswith(("=", "+", "-", "@")):
                float(cell)  # only numbers start with a minus
    assert next(r for r in rows if r[0] == "Firm-years")[2:] == ["90", "", "90", ""]


def test_digits_zero_never_prints_a_signed_zero(run):
    coef, fit, manifest = run
    coef = coef.copy()
    coef.loc[0, "estimate"] = -0.3
    coef.loc[1, "estimate"] = -0.0004
    for fmt in ("latex", "markdown", "csv"):
        text = regression_table(coef, fit, manifest, fmt=fmt, digits=0)
        assert not re.search(r"(?<![\d.])[-\u2212]0(?![.\d])", text), fmt
    assert number(-0.0004, 3) == "0.000" and number(-0.0006, 3) == "-0.001"
    assert number(-0.4, 0) == "0" and number(-10.5, 1, "\u2212") == "\u221210.5"


def test_several_runs_say_what_each_absorbed():
    coef = pd.DataFrame({"measure": "book", "model": "linear", "term": ["size", "weird_col"],
                         "estimate": [0.1, -0.3], "std_error": [0.01, 0.5],
                         "p_value": [0.001, 0.6]})
    fit = pd.DataFrame({"measure": ["book"], "model": ["linear"], "n_obs": [10],
                        "n_firms": [4], "r2": [0.5], "r2_oos": [-0.05]})
    spec = {"effects": "industry,year", "estimator": "pooled", "model": "linear",
            "absorbed": {"industry": {"levels": 95, "own": 5, "pooled": 90},
                         "year": {"levels": 1}}, "lag_drivers": True, "cluster": "firm-year"}
    fm = coef.assign(model="fama-macbeth", nw_lags=2)
    fm_fit = fit.assign(model="fama-macbeth", r2_oos=float("nan"))
    fm_spec = {**spec, "estimator": "fama-macbeth", "model": "fama-macbeth", "effects": "year",
               "absorbed": {"year": {"levels": 12}}, "lag_drivers": False}
    fe_spec = {**spec, "estimator": "within", "model": "within", "effects": "firm,year",
               "absorbed": {"firm": {"levels": 1234}, "year": {"levels": 12}},
               "cluster": "firm", "lag_drivers": False}
    md = comparison_table([
        RunTables(coef, fit, {"specification": spec}),
        RunTables(fm, fm_fit, {"specification": fm_spec}),
        RunTables(coef.assign(model="within"), fit.assign(model="within", r2_oos=None),
                  {"specification": fe_spec})], fmt="markdown")
    assert "| Industry effects |  | 5 own, 90 pooled | No | No |" in md
    assert "| Year effects |  | 1 year, none absorbed | Each year | 12 years |" in md
    assert "| Firm effects |  | No | No | 1,234 firms |" in md
    assert "| Drivers dated |  | t-1 (lagged) | t | t |" in md
    assert "| Estimator |  | Pooled OLS | Fama-MacBeth | Within (OLS) |" in md
    assert "By firm and year (two-way) | Newey-West, 2 lags | By firm |" in md
    assert "| R² out of sample |  | \u22120.050 | n/a | n/a |" in md
    assert "| Weird col |  | \u22120.300 |" in md  # a driver without an expected sign


def test_bad_format_and_empty_table(run):
    coef, fit, manifest = run
    with pytest.raises(ConfigError, match=r"format must be one of \['csv', 'latex', "
                                          r"'markdown'\]; got 'docx'"):
        regression_table(coef, fit, manifest, fmt="docx")
    with pytest.raises(ConfigError, match="coefficients must hold at least one row"):
        regression_table(coef.iloc[:0], fit, manifest)
    with pytest.raises(ConfigError, match="at least one results folder"):
        comparison_table([])


def test_latex_escape():
    assert latex_escape("a_b & 10% $x$ #1 {y} ~^\\") == (
        r"a\_b \& 10\% \$x\$ \#1 \{y\} \textasciitilde{}\textasciicircum{}\textbackslash{}")


@pytest.fixture(scope="module")
def three_runs(tmp_path_factory):
    """Three specifications of one invented panel, written by the commands themselves."""
    from levgap.demo import make_panel

    root = tmp_path_factory.mktemp("spec3")
    panel = make_panel(seed=41)
    panel = panel[panel["firm_id"].isin(sorted(panel["firm_id"].unique())[:150])]
    path = root / "panel.csv"
    panel.to_csv(path, index=False)
    runner = CliRunner()
    for name, args in (("pooled", ["analyze", "--model", "linear", "--no-report", "--quiet"]),
                       ("fm", ["estimate", "--estimator", "fama-macbeth", "--effects", "year"]),
                       ("fe", ["estimate", "--effects", "firm,year"])):
        res = runner.invoke(app, [args[0], str(path), "--out", str(root / name), *args[1:]])
        assert res.exit_code == 0, res.output
    return root


def test_three_specifications_side_by_side(three_runs):
    res = CliRunner().invoke(app, ["table", *(str(three_runs / n) for n in ("pooled", "fm",
                                                                           "fe")),
                                   "--format", "markdown"])
    assert res.exit_code == 0, res.output
    head = res.output.splitlines()[0]
    assert head.count("Book leverage") == 3 and "(6) Market leverage" in head
    assert "| Estimator |  | Pooled OLS | Pooled OLS | Fama-MacBeth | Fama-MacBeth |" \
        in res.output
    assert "Within (OLS) |" in res.output and "firms |" in res.output


@pytest.mark.skipif(shutil.which("pdflatex") is None,
                    reason="pdflatex is not installed (.ci/run installs Debian's texlive); "
                    "the structure tests above still run")
def test_three_specification_latex_table_compiles(three_runs, tmp_path):
    out = tmp_path / "t.tex"
    res = CliRunner().invoke(app, ["table", *(str(three_runs / n) for n in ("pooled", "fm",
                                                                           "fe")),
                                   "-o", str(out)])
    assert res.exit_code == 0, res.output
    doc = tmp_path / "doc.tex"
    doc.write_text("\\documentclass{article}\n\\usepackage[landscape,margin=1cm]{geometry}\n"
                   "\\usepackage{booktabs}\n\\begin{document}\n\\input{t.tex}\n"
                   "\\end{document}\n", encoding="utf-8")
    proc = subprocess.run(["pdflatex", "-interaction=nonstopmode", "-halt-on-error", doc.name],
                          cwd=tmp_path, capture_output=True, text=True, timeout=120, check=False)
    assert proc.returncode == 0, proc.stdout[-3000:]
    assert (tmp_path / "doc.pdf").stat().st_size > 1000
    assert "Overfull" not in (tmp_path / "doc.log").read_text(encoding="latin-1")


def test_cli_table(tmp_path):
    from levgap.report.tables import write_tables

    tables, manifest = make_outputs(20, 3, seed=7)
    out = tmp_path / "run"
    write_tables(tables, manifest, out)
    runner = CliRunner()
    tex = runner.invoke(app, ["table", str(out), "--format", "latex"])
    assert tex.exit_code == 0, tex.output
    assert tex.output.startswith("% levgap regression table") and "Market-to-book" in tex.output
    md = runner.invoke(app, ["table", str(out), "--format", "markdown"])
    assert md.exit_code == 0 and md.output.startswith("|  | Expected sign | (1) Book leverage")
    written = runner.invoke(app, ["table", str(out), "--format", "csv", "-o",
                                  str(tmp_path / "t.csv")])
    assert written.exit_code == 0
    assert (tmp_path / "t.csv").read_text(encoding="utf-8").startswith(
        ",expected_sign,(1),,(2)")
    bad = runner.invoke(app, ["table", str(out), "--format", "docx"])
    assert bad.exit_code == 2 and "must be latex, markdown or csv; got 'docx'" in bad.output
    none = runner.invoke(app, ["table", str(out), str(tmp_path / "nothing")])
    assert none.exit_code == 2 and "Traceback" not in none.output
    assert "Example: levgap table" in runner.invoke(app, ["table", "--help"]).output
