"""Row rules, the exclusion ledger and the accounting of every input row."""

from __future__ import annotations

import warnings

import numpy as np
import pandas as pd
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from levgap.config import InputOptions, RunConfig
from levgap.errors import DataWarning, SchemaError
from levgap.ingest import FLAGS, REASONS, read_panel, validate_panel
from levgap.ingest.validate import parse_numbers
from levgap.panel import EXCLUSION_COLUMNS

GOOD = {
    "firm_id": "A1", "fiscal_year": 2020, "industry": "10", "total_assets": 100.0,
    "total_debt": 30.0, "ppe_net": 40.0, "ebitda": 12.0, "book_equity": 50.0,
    "market_equity": 70.0,
}


def _frame(*changes: dict) -> pd.DataFrame:
    rows = []
    for i, ch in enumerate(changes):
        row = dict(GOOD, firm_id=f"F{i:03d}")
        row.update(ch)
        rows.append(row)
    return pd.DataFrame(rows).astype(object)


def _reason_of(panel, row):
    ex = panel.exclusions.set_index("source_row")
    return ex.loc[row, "reason"] if row in ex.index else None


@pytest.mark.parametrize(
    ("change", "reason", "detail"),
    [
        ({"total_debt": "abc"}, "non_numeric", "total_debt must be a number; got 'abc'"),
        ({"fiscal_year": "FY20"}, "non_numeric", "fiscal_year must be a number"),
        ({"ebitda": None}, "missing_value", "ebitda must have a value"),
        ({"firm_id": "  "}, "missing_value", "firm_id must have a value"),
        # the blank tokens are blanks in text columns too (issue 9, point 11)
        ({"industry": "n/a"}, "missing_value", "industry ('n/a' counts as blank) must have"),
        ({"industry": "Retail n/a"}, None, None),
        ({"fiscal_year": 2020.5}, "bad_fiscal_year", "whole number"),
        ({"fiscal_year": 20}, "bad_fiscal_year", "got 20"),
        ({"total_assets": 0}, "assets_not_positive", "total_assets must be > 0; got 0"),
        ({"total_assets": -5}, "assets_not_positive", "got -5"),
        ({"total_debt": -1}, "negative_debt", "total_debt must be >= 0; got -1"),
        ({"ppe_net": -1}, "negative_ppe", "ppe_net must be >= 0"),
        ({"total_debt": 120}, "debt_above_assets", "got 120 > 100"),
        ({"ppe_net": 101}, "ppe_above_assets", "got 101 > 100"),
        ({"ebitda": -150}, "ebitda_above_assets", "got |-150| > 100"),
        ({"total_assets": "1e400"}, "non_numeric", "total_assets must be a number"),
    ],
)
def test_each_row_rule(change, reason, detail):
    panel = validate_panel(_frame({}, change))
    assert _reason_of(panel, 1) is None
    assert _reason_of(panel, 2) == reason
    if reason:
        line = panel.exclusions.iloc[0]
        assert detail in line["detail"]
        assert line["measure"] == ""
        assert line["firm_id"] == ("F001" if change.get("firm_id") is None else "")
        assert reason in REASONS
    assert len(panel.data) + len(panel.exclusions) == 2


def test_first_reason_wins_and_details_list_all():
    panel = validate_panel(_frame({"total_debt": "x", "ppe_net": "y", "ebitda": None}))
    line = panel.exclusions.iloc[0]
    assert line["reason"] == "non_numeric"
    assert "total_debt" in line["detail"] and "ppe_net" in line["detail"]
    assert "ebitda must have a value" in line["detail"]


def test_negative_book_equity_and_missing_market_equity_are_kept_and_flagged():
    panel = validate_panel(_frame({"book_equity": -10.0, "market_equity": None}))
    assert panel.exclusions.empty
    assert panel.data.loc[0, "flags"] == "negative_book_equity;no_market_equity"
    assert set(panel.data.loc[0, "flags"].split(";")) <= set(FLAGS)


