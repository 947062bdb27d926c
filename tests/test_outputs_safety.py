"""No command deletes or overwrites a file it did not write, in or out of ``--out``.

Issue 9, points 1, 2 and 4: a planted marker cannot make levgap touch anything; inputs kept
inside ``--out`` (or named like an output) survive every later run; single-file writers
(``table -o``, ``check --ledger``, ``explain --plot``, ``import-sec``) never replace an input
or a file levgap did not write; the closing line names exactly the files written.
"""

from __future__ import annotations

import json
import os
import shutil
from pathlib import Path

import pandas as pd
import pytest
from typer.testing import CliRunner

from levgap.cli import app
from levgap.demo import make_panel
from levgap.errors import OutputError
from levgap.outputs import (
    MARKER,
    RunWriter,
    atomic_write_bytes,
    file_digest,
    new_run_id,
    read_marker,
    verify_run,
)
from levgap.report.tables import write_tables

runner = CliRunner()
FIXTURES = Path(__file__).parent / "fixtures" / "sec"


def _one_line_error(result, pattern: str) -> None:
    assert result.exit_code == 2, result.output
    assert "Traceback" not in result.output
    lines = [ln for ln in result.output.strip().splitlines() if ln.strip()]
    assert len(lines) == 1 and pattern in lines[0], result.output


def _small_panel() -> pd.DataFrame:
    p = make_panel(3)
    return p[p["firm_id"] <= "TR0120"]  # 120 firms, 10 years: quick to analyse and report


@pytest.fixture(scope="module")
def panel(tmp_path_factory) -> Path:
    path = tmp_path_factory.mktemp("in") / "panel.csv"
    _small_panel().to_csv(path, index=False)
    return path


def _analyze(panel: Path, out: Path, *extra: str):
    return runner.invoke(app, ["analyze", str(panel), "--out", str(out), "--no-report",
                               "--top", "1", *extra])


def _tables():
    return {"ledger": pd.DataFrame({"source_row": [1, 2], "note": ["a", "b"]})}


def _victims(tmp_path: Path) -> dict[Path, bytes]:
    elsewhere = tmp_path / "elsewhere"
    elsewhere.mkdir()
    from levgap.outputs.legacy import V01_HEADERS

    # the table is a real 0.1 output elsewhere: its content alone would pass as levgap's
    table = (",".join(V01_HEADERS[0]) + "\r\n").encode()
    files = {elsewhere / "x": b"precious x", elsewhere / "targets.csv": table}
    for p, data in files.items():
        p.write_bytes(data)
    return files


@pytest.mark.parametrize("kind", ["v2", "legacy"])
def test_planted_marker_with_paths_outside_deletes_nothing(tmp_path, panel, kind):
    victims = _victims(tmp_path)
    out = tmp_path / "out"
    out.mkdir()
    names = ["../elsewhere/x", str(tmp_path / "elsewhere" / "targets.csv"),
             "..", "../elsewhere/targets.csv", "sub/../../elsewhere/x",
             "run.json"]  # listed by every 0.1 marker: else the marker is the user's file
    if kind == "v2":
        # even with the right digests, a name that is not a plain file name proves nothing
        files = {}
        for n in names:
            target = (out / n) if not os.path.isabs(n) else Path(n)
            size, sha = file_digest(target) if target.is_file() else (0, "0" * 64)
            files[n] = {"kind": "output", "written": True, "size": size, "sha256": sha}
        marker = {"levgap_output": 2, "run_id": "planted", "state": "complete", "files": files}
        (out / MARKER).write_text(json.dumps(marker))
    else:
        (out / MARKER).write_text("\n".join(names) + "\n")
    for extra in ([], ["--format", "parquet"], ["--xlsx"]):  # runs that remove stale files
        result = _analyze(panel, out, *extra)
        assert result.exit_code == 0, result.output
    for p, data in victims.items():
        assert p.read_bytes() == data, p
    assert sorted(os.listdir(tmp_path / "elsewhere")) == ["targets.csv", "x"]


def test_input_kept_inside_out_survives_every_later_run(tmp_path, panel):
    out = tmp_path / "out"
    out.mkdir()
    inside = out / "panel.csv"
    shutil.copy(panel, inside)
    before = inside.read_bytes()
    for extra in ([], ["--format", "parquet"], ["--xlsx"], []):
        result = _analyze(inside, out, *extra)
        assert result.exit_code == 0, result.output
        assert inside.read_bytes() == before
    # a run from another panel leaves it alone too, and does not call it foreign
    result = _analyze(panel, out)
    assert result.exit_code == 0, result.output
    assert inside.read_bytes() == before
    assert read_marker(out).records["panel.csv"].kind == "kept"


