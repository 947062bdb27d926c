"""Publication tables: every driver, standard errors in parentheses, marks with their legend,
N and R², fixed effects and clustering; LaTeX that a plain ``tabular`` compiles."""

from __future__ import annotations

import csv
import io
import re
import shutil
import subprocess

import pandas as pd
import pytest
from _report_data import DRIVERS, make_outputs

from levgap.errors import ConfigError
from levgap.report.publication import latex_escape, regression_table


@pytest.fixture(scope="module")
def run():
    tables, manifest = make_outputs(30, 3, seed=6)
    return tables["coefficients"], tables["model_fit"], manifest


def _split_latex_row(line: str) -> list[str]:
    body = line.rstrip()
    assert body.endswith(r"\\"), line
    return re.split(r"(?<!\\)&", body[:-2])


def test_latex_is_a_plain_tabular_with_every_driver(run):
    coef, fit, manifest = run
    tex = regression_table(coef, fit, manifest, fmt="latex")
    lines = tex.strip().splitlines()
    assert lines[0] == r"\begin{tabular}{lcc}" and lines[-1] == r"\end{tabular}"
    for line in lines[1:-1]:
        if line.startswith((r"\hline", r"\multicolumn")):
            continue
        assert len(_split_latex_row(line)) == 3, line  # label + one column per measure
    for driver in DRIVERS:
        assert latex_escape(driver) + " & " in tex
    # No unescaped underscore, ampersand or percent outside the cell separators.
    assert not re.search(r"(?<!\\)_", tex.replace("R^2", "").replace("$", ""))
    assert not re.search(r"(?<!\\)%", tex)
    for needle in ("Book leverage", "Market leverage", "Industry fixed effects & Yes & Yes",
                   "Year fixed effects & Yes & Yes", "Standard errors clustered by & Firm",
                   "Observations & 90 & 90", r"$R^2$ & $0.410$", r"$^{***}\,p<0.01$",
                   r"$^{**}\,p<0.05$", r"$^{*}\,p<0.1$", "Standard errors in parentheses"):
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
        term = c["term"].replace("_", r"\_")
        i = next(k for k, r in enumerate(rows) if r.startswith(f"| {term} |"))
        col = 1 if c["measure"] == "book" else 2
        assert [x.strip() for x in rows[i].strip("|").split(" | ")][col] == est
        assert [x.strip() for x in rows[i + 1].strip("|").split(" | ")][col] == se


def test_markdown_is_a_pipe_table(run):
    coef, fit, manifest = run
    md = regression_table(coef, fit, manifest, fmt="markdown")
    rows = [r for r in md.splitlines() if r.startswith("|")]
    assert rows[1] == "|:---|---:|---:|"
    assert all(r.endswith("|") and r.count(" | ") == 2 for r in rows if r != rows[1])
    for driver in DRIVERS:
        assert any(r.startswith("| " + driver.replace("_", r"\_") + " |") for r in rows)
    assert "| Observations | 90 | 90 |" in md and "| R² |" in md
    assert r"\*\*\* p &lt; 0.01" in md


def test_csv_has_the_same_layout_and_no_formula_cells(run):
    coef, fit, manifest = run
    text = regression_table(coef, fit, manifest, fmt="csv")
    rows = list(csv.reader(io.StringIO(text)))
    assert rows[0] == ["", "(1)", "(2)"] and rows[1] == ["", "Book leverage", "Market leverage"]
    assert {r[0] for r in rows} >= set(DRIVERS)
    for r in rows:
        for cell in r:
            assert not cell.startswith(("=", "+", "-", "@")), cell
    obs = next(r for r in rows if r[0] == "Observations")
    assert obs[1:] == ["90", "90"]


def test_several_models_and_missing_terms():
    coef = pd.DataFrame({
        "measure": ["book", "book", "book"], "model": ["linear", "fractional", "linear"],
        "term": ["size", "size", "tangibility"], "estimate": [0.1, 0.2, -0.3],
        "std_error": [0.01, 0.02, 0.5], "p_value": [0.001, 0.04, 0.6],
    })
    fit = pd.DataFrame({"measure": ["book"], "model": ["linear"], "n_obs": [10], "n_firms": [4],
                        "r2": [0.5], "r2_oos": [-0.05]})
    md = regression_table(coef, fit, {"options": {"model": {"cluster": "firm-year"}}},
                          fmt="markdown")
    assert "(1) Book leverage (linear)" in md and "(2) Book leverage (fractional)" in md
    assert "| tangibility | \u22120.300 |  |" in md
    assert "| R² out of sample | \u22120.050 |  |" in md
    assert "Firm and year" in md


def test_bad_format_and_empty_table(run):
    coef, fit, manifest = run
    with pytest.raises(ConfigError, match=r"format must be one of \['csv', 'latex', "
                                          r"'markdown'\]; got 'docx'"):
        regression_table(coef, fit, manifest, fmt="docx")
    with pytest.raises(ConfigError, match="coefficients must hold at least one row"):
        regression_table(coef.iloc[:0], fit, manifest)


def test_latex_escape():
    assert latex_escape("a_b & 10% $x$ #1 {y} ~^\\") == (
        r"a\_b \& 10\% \$x\$ \#1 \{y\} \textasciitilde{}\textasciicircum{}\textbackslash{}")


@pytest.mark.skipif(shutil.which("pdflatex") is None,
                    reason="pdflatex is not installed; the structure test above still runs")
def test_latex_compiles(run, tmp_path):
    coef, fit, manifest = run
    tex = regression_table(coef, fit, manifest, fmt="latex")
    doc = tmp_path / "t.tex"
    doc.write_text("\\documentclass{article}\n\\begin{document}\n" + tex
                   + "\\end{document}\n", encoding="utf-8")
    proc = subprocess.run(["pdflatex", "-interaction=nonstopmode", "-halt-on-error", doc.name],
                          cwd=tmp_path, capture_output=True, text=True, timeout=120, check=False)
    assert proc.returncode == 0, proc.stdout[-3000:]
    assert (tmp_path / "t.pdf").stat().st_size > 1000


def test_cli_table(tmp_path):
    from typer.testing import CliRunner

    from levgap.cli import app
    from levgap.report.tables import write_tables

    tables, manifest = make_outputs(20, 3, seed=7)
    out = tmp_path / "run"
    write_tables(tables, manifest, out)
    runner = CliRunner()
    tex = runner.invoke(app, ["table", str(out), "--format", "latex"])
    assert tex.exit_code == 0, tex.output
    assert tex.output.startswith(r"\begin{tabular}") and r"market\_to\_book" in tex.output
    md = runner.invoke(app, ["table", str(out), "--format", "markdown"])
    assert md.exit_code == 0 and md.output.startswith("|  | (1) Book leverage")
    written = runner.invoke(app, ["table", str(out), "--format", "csv", "-o",
                                  str(tmp_path / "t.csv")])
    assert written.exit_code == 0
    assert (tmp_path / "t.csv").read_text(encoding="utf-8").startswith(",(1),(2)")
    bad = runner.invoke(app, ["table", str(out), "--format", "docx"])
    assert bad.exit_code == 2 and "must be latex, markdown or csv; got 'docx'" in bad.output
    none = runner.invoke(app, ["table", str(tmp_path / "nothing")])
    assert none.exit_code == 2 and "Traceback" not in none.output
    assert "Example: levgap table" in runner.invoke(app, ["table", "--help"]).output