def test_invalid_optional_values_set_missing_with_flag_and_warning():
    frame = _frame({}, {"cash": -3, "market_equity": "lots"})
    frame["cash"] = [1.0, -3]
    with pytest.warns(DataWarning) as rec:
        panel = validate_panel(frame)
    messages = " ".join(str(w.message) for w in rec)
    assert "cash" in messages and "market_equity" in messages
    d = panel.data
    assert np.isnan(d.loc[1, "cash"]) and d.loc[0, "cash"] == 1.0
    assert np.isnan(d.loc[1, "market_equity"])
    assert d.loc[1, "flags"] == "no_market_equity;invalid_market_equity;invalid_cash"
    assert panel.exclusions.empty
    assert any("invalid_cash" in w for w in panel.warnings)


def test_exact_duplicates_keep_first_and_list_copies():
    frame = _frame({}, {}, {})
    frame.loc[1, "firm_id"] = "F000"
    frame.loc[2, "firm_id"] = "F000"
    frame["total_debt"] = ["30", "30.0", 30.0]  # same number, written differently
    panel = validate_panel(frame)
    assert panel.data["source_row"].tolist() == [1]
    assert panel.exclusions["reason"].tolist() == ["duplicate_row", "duplicate_row"]
    assert "exact copy of row 1" in panel.exclusions.loc[0, "detail"]


def test_conflicting_duplicates_exclude_every_copy():
    frame = _frame({}, {"total_debt": 31.0}, {})
    frame.loc[1, "firm_id"] = "F000"
    panel = validate_panel(frame)
    assert panel.data["source_row"].tolist() == [3]
    ex = panel.exclusions
    assert ex["reason"].tolist() == ["conflicting_duplicate"] * 2
    assert ex["source_row"].tolist() == [1, 2]
    assert "also in row(s) 2" in ex.loc[0, "detail"] and "total_debt" in ex.loc[0, "detail"]


def test_same_firm_other_year_is_not_duplicate():
    frame = _frame({}, {"fiscal_year": 2021})
    frame.loc[1, "firm_id"] = "F000"
    assert validate_panel(frame).exclusions.empty


def test_multi_currency_fx_rules():
    frame = _frame({"currency": "EUR", "fx_rate": 1.1}, {"currency": "USD", "fx_rate": None},
                   {"currency": "GBP", "fx_rate": None}, {"currency": "GBP", "fx_rate": -1})
    cfg = RunConfig.from_dict({"units": {"currency": "USD"}})
    panel = validate_panel(frame, config=cfg)
    assert panel.data["source_row"].tolist() == [1, 2]
    assert panel.data.loc[0, "total_assets"] == pytest.approx(110.0)
    assert panel.exclusions["reason"].tolist() == ["missing_value", "bad_fx_rate"]
    assert panel.exclusions.loc[0, "detail"] == (
        "fx_rate (currency is GBP in a file with several currencies) must have a value; got a "
        "blank")
    with pytest.raises(SchemaError, match="fx_rate column must be given when currencies EUR"):
        validate_panel(frame.drop(columns="fx_rate"))


def test_single_foreign_currency_needs_fx_rate():
    frame = _frame({"currency": "usd"}, {"currency": "USD"})
    assert len(validate_panel(frame).data) == 2  # no reference currency declared
    eur = RunConfig.from_dict({"units": {"currency": "EUR"}})
    with pytest.raises(SchemaError, match="rows are in USD and \\[units\\] currency is EUR"):
        validate_panel(frame, config=eur)
    frame["fx_rate"] = [0.9, None]
    panel = validate_panel(frame, config=eur)
    assert panel.data["total_assets"].tolist() == [90.0]
    assert panel.exclusions["reason"].tolist() == ["missing_value"]
    usd = RunConfig.from_dict({"units": {"currency": "usd"}})
    assert len(validate_panel(frame.drop(columns="fx_rate"), config=usd).data) == 2


