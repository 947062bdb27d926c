"""Tampered output folders and hostile text: one line and exit 2, nothing unsafe printed.

Issue 9, points 14 and 15: readers (``screen``, ``explain``, ``report``, ``table`` and
``read_outputs``) refuse a folder whose tables lack a column or hold a wrong type, whose
``run.json`` is not an object or comes from a newer levgap, naming the file and column;
terminal output carries no escape sequences from the data; the neutraliser knows the fullwidth
formula signs and leading spaces; workbook cells are cut to what Excel holds; usage errors are
one line.
"""

from __future__ import annotations

import csv
import io
import json
import re
import shutil
import subprocess
import sys
import warnings
from pathlib import Path

import openpyxl
import pandas as pd
import pyarrow as pa
import pyarrow.parquet as pq
import pytest
from typer.testing import CliRunner

from levgap.cli import app
from levgap.cli.common import plain
from levgap.demo import make_panel
from levgap.errors import DataWarning, OutputError
from levgap.outputs import MARKER, file_digest, neutralise
from levgap.report.tables import read_outputs

runner = CliRunner()
COMMANDS = {
    "screen": ["screen", "{out}"],
    "explain": ["explain", "{out}", "TR0001"],
    "report": ["report", "{out}"],
    "table": ["table", "{out}"],
}
ESCAPES = ("\x1b", "\x07", "\x9b", "\u202e")
CSV_EVIL = "\x1b[2J\x1b[31mEvil\x1b]0;pwned\x07 Corp\x9b31m\r\x08X"
"""Issue 15's name: screen clear, colour, OSC title, 8-bit CSI, carriage return, backspace."""


def _one_line(result, *patterns: str) -> str:
    assert result.exit_code == 2, result.output
    lines = result.output.strip().splitlines()
    assert len(lines) == 1 and "Traceback" not in result.output, result.output
    for p in patterns:
        assert p in lines[0], result.output
    return lines[0]


@pytest.fixture(scope="module")
def runs(tmp_path_factory: pytest.TempPathFactory) -> dict[str, Path]:
    base = tmp_path_factory.mktemp("runs")
    panel = base / "panel.csv"
    p = make_panel(3)
    p = p[p["firm_id"] <= "TR0150"].copy()
    p.loc[p["firm_id"] == "TR0001", "firm_name"] = (
        "Evil\x1b[31m Red\x1b]0;pwned\x07 \x1b]8;;http://x.invalid\x07link\x1b]8;;\x07"
        "\u202eTitle\x9b2J")
    p.to_csv(panel, index=False)
    made = {}
    for fmt in ("csv", "parquet"):
        out = base / fmt
        result = runner.invoke(app, ["analyze", str(panel), "--out", str(out), "--format", fmt,
                                     "--no-report", "--quiet"])
        assert result.exit_code == 0, result.output
        made[fmt] = out
    return made


def _copy(runs: dict[str, Path], tmp_path: Path, fmt: str = "csv") -> Path:
    out = tmp_path / "copy"
    shutil.copytree(runs[fmt], out)
    return out


def _restamp(out: Path) -> None:
    """Record the tampered files' digests in run.json, as a tamperer who knows the format
    would (``levgap report --accept-edits`` does the same): the table checks must still hold."""
    run = json.loads((out / "run.json").read_text())
    for name in run["files"]:
        size, sha = file_digest(out / name)
        run["digests"][name] = {"size": size, "sha256": sha}
    (out / "run.json").write_text(json.dumps(run))


def _invoke(name: str, out: Path):
    return runner.invoke(app, [a.format(out=out) for a in COMMANDS[name]])


@pytest.mark.parametrize("command", sorted(COMMANDS))
def test_a_missing_column_names_file_and_column(runs, tmp_path, command):
    out = _copy(runs, tmp_path)
    table = "coefficients" if command == "table" else "targets"
    frame = pd.read_csv(out / f"{table}.csv", dtype=str)
    column = "std_error" if table == "coefficients" else "gap"
    frame.drop(columns=[column]).to_csv(out / f"{table}.csv", index=False)
    _one_line(_invoke(command, out), f"{table}.csv", "is not the file run")
    _restamp(out)
    _one_line(_invoke(command, out), f"{table}.csv", f"must have the column {column}")


