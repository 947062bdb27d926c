"""Bad and ambiguous panels: never a guessed number, never a traceback, every row accounted.

Issue 9, points 5-9 and the reader parts of 11 and 14: a config with the default report, column
maps that collide, decimal-comma numbers, blank and unknown currencies, money that overflows,
codes written as ``3711.0``, blank tokens in ``firm_id``, NUL bytes, UTF-16 without a
byte-order mark, and a device as the panel.
"""

from __future__ import annotations

import os
import subprocess
import sys
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from typer.testing import CliRunner

from levgap.cli import app
from levgap.codes import MONEY_LIMIT, REASONS
from levgap.config import InputOptions, RunConfig
from levgap.demo import make_panel
from levgap.errors import SchemaError
from levgap.ingest import read_panel, resolve_columns, validate_panel
from levgap.ingest.cells import parse_numbers

runner = CliRunner()
HEAD = "firm_id,fiscal_year,industry,total_assets,total_debt,ppe_net,ebitda,book_equity"


def _accounted(panel) -> None:
    rows = sorted([*panel.data["source_row"], *panel.exclusions["source_row"]])
    assert rows == sorted(set(rows)) and len(rows) == panel.n_input_rows
    assert set(panel.exclusions["reason"]) <= set(REASONS)


def _write(tmp_path: Path, lines: list[str], name: str = "p.csv") -> Path:
    path = tmp_path / name
    path.write_text("\n".join(lines) + "\n", encoding="utf-8")
    return path


def _small_panel() -> pd.DataFrame:
    p = make_panel(3)
    return p[p["firm_id"] <= "TR0150"].copy()  # 150 firms, 10 years: quick to analyse


@pytest.fixture(scope="module")
def panel_csv(tmp_path_factory: pytest.TempPathFactory) -> Path:
    path = tmp_path_factory.mktemp("in") / "panel.csv"
    _small_panel().to_csv(path, index=False)
    return path


def test_config_with_the_default_report_and_a_workbook(panel_csv: Path, tmp_path: Path):
    # point 5: the report template met a config input without a row count
    cfg = tmp_path / "run.toml"
    cfg.write_text("[model]\nmeasures = ['book']\n", encoding="utf-8")
    out = tmp_path / "o"
    result = runner.invoke(app, ["analyze", str(panel_csv), "--out", str(out), "--config",
                                 str(cfg), "--xlsx", "--quiet"])
    assert result.exit_code == 0, result.output
    page = (out / "report.html").read_text(encoding="utf-8")
    assert "run configuration" in page and "run.toml" in page
    assert (out / "workbook.xlsx").stat().st_size > 10_000


def test_two_schema_columns_on_one_header_are_refused():
    # point 6
    headers = ["firm_id", "fiscal_year", "industry", "total_assets", "X", "ebitda",
               "book_equity"]
    with pytest.raises(SchemaError, match="total_debt and ppe_net must name different headers"):
        resolve_columns(headers, {"total_debt": "X", "ppe_net": "X"}, "p.csv")


def test_a_map_taking_an_auto_matched_header_says_so_without_contradiction():
    headers = HEAD.split(",")
    with pytest.raises(SchemaError) as err:
        resolve_columns(headers, {"total_debt": "total_assets"}, "p.csv")
    msg = str(err.value)
    assert ("required column total_assets matches the header 'total_assets', but [columns] "
            "total_debt = 'total_assets' takes that header") in msg
    assert "missing" not in msg and "columns found" not in msg


@pytest.mark.parametrize(
    ("options", "cells", "expected"),
    [
        # decimal comma, thousands given: 147.782 is 147 782 (never 147.782)
        (InputOptions(decimal=",", thousands="."), ["147.782", "1.234.567,8", "12,5", "1.5"],
         [147782.0, 1234567.8, 12.5, None]),
        # decimal comma, no thousands mark: the dot still only groups thousands
        (InputOptions(decimal=","), ["147.782", "147,782", "0.5", "-1.000,25"],
         [147782.0, 147.782, None, -1000.25]),
        # the default: a dot is the decimal mark, a comma is not a number
        (InputOptions(), ["147.782", "1,5", "(12.5)", "1e3"], [147.782, None, -12.5, 1000.0]),
        (InputOptions(thousands=","), ["1,234.5", "12,34", "1,234,567"],
         [1234.5, None, 1234567.0]),
        (InputOptions(decimal=",", thousands=" "), ["1 234,5", "1\u00a0234", "12 34"],
         [1234.5, 1234.0, None]),
        # review M1: with a decimal comma a dot is never a decimal point, whatever the
        # thousands mark; L7: a decimal comma needs a digit after it
        (InputOptions(decimal=",", thousands=" "),
         ["147.782", "1.5", "12.34", ".782", "147 782,5", ",5", "147 782,"],
         [None, None, None, None, 147782.5, 0.5, None]),
        (InputOptions(decimal=",", thousands="."), ["147.782,", "12,", "1.234,", "1.234,0"],
         [None, None, None, 1234.0]),
        (InputOptions(decimal=","), ["147.782,", "147,", ".782"], [None, None, None]),
    ],
)
def test_number_marks_never_guess(options, cells, expected):
    # point 7; the rule is stated in data_templates/README.md
    values, blank, bad = parse_numbers(pd.Series(cells, dtype="str"), options)
    for v, b, e in zip(values, bad, expected, strict=True):
        if e is None:
            assert b and np.isnan(v)
        else:
            assert not b and v == pytest.approx(e, rel=1e-12)