def test_ledger_columns_and_types():
    panel = validate_panel(_frame({"total_assets": -1}, {"fiscal_year": "x"}))
    ex = panel.exclusions
    assert tuple(ex.columns) == EXCLUSION_COLUMNS
    assert ex["source_row"].dtype == np.int64
    assert ex["fiscal_year"].tolist()[0] == 2020 and pd.isna(ex["fiscal_year"].tolist()[1])


def test_source_rows_and_numeric_frames():
    frame = pd.DataFrame([GOOD, dict(GOOD, firm_id="B", total_assets=-1.0)])
    panel = validate_panel(frame, source_rows=[4, 9], source="x.csv", n_input_rows=2)
    assert panel.data["source_row"].tolist() == [4]
    assert panel.exclusions["source_row"].tolist() == [9]
    with pytest.raises(SchemaError, match="one row number per frame row"):
        validate_panel(frame, source_rows=[1])


@pytest.mark.parametrize(
    ("cells", "opts", "expected"),
    [
        (["1", " 2.5 ", "-3e2", "+4", ".5"], {}, [1, 2.5, -300, 4, 0.5]),
        (["1.234,5", "2,0"], {"decimal": ",", "thousands": "."}, [1234.5, 2.0]),
        (["1 234,5", "1\u00a0234,5", "1\u202f234"], {"decimal": ",", "thousands": " "},
         [1234.5, 1234.5, 1234]),
        (["1,234.5"], {"thousands": ","}, [1234.5]),
        (["(12,5)", "(1.234,5)"], {"decimal": ",", "thousands": "."}, [-12.5, -1234.5]),
        (["(12.5)", " ( 3 ) "], {}, [-12.5, -3]),
    ],
)
def test_parse_numbers_formats(cells, opts, expected):
    values, blank, bad = parse_numbers(pd.Series(cells, dtype="str"), InputOptions(**opts))
    assert values.tolist() == pytest.approx(expected)
    assert not blank.any() and not bad.any()


def test_parse_numbers_blank_and_bad():
    s = pd.Series(["", "NA", "#N/A", "-", "abc", "1,5", "inf", "0x10", None], dtype="str")
    values, blank, bad = parse_numbers(s)
    assert blank.tolist() == [True] * 4 + [False] * 4 + [True]
    assert bad.tolist() == [False] * 4 + [True] * 4 + [False]
    assert np.isnan(values).all()
    mixed = pd.Series([1, 2.5, "3", None, float("nan"), "x", True], dtype=object)
    values, blank, bad = parse_numbers(mixed)
    assert values[:3].tolist() == [1, 2.5, 3]
    assert blank.tolist() == [False, False, False, True, True, False, False]
    assert bad.tolist() == [False] * 5 + [True, True]


MESSY = """firm_id,fiscal_year,industry,total_assets,total_debt,ppe_net,ebitda,book_equity,firm_name
K1,2020,20,100,10,20,5,40,Kestrel One
K2,2020,20,0,10,20,5,40,Zero Assets
K3,2020,20,-50,10,20,5,40,Negative Assets
K4,2020,20,100,ten,20,5,40,Text Debt
K5,2020,20,100,10,,5,40,Blank PPE
,2020,20,100,10,20,5,40,No Id
K7,2020,20,100,10,20,5,40,Conflict A
K7,2020,20,100,12,20,5,40,Conflict B
K8,2020,20,100,10,20,5,40,Kestrel Eight
K8,2020,20,100,10,20,5,40,Kestrel Eight
K9,2021,20,100,10,20,5,-5,Kestrel Nine
"""


