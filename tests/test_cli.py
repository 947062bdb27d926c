"""The command line: every command answers, every error path is one line and exit 2."""

from __future__ import annotations

import json
from pathlib import Path

import pandas as pd
import pytest
from typer.testing import CliRunner

from levgap.cli import app
from levgap.demo import make_panel

runner = CliRunner()
COMMANDS = ("demo", "analyze", "screen", "explain", "check", "template")


def _one_line_error(result, pattern: str) -> None:
    assert result.exit_code == 2, result.output
    assert "Traceback" not in result.output
    lines = [ln for ln in result.output.strip().splitlines() if ln.strip()]
    assert any(pattern in ln for ln in lines), result.output


@pytest.fixture(scope="module")
def panel_csv(tmp_path_factory: pytest.TempPathFactory) -> Path:
    path = tmp_path_factory.mktemp("in") / "panel.csv"
    p = make_panel(3)
    p.loc[5, "firm_name"] = "=HYPERLINK(\"http://x\")"
    p.to_csv(path, index=False)
    return path


@pytest.fixture(scope="module")
def out_dir(panel_csv: Path, tmp_path_factory: pytest.TempPathFactory) -> Path:
    out = tmp_path_factory.mktemp("out") / "run"
    result = runner.invoke(app, ["analyze", str(panel_csv), "--out", str(out), "--quiet"])
    assert result.exit_code == 0, result.output
    return out


def test_version() -> None:
    import levgap

    result = runner.invoke(app, ["--version"])
    assert result.exit_code == 0 and result.output == f"levgap {levgap.__version__}\n"


def test_version_is_pyprojects() -> None:
    """``levgap.__version__`` is written as text (no metadata scan at start-up); it must be
    the release pyproject.toml declares, and the installed one."""
    import tomllib
    from importlib.metadata import version

    import levgap

    pyproject = Path(__file__).resolve().parents[1] / "pyproject.toml"
    declared = tomllib.loads(pyproject.read_text(encoding="utf-8"))["project"]["version"]
    assert levgap.__version__ == declared == version("levgap")


@pytest.mark.parametrize("command", COMMANDS)
def test_every_help_shows_an_example(command: str) -> None:
    result = runner.invoke(app, [command, "--help"])
    assert result.exit_code == 0
    assert "Example: levgap" in result.output


def test_analyze_writes_every_contract_file(out_dir: Path) -> None:
    for name in ("targets.csv", "drivers.csv", "coefficients.csv", "model_fit.csv",
                 "exclusions.csv", "run.json", "report.html"):
        assert (out_dir / name).is_file(), name
    manifest = json.loads((out_dir / "run.json").read_text())
    assert manifest["counts"]["rows_used"] == manifest["counts"]["rows_in"]
    targets = pd.read_csv(out_dir / "targets.csv", dtype={"firm_name": str})
    assert "'=HYPERLINK(\"http://x\")" in set(targets["firm_name"])


def test_analyze_parquet_json_and_rerun_into_own_folder(panel_csv: Path, tmp_path: Path) -> None:
    out = tmp_path / "pq"
    args = ["analyze", str(panel_csv), "--out", str(out), "--format", "parquet",
            "--measure", "book", "--json"]
    result = runner.invoke(app, args)
    assert result.exit_code == 0, result.output
    summary = json.loads(result.output)
    assert summary["model_fit"][0]["measure"] == "book"
    assert (out / "targets.parquet").is_file()
    again = runner.invoke(app, args)
    assert again.exit_code == 0, again.output


def test_analyze_refuses_a_foreign_folder(panel_csv: Path, tmp_path: Path) -> None:
    (tmp_path / "notes.txt").write_text("mine")
    result = runner.invoke(app, ["analyze", str(panel_csv), "--out", str(tmp_path)])
    _one_line_error(result, "levgap did not write")
    assert (tmp_path / "notes.txt").read_text() == "mine"
    assert not (tmp_path / "targets.csv").exists()


def test_missing_column_is_exit_2_and_one_line(tmp_path: Path) -> None:
    path = tmp_path / "short.csv"
    make_panel(3).drop(columns=["ppe_net", "ebitda"]).head(50).to_csv(path, index=False)
    result = runner.invoke(app, ["analyze", str(path), "--out", str(tmp_path / "o")])
    _one_line_error(result, "ppe_net")
    assert "short.csv" in result.output
    check = runner.invoke(app, ["check", str(path)])
    _one_line_error(check, "ebitda")