@pytest.mark.parametrize("name", ["report.html", "workbook.xlsx", "run.json", "targets.csv"])
def test_input_named_like_an_output_is_refused_not_replaced(tmp_path, panel, name):
    out = tmp_path / "out"
    out.mkdir()
    disguised = out / name
    if name == "workbook.xlsx":
        _small_panel().to_excel(disguised, index=False)
    else:
        shutil.copy(panel, disguised)  # CSV content: the reader goes by content
    before = disguised.read_bytes()
    result = runner.invoke(app, ["analyze", str(disguised), "--out", str(out), "--xlsx",
                                 "--top", "1"])
    _one_line_error(result, "never replace an input")
    assert disguised.read_bytes() == before
    assert not [n for n in os.listdir(out) if n.startswith(".levgap-")
                and n != MARKER]


def test_foreign_file_with_an_output_name_is_never_replaced_even_with_force(tmp_path, panel):
    out = tmp_path / "out"
    out.mkdir()
    (out / "report.html").write_text("<p>my own notes</p>")
    result = runner.invoke(app, ["analyze", str(panel), "--out", str(out), "--force"])
    _one_line_error(result, "levgap did not write it")
    assert (out / "report.html").read_text() == "<p>my own notes</p>"
    assert sorted(os.listdir(out)) == ["report.html"]  # nothing of the run was swapped in


@pytest.mark.parametrize("mine", ["my notes\n", '{"mine": 1}\n', "", "dir"])
def test_a_users_file_named_like_the_marker_is_never_replaced(tmp_path, panel, mine):
    """Issue 9, point 3 (FAIL 5): an existing ``.levgap-output`` that is not a levgap marker
    is the user's file: refused with and without --force, by analyze and demo."""
    out = tmp_path / "out"
    out.mkdir()
    if mine == "dir":
        (out / MARKER).mkdir()
    else:
        (out / MARKER).write_text(mine)
    for extra in ([], ["--force"]):
        _one_line_error(_analyze(panel, out, *extra), f"{MARKER}: the file exists and is not "
                        "a levgap marker")
        assert os.listdir(out) == [MARKER]  # no stage, no file of the run
    _one_line_error(runner.invoke(app, ["demo", "--out", str(out)]), "is not a levgap marker")
    assert os.listdir(out) == [MARKER]
    if mine != "dir":
        assert (out / MARKER).read_text() == mine


@pytest.mark.parametrize("mine", ["", "{}\n"])
def test_a_single_file_writer_leaves_a_users_marker_named_file_alone(tmp_path, mine):
    (tmp_path / MARKER).write_text(mine)
    atomic_write_bytes(tmp_path / "note.md", b"one")  # written, but not recorded over it
    assert (tmp_path / MARKER).read_text() == mine
    with pytest.raises(OutputError, match="levgap did not write it"):
        atomic_write_bytes(tmp_path / "note.md", b"two")  # unrecorded: never replaced
    assert (tmp_path / "note.md").read_bytes() == b"one"


def test_an_edited_output_is_not_replaced_and_a_link_is_not_followed(tmp_path, panel):
    out = tmp_path / "out"
    assert _analyze(panel, out).exit_code == 0
    targets = out / "targets.csv"
    targets.write_text(targets.read_text() + "my,own,row\n")
    result = _analyze(panel, out)
    _one_line_error(result, "changed since")
    assert targets.read_text().endswith("my,own,row\n")
    # a link named like an output, pointing at a file elsewhere
    victim = tmp_path / "victim.csv"
    victim.write_text("precious")
    targets.unlink()
    targets.symlink_to(victim)
    result = _analyze(panel, out)
    _one_line_error(result, "levgap did not write it")
    assert victim.read_text() == "precious" and targets.is_symlink()


def test_hard_link_to_an_input_is_recognised(tmp_path, panel):
    out = tmp_path / "out"
    out.mkdir()
    os.link(panel, out / "drivers.csv")
    before = panel.read_bytes()
    result = runner.invoke(app, ["analyze", str(panel), "--out", str(out), "--no-report",
                                 "--force"])
    _one_line_error(result, "never replace an input")
    assert panel.read_bytes() == before


def test_marker_of_a_newer_levgap_proves_nothing(tmp_path):
    out = tmp_path / "o"
    write_tables(_tables(), {}, out)
    marker = json.loads((out / MARKER).read_text())
    marker["levgap_output"] = 3
    (out / MARKER).write_text(json.dumps(marker))
    with pytest.raises(OutputError, match="levgap did not write it"):
        write_tables(_tables(), {}, out, force=True)
    assert (out / "ledger.csv").is_file()