def test_decimal_comma_rule_end_to_end(tmp_path: Path):
    path = _write(tmp_path, [HEAD.replace(",", ";"), "A;2020;1;147.782;10,5;5;1;3",
                             "B;2020;1;1.5;1;1;1;1"])
    cfg = RunConfig(input=InputOptions(decimal=","))
    panel = read_panel(path, config=cfg)
    assert panel.data["total_assets"].tolist() == [147782.0]
    assert panel.exclusions["reason"].tolist() == ["non_numeric"]
    assert "total_assets must be a number; got '1.5'" in panel.exclusions["detail"][0]
    _accounted(panel)


def _currency_frame(currency: list[str], fx: list[str]) -> pd.DataFrame:
    n = len(currency)
    return pd.DataFrame({
        "firm_id": [f"F{i}" for i in range(n)], "fiscal_year": ["2020"] * n,
        "industry": ["10"] * n, "total_assets": ["100"] * n, "total_debt": ["10"] * n,
        "ppe_net": ["5"] * n, "ebitda": ["1"] * n, "book_equity": ["50"] * n,
        "currency": currency, "fx_rate": fx,
    }, dtype="str")


def test_blank_currency_among_several_is_not_the_reference():
    # point 8: rows 3 and 4 have no currency; only row 4 says how to convert
    frame = _currency_frame(["EUR", "USD", "", ""], ["", "0.9", "", "0.5"])
    panel = validate_panel(frame, config=RunConfig.from_dict({"units": {"currency": "EUR"}}))
    assert panel.data["source_row"].tolist() == [1, 2, 4]
    assert panel.data["total_assets"].tolist() == [100.0, 90.0, 50.0]
    (detail,) = panel.exclusions["detail"]
    assert panel.exclusions["reason"].tolist() == ["missing_value"]
    assert "fx_rate (currency is blank in a file with several currencies)" in detail
    _accounted(panel)
    # without a reference currency, too
    panel = validate_panel(_currency_frame(["EUR", "USD", ""], ["1", "0.9", ""]))
    assert panel.exclusions["source_row"].tolist() == [3]


def test_currency_codes_are_iso_4217():
    frame = _currency_frame(["eur", "DEM", "XYZ", "€", "EUR"], ["1", "0.5", "1", "1", "1"])
    panel = validate_panel(frame)
    ex = panel.exclusions.set_index("source_row")
    assert ex.loc[3, "reason"] == "unknown_currency" and ex.loc[4, "reason"] == "unknown_currency"
    assert "currency must be an ISO 4217 code such as EUR; got 'XYZ'" in ex.loc[3, "detail"]
    assert panel.data["source_row"].tolist() == [1, 2, 5]  # lower case and withdrawn DEM ok
    _accounted(panel)


def test_money_overflow_is_excluded_not_infinite():
    # point 9; pytest turns any RuntimeWarning into an error, so none may be raised
    frame = _currency_frame(["EUR"] * 4, ["1", "1e306", "1", "1"])
    frame.loc[2, "total_assets"] = "1e305"  # beyond the limit before any scaling
    frame.loc[3, "total_debt"] = "1e299"
    panel = validate_panel(frame, config=RunConfig.from_dict({"units": {"scale": 1000.0}}))
    ex = panel.exclusions.set_index("source_row")
    assert list(ex.index) == [2, 3, 4] and set(ex["reason"]) == {"money_overflow"}
    assert "total_assets is inf after [units] scale 1000 and fx_rate 1e+306" in ex.loc[2, "detail"]
    assert "total_assets is 1e+308 after" in ex.loc[3, "detail"]
    assert not np.isinf(panel.data.select_dtypes("number").to_numpy()).any()
    assert (panel.data[["total_assets", "total_debt"]].abs() <= MONEY_LIMIT).all().all()
    _accounted(panel)