@pytest.mark.parametrize(
    ("args", "pattern"),
    [
        (["analyze", "nope.csv", "--out", "x"], "nope.csv"),
        (["analyze", "{panel}", "--out", "{tmp}/o", "--measure", "cash"], "book, market"),
        # review L7: the value came from --cluster, not from a configuration's [model]
        (["analyze", "{panel}", "--out", "{tmp}/o", "--cluster", "country"],
         "error: --cluster must be one of ['firm', 'firm-year', 'industry']; got 'country'"),
        (["analyze", "{panel}", "--out", "{tmp}/o", "--model", "probit"],
         "error: --model must be one of"),
        (["analyze", "{panel}", "--out", "{tmp}/o", "--format", "xls"], "csv or parquet"),
        (["analyze", "{panel}", "--out", "{tmp}/o", "--config", "{tmp}/none.toml"],
         "none.toml"),
        (["screen", "{tmp}"], "{tmp}"),
        (["explain", "{out}", "NOBODY"], "NOBODY"),
        (["explain", "{out}", "TR0001", "--year", "1900"], "1900"),
        (["screen", "{out}", "--status", "sideways"], "over, under"),
        (["check", "{tmp}/none.csv"], "none.csv"),
    ],
)
def test_error_paths(args: list[str], pattern: str, panel_csv: Path, out_dir: Path,
                     tmp_path: Path) -> None:
    fill = {"panel": str(panel_csv), "tmp": str(tmp_path), "out": str(out_dir)}
    result = runner.invoke(app, [a.format(**fill) for a in args])
    _one_line_error(result, pattern.format(**fill))


def test_bad_config_key_names_it(panel_csv: Path, tmp_path: Path) -> None:
    cfg = tmp_path / "run.toml"
    cfg.write_text("[model]\nclustr = 'firm'\n")
    result = runner.invoke(app, ["analyze", str(panel_csv), "--out", str(tmp_path / "o"),
                                 "--config", str(cfg)])
    _one_line_error(result, "clustr")


def test_screen_and_explain(out_dir: Path, tmp_path: Path) -> None:
    result = runner.invoke(app, ["screen", str(out_dir), "--status", "over", "--top", "3"])
    assert result.exit_code == 0, result.output
    targets = pd.read_csv(out_dir / "targets.csv", dtype={"firm_id": str})
    latest = targets[(targets["measure"] == "book")
                     & (targets["fiscal_year"] == targets["fiscal_year"].max())]
    over = latest[latest["status"] == "over"].sort_values("gap", ascending=False)
    rows = [ln for ln in result.output.splitlines() if ln.startswith("│")]
    # the three rows are the three largest gaps among firms over their band, in that order
    assert [r.split("│")[1].strip() for r in rows] == over["firm_id"].head(3).tolist()
    assert all(r.split("│")[2].strip() == "over" for r in rows)
    assert f"{len(over)} firms over" in result.output
    firm = targets.iloc[0]["firm_id"]
    plot = tmp_path / "steps.svg"
    result = runner.invoke(app, ["explain", str(out_dir), firm, "--measure", "book",
                                 "--plot", str(plot)])
    assert result.exit_code == 0, result.output
    for word in ("tangibility", "peers' offset", "unexplained gap", "Target"):
        assert word in result.output
    assert plot.is_file() and plot.stat().st_size > 1000


def test_check_reports_exclusions(tmp_path: Path) -> None:
    p = make_panel(3).head(200).astype({"total_debt": object})
    p.loc[3, "total_assets"] = -1
    p.loc[4, "total_debt"] = "lots"
    path = tmp_path / "p.csv"
    p.to_csv(path, index=False)
    ledger = tmp_path / "ledger.csv"
    result = runner.invoke(app, ["check", str(path), "--ledger", str(ledger)])
    assert result.exit_code == 0, result.output
    assert "198 usable, 2 excluded" in result.output
    rows = pd.read_csv(ledger)
    assert sorted(rows["source_row"]) == [4, 5]


def test_check_counts_in_the_singular_when_there_is_one(tmp_path: Path) -> None:
    p = make_panel(3)
    p = p[p["industry"] == p["industry"].iloc[0]].head(40).copy()
    p.loc[p.index[0], "market_equity"] = float("nan")
    path = tmp_path / "p.csv"
    p.to_csv(path, index=False)
    result = runner.invoke(app, ["check", str(path)])
    assert result.exit_code == 0, result.output
    assert "1 row has no market equity" in result.output
    assert ", 1 industry, fiscal years" in result.output
    assert "40 rows; " in result.output