@pytest.mark.parametrize("command", sorted(COMMANDS))
def test_a_wrong_type_names_file_and_column(runs, tmp_path, command):
    out = _copy(runs, tmp_path)
    table = "coefficients" if command == "table" else "targets"
    column = "estimate" if table == "coefficients" else "peer_count"
    frame = pd.read_csv(out / f"{table}.csv", dtype=str, keep_default_na=False)
    frame.loc[1, column] = "lots" if column == "estimate" else "2.5"
    frame.to_csv(out / f"{table}.csv", index=False)
    _restamp(out)
    line = _one_line(_invoke(command, out), f"{table}.csv", f"column {column} must hold")
    assert ("such as 'lots'" in line) if column == "estimate" else "whole numbers" in line


def test_parquet_tables_are_checked_too(runs, tmp_path):
    out = _copy(runs, tmp_path, "parquet")
    t = pq.read_table(out / "targets.parquet")
    i = t.column_names.index("gap")
    t = t.set_column(i, "gap", pa.array(["x"] * t.num_rows))
    pq.write_table(t, out / "targets.parquet")
    _restamp(out)
    _one_line(_invoke("screen", out), "targets.parquet", "column gap must hold numbers")
    with pytest.raises(OutputError, match="column gap must hold numbers"):
        read_outputs(out)


@pytest.mark.parametrize("args", [["screen", "{out}"], ["explain", "{out}", "TR0002"]])
def test_parquet_runs_are_read_without_pandas(runs, args):
    """``pyarrow.parquet.read_table`` imports pandas; the reader must not use it."""
    code = ("import sys\nfrom levgap.cli import main\n"
            f"sys.argv = ['levgap', *{[a.format(out=runs['parquet']) for a in args]!r}]\n"
            "try:\n    main()\nexcept SystemExit as e:\n    assert not e.code, e.code\n"
            "print('PANDAS', 'pandas' in sys.modules)\n")
    run = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                         check=True)
    assert "PANDAS False" in run.stdout, run.stdout + run.stderr


@pytest.mark.parametrize(
    ("body", "pattern"),
    [
        ("[1, 2]", "run.json must be a JSON object; got list"),
        ("null", "run.json must be a JSON object; got null"),
        ('{"schema_version": 9}', "schema_version 9 is newer than this levgap reads (1)"),
        ('{"schema_version": "1"}', "schema_version must be a whole number"),
        ('{"levgap_version": "99.0"}', "written by levgap 99.0, newer than this levgap"),
        ('{"levgap_version": 7}', "levgap_version must be text"),
        ('{"run_id": "../x", "files": []}', "run_id must be a levgap run id"),
        ('{"run_id": "abc", "files": ["../targets.csv"]}', "files must list the run's"),
        ("{not json", "run.json must be valid JSON"),
    ],
)
@pytest.mark.parametrize("command", sorted(COMMANDS))
def test_a_damaged_or_newer_run_json(runs, tmp_path, command, body, pattern):
    out = _copy(runs, tmp_path)
    (out / "run.json").write_text(body, encoding="utf-8")
    _one_line(_invoke(command, out), "run.json", pattern)


def test_run_json_that_is_a_device_or_huge_is_refused(runs, tmp_path):
    out = _copy(runs, tmp_path)
    (out / "run.json").unlink()
    (out / "run.json").symlink_to("/dev/zero")
    _one_line(_invoke("screen", out), "must be a regular file")


@pytest.mark.parametrize("command", sorted(COMMANDS))
def test_files_of_two_runs_or_a_missing_file(runs, tmp_path, command):
    out = _copy(runs, tmp_path)
    marker = json.loads((out / MARKER).read_text())
    marker["run_id"] = "0123456789abcdef"
    (out / MARKER).write_text(json.dumps(marker))
    _one_line(_invoke(command, out), "the folder mixes two runs")
    out2 = _copy(runs, tmp_path / "b")
    (out2 / "drivers.csv").unlink()
    _one_line(_invoke(command, out2), "drivers.csv", "lists this file but it is missing")


def test_a_copied_folder_without_its_marker_still_reads(runs, tmp_path):
    out = tmp_path / "copy"
    out.mkdir()
    for p in runs["csv"].iterdir():
        if p.name != MARKER:
            shutil.copy(p, out / p.name)
    tables, manifest = read_outputs(out)
    assert len(tables["targets"]) and manifest["run_id"]


