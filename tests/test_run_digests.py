"""A run's files are its own: ``run.json`` records each file's size and SHA-256.

Review findings H2 and M3 (issue 9): a folder mixing two runs is refused by every reader, with
or without the marker (``cp results/*`` drops the dotfile); a planted marker alone never makes
a user's file levgap's (the marker and the run's ``run.json`` must both list it).
"""

from __future__ import annotations

import json
import os
import shutil
from pathlib import Path

import pytest
from typer.testing import CliRunner

from levgap.cli import app
from levgap.demo import make_panel
from levgap.outputs import MARKER, Marker, Record, file_digest
from levgap.outputs.marker import marker_bytes

runner = CliRunner()


def _one_line_error(result, *patterns: str) -> str:
    assert result.exit_code == 2, result.output
    assert "Traceback" not in result.output
    lines = [ln for ln in result.output.strip().splitlines() if ln.strip()]
    assert len(lines) == 1, result.output
    for p in patterns:
        assert p in lines[0], result.output
    return lines[0]


@pytest.fixture(scope="module")
def panel(tmp_path_factory) -> Path:
    p = make_panel(3)
    path = tmp_path_factory.mktemp("in") / "panel.csv"
    p[p["firm_id"] <= "TR0080"].to_csv(path, index=False)
    return path


def _analyze(panel: Path, out: Path, *extra: str):
    return runner.invoke(app, ["analyze", str(panel), "--out", str(out), "--no-report",
                               "--top", "1", *extra])


# ------------------------------------------------------------------------------ M3: writers

@pytest.mark.parametrize("kind", ["output", "file"])
@pytest.mark.parametrize("force", [False, True])
def test_planted_marker_with_true_digests_proves_nothing(tmp_path, panel, kind, force):
    """A marker listing the user's files with their true size and SHA-256, and no run.json."""
    out = tmp_path / "out2"
    out.mkdir()
    mine = {"report.html": b"<p>my own report</p>", "targets.csv": b"firm_id,mine\r\nA,1\r\n"}
    records = {}
    for name, data in mine.items():
        (out / name).write_bytes(data)
        size, sha = file_digest(out / name)
        records[name] = Record(size, sha, kind)
    (out / MARKER).write_bytes(marker_bytes(Marker("planted0run", "complete", records)))
    result = _analyze(panel, out, *(["--force"] if force else []))
    assert result.exit_code == 2, result.output
    assert "Traceback" not in result.output
    for name, data in mine.items():
        assert (out / name).read_bytes() == data, name
    assert not [n for n in os.listdir(out) if n.startswith(".levgap-") and n != MARKER]


def test_marker_and_run_json_of_another_run_prove_nothing(tmp_path, panel):
    """The marker's run id must be the run record's: a run.json of another run is no witness."""
    out = tmp_path / "out"
    assert _analyze(panel, out).exit_code == 0
    run = json.loads((out / "run.json").read_text())
    mine = b"<p>my own report</p>"
    (out / "report.html").write_bytes(mine)
    size, sha = file_digest(out / "report.html")
    raw = json.loads((out / MARKER).read_text())
    raw["run_id"] = "someotherrun"
    raw["files"]["report.html"] = Record(size, sha, "output").to_json()
    (out / MARKER).write_text(json.dumps(raw))
    run["digests"]["report.html"] = {"size": size, "sha256": sha}
    run["files"].append("report.html")
    (out / "run.json").write_text(json.dumps(run))
    result = _analyze(panel, out, "--force")
    assert result.exit_code == 2, result.output
    assert (out / "report.html").read_bytes() == mine


def test_a_run_replaces_and_removes_its_own_files(tmp_path, panel):
    """The second witness does not stop levgap from replacing its own previous run."""
    out = tmp_path / "out"
    assert runner.invoke(app, ["analyze", str(panel), "--out", str(out), "--top", "1"]
                         ).exit_code == 0
    run = json.loads((out / "run.json").read_text())
    assert set(run["digests"]) == set(run["files"]) and "report.html" in run["files"]
    for name in run["files"]:
        assert tuple(run["digests"][name].values()) == file_digest(out / name), name
    result = _analyze(panel, out)
    assert result.exit_code == 0, result.output
    assert not (out / "report.html").exists()
    # and after `cp -r` (new inodes and times, same content): still levgap's by the digests
    copy = tmp_path / "copy"
    shutil.copytree(out, copy)
    assert _analyze(panel, copy, "--format", "parquet").exit_code == 0
    assert not (copy / "targets.csv").exists() and (copy / "targets.parquet").is_file()


