"""One vocabulary: every user-facing label is defined once, in ``levgap.glossary``, and read
from there by the CLI, the report, the workbook and the READMEs; numbers never show a negative
zero; counts take the right plural."""

from __future__ import annotations

import ast
import re
from pathlib import Path

import pytest

from levgap import glossary as g

SRC = Path(__file__).resolve().parents[1] / "src" / "levgap"
ROOT = SRC.parents[1]
OLD_VARIANTS = ("gap pp", "gap, pp", "r² oos", "rmse oos", "std. error", "contribution pp",
                "change, pp", "median gap, pp", "95% ci",
                # the deal check's terminal, explain --add-debt and page had their own
                "to top (recap)", "to top (funded)", "nd/ebitda", "ebitda/int", "pd 1y",
                "debt to band top (recap)", "actual leverage",
                "target (saved model, full sample)", "trade-off: best debt")
"""Labels the vocabulary replaced (issue 13): none may come back."""


def _labels() -> dict[str, str]:
    """Multi-word labels: single words ("firm", "gap") double as column names and option
    values in code, so only labels of several words (or with symbols) can be searched for."""
    return {k: t.label for k, t in g.TERMS.items()
            if t.label != k and re.search(r"[\s²'%-]", t.label)}


def _python_strings(path: Path) -> list[tuple[int, str]]:
    """String constants of a module (f-string parts included), docstrings left out."""
    tree = ast.parse(path.read_text(encoding="utf-8"))
    docs = set()
    for node in ast.walk(tree):
        if isinstance(node, ast.Module | ast.ClassDef | ast.FunctionDef | ast.AsyncFunctionDef):
            body = node.body
            if body and isinstance(body[0], ast.Expr) and isinstance(body[0].value,
                                                                     ast.Constant):
                docs.add(id(body[0].value))
        if isinstance(node, ast.Assign | ast.AnnAssign):  # attribute docstrings after a value
            pass
    out = []
    for node in ast.walk(tree):
        if isinstance(node, ast.Constant) and isinstance(node.value, str) and id(node) not in docs:
            out.append((node.lineno, node.value))
    return out


def _template_texts(path: Path) -> list[tuple[int, str]]:
    """Texts of a template: quoted strings (scripts, attributes) and element text (outside
    scripts and styles)."""
    text = path.read_text(encoding="utf-8")
    found = [(text.count("\n", 0, m.start()) + 1, m.group(1))
             for m in re.finditer(r"\"([^\"\n]*)\"", text)]
    html = re.sub(r"<(script|style)\b.*?</\1>", lambda m: "\n" * m.group(0).count("\n"),
                  text, flags=re.S)
    found += [(html.count("\n", 0, m.start()) + 1, m.group(1))
              for m in re.finditer(r">([^<>{}]+)<", html)]
    return found


def _all_texts() -> list[tuple[Path, int, str]]:
    out = []
    for path in sorted(SRC.rglob("*")):
        if path.suffix == ".py":
            out += [(path, n, s) for n, s in _python_strings(path)]
        elif path.suffix in (".j2", ".js"):
            out += [(path, n, s) for n, s in _template_texts(path)]
    return out


def _norm(text: str) -> str:
    return " ".join(text.split()).strip(" :").casefold()


def test_each_label_is_written_once_in_src() -> None:
    labels = _labels()
    assert len(labels) >= 25  # the search covers the vocabulary, not a handful of words
    texts = _all_texts()
    wrong = {}
    for key, label in labels.items():
        forms = {_norm(label), _norm(g.header(key)), _norm(g.header(key, "EUR millions"))}
        hits = [(str(p.relative_to(SRC)), n) for p, n, s in texts if _norm(s) in forms]
        if [p for p, _ in hits] != ["glossary.py"]:
            wrong[label] = hits
    assert wrong == {}


def test_replaced_variants_are_gone() -> None:
    for path, n, text in _all_texts():
        low = text.casefold()
        for old in OLD_VARIANTS:
            assert not re.search(rf"(^|[^\w]){re.escape(old)}($|[^\w])", low), (path, n, text)


