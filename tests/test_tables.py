"""Safe tabular outputs: neutralised cells, atomic writes, foreign folders, inputs untouched."""

from __future__ import annotations

import json
import os

import numpy as np
import pandas as pd
import pytest

from levgap.errors import OutputError
from levgap.outputs import MARKER, file_digest, read_marker
from levgap.report.tables import neutralise, read_outputs, write_tables

NASTY = ["=HYPERLINK(\"http://x\",\"y\")", "@SUM(A1)", "+cmd|' /C calc'!A0", "-5 notes",
         "\tTab", "\rCR", "Plain", ""]


def _tables():
    firms = pd.DataFrame({  # not a contract table: read back without a column check
        "firm_id": pd.Series(["0001", "0002", "0003", "0004", "0005", "0006", "0007", "0008"],
                             dtype="str"),
        "firm_name": pd.Series(NASTY, dtype="str"),
        "gap": np.linspace(-0.2, 0.2, 8),
        "peer_count": np.arange(8, dtype=np.int64),
    })
    exclusions = pd.DataFrame({
        "source_row": np.array([3], dtype=np.int64),
        "firm_id": pd.Series(["=1+1"], dtype="str"),
        "fiscal_year": pd.array([pd.NA], dtype="Int64"),
        "measure": pd.Series([""], dtype="str"),
        "reason": pd.Series(["non_numeric"], dtype="str"),
        "detail": pd.Series(["total_debt must be a number; got '@x'"], dtype="str"),
    })
    return {"firms": firms, "exclusions": exclusions}


def test_neutralise_text_only():
    frame = pd.DataFrame({
        "name": pd.Series(NASTY, dtype="str"),
        "obj": pd.Series([*NASTY[:7], 3], dtype=object),
        "num": np.linspace(-1, 1, 8),
    })
    out = neutralise(frame)
    assert out["name"].tolist()[:6] == ["'" + v for v in NASTY[:6]]
    assert out["name"].tolist()[6:] == ["Plain", ""]
    assert out["obj"].tolist()[7] == 3 and out["obj"].tolist()[0].startswith("'=")
    assert out["num"].tolist() == frame["num"].tolist()
    assert frame["name"].tolist() == NASTY  # input unchanged


@pytest.mark.parametrize("fmt", ["csv", "parquet"])
def test_write_and_read_back(tmp_path, fmt):
    out = tmp_path / "out"
    manifest = {"counts": {"rows": np.int64(8)}, "share": float("nan"), "path": out}
    written = write_tables(_tables(), manifest, out, fmt=fmt)
    assert [p.name for p in written] == [f"firms.{fmt}", f"exclusions.{fmt}", "run.json"]
    assert sorted(os.listdir(out)) == sorted([MARKER, *(p.name for p in written)])
    tables, man = read_outputs(out)
    run_id = man.pop("run_id")
    assert run_id == read_marker(out).run_id and len(run_id) == 16
    digests = man.pop("digests")
    assert {n: (d["size"], d["sha256"]) for n, d in digests.items()} == {
        n: file_digest(out / n) for n in (f"exclusions.{fmt}", f"firms.{fmt}")}
    assert man == {"counts": {"rows": 8}, "share": None, "path": str(out),
                   "files": [f"exclusions.{fmt}", f"firms.{fmt}"]}
    t = tables["firms"]
    assert t["firm_id"].tolist()[0] == "0001"
    assert t["firm_name"].tolist()[:3] == ["'" + v for v in NASTY[:3]]
    assert t["gap"].tolist() == pytest.approx(np.linspace(-0.2, 0.2, 8).tolist())
    assert tables["exclusions"]["firm_id"].tolist() == ["'=1+1"]


def test_csv_cells_never_start_with_formula_characters(tmp_path):
    write_tables(_tables(), {}, tmp_path / "o")
    text = (tmp_path / "o" / "firms.csv").read_text(encoding="utf-8")
    for line in text.splitlines()[1:]:
        name = line.split(",", 2)[1].strip('"')
        assert not name.startswith(("=", "+", "-", "@", "\t", "\r")), line


def test_rerun_into_own_folder_and_format_switch(tmp_path):
    out = tmp_path / "o"
    write_tables(_tables(), {}, out, fmt="csv")
    write_tables(_tables(), {"run": 2}, out, fmt="parquet")
    names = sorted(os.listdir(out))
    assert names == [MARKER, "exclusions.parquet", "firms.parquet", "run.json"]
    assert read_outputs(out)[1]["run"] == 2


def test_foreign_folder_refused_and_untouched(tmp_path):
    out = tmp_path / "mine"
    out.mkdir()
    foreign = out / "budget.xlsx"
    foreign.write_bytes(b"precious")
    before = foreign.stat().st_mtime_ns
    with pytest.raises(OutputError, match=r"levgap did not write \(budget.xlsx\).*--force"):
        write_tables(_tables(), {}, out)
    assert foreign.read_bytes() == b"precious" and foreign.stat().st_mtime_ns == before
    assert sorted(os.listdir(out)) == ["budget.xlsx"]
    write_tables(_tables(), {}, out, force=True)
    assert foreign.read_bytes() == b"precious"
    # a re-run is allowed, the foreign file still needs --force
    with pytest.raises(OutputError):
        write_tables(_tables(), {}, out)


def test_input_never_overwritten(tmp_path):
    out = tmp_path / "o"
    out.mkdir()
    panel = out / "firms.csv"
    panel.write_text("firm_id\n1\n")
    with pytest.raises(OutputError, match="never replace an input"):
        write_tables(_tables(), {}, out, force=True, inputs=[panel])
    assert panel.read_text() == "firm_id\n1\n"


def test_out_path_is_a_file(tmp_path):
    f = tmp_path / "file"
    f.write_text("x")
    with pytest.raises(OutputError, match="must be a folder"):
        write_tables(_tables(), {}, f)


def test_bad_names_and_format(tmp_path):
    with pytest.raises(OutputError, match="format"):
        write_tables(_tables(), {}, tmp_path / "o", fmt="xls")
    with pytest.raises(OutputError, match="table name"):
        write_tables({"../evil": pd.DataFrame()}, {}, tmp_path / "o")


def test_read_outputs_needs_manifest(tmp_path):
    with pytest.raises(OutputError, match="run.json"):
        read_outputs(tmp_path)


def test_no_temp_files_left(tmp_path):
    out = tmp_path / "o"
    write_tables(_tables(), {"x": 1}, out)
    assert not [n for n in os.listdir(out) if n.startswith((".levgap-tmp-", ".levgap-stage-"))]
    assert json.loads((out / "run.json").read_text())["x"] == 1


def test_files_get_the_usual_mode(tmp_path):
    umask = os.umask(0o022)
    try:
        written = write_tables(_tables(), {}, tmp_path / "o")
    finally:
        os.umask(umask)
    for p in written:
        assert p.stat().st_mode & 0o777 == 0o644


def test_a_file_levgap_wrote_beside_a_run_is_known_not_foreign(tmp_path):
    from levgap.outputs import atomic_write_bytes

    out = tmp_path / "o"
    write_tables(_tables(), {}, out)
    atomic_write_bytes(out / "table.tex", b"\\begin{tabular}")  # e.g. levgap table -o
    write_tables(_tables(), {}, out)  # not refused as foreign
    # and kept: no run record lists it, so a run never removes it (only the marker vouches)
    assert (out / "table.tex").read_bytes() == b"\\begin{tabular}"
    assert read_marker(out).records["table.tex"].written