def _as_written_before_digests(out: Path) -> None:
    """Rewrite a run folder as levgap did before run.json recorded digests: run.json without
    ``digests``, the marker's record of run.json updated to its new content."""
    run = json.loads((out / "run.json").read_text())
    del run["digests"]
    (out / "run.json").write_text(json.dumps(run))
    size, sha = file_digest(out / "run.json")
    raw = json.loads((out / MARKER).read_text())
    raw["files"]["run.json"] = Record(size, sha, "output").to_json()
    (out / MARKER).write_text(json.dumps(raw))


def test_a_folder_written_before_digests_is_replaced_by_a_new_run(tmp_path, panel):
    """Upgrading: the previous format's run.json (no digests) still witnesses its own marker,
    so a new run replaces that run's files; readers ask for a new run instead."""
    out = tmp_path / "out"
    assert _analyze(panel, out).exit_code == 0
    _as_written_before_digests(out)
    _one_line_error(runner.invoke(app, ["screen", str(out), "--top", "1"]), "digests")
    result = _analyze(panel, out, "--format", "parquet")
    assert result.exit_code == 0, result.output
    assert not (out / "targets.csv").exists() and (out / "targets.parquet").is_file()
    assert "digests" in json.loads((out / "run.json").read_text())
    # a file the old run.json does not list is still not levgap's
    out2 = tmp_path / "out2"
    assert _analyze(panel, out2).exit_code == 0
    (out2 / "report.html").write_bytes(b"<p>mine</p>")
    size, sha = file_digest(out2 / "report.html")
    raw = json.loads((out2 / MARKER).read_text())
    raw["files"]["report.html"] = Record(size, sha, "output").to_json()
    (out2 / MARKER).write_text(json.dumps(raw))
    _as_written_before_digests(out2)
    _analyze(panel, out2, "--force")  # --no-report: a report.html of its own would go
    assert (out2 / "report.html").read_bytes() == b"<p>mine</p>"


@pytest.mark.slow  # two reports (about 5 s of CPU)
def test_report_rebuilds_a_removed_report_and_refuses_a_copy_without_marker(tmp_path, panel):
    out = tmp_path / "out"
    assert runner.invoke(app, ["analyze", str(panel), "--out", str(out), "--top", "1"]
                         ).exit_code == 0
    (out / "report.html").unlink()
    for cmd in (["screen", str(out), "--top", "1"], ["explain", str(out), "TR0001"]):
        assert runner.invoke(app, cmd).exit_code == 0, cmd
    result = runner.invoke(app, ["report", str(out)])
    assert result.exit_code == 0, result.output
    assert (out / "report.html").is_file()
    copy = tmp_path / "copy"
    copy.mkdir()
    for p in out.iterdir():
        if p.is_file() and p.name != MARKER:
            shutil.copy(p, copy / p.name)
    assert runner.invoke(app, ["screen", str(copy), "--top", "1"]).exit_code == 0
    before = (copy / "run.json").read_bytes()
    _one_line_error(runner.invoke(app, ["report", str(copy)]), "without its marker")
    assert (copy / "run.json").read_bytes() == before


# ------------------------------------------------------------------------------ H2: readers

@pytest.fixture(scope="module")
def two_runs(tmp_path_factory, panel) -> tuple[Path, Path]:
    base = tmp_path_factory.mktemp("runs")
    other = base / "other.csv"
    p = make_panel(5)
    p[p["firm_id"] <= "TR0080"].to_csv(other, index=False)
    a, b = base / "runA", base / "runB"
    for src, out in ((panel, a), (other, b)):
        assert _analyze(src, out).exit_code == 0
    return a, b


READERS = {
    "screen": lambda out: runner.invoke(app, ["screen", str(out), "--top", "1"]),
    "table": lambda out: runner.invoke(app, ["table", str(out), "--format", "csv"]),
    "report": lambda out: runner.invoke(app, ["report", str(out)]),
    "explain": lambda out: runner.invoke(app, ["explain", str(out), "TR0001"]),
}


def _mix(two_runs, tmp_path: Path, name: str, marker: bool) -> Path:
    """``cp -r runA mix; cp runB/NAME mix/`` (``marker=False``: ``cp runA/* mix/``)."""
    a, b = two_runs
    mix = tmp_path / "mix"
    shutil.copytree(a, mix, ignore=None if marker else shutil.ignore_patterns(MARKER))
    shutil.copy(b / name, mix / name)
    return mix