def test_levgap_files_of_the_previous_run_are_removed_and_said(tmp_path, panel):
    out = tmp_path / "out"
    result = runner.invoke(app, ["analyze", str(panel), "--out", str(out), "--xlsx",
                                 "--top", "1"])
    assert result.exit_code == 0, result.output
    line = [ln for ln in result.output.splitlines() if ln.startswith("Outputs written")][0]
    run = json.loads((out / "run.json").read_text())
    named = line.split(": ", 1)[1].rstrip(".").split(", ")
    assert "report.html" in named and "workbook.xlsx" in named and named[-1] == "run.json"
    assert sorted(named) == sorted([*run["files"], "run.json"])
    assert sorted(os.listdir(out)) == sorted([*named, MARKER])
    # --no-report: the previous run's report and workbook would describe another run
    result = runner.invoke(app, ["analyze", str(panel), "--out", str(out), "--no-report",
                                 "--top", "1"])
    assert result.exit_code == 0, result.output
    assert "Removed report.html, workbook.xlsx of the previous run" in result.output
    assert "report.html" not in result.output.split("Removed")[0]
    kept = [n for n in named if n not in ("report.html", "workbook.xlsx")]
    assert sorted(os.listdir(out)) == sorted([MARKER, *kept])
    summary = runner.invoke(app, ["analyze", str(panel), "--out", str(out), "--json",
                                  "--format", "parquet", "--no-report"])
    data = json.loads(summary.output)
    assert data["written"][-1] == "run.json" and "targets.parquet" in data["written"]
    assert "targets.csv" in data["removed"] and data["run_id"] == verify_run(out).run_id


def test_table_output_never_replaces_the_runs_input_or_files(tmp_path, panel):
    out = tmp_path / "out"
    local = tmp_path / "panel.csv"
    shutil.copy(panel, local)
    assert _analyze(local, out).exit_code == 0
    before = local.read_bytes()
    _one_line_error(runner.invoke(app, ["table", str(out), "-o", str(local)]),
                    "never replace an input")
    assert local.read_bytes() == before
    # the same panel elsewhere, even one levgap wrote (as import-sec does), by its content
    moved = tmp_path / "moved.csv"
    atomic_write_bytes(moved, local.read_bytes())
    _one_line_error(runner.invoke(app, ["table", str(out), "-o", str(moved)]),
                    "content of the run's input")
    _one_line_error(runner.invoke(app, ["table", str(out), "-o", str(out / "targets.csv")]),
                    "belongs to the levgap run")
    mine = tmp_path / "table.tex"
    mine.write_text("my hand-made table")
    _one_line_error(runner.invoke(app, ["table", str(out), "-o", str(mine)]),
                    "levgap did not write it")
    assert mine.read_text() == "my hand-made table"
    fresh = tmp_path / "fresh.tex"
    for _ in range(2):  # a file levgap wrote may be rewritten
        result = runner.invoke(app, ["table", str(out), "-o", str(fresh)])
        assert result.exit_code == 0, result.output
    plot = tmp_path / "plot.svg"
    plot.write_text("<svg>mine</svg>")
    firm = pd.read_csv(out / "targets.csv").iloc[0]["firm_id"]
    _one_line_error(runner.invoke(app, ["explain", str(out), firm, "--plot", str(plot)]),
                    "levgap did not write it")
    assert plot.read_text() == "<svg>mine</svg>"


def test_check_ledger_refuses_the_config_too(tmp_path, panel):
    cfg = tmp_path / "run.toml"
    cfg.write_text("[model]\nseed = 1\n")
    before = cfg.read_bytes()
    result = runner.invoke(app, ["check", str(panel), "--config", str(cfg), "--ledger",
                                 str(cfg)])
    _one_line_error(result, "never replace an input")
    assert cfg.read_bytes() == before


def test_import_sec_refuses_the_price_file_as_output(tmp_path):
    prices = tmp_path / "prices.csv"
    shutil.copy(FIXTURES / "prices.csv", prices)
    before = prices.read_bytes()
    result = runner.invoke(app, ["import-sec", str(FIXTURES / "current"), "--prices",
                                 str(prices), "--out", str(prices)])
    _one_line_error(result, "never replace an input")
    assert prices.read_bytes() == before
    sources = tmp_path / "panel.sources.csv"
    sources.write_text("mine")
    result = runner.invoke(app, ["import-sec", str(FIXTURES / "current"), "--out",
                                 str(tmp_path / "panel.csv")])
    _one_line_error(result, "levgap did not write it")
    assert sources.read_text() == "mine"


