"""Real-world inputs end to end (issue 3): the user's own headers and formats, messy rows,
hostile cells, foreign output folders and damaged files, through the CLI."""

from __future__ import annotations

import csv
import sys
from pathlib import Path

import openpyxl
import pandas as pd
import pytest
from typer.testing import CliRunner

from levgap.cli import app
from levgap.demo import make_panel

sys.path.insert(0, str(Path(__file__).parent))
from test_ingest import _mutations  # noqa: E402

RENAMED = {
    "firm_id": "Company code", "fiscal_year": "FY", "industry": "SIC", "total_assets":
    "Assets (EUR k)", "total_debt": "Debt (EUR k)", "ppe_net": "Net PP&E", "ebitda": "EBITDA",
    "book_equity": "Equity", "firm_name": "Name", "market_equity": "Market cap",
}
FORMULA_START = ("=", "+", "-", "@", "\t", "\r")


@pytest.fixture(scope="module")
def panel() -> pd.DataFrame:
    """Every fourth firm of the invented demo panel (about 960 firm-years, 13 industries)."""
    p = make_panel(7)
    ids = sorted(p["firm_id"].unique())[::4]
    p = p[p["firm_id"].isin(ids)].reset_index(drop=True)
    return p[[c for c in p.columns if c in RENAMED or c in ("revenue", "cash")]]


def _run(*args: str):
    # DataWarnings (e.g. the Latin-1 fallback) are shown by the CLI as notes; none may escape,
    # since pytest turns warnings into errors
    result = CliRunner().invoke(app, [str(a) for a in args])
    # an uncaught exception would be recorded here rather than as a clean exit
    assert result.exception is None or isinstance(result.exception, SystemExit), result.output
    return result


def _one_line_error(result) -> str:
    text = result.output.strip()
    assert "Traceback" not in text
    assert len(text.splitlines()) == 1, text
    return text


def test_same_panel_three_ways_gives_identical_targets(tmp_path, panel):
    # 1. plain CSV, money in millions
    plain = tmp_path / "plain.csv"
    panel.to_csv(plain, index=False)

    # 2. European export: semicolons, decimal commas, dot thousands, money in thousands
    eu = panel.copy()
    money = ["total_assets", "total_debt", "ppe_net", "ebitda", "book_equity", "market_equity",
             "revenue", "cash"]
    for c in money:
        eu[c] = eu[c].map(lambda v: "" if pd.isna(v) else f"{v * 1000:,.6f}".replace(
            ",", "_").replace(".", ",").replace("_", "."))
    semi = tmp_path / "export.csv"
    eu.to_csv(semi, sep=";", index=False)
    semi_cfg = tmp_path / "semi.toml"
    semi_cfg.write_text('[input]\ndelimiter = ";"\ndecimal = ","\nthousands = "."\n'
                        "[units]\nscale = 0.001\n")

    # 3. workbook with the user's own headers, a title row above them
    book = tmp_path / "panel.xlsx"
    wb = openpyxl.Workbook()
    ws = wb.active
    ws.title = "Peers"
    ws.append(["Peer panel, invented figures"])
    ws.append([RENAMED.get(c, c) for c in panel.columns])
    for row in panel.itertuples(index=False):
        ws.append([None if (isinstance(v, float) and v != v) else v for v in row])
    wb.save(book)
    book_cfg = tmp_path / "book.toml"
    book_cfg.write_text(
        "[columns]\n" + "".join(f'{k} = "{v}"\n' for k, v in RENAMED.items())
        + '[input]\nsheet = "Peers"\nskip_rows = 1\n'
    )

    targets = []
    for name, path, cfg in [("a", plain, None), ("b", semi, semi_cfg), ("c", book, book_cfg)]:
        args = ["analyze", path, "--out", tmp_path / name, "--quiet", "--no-report"]
        if cfg is not None:
            args += ["--config", cfg]
        result = _run(*args)
        assert result.exit_code == 0, result.output
        targets.append(pd.read_csv(tmp_path / name / "targets.csv", dtype={"firm_id": str}))
    assert len(targets[0]) > 1000
    pd.testing.assert_frame_equal(targets[0], targets[1], check_exact=False, rtol=1e-12)
    pd.testing.assert_frame_equal(targets[0], targets[2], check_exact=False, rtol=1e-12)