def test_overflow_by_cli_prints_no_numpy_warning(tmp_path: Path):
    p = _small_panel()
    p.loc[0, "total_assets"] = 1e306
    p.loc[1, "market_equity"] = 1e306
    path = tmp_path / "big.csv"
    p.to_csv(path, index=False)
    cfg = tmp_path / "run.toml"
    cfg.write_text("[units]\nscale = 100.0\n")
    run = subprocess.run(
        [sys.executable, "-m", "levgap", "analyze", str(path), "--out", str(tmp_path / "o"),
         "--config", str(cfg), "--no-report", "--json"],
        capture_output=True, text=True, timeout=300)
    assert run.returncode == 0, run.stderr
    assert "RuntimeWarning" not in run.stderr and "Traceback" not in run.stderr
    assert '"money_overflow": 2' in run.stdout


def test_codes_as_text_and_blank_tokens_in_firm_id(tmp_path: Path):
    # point 11 (reader part)
    lines = [HEAD, "A,2020,3711,10,1,1,1,1", "B,2020,3711.0,10,1,1,1,1",
             "C,2020,0457.00,10,1,1,1,1", "NA,2020,1,10,1,1,1,1", "nan,2021,1,10,1,1,1,1",
             " NULL ,2021,1,10,1,1,1,1", "D,2020,37.5,10,1,1,1,1", "2021.0,2020,1,10,1,1,1,1"]
    panel = read_panel(_write(tmp_path, lines))
    d = panel.data.set_index("firm_id")
    assert d.loc["A", "industry"] == d.loc["B", "industry"] == "3711"
    assert d.loc["C", "industry"] == "0457" and d.loc["D", "industry"] == "37.5"
    assert "2021" in d.index
    ex = panel.exclusions
    assert ex["source_row"].tolist() == [4, 5, 6]
    assert set(ex["reason"]) == {"missing_value"}
    assert "firm_id ('NA' counts as blank) must have a value" in ex["detail"][0]
    assert "firm_id ('NULL' counts as blank)" in ex["detail"][2]
    _accounted(panel)
    # a workbook's number cells give the same codes
    frame = pd.DataFrame({c: [v] for c, v in zip(HEAD.split(","), ["A", 2020, 3711.0, 10, 1,
                                                                     1, 1, 1], strict=True)})
    assert validate_panel(frame).data["industry"].tolist() == ["3711"]


def test_nul_bytes_in_text_cells_are_removed(tmp_path: Path):
    path = tmp_path / "nul.csv"
    path.write_bytes((HEAD + ",firm_name\nA\x00B,2020,10,10,1,1,1,1,Nord\x00vik\n").encode())
    panel = read_panel(path)
    assert panel.data["firm_id"].tolist() == ["AB"]
    assert panel.data["firm_name"].tolist() == ["Nordvik"]


def test_utf16_without_a_mark_is_refused_with_the_fix(tmp_path: Path):
    path = tmp_path / "u16.csv"
    path.write_bytes((HEAD + "\nA,2020,1,10,1,1,1,1\n").encode("utf-16-le"))
    with pytest.raises(SchemaError, match='UTF-16 without a byte-order mark.*encoding = '
                                          '"utf-16-le"'):
        read_panel(path)
    panel = read_panel(path, config=RunConfig(input=InputOptions(encoding="utf-16-le")))
    assert len(panel.data) == 1


@pytest.mark.skipif(not os.path.exists("/dev/zero"), reason="no /dev/zero on this system")
def test_a_device_or_pipe_is_not_read(tmp_path: Path):
    result = runner.invoke(app, ["check", "/dev/zero"])
    assert result.exit_code == 2 and "must be a regular file" in result.output
    fifo = tmp_path / "fifo.csv"
    os.mkfifo(fifo)
    with pytest.raises(SchemaError, match="must be a regular file; got a device or pipe"):
        read_panel(fifo)


def test_a_repeated_header_is_one_line_not_a_crash(tmp_path: Path):
    path = _write(tmp_path, ["firm_id,firm_id,fiscal_year", "1,2,3"])
    with pytest.raises(SchemaError, match="headers must be unique; got firm_id"):
        read_panel(path)


def test_a_columns_entry_matches_regardless_of_case_and_surrounding_spaces():
    # review L7, as auto-matching does (documented in data_templates/README.md)
    headers = ["firm_id", "fiscal_year", "industry", "total_assets", " Total Debt ", "ppe_net",
               "ebitda", "book_equity"]
    found = resolve_columns(headers, {"total_debt": "total debt"})
    assert found["total_debt"] == " Total Debt "
    with pytest.raises(SchemaError, match="several close matches"):
        resolve_columns([*headers, "TOTAL DEBT"], {"total_debt": "total debt"})