def test_check_ledger_is_analyzes_whole_row_part(panel_csv: Path, out_dir: Path,
                                                 tmp_path: Path) -> None:
    # review L4: check lists whole-row exclusions only, and says so; analyze's ledger holds
    # exactly those plus rows left out of one measure, whose reasons the README lists
    from levgap.codes import ANALYSIS_REASONS, MEASURE_REASONS, REASONS

    ledger = tmp_path / "ledger.csv"
    result = runner.invoke(app, ["check", str(panel_csv), "--ledger", str(ledger)])
    assert result.exit_code == 0, result.output
    assert "whole rows" in result.output and "no_market_equity" in result.output
    mine = pd.read_csv(ledger, keep_default_na=False)
    theirs = pd.read_csv(out_dir / "exclusions.csv", keep_default_na=False)
    whole = theirs[theirs["measure"] == ""]
    assert sorted(mine["source_row"]) == sorted(whole["source_row"])
    part = theirs[theirs["measure"] != ""]
    assert len(part) and set(part["reason"]) <= set(MEASURE_REASONS)
    readme = (Path(__file__).resolve().parents[1] / "data_templates" / "README.md").read_text()
    for code in {*REASONS, *ANALYSIS_REASONS, *MEASURE_REASONS, *theirs["reason"]}:
        assert f"| `{code}` |" in readme, code


def test_template_writes_files(tmp_path: Path) -> None:
    result = runner.invoke(app, ["template", "--out", str(tmp_path)])
    assert result.exit_code == 0, result.output
    assert (tmp_path / "panel_template.csv").is_file()


@pytest.mark.slow  # two reports (about 5 s of CPU)
def test_demo_runs_and_names_extremes(tmp_path: Path) -> None:
    result = runner.invoke(app, ["demo", "--out", str(tmp_path / "d")])
    assert result.exit_code == 0, result.output
    assert "Most over-levered" in result.output and "Most under-levered" in result.output
    assert "not investment, credit or legal advice" in result.output
    again = runner.invoke(app, ["demo", "--out", str(tmp_path / "d")])
    assert again.exit_code == 0, again.output


def test_data_warnings_become_notes_and_ledger_never_replaces_input(tmp_path: Path) -> None:
    p = make_panel(3).head(120).copy()
    p["firm_name"] = "Phares Éclatés de Tarrow"  # invented; accented to force Latin-1
    path = tmp_path / "latin.csv"
    p.to_csv(path, index=False, encoding="latin-1")
    result = runner.invoke(app, ["check", str(path)])
    assert result.exit_code == 0, result.output
    notes = [ln for ln in result.output.splitlines() if "note:" in ln]
    assert len(notes) == 1 and "UTF-8" in notes[0], result.output
    before = path.read_bytes()
    refused = runner.invoke(app, ["check", str(path), "--ledger", str(path)])
    _one_line_error(refused, "never replace an input")
    assert path.read_bytes() == before


def test_explain_and_screen_edge_cases(out_dir: Path, tmp_path: Path) -> None:
    targets = pd.read_csv(out_dir / "targets.csv", dtype={"firm_id": str})
    book = targets[targets["measure"] == "book"]
    market = targets[targets["measure"] == "market"]
    only_book = book[~book.set_index(["firm_id", "fiscal_year"]).index.isin(
        market.set_index(["firm_id", "fiscal_year"]).index)].iloc[0]
    result = runner.invoke(app, ["explain", str(out_dir), only_book["firm_id"], "--year",
                                 str(only_book["fiscal_year"]), "--measure", "market"])
    _one_line_error(result, "excluded from that measure")
    result = runner.invoke(app, ["explain", str(out_dir), only_book["firm_id"], "--plot",
                                 str(tmp_path / "x.csv")])
    _one_line_error(result, ".png or .svg")
    assert "tangibility" not in result.output  # refused before any explanation is printed
    result = runner.invoke(app, ["screen", str(out_dir), "--top", "0"])
    assert result.exit_code == 2


def test_raw_id_finds_a_neutralised_firm(panel_csv: Path, tmp_path: Path) -> None:
    p = make_panel(3)
    p.loc[p["firm_id"] == "TR0001", "firm_id"] = "=1+1"
    path = tmp_path / "hostile.csv"
    p.to_csv(path, index=False)
    out = tmp_path / "o"
    assert runner.invoke(app, ["analyze", str(path), "--out", str(out), "--quiet"]).exit_code == 0
    result = runner.invoke(app, ["explain", str(out), "=1+1"])
    assert result.exit_code == 0, result.output


def test_check_without_usable_rows_and_demo_into_a_file(tmp_path: Path) -> None:
    p = make_panel(3).head(20)
    p["total_assets"] = 0
    path = tmp_path / "zero.csv"
    p.to_csv(path, index=False)
    result = runner.invoke(app, ["check", str(path)])
    assert result.exit_code == 2 and "at least one usable row" in result.output
    blocker = tmp_path / "file.csv"
    blocker.write_text("x")
    _one_line_error(runner.invoke(app, ["demo", "--out", str(blocker)]), "must be a folder")


