"""workbook.xlsx: five sheets, frozen headers, autofilters, percent formats, no formulas, and
every value read back by openpyxl as written."""

from __future__ import annotations

import re
import zipfile

import numpy as np
import openpyxl
import pandas as pd
import pytest
from _report_data import make_outputs

from levgap.errors import DataWarning, OutputError
from levgap.report import workbook as wbmod
from levgap.report.tables import neutralise
from levgap.report.workbook import SHEETS, readable_targets, write_workbook


@pytest.fixture(scope="module")
def outputs():
    tables, manifest = make_outputs(25, 3, seed=4)
    targets = tables["targets"].copy()
    # Characters XML cannot hold, and leading/trailing spaces, in a name.
    targets.loc[targets["firm_id"] == "F00010", "firm_name"] = " Ctrl\x01Char Ltd "
    return {**tables, "targets": targets}, manifest


@pytest.fixture(scope="module")
def book(outputs, tmp_path_factory):
    tables, manifest = outputs
    path = write_workbook(tables, manifest, tmp_path_factory.mktemp("wb") / "workbook.xlsx")
    return path, openpyxl.load_workbook(path)


def test_five_sheets_frozen_headers_autofilter(book, outputs):
    path, wb = book
    tables, _ = outputs
    assert wb.sheetnames == list(SHEETS)
    sizes = {"Targets": "targets", "Drivers": "drivers", "Coefficients": "coefficients",
             "Exclusions": "exclusions"}
    for sheet, key in sizes.items():
        ws = wb[sheet]
        frame = tables[key]
        if sheet == "Targets":  # the words beside the codes
            frame = readable_targets(frame, outputs[1])
        assert ws.freeze_panes == "A2", sheet
        last = openpyxl.utils.get_column_letter(frame.shape[1])
        assert ws.auto_filter.ref == f"A1:{last}{len(frame) + 1}", sheet
        assert [c.value for c in ws[1]] == list(frame.columns)
        assert all(c.font.bold for c in ws[1])
        assert ws.max_row == len(frame) + 1
        widths = [ws.column_dimensions[openpyxl.utils.get_column_letter(j)].width
                  for j in range(1, frame.shape[1] + 1)]
        assert all(8 <= w <= 48 for w in widths), (sheet, widths)
    assert wb["Summary"].freeze_panes == "A2"


def test_no_formula_cells(book):
    path, wb = book
    for ws in wb:
        for row in ws.iter_rows():
            for cell in row:
                assert cell.data_type != "f", (ws.title, cell.coordinate, cell.value)
                if isinstance(cell.value, str):
                    assert not cell.value.startswith(("=", "+", "-", "@")), cell.value
    with zipfile.ZipFile(path) as z:
        for name in z.namelist():
            if name.startswith("xl/worksheets/"):
                assert not re.search(rb"<f[ >]", z.read(name)), name


def test_values_round_trip(book, outputs):
    path, _ = book
    tables, _ = outputs
    expected = neutralise(readable_targets(tables["targets"], outputs[1]))
    got = pd.read_excel(path, sheet_name="Targets", engine="openpyxl")
    cols = list(got.columns)
    assert cols[cols.index("industry") + 1] == "industry_name"
    assert cols[cols.index("flags") + 1] == "flag_notes"
    flagged = got[got["flags"].fillna("").str.startswith("volatility_imputed")]
    assert len(flagged)
    assert flagged["flag_notes"].str.startswith("volatility_imputed: fewer than three").all()
    assert (got["flag_notes"].isna() == (got["flags"].fillna("") == "")).all()
    assert list(got.columns) == list(expected.columns)
    for col in ("actual", "target", "gap", "gap_z", "debt_to_target", "peer_target"):
        np.testing.assert_array_equal(got[col].to_numpy(float), expected[col].to_numpy(float))
    assert (got["fiscal_year"].to_numpy() == expected["fiscal_year"].to_numpy()).all()
    names = got["firm_name"].tolist()
    assert "<script>document.title='pwned'</script>" in names
    assert "'=HYPERLINK(\"http://example.invalid\")" in names  # neutralised, kept as text
    assert " CtrlChar Ltd " in names  # \x01 dropped, spaces kept
    flags = got["flags"].fillna("").tolist()
    assert flags == expected["flags"].tolist()
    excl = pd.read_excel(path, sheet_name="Exclusions", engine="openpyxl")
    assert "'=cmd|' /C calc'!A0" in excl["firm_id"].tolist()


