"""``levgap explain`` prints, to the character, what it printed before it stopped using pandas.

``fixtures/explain/run`` is a folder ``levgap analyze`` wrote (without its marker) on the demo
panel cut to industries 1311, 3716 and 9990 and fiscal years 2020-2023, with a peer list
(``TR0002`` lists ``TR0003``, ``TR0195``, ``TR0398``)::

    p = make_panel()
    p[p.industry.isin(["1311", "3716", "9990"]) & (p.fiscal_year >= 2020)].to_csv(...)
    levgap analyze panel.csv --out run --no-report --quiet --peers peers.csv

Each ``fixtures/explain/expected/<case>.txt`` is the exit code and the text the pandas-based
``explain`` (main at 1874631) printed for that case; ``explain`` must print the same now. The
cases cover a firm with ``few_peers`` and a pooled industry, a listed peer group, a
persistent firm, a winsorised driver, a firm found by part of its name, narrow and wide
terminals, ``--peers`` and the one-line refusals (unknown firm, year, excluded measure).
Being a folder written before, it also checks that such a folder stays explainable.

To write the expected files again (after a deliberate change of the text):
``python tests/test_explain_text.py``.
"""

from __future__ import annotations

import shutil
import sys
from pathlib import Path

import pytest
from typer.testing import CliRunner

HERE = Path(__file__).parent / "fixtures" / "explain"
CASES: dict[str, tuple[int, list[str]]] = {
    "gas-firm": (100, ["TR0001"]),
    "few-peers-pooled": (100, ["TR0194", "--peers"]),
    "listed-peers": (100, ["TR0002", "--peers"]),
    "persistent-market": (100, ["TR0022", "--measure", "market"]),
    "earlier-year": (100, ["TR0006", "--year", "2022"]),
    "id-in-lower-case-winsorised": (100, ["tr0003"]),
    "part-of-a-name": (100, ["belbrook"]),
    "several-names": (100, ["Gasfields"]),
    "unknown-firm": (100, ["TR9999"]),
    "excluded-measure": (100, ["TR0030", "--measure", "market"]),
    "year-not-held": (100, ["TR0001", "--year", "2015"]),
    "narrow-with-peers": (60, ["TR0018", "--peers"]),
    "wide-market-peers": (200, ["TR0397", "--peers", "--measure", "market"]),
    "very-narrow": (40, ["TR0195"]),
}


def explain_text(run: Path, width: int, args: list[str]) -> str:
    """``levgap explain RUN ARGS`` on a terminal ``width`` columns wide: exit code and text."""
    from levgap.cli import app

    result = CliRunner().invoke(app, ["explain", str(run), *args],
                                env={"COLUMNS": str(width)})
    return f"exit {result.exit_code}\n{result.output}".replace(str(run), "RUN")


@pytest.fixture(scope="module")
def run(tmp_path_factory: pytest.TempPathFactory) -> Path:
    out = tmp_path_factory.mktemp("explain") / "run"
    shutil.copytree(HERE / "run", out)
    return out


@pytest.mark.parametrize("case", sorted(CASES))
def test_explain_prints_what_it_printed_before(run: Path, case: str) -> None:
    width, args = CASES[case]
    want = (HERE / "expected" / f"{case}.txt").read_text(encoding="utf-8")
    assert explain_text(run, width, args) == want


def _edited_run(tmp_path: Path, table: str, firm_row: str, column: str, edit) -> Path:
    """A copy of the stored run with one cell of the row starting ``firm_row`` edited, and
    ``run.json`` restamped as a tamperer who knows the format would."""
    import json

    from levgap.outputs import file_digest

    out = tmp_path / "run"
    shutil.copytree(HERE / "run", out)
    path = out / f"{table}.csv"
    lines = path.read_bytes().decode("utf-8").split("\r\n")
    at = next(i for i, ln in enumerate(lines) if ln.startswith(firm_row))
    cells = lines[at].split(",")
    i = lines[0].split(",").index(column)
    cells[i] = edit(cells[i])
    lines[at] = ",".join(cells)
    path.write_bytes("\r\n".join(lines).encode("utf-8"))
    run = json.loads((out / "run.json").read_text(encoding="utf-8"))
    size, sha = file_digest(path)
    run["digests"][path.name] = {"size": size, "sha256": sha}
    (out / "run.json").write_text(json.dumps(run), encoding="utf-8")
    return out


def test_a_blank_peer_count_reads_as_no_peers(tmp_path: Path) -> None:
    """A whole-number column with a blank cell is read (as a blank number), not refused: the
    pandas-based reader failed on it with "cannot convert NA to integer"."""
    out = _edited_run(tmp_path, "targets", '"TR0001","Belbrook Gasfields",2023,"1311","book",',
                      "peer_count", lambda v: "")
    text = explain_text(out, 100, ["TR0001"])
    assert text.startswith("exit 0\n"), text
    assert "(no peers)" in text and "peers: none." in text


def test_drivers_that_do_not_add_up_are_one_line(tmp_path: Path) -> None:
    """Refused before anything is printed (the pandas-based explain printed half the view)."""
    out = _edited_run(tmp_path, "drivers", '"TR0001",2023,"book","size",', "contribution",
                      lambda v: repr(float(v) + 0.5))
    text = explain_text(out, 100, ["TR0001"])
    assert text.count("\n") == 2 and text.startswith("exit 2\nlevgap: error: driver "
                                                      "contributions of firm TR0001"), text


if __name__ == "__main__":  # write the expected files from the code on the path
    import tempfile

    with tempfile.TemporaryDirectory() as tmp:
        copy = Path(tmp) / "run"
        shutil.copytree(HERE / "run", copy)
        (HERE / "expected").mkdir(exist_ok=True)
        for name, (w, a) in CASES.items():
            (HERE / "expected" / f"{name}.txt").write_text(explain_text(copy, w, a),
                                                          encoding="utf-8")
            print(name, file=sys.stderr)