def test_the_search_finds_a_planted_copy(tmp_path: Path) -> None:
    # negative control: a module writing a label itself is caught by the same search
    module = tmp_path / "copy.py"
    module.write_text('"""Doc: debt to target."""\nHEAD = ("firm", "debt to target")\n',
                      encoding="utf-8")
    strings = [s for _, s in _python_strings(module)]
    assert strings == ["firm", "debt to target"]
    page = tmp_path / "page.j2"
    page.write_text("<th>gap z</th><script>var a = \"peer median\";</script>", encoding="utf-8")
    assert sorted(s for _, s in _template_texts(page)) == ["gap z", "peer median"]


@pytest.mark.parametrize(("value", "text"), [(-1e-9, "0.0"), (-0.0004, "0.0"), (0.0004, "0.0"),
                                             (0.0006, "+0.1"), (-0.0006, "-0.1")])
def test_no_negative_zero_in_points(value: float, text: str) -> None:
    assert g.pp(value) == text


def test_no_negative_zero_anywhere() -> None:
    assert g.pct(-1e-9) == "0.0%"
    assert g.money(-0.04) == "0.0" and g.money(-1234.56) == "-1,234.6"
    assert g.signed(-0.001) == "0.00" and g.number(-0.0001, 3) == "0.000"
    assert g.pct(float("nan")) == g.MISSING and g.money(None) == g.MISSING


def test_plurals_and_money_units() -> None:
    assert g.count(1, "firm") == "1 firm" and g.count(2, "firm") == "2 firms"
    assert g.count(1, "industry") == "1 industry" and g.count(3, "industry") == "3 industries"
    assert g.count(1200, "firm-year") == "1,200 firm-years"
    assert g.header("debt_to_target", "EUR millions") == "debt to target (EUR millions)"
    assert g.money_unit({"currency": "EUR", "unit": "millions"}) == "EUR millions"
    assert g.header("gap") == "gap (pp)" and g.header("actual") == "actual"


def test_readmes_carry_the_glossary() -> None:
    table = g.glossary_markdown()
    assert table in (ROOT / "README.md").read_text(encoding="utf-8")
    assert table in (ROOT / "data_templates" / "README.md").read_text(encoding="utf-8")


def test_top_means_the_same_in_every_command() -> None:
    from typer.testing import CliRunner

    from levgap.cli import app
    from levgap.cli.common import TOP_HELP

    for command in ("demo", "analyze", "screen"):
        out = CliRunner().invoke(app, [command, "--help"], env={"COLUMNS": "400"}).output
        assert " ".join(TOP_HELP.split()) in " ".join(out.split()), command


def test_top_level_help_shows_whole_descriptions() -> None:
    from typer.testing import CliRunner

    from levgap.cli import app

    out = CliRunner().invoke(app, ["--help"], env={"COLUMNS": "80"}).output
    assert not [ln for ln in out.splitlines()[1:] if "..." in ln], out  # nothing cut
    flat = " ".join(out.split())
    assert "Show why a firm's target differs from its peers', driver by driver, with its gap " \
           "history, its flags in words and (--peers) its peers." in flat


def test_the_deal_check_and_compare_read_their_labels_here() -> None:
    """Every figure the deal check (proforma.csv's page, terminal and explain --add-debt) and
    levgap compare show has its label in the glossary, so the search above covers them."""
    from levgap.compare import COMPARE_COLUMNS
    from levgap.deal.result import CAPACITY_COLUMNS
    from levgap.deal.statement import LINES

    shown = {*CAPACITY_COLUMNS, "net_debt_to_ebitda", "debt_to_ebitda", "ebitda_to_interest",
             "altman_score", "asset_value", "asset_volatility", "distance_to_default",
             "default_probability", "tax_shield_pv", "expected_distress_cost",
             "tradeoff_best_debt", "scenario", "total_debt", "total_assets",
             *(set(COMPARE_COLUMNS) - {"coverage_industry_min", "coverage_industry_max",
                                       "n_obs"})}
    assert shown - set(g.TERMS) == set()
    assert set(LINES) <= set(g.STATEMENT)
    labels = _labels()
    for key in ("capacity_to_band_top_recap", "net_debt_to_ebitda", "default_probability",
                "outside_unit_interval"):
        assert key in labels  # searched for by test_each_label_is_written_once_in_src