def test_terminal_output_carries_no_escape_sequences(runs):
    out = runs["csv"]
    for args in (["screen", str(out), "--top", "400"],
                 ["explain", str(out), "TR0001", "--measure", "book"]):
        result = runner.invoke(app, args)
        assert result.exit_code == 0, result.output
        assert "Evil" in result.output and "Title" in result.output
        assert not any(ch in result.output for ch in ESCAPES), repr(result.output)
    bad = runner.invoke(app, ["check", "no\x1b[2Jsuch\x07.csv"])
    assert bad.exit_code == 2 and not any(ch in bad.output for ch in ESCAPES)


def test_screen_csv_carries_no_control_characters(tmp_path):
    """Issue 15: ``screen --format csv`` strips text cells as the table view does, and every
    row parses to the header's number of fields."""
    p = make_panel(3)
    p = p[p["firm_id"] <= "TR0150"].copy()
    p.loc[p["firm_id"] == "TR0001", "firm_name"] = "Tame \u202eTitle\x1b[0m"
    p.loc[p["firm_id"] == "TR0002", "firm_name"] = CSV_EVIL
    p.to_csv(tmp_path / "p.csv", index=False, lineterminator="\r\n")  # CRLF: CR is quoted
    made = runner.invoke(app, ["analyze", str(tmp_path / "p.csv"), "--out", str(tmp_path / "o"),
                               "--no-report", "--quiet"])
    assert made.exit_code == 0, made.output
    result = runner.invoke(app, ["screen", str(tmp_path / "o"), "--format", "csv"])
    assert result.exit_code == 0, result.output
    bad = ("\x1b", "\x9b", "\x07", "\r", "\x08", "\u202e")
    assert not any(ch in result.output for ch in bad), repr(result.output)
    rows = list(csv.reader(io.StringIO(result.output)))
    assert len(rows) > 3 and {len(r) for r in rows} == {len(rows[0])}, rows
    names = {r[0]: r[rows[0].index("firm_name")] for r in rows[1:]}
    assert names["TR0002"] == "Evil Corp X" and "Title" in names["TR0001"], names


@pytest.mark.parametrize(
    ("raw", "shown"),
    [
        ("\x1b[31mred\x1b[0m", "red"),
        ("a\x1b]0;title\x07b", "ab"),
        ("a\x1b]8;;http://x\x1b\\link\x1b]8;;\x1b\\b", "alinkb"),
        ("tab\there\nnew", "tab here new"),
        ("bell\x07 nul\x00 del\x7f c1\x85", "bell nul del c1"),
        ("\u202eevil\u2066", "evil"),
        ("plain é ü 中", "plain é ü 中"),
    ],
)
def test_plain_strips_controls_and_escapes(raw, shown):
    assert plain(raw) == shown


@pytest.mark.parametrize(
    ("cell", "risky"),
    [
        ("=1+1", True), (" =1+1", True), ("\u3000=1", True), ("＝1+1", True), ("＋x", True),
        ("－x", True), ("＠SUM(A1)", True), ("  ＋x", True), ("\tx", True), ("\rx", True),
        ("-5 notes", True), ("a=b", False), ("Nordvik", False), ("", False), (" x", False),
    ],
)
def test_neutraliser_knows_fullwidth_signs_and_leading_spaces(cell, risky):
    for dtype in ("str", object):
        out = neutralise(pd.DataFrame({"c": pd.Series([cell], dtype=dtype)}))
        assert out["c"][0] == ("'" + cell if risky else cell)


def test_workbook_cells_longer_than_excel_holds_are_cut_with_a_note(tmp_path):
    from _report_data import make_outputs

    from levgap.report.workbook import EXCEL_MAX_CHARS, write_workbook

    tables, manifest = make_outputs(12, 2)
    long_name = "Ab" * 40_000 + "😀" * 10
    tables["targets"].loc[0, "firm_name"] = long_name
    tables["exclusions"].loc[0, "detail"] = "x" * 32_767  # exactly the limit: kept whole
    path = tmp_path / "w.xlsx"
    with pytest.warns(DataWarning, match=r"1 text cell\(s\) are longer than the 32,767"):
        write_workbook(tables, manifest, path)
    wb = openpyxl.load_workbook(path, read_only=True)
    names = [r[1] for r in wb["Targets"].iter_rows(min_row=2, max_row=3, values_only=True)]
    assert names[0].endswith("[cut by levgap: 80,010 characters; the CSV or Parquet output "
                             "holds them all]")
    assert len(names[0].encode("utf-16-le")) // 2 <= EXCEL_MAX_CHARS
    assert names[0].startswith("AbAb")
    detail = next(wb["Exclusions"].iter_rows(min_row=2, max_row=2, values_only=True))[5]
    assert detail == "x" * 32_767
    summary = [r for r in wb["Summary"].iter_rows(values_only=True) if r and r[0] == "cut cells"]
    assert summary and "1 text cell(s)" in summary[0][1]
    wb.close()