def test_messy_file_every_bad_row_in_ledger(tmp_path):
    p = tmp_path / "messy.csv"
    p.write_text(MESSY)
    panel = read_panel(p)
    ex = panel.exclusions.set_index("source_row")["reason"].to_dict()
    assert ex == {
        2: "assets_not_positive", 3: "assets_not_positive", 4: "non_numeric",
        5: "missing_value", 6: "missing_value", 7: "conflicting_duplicate",
        8: "conflicting_duplicate", 10: "duplicate_row",
    }
    assert panel.data["source_row"].tolist() == [1, 9, 11]
    assert panel.n_input_rows == 11


BAD_CELLS = ["", "x", "-5", "0", "1e999", "NA", "  7 ", "=1+1"]


@st.composite
def messy_panels(draw):
    n = draw(st.integers(min_value=0, max_value=25))
    rows = []
    for _ in range(n):
        if rows and draw(st.integers(0, 5)) == 0:
            rows.append(dict(draw(st.sampled_from(rows))))  # exact copy
            continue
        row = {
            "firm_id": draw(st.sampled_from(["A", "B", "C", "", "0042"])),
            "fiscal_year": draw(st.sampled_from(["2019", "2020", "2021", "", "20x", "2020.5"])),
            "industry": draw(st.sampled_from(["10", "11", ""])),
        }
        for col in ("total_assets", "total_debt", "ppe_net", "ebitda", "book_equity",
                    "market_equity", "cash"):
            good = str(draw(st.floats(min_value=0, max_value=200, allow_nan=False)))
            row[col] = draw(st.sampled_from([good, good, good, *BAD_CELLS]))
        rows.append(row)
    blank_lines = draw(st.lists(st.integers(0, max(n, 1)), max_size=3))
    return rows, blank_lines


@settings(max_examples=60, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(messy_panels())
def test_every_input_row_in_exactly_one_place(tmp_path_factory, case):
    rows, blank_lines = case
    cols = ["firm_id", "fiscal_year", "industry", "total_assets", "total_debt", "ppe_net",
            "ebitda", "book_equity", "market_equity", "cash"]
    lines = [",".join(r[c] for c in cols) for r in rows]
    for pos in sorted(blank_lines, reverse=True):
        lines.insert(min(pos, len(lines)), "")
    p = tmp_path_factory.mktemp("messy") / "m.csv"
    p.write_text(",".join(cols) + "\n" + "\n".join(lines) + "\n")
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", DataWarning)
        panel = read_panel(p)
    kept = panel.data["source_row"].tolist()
    excluded = panel.exclusions["source_row"].tolist()
    # row numbers are the non-blank records, counting blank lines (and records whose every
    # cell is empty) as rows that are not data
    expected = [i + 1 for i, line in enumerate(lines) if line.strip(",")]
    assert panel.n_input_rows == len(expected)
    assert len(kept) + len(excluded) == len(expected)
    assert not set(kept) & set(excluded)
    assert sorted(kept + excluded) == expected
    assert set(panel.exclusions["reason"]) <= set(REASONS)
    assert (panel.exclusions["measure"] == "").all()
    d = panel.data
    assert (d["total_assets"] > 0).all() and (d["total_debt"] >= 0).all()
    assert not d.duplicated(["firm_id", "fiscal_year"]).any()


def test_duplicate_headers_refused_and_labels_made_text():
    frame = _frame({})
    with pytest.raises(SchemaError, match="headers must be unique; got total_debt"):
        validate_panel(pd.concat([frame, frame[["total_debt"]]], axis=1))
    numbered = frame.copy()
    numbered[7] = "extra"
    panel = validate_panel(numbered)
    assert len(panel.data) == 1
    assert "columns not in schema v1 were ignored: 7" in panel.warnings


def test_panel_data_round_trips_with_its_row_numbers():
    frame = _frame({}, {"total_assets": -1}, {})
    panel = validate_panel(frame)
    again = validate_panel(panel.data)
    assert again.data["source_row"].tolist() == [1, 3]
    pd.testing.assert_frame_equal(again.data, panel.data)
    assert not any("ignored" in w for w in again.warnings)
