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