@pytest.mark.parametrize(
    ("args", "pattern"),
    [
        (["screen", "x", "--top", "0"], "Invalid value for '--top'"),
        (["analyze", "p.csv", "--out", "o", "--bogus"], "No such option: --bogus"),
        (["analyze"], "Missing argument"),
        (["nope"], "No such command 'nope'"),
        (["screen", "{out}", "--status", "sideways"], "must be over, under or within"),
        (["table", "{out}", "--digits", "x"], "Invalid value for '--digits'"),
    ],
)
def test_usage_errors_are_one_line(runs, args, pattern):
    result = runner.invoke(app, [a.format(out=runs["csv"]) for a in args])
    line = _one_line(result, pattern)
    assert line.startswith("levgap: error: ") and "--help" in line


def test_usage_errors_are_one_line_from_the_console_script():
    run = subprocess.run([sys.executable, "-m", "levgap", "screen"], capture_output=True,
                         text=True, timeout=60)
    assert run.returncode == 2 and run.stdout == ""
    assert re.fullmatch(r"levgap: error: Missing argument 'out_dir'\. \(see `[^`]+ screen "
                        r"--help`\)\n", run.stderr), run.stderr


# Review finding L2: hostile run.json and blanked tables are one line and exit 2 in every reader.

@pytest.mark.parametrize("command", sorted(COMMANDS))
def test_run_json_nested_too_deeply_is_one_line(runs, tmp_path, command):
    out = _copy(runs, tmp_path)
    (out / "run.json").write_text("[" * 100_000 + "]" * 100_000, encoding="utf-8")
    _one_line(_invoke(command, out), "run.json", "nested too deeply")
    with pytest.raises(OutputError, match="nested too deeply"):
        read_outputs(out)


def test_model_json_nested_too_deeply_is_refused(runs, tmp_path):
    import levgap

    out = _copy(runs, tmp_path)
    (out / "model.json").write_text("[" * 100_000 + "]" * 100_000, encoding="utf-8")
    _restamp(out)
    with pytest.raises(OutputError, match="model.json must be valid JSON; got the JSON is "
                                          "nested too deeply"):
        levgap.load_model(out)


@pytest.mark.parametrize(
    ("change", "pattern"),
    [
        (lambda r: r.update(options="x"), "options must be an object; got 'x'"),
        (lambda r: r["options"]["model"].update(measures=5),
         "options.model.measures must be a list of names"),
        (lambda r: r["options"]["model"].update(drivers="size"),
         "options.model.drivers must be a list of names"),
        (lambda r: r.update(counts=[1]), "counts must be an object"),
        (lambda r: r.update(pooled_industries=[{"weight": [1]}]), "pooled_industries must be"),
    ],
)
@pytest.mark.parametrize("command", sorted(COMMANDS))
def test_run_json_parts_of_the_wrong_type(runs, tmp_path, command, change, pattern):
    out = _copy(runs, tmp_path)
    run = json.loads((out / "run.json").read_text())
    change(run)
    (out / "run.json").write_text(json.dumps(run))
    _one_line(_invoke(command, out), "run.json", pattern)


@pytest.mark.parametrize("command", sorted(COMMANDS))
def test_a_blanked_column_is_refused_without_warnings(runs, tmp_path, command):
    out = _copy(runs, tmp_path)
    table, column = ("coefficients", "term") if command == "table" else ("targets", "target")
    frame = pd.read_csv(out / f"{table}.csv", dtype=str, keep_default_na=False)
    frame[column] = ""
    frame.to_csv(out / f"{table}.csv", index=False)
    _restamp(out)  # as `levgap report --accept-edits` would
    with warnings.catch_warnings():
        warnings.simplefilter("error")  # no RuntimeWarning from a blank column either
        result = _invoke(command, out)
    _one_line(result, f"{table}.csv", f"column {column} must have a value in every row")
    report = runner.invoke(app, ["report", str(out), "--accept-edits"])
    _one_line(report, f"{table}.csv" if command != "table" else "coefficients.csv",
              "must have a value in every row")