def test_number_formats(book):
    _, wb = book
    t = wb["Targets"]
    head = {c.value: c.column for c in t[1]}
    assert t.cell(2, head["actual"]).number_format == "0.0%"
    assert t.cell(2, head["band_high"]).number_format == "0.0%"
    assert t.cell(2, head["gap_z"]).number_format == "0.00"
    d = wb["Drivers"]
    dh = {c.value: c.column for c in d[1]}
    seen = {}
    for row in range(2, 12):
        driver = d.cell(row, dh["driver"]).value
        seen[driver] = d.cell(row, dh["firm_value"]).number_format
        assert d.cell(row, dh["contribution"]).number_format == "0.00%"
    assert seen["tangibility"] == "0.0%" and seen["profitability"] == "0.0%"
    assert seen["size"] == "0.000" and seen["market_to_book"] == "0.000"
    c = wb["Coefficients"]
    ch = {x.value: x.column for x in c[1]}
    assert c.cell(2, ch["p_value"]).number_format == "0.000"


def test_summary(book, outputs):
    _, wb = book
    tables, manifest = outputs
    rows = list(wb["Summary"].iter_rows(min_row=2, values_only=True))
    cut = next(i for i, r in enumerate(rows) if r[0] and str(r[0]).startswith("Glossary"))
    items = {r[0]: r[1] for r in rows[:cut] if r[0]}
    assert items["firms"] == manifest["counts"]["firms"]
    glossary = {r[0]: r[1:4] for r in rows[cut + 2:] if r[0]}
    assert glossary["gap"] == ("gap", "pp", "actual minus target")
    assert glossary["debt_to_target"][0] == "debt to target"
    assert items["standard errors clustered by"] == "firm"
    assert items["input file"] == "panels/<odd> name.csv"
    assert "not investment, credit or legal advice" in items["caution"]
    assert items["measure"] == "model"  # the header row of the model fit table
    assert items["book"] == "linear"


def test_too_many_rows_keep_the_first_and_warn(outputs, tmp_path, monkeypatch):
    tables, manifest = outputs
    monkeypatch.setattr(wbmod, "EXCEL_MAX_ROWS", 201)
    with pytest.warns(DataWarning, match=r"Drivers has 750 rows, more than an Excel sheet"):
        path = write_workbook(tables, manifest, tmp_path / "w.xlsx")
    wb = openpyxl.load_workbook(path, read_only=True)
    assert wb["Drivers"].max_row == 201
    summary = [r for r in wb["Summary"].iter_rows(values_only=True) if r and r[0] == "truncated"]
    assert any("Drivers: first 200 of 750 rows" in str(r[1]) for r in summary)
    wb.close()


def test_missing_table_and_unwritable_path(outputs, tmp_path):
    tables, manifest = outputs
    with pytest.raises(OutputError, match=r"got no \['coefficients'\]"):
        write_workbook({k: v for k, v in tables.items() if k != "coefficients"}, manifest,
                       tmp_path / "w.xlsx")
    blocker = tmp_path / "file"
    blocker.write_text("x")
    with pytest.raises(OutputError, match="must be writable"):
        write_workbook(tables, manifest, blocker / "w.xlsx")
    assert not list(tmp_path.glob(".levgap-tmp-*"))


def test_odd_column_types_round_trip(outputs, tmp_path):
    tables, manifest = outputs
    excl = pd.DataFrame({
        "source_row": pd.array([1, None, 3], dtype="Int64"),
        "firm_id": ["a", None, "  padded  "],
        "fiscal_year": [2020.0, float("nan"), float("inf")],
        "measure": ["", "book", "market"],
        "reason": ["x", "y", "z"],
        "detail": ["1 < 2 & 3 > 2", "tab\there", "@SUM(1)"],
        "kept": [True, False, True],
    })
    path = write_workbook({**tables, "exclusions": excl}, manifest, tmp_path / "w.xlsx")
    got = [r for r in openpyxl.load_workbook(path)["Exclusions"].iter_rows(values_only=True)]
    assert got[0] == tuple(excl.columns)
    assert got[1] == (1, "a", 2020, None, "x", "1 < 2 & 3 > 2", True)
    assert got[2] == (None, None, None, "book", "y", "tab\there", False)
    assert got[3] == (3, "  padded  ", None, "market", "z", "'@SUM(1)", True)