HEAVY = ("pandas", "statsmodels", "scipy", "matplotlib", "sklearn")


def _no_pandas_run(args: list[str], heavy: tuple[str, ...] = HEAVY) -> str:
    """Run ``levgap ARGS`` in a fresh interpreter; its output, after checking that pandas
    and the other ``heavy`` modules were never imported."""
    import subprocess
    import sys

    code = (
        "import sys\n"
        "from levgap.cli import main\n"
        f"sys.argv = ['levgap', *{args!r}]\n"
        "try:\n    main()\nexcept SystemExit as e:\n    assert not e.code, e.code\n"
        f"heavy = [m for m in {heavy!r} if m in sys.modules]\n"
        "print('HEAVY', heavy)\n"
    )
    run = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                         check=True)
    assert "HEAVY []" in run.stdout, run.stdout + run.stderr
    return run.stdout


@pytest.mark.parametrize("kind", ["csv", "parquet"])
def test_check_reads_and_validates_without_pandas(tmp_path: Path, kind: str) -> None:
    """Issue 15: `check` reads, validates and reports a panel (exclusions, copies, notes)
    without importing pandas; the counts are those of the ledger `read_panel` builds."""
    import pyarrow as pa
    import pyarrow.csv as pacsv
    import pyarrow.parquet as pq

    from levgap.errors import DataWarning
    from levgap.ingest import read_panel

    header = ["firm_id", "fiscal_year", "industry", "total_assets", "total_debt", "ppe_net",
              "ebitda", "book_equity", "market_equity", "revenue", "extra"]
    rows = [["A1", "2020", "10", "100", "10", "20", "5", "40", "50", "9", "x"],
            ["A1", "2020", "10", "100", "10", "20", "5", "40", "50", "9", "x"],   # copy
            ["B1", "2020", "10", "100", "10", "20", "5", "40", "", "-3", "x"],    # note
            ["B1", "2021", "10", "100", "lots", "20", "5", "40", "", "1", "x"],   # text debt
            ["C1", "2021", "20", "100", "10", "20", "5", "40", "", "1", "x"],
            ["C1", "2021", "20", "100", "11", "20", "5", "40", "", "1", "x"]]  # conflict
    table = pa.table({h: [r[j] for r in rows] for j, h in enumerate(header)})
    path = tmp_path / f"p.{kind}"
    if kind == "csv":
        pacsv.write_csv(table, path)
    else:
        pq.write_table(table, path)
    out = _no_pandas_run(["check", str(path)], (*HEAVY, "rich"))  # plain lines: no rich
    with pytest.warns(DataWarning, match="revenue must be a number"):
        ledger = read_panel(path).exclusions
    assert f"6 rows; 2 usable, {len(ledger)} excluded." in out
    for reason, n in ledger["reason"].value_counts().items():
        assert f"excluded, {reason}: {n}" in out
    assert {"duplicate_row", "conflicting_duplicate", "non_numeric"} == set(ledger["reason"])
    assert "2 firms, 1 industry, fiscal years 2020-2020" in out
    assert "note: columns not in schema v1 were ignored: extra" in out
    assert out.count("revenue must be a number >= 0") == 1  # the warning is the note


@pytest.fixture(scope="module")
def parquet_out(panel_csv: Path, tmp_path_factory: pytest.TempPathFactory) -> Path:
    out = tmp_path_factory.mktemp("out") / "run"
    result = runner.invoke(app, ["analyze", str(panel_csv), "--out", str(out), "--quiet",
                                 "--format", "parquet", "--no-report"])
    assert result.exit_code == 0, result.output
    return out


@pytest.mark.parametrize("args", [["screen", "{out}", "--top", "2"], ["template", "--out", "{tmp}"],
                                  ["screen", "{parquet}", "--top", "2"],
                                  ["screen", "{out}", "--new", "--industry", "3711",
                                   "--sort", "change", "--format", "json"],
                                  ["screen", "{out}", "--persistent", "--format", "csv"],
                                  ["explain", "{out}", "TR0001"],
                                  ["explain", "{out}", "tr0001", "--measure", "market",
                                   "--year", "2022"],
                                  ["--version"], ["--help"]])
def test_quick_commands_do_not_import_heavy_libraries(args: list[str], out_dir: Path,
                                                      parquet_out: Path, tmp_path: Path) -> None:
    fill = {"out": str(out_dir), "tmp": str(tmp_path / "t"), "parquet": str(parquet_out)}
    heavy = HEAVY
    if args[0].startswith("--"):  # the version is text, not read from the packages' metadata
        heavy += ("importlib.metadata",)
    _no_pandas_run([a.format(**fill) for a in args], heavy)