def test_messy_file_runs_and_lists_every_bad_row(tmp_path, panel):
    good = panel.astype(str).replace("nan", "")
    n = len(good)
    bad = good.iloc[:6].copy()
    bad["firm_id"] = [f"MESSY-{i}" for i in range(6)]
    bad.iloc[0, bad.columns.get_loc("total_assets")] = "0"
    bad.iloc[1, bad.columns.get_loc("total_assets")] = "-12.5"
    bad.iloc[2, bad.columns.get_loc("total_debt")] = "about ten"
    bad.iloc[3, bad.columns.get_loc("ebitda")] = ""
    bad.iloc[4, bad.columns.get_loc("industry")] = " "
    conflict = good.iloc[[10]].copy()
    # same firm-year as row 11, different (still admissible) debt
    conflict["total_debt"] = str(float(conflict["total_debt"].iloc[0]) * 0.5 + 0.1)
    frame = pd.concat([good, bad, conflict], ignore_index=True)
    path = tmp_path / "messy.csv"
    frame.to_csv(path, index=False)
    result = _run("analyze", path, "--out", tmp_path / "out", "--quiet", "--no-report")
    assert result.exit_code == 0, result.output
    ex = pd.read_csv(tmp_path / "out" / "exclusions.csv", dtype={"firm_id": str},
                     keep_default_na=False)
    whole = ex[ex["measure"] == ""].set_index("source_row")["reason"].to_dict()
    assert whole == {
        n + 1: "assets_not_positive", n + 2: "assets_not_positive", n + 3: "non_numeric",
        n + 4: "missing_value", n + 5: "missing_value", 11: "conflicting_duplicate",
        n + 7: "conflicting_duplicate",
    }
    targets = pd.read_csv(tmp_path / "out" / "targets.csv", dtype={"firm_id": str})
    messy = set(targets.loc[targets["firm_id"].str.startswith("MESSY"), "firm_id"])
    assert messy == {"MESSY-5"}  # the one untouched copy is used


def test_hostile_names_neutralised_in_every_table_and_utf8_from_latin1(tmp_path, panel):
    p = panel.copy()
    firms = sorted(p["firm_id"].unique())
    names = {
        firms[0]: '=HYPERLINK("http://example.invalid","click")',
        firms[1]: "@SUM(A1)",
        firms[2]: "+cmd|' /C calc'!A0",
        firms[3]: "-2+3",
        firms[4]: "Forges Éclatées de Tarrow",
    }
    p["firm_name"] = p["firm_id"].map(names).fillna(p["firm_name"])
    path = tmp_path / "latin.csv"
    path.write_bytes(p.to_csv(index=False).encode("latin-1"))
    result = _run("analyze", path, "--out", tmp_path / "out", "--quiet", "--no-report", "--xlsx")
    assert result.exit_code == 0, result.output
    csvs = sorted((tmp_path / "out").glob("*.csv"))
    assert {c.name for c in csvs} >= {"targets.csv", "drivers.csv", "exclusions.csv"}
    for f in csvs:
        text = f.read_bytes().decode("utf-8")  # every output is UTF-8
        for row in csv.reader(text.splitlines()):
            for cell in row:
                if cell and not _is_number(cell):
                    assert not cell.startswith(FORMULA_START), (f.name, cell)
    targets = (tmp_path / "out" / "targets.csv").read_text(encoding="utf-8")
    assert "Forges Éclatées de Tarrow" in targets
    assert "'=HYPERLINK(" in targets and "'@SUM(A1)" in targets and "'+cmd|" in targets
    book = tmp_path / "out" / "workbook.xlsx"
    assert book.is_file()  # asked for with --xlsx: its cells are checked, never skipped
    wb = openpyxl.load_workbook(book, read_only=True)
    texts = 0
    for ws in wb.worksheets:
        for row in ws.iter_rows(values_only=True):
            for v in row:
                if isinstance(v, str):
                    texts += 1
                    assert not v.startswith(FORMULA_START), (ws.title, v)
    wb.close()
    assert texts > 1000


def _is_number(cell: str) -> bool:
    try:
        float(cell)
    except ValueError:
        return False
    return True


def test_out_into_foreign_folder_is_refused_without_touching_it(tmp_path, panel):
    path = tmp_path / "panel.csv"
    panel.to_csv(path, index=False)
    out = tmp_path / "shared"
    out.mkdir()
    theirs = out / "notes.txt"
    theirs.write_text("someone else's file")
    before = theirs.stat().st_mtime_ns
    result = _run("analyze", path, "--out", out, "--quiet")
    assert result.exit_code == 2
    assert "--force" in _one_line_error(result)
    assert sorted(p.name for p in out.iterdir()) == ["notes.txt"]
    assert theirs.read_text() == "someone else's file" and theirs.stat().st_mtime_ns == before


def test_input_inside_out_folder_is_never_overwritten(tmp_path, panel):
    out = tmp_path / "work"
    out.mkdir()
    path = out / "targets.csv"  # the user's panel has the name of an output
    panel.to_csv(path, index=False)
    original = path.read_bytes()
    result = _run("analyze", path, "--out", out, "--quiet", "--force", "--no-report")
    assert result.exit_code == 2
    assert path.read_bytes() == original


def _seed_csv(panel: pd.DataFrame) -> bytes:
    return panel.head(12).to_csv(index=False).encode("utf-8")


@pytest.mark.parametrize("command", ["check", "analyze"])
def test_byte_mutated_files_exit_0_or_2_without_traceback(tmp_path, panel, command):
    seed = _seed_csv(panel)
    mutations = _mutations(seed, 30 if command == "check" else 25)
    codes = []
    for i, data in enumerate(mutations):
        path = tmp_path / f"m{i}.csv"
        path.write_bytes(data)
        args = [command, path]
        if command == "analyze":
            args += ["--out", tmp_path / f"o{i}", "--quiet", "--no-report"]
        result = _run(*args)
        assert result.exit_code in (0, 2), (i, result.output)
        if result.exit_code == 2:
            assert _one_line_error(result).startswith("levgap: error:")
        codes.append(result.exit_code)
    assert 2 in codes
    if command == "check":
        assert 0 in codes