@pytest.mark.parametrize("marker", [True, False])
@pytest.mark.parametrize("reader", sorted(READERS))
def test_a_folder_mixing_two_runs_is_refused_by_every_reader(two_runs, tmp_path, reader,
                                                            marker):
    name = "coefficients.csv" if reader == "table" else "targets.csv"
    a = two_runs[0]
    assert READERS[reader](a).exit_code == 0  # the run itself reads
    mix = _mix(two_runs, tmp_path, name, marker)
    run_id = json.loads((a / "run.json").read_text())["run_id"]
    before = {p.name: p.read_bytes() for p in mix.iterdir()}
    _one_line_error(READERS[reader](mix), f"{mix / name}",
                    f"{name} is not the file run {run_id} wrote")
    assert {p.name: p.read_bytes() for p in mix.iterdir()} == before  # report wrote nothing


@pytest.mark.parametrize("marker", [True, False])
def test_python_readers_refuse_a_mixed_folder(two_runs, tmp_path, marker):
    import levgap
    from levgap.errors import OutputError
    from levgap.report.tables import read_outputs

    mix = _mix(two_runs, tmp_path, "drivers.csv", marker)
    with pytest.raises(OutputError, match="drivers.csv is not the file run"):
        read_outputs(mix)
    with pytest.raises(OutputError, match="drivers.csv is not the file run"):
        levgap.proforma(mix, "TR0001", [{"name": "nothing"}])
    read_outputs(mix, names=["targets"])  # the tables not read are not checked
    # a model.json of another run, stamped with this run's id
    a, b = two_runs
    mix2 = _mix(two_runs, tmp_path / "m", "model.json", marker)
    model = json.loads((b / "model.json").read_text())
    model["run_id"] = json.loads((a / "run.json").read_text())["run_id"]
    (mix2 / "model.json").write_text(json.dumps(model))
    with pytest.raises(OutputError, match="model.json is not the file run"):
        levgap.load_model(mix2)
    assert levgap.load_model(a).record["run_id"] == model["run_id"]


def test_a_copy_without_the_marker_reads_and_hashes_only_on_the_slow_path(two_runs, tmp_path,
                                                                         monkeypatch):
    import levgap.outputs.verify as verify

    a = two_runs[0]
    hashed: list[str] = []
    real = verify.file_digest
    monkeypatch.setattr(verify, "file_digest", lambda p: hashed.append(p.name) or real(p))
    assert READERS["screen"](a).exit_code == 0
    assert hashed == []  # the marker's inode and time match: nothing hashed
    copy = tmp_path / "copy"
    copy.mkdir()
    for p in a.iterdir():
        if p.name != MARKER:
            shutil.copy(p, copy / p.name)
    assert READERS["screen"](copy).exit_code == 0
    assert hashed == ["targets.csv"]
    # same size, other content: the digest decides
    t = (copy / "targets.csv").read_bytes()
    i = t.index(b"TR0001")
    (copy / "targets.csv").write_bytes(t[:i] + b"TR0002" + t[i + 6:])
    _one_line_error(READERS["screen"](copy), "targets.csv is not the file run")


def test_report_accepts_edited_tables_only_when_asked(two_runs, tmp_path):
    out = tmp_path / "edited"
    shutil.copytree(two_runs[0], out)
    t = (out / "targets.csv").read_text(encoding="utf-8")
    (out / "targets.csv").write_text(t.replace("TR0001", "MY0001"), encoding="utf-8")
    _one_line_error(READERS["report"](out), "targets.csv is not the file run")
    assert not (out / "report.html").exists() or "MY0001" not in (out / "report.html").read_text(
        encoding="utf-8")
    result = runner.invoke(app, ["report", str(out), "--accept-edits"])
    assert result.exit_code == 0, result.output
    assert "MY0001" in (out / "report.html").read_text(encoding="utf-8")
    run = json.loads((out / "run.json").read_text())
    assert tuple(run["digests"]["targets.csv"].values()) == file_digest(out / "targets.csv")
    assert "report.html" in run["files"]
    assert READERS["screen"](out).exit_code == 0  # re-stamped: every reader accepts them now
    # an accepted table is the user's: a later run does not replace it
    before = (out / "targets.csv").read_bytes()
    assert _analyze(two_runs[0].parent / "other.csv", out).exit_code == 2
    assert (out / "targets.csv").read_bytes() == before
    # still checked against the contract
    (out / "targets.csv").write_text("firm_id\r\nX\r\n", encoding="utf-8")
    _one_line_error(runner.invoke(app, ["report", str(out), "--accept-edits"]),
                    "must have the column")