def _legacy_folder(out: Path, panel: Path) -> None:
    """A folder as levgap 0.1 left it: a plain marker, run.json without a run id, the five
    tables with the 0.1 columns."""
    from levgap.outputs.legacy import V01_COLUMNS

    assert _analyze(panel, out).exit_code == 0
    run = json.loads((out / "run.json").read_text())
    for name in run.pop("files"):
        stem = Path(name).stem
        if stem in V01_COLUMNS:
            frame = pd.read_csv(out / name, dtype=str, keep_default_na=False)
            frame[list(V01_COLUMNS[stem])].to_csv(out / name, index=False,
                                                  lineterminator="\r\n")
        else:
            (out / name).unlink()  # fold_coefficients.csv, model.json: not in 0.1
    names = [f"{s}.csv" for s in V01_COLUMNS] + ["run.json", "report.html", "panel.csv"]
    run.pop("run_id")
    (out / "run.json").write_text(json.dumps(run))
    shutil.copy(panel, out / "panel.csv")  # 0.1 listed the user's panel kept in --out
    (out / "report.html").write_text("<p>not levgap's</p>")
    (out / MARKER).write_text("\n".join(names) + "\n")


def test_legacy_folder_is_readable_and_only_verifiable_files_are_replaced(tmp_path, panel):
    out = tmp_path / "old"
    _legacy_folder(out, panel)
    assert verify_run(out).run_id is None
    assert runner.invoke(app, ["screen", str(out), "--top", "2"]).exit_code == 0
    keep = {n: (out / n).read_bytes() for n in ("panel.csv", "report.html")}
    result = _analyze(panel, out)
    assert result.exit_code == 0, result.output
    for name, data in keep.items():  # listed by 0.1, but nothing shows levgap wrote them
        assert (out / name).read_bytes() == data, name
    assert verify_run(out).run_id is not None  # the 0.1 tables were replaced by the new run
    assert read_marker(out).records["report.html"].kind == "kept"
    result = runner.invoke(app, ["analyze", str(panel), "--out", str(out)])
    _one_line_error(result, "report.html: the file exists and levgap did not write it")


def test_run_writer_refuses_bad_names_and_leaves_no_stage(tmp_path):
    out = tmp_path / "o"
    with pytest.raises(OutputError, match="plain file name"), RunWriter(
            out, run_id=new_run_id()) as run:
        run.add("../x.csv", b"x")
    with pytest.raises(OutputError, match="plain file name"), RunWriter(
            out, run_id=new_run_id()) as run:
        run.add(MARKER, b"x")
    assert os.listdir(out) == []  # the stage of a failed run is gone


def test_single_file_writer_records_and_refuses(tmp_path):
    target = tmp_path / "note.md"
    atomic_write_bytes(target, b"one")
    atomic_write_bytes(target, b"two")  # levgap wrote it: replaced
    assert target.read_bytes() == b"two"
    target.write_bytes(b"edited by hand")
    with pytest.raises(OutputError, match="changed since"):
        atomic_write_bytes(target, b"three")
    assert target.read_bytes() == b"edited by hand"
    assert sorted(os.listdir(tmp_path)) == [MARKER, "note.md"]


def test_demo_refuses_a_foreign_folder_before_writing_anything(tmp_path):
    out = tmp_path / "d"
    out.mkdir()
    (out / "notes.txt").write_text("mine")
    result = runner.invoke(app, ["demo", "--out", str(out)])
    _one_line_error(result, "levgap did not write (notes.txt)")
    assert sorted(os.listdir(out)) == ["notes.txt"]


def test_a_users_file_named_like_a_temporary_file_is_never_removed(tmp_path, panel):
    # found by an outside review: stray temporary files were swept by their name's shape
    # alone; a levgap temporary name carries a tag of its random part (outputs.files)
    from levgap.outputs.files import is_temp_name, temp_path

    out = tmp_path / "out"
    assert _analyze(panel, out).exit_code == 0  # a results folder of levgap's
    mine = out / ".levgap-tmp-0123456789abcdef.csv"
    mine.write_text("my numbers\n", encoding="utf-8")
    ours = temp_path(out, ".csv")  # what a write killed half-way would leave behind
    ours.write_text("half written", encoding="utf-8")
    assert is_temp_name(ours.name) and not is_temp_name(mine.name)
    refused = _analyze(panel, out)  # a file levgap did not write: named, the run refused
    assert refused.exit_code == 2 and mine.name in refused.output
    for _ in range(2):
        assert _analyze(panel, out, "--force").exit_code == 0  # --force leaves it alone
    assert mine.read_text(encoding="utf-8") == "my numbers\n"
    assert not ours.exists()  # levgap's own stray file is cleaned up
