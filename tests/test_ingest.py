"""Readers: CSV dialects and encodings, Parquet, XLSX, column maps, row numbers, bad files."""

from __future__ import annotations

import random
import warnings
from pathlib import Path

import numpy as np
import openpyxl
import pandas as pd
import pytest

from levgap.config import InputOptions, RunConfig, Units
from levgap.errors import ConfigError, DataWarning, LevgapError, SchemaError
from levgap.ingest import read_panel, read_table
from levgap.schema import COLUMNS

HEADER = [
    "firm_id", "fiscal_year", "industry", "total_assets", "total_debt", "ppe_net", "ebitda",
    "book_equity", "firm_name", "market_equity",
]
ROWS = [
    ["0101", "2020", "3714", "1520.4", "412.0", "610.9", "188.3", "702.5", "Nordvik Axle", "955.0"],
    ["0101", "2021", "3714", "1604.0", "380.5", "640.0", "201.0", "760.0", "Nordvik Axle",
     "1010.5"],
    ["0207", "2021", "3714", "880.25", "0", "210.0", "-12.5", "-40.0", "Brask Gear", ""],
    ["0330", "2021", "28", "2500000.5", "1200.75", "900.0", "310.0", "1300.0", "Éléa Chimie",
     "2100"],
]


def _csv(rows=ROWS, header=HEADER, sep=",", newline="\n") -> str:
    def cell(v: str) -> str:
        quoted = '"' + v.replace('"', '""') + '"'
        return quoted if (sep in v or '"' in v or "\n" in v) else v

    return newline.join(sep.join(cell(v) for v in r) for r in [header, *rows]) + newline


@pytest.fixture
def plain(tmp_path):
    p = tmp_path / "panel.csv"
    p.write_text(_csv(), encoding="utf-8")
    return p


def test_plain_csv_types_and_leading_zeros(plain):
    panel = read_panel(plain)
    d = panel.data
    assert list(d.columns) == [c.name for c in COLUMNS] + ["source_row", "flags"]
    assert d["firm_id"].tolist() == ["0101", "0101", "0207", "0330"]
    assert d["industry"].tolist() == ["3714", "3714", "3714", "28"]
    assert d["fiscal_year"].dtype == np.int64
    assert d["total_assets"].dtype == np.float64
    assert d["source_row"].tolist() == [1, 2, 3, 4]
    assert d.loc[3, "total_assets"] == 2500000.5
    assert panel.n_input_rows == 4
    assert len(panel.sha256) == 64
    assert panel.exclusions.empty
    assert d.loc[2, "flags"] == "negative_book_equity;no_market_equity"
    assert d.loc[0, "flags"] == ""


def test_semicolon_decimal_comma_thousands_via_input(tmp_path, plain):
    rows = [[v.replace(".", ",") if i >= 3 and i != 8 else v for i, v in enumerate(r)]
            for r in ROWS]
    rows[3][3] = "2.500.000,5"
    p = tmp_path / "eu.csv"
    p.write_text(_csv(rows, sep=";"), encoding="utf-8")
    cfg = RunConfig(input=InputOptions(delimiter=";", decimal=",", thousands="."))
    pd.testing.assert_frame_equal(read_panel(p, config=cfg).data, read_panel(plain).data)


def test_delimiter_detected(tmp_path, plain):
    for sep in (";", "\t", "|"):
        p = tmp_path / f"d{ord(sep)}.csv"
        p.write_text(_csv(sep=sep), encoding="utf-8")
        pd.testing.assert_frame_equal(read_panel(p).data, read_panel(plain).data)


def test_bom_crlf_and_quotes(tmp_path, plain):
    rows = [r.copy() for r in ROWS]
    rows[0][8] = 'Nordvik "Axle", Ltd'
    p = tmp_path / "bom.csv"
    p.write_bytes(b"\xef\xbb\xbf" + _csv(rows, newline="\r\n").encode("utf-8"))
    d = read_panel(p).data
    assert d.columns[0] == "firm_id"
    assert d.loc[0, "firm_name"] == 'Nordvik "Axle", Ltd'
    assert d["firm_id"].tolist() == read_panel(plain).data["firm_id"].tolist()


def test_classic_mac_line_ends(tmp_path, plain):
    p = tmp_path / "cr.csv"
    p.write_text(_csv(newline="\r"), encoding="utf-8", newline="")
    pd.testing.assert_frame_equal(read_panel(p).data, read_panel(plain).data)


def test_quoted_newline_is_one_record(tmp_path):
    rows = [r.copy() for r in ROWS]
    rows[0][8] = "Nordvik\nAxle"
    p = tmp_path / "nl.csv"
    p.write_text(_csv(rows), encoding="utf-8")
    d = read_panel(p).data
    assert d.loc[0, "firm_name"] == "Nordvik\nAxle"
    assert d["source_row"].tolist() == [1, 2, 3, 4]


def test_blank_lines_count_as_rows_but_not_data(tmp_path):
    text = _csv().split("\n")
    # header, row1, blank, row2, blank (CRLF), row3, a record of empty cells, row4
    lines = [text[0], text[1], "", text[2], "\r", text[3], ",,,,,,,,,", text[4], "", ""]
    p = tmp_path / "blank.csv"
    p.write_text("\n".join(lines), encoding="utf-8")
    panel = read_panel(p)
    assert panel.data["source_row"].tolist() == [1, 3, 5, 7]
    assert panel.n_input_rows == 4


def test_skip_rows_and_blank_lines_above_header(tmp_path, plain):
    p = tmp_path / "skip.csv"
    p.write_text("Exported from ledger\nunits: millions\n\n" + _csv(), encoding="utf-8")
    panel = read_panel(p, config=RunConfig(input=InputOptions(skip_rows=2)))
    pd.testing.assert_frame_equal(panel.data, read_panel(plain).data)
    with pytest.raises(SchemaError, match="skip_rows"):
        read_panel(p, config=RunConfig(input=InputOptions(skip_rows=99)))


def test_latin1_falls_back_with_warning(tmp_path):
    p = tmp_path / "latin.csv"
    p.write_bytes(_csv().encode("latin-1"))
    with pytest.warns(DataWarning, match="not valid UTF-8"):
        panel = read_panel(p)
    assert panel.data.loc[3, "firm_name"] == "Éléa Chimie"
    assert any("UTF-8" in w for w in panel.warnings)
    # configured encoding: no warning
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        cfg = RunConfig(input=InputOptions(encoding="latin-1"))
        assert read_panel(p, config=cfg).data.loc[3, "firm_name"] == "Éléa Chimie"
    with pytest.raises(SchemaError, match=r"line 5 must be valid utf-8"):
        read_panel(p, config=RunConfig(input=InputOptions(encoding="utf-8")))
    with pytest.raises(ConfigError, match="encoding"):
        read_panel(p, config=RunConfig(input=InputOptions(encoding="no-such-codec")))


def test_utf16_with_bom(tmp_path, plain):
    p = tmp_path / "u16.csv"
    p.write_bytes(_csv(sep="\t").encode("utf-16"))
    pd.testing.assert_frame_equal(read_panel(p).data, read_panel(plain).data)


def test_parquet_same_as_csv(tmp_path, plain):
    frame = pd.DataFrame(ROWS, columns=HEADER)
    for c in HEADER[3:8] + ["market_equity"]:
        frame[c] = pd.to_numeric(frame[c])
    frame["fiscal_year"] = frame["fiscal_year"].astype(int)
    p = tmp_path / "panel.parquet"
    frame.to_parquet(p)
    pd.testing.assert_frame_equal(read_panel(p).data, read_panel(plain).data)


def _xlsx(path, header, rows, *, sheet="Data", before=()):
    wb = openpyxl.Workbook()
    ws = wb.active
    ws.title = "Notes"
    ws.append(["not the panel"])
    ws2 = wb.create_sheet(sheet)
    for r in before:
        ws2.append(r)
    ws2.append(header)
    for r in rows:
        ws2.append(r)
    wb.save(path)


def test_xlsx_named_sheet_with_mapped_headers(tmp_path, plain):
    headers = ["Firm", "Year", "SIC", "Assets (m)", "Debt (m)", "PP&E", "EBITDA", "Equity",
               "Name", "Mkt cap"]
    rows = []
    for r in ROWS:
        rows.append([r[0], int(r[1]), r[2], *[float(v) for v in r[3:8]], r[8],
                     float(r[9]) if r[9] else None])
    rows.insert(2, [None] * 10)  # a blank spreadsheet row counts in the numbering
    p = tmp_path / "book.xlsx"
    _xlsx(p, headers, rows, before=[["Peer panel"]])
    cfg = RunConfig(
        columns=dict(zip(HEADER, headers, strict=True)),
        input=InputOptions(sheet="Data", skip_rows=1),
    )
    panel = read_panel(p, config=cfg)
    expected = read_panel(plain).data
    expected["source_row"] = [1, 2, 4, 5]
    pd.testing.assert_frame_equal(panel.data, expected)
    with pytest.raises(SchemaError, match=r"sheet must name a worksheet.*'Nope'"):
        read_panel(p, config=RunConfig(columns=cfg.columns, input=InputOptions(sheet="Nope")))
    # first sheet by default: it has no panel columns
    with pytest.raises(SchemaError, match="required columns must be present"):
        read_panel(p)


def test_headers_match_regardless_of_case_and_spaces(tmp_path, plain):
    header = [" Firm_ID", "Fiscal Year", "INDUSTRY", "Total-Assets", "total debt", "ppe_net",
              "EBITDA", "Book Equity", "firm name", "market_equity"]
    p = tmp_path / "loose.csv"
    p.write_text(_csv(header=header) , encoding="utf-8")
    pd.testing.assert_frame_equal(read_panel(p).data, read_panel(plain).data)


def test_repeated_header_refused(tmp_path):
    p = tmp_path / "dup.csv"
    p.write_text(_csv(header=HEADER + ["total_debt"], rows=[r + ["1"] for r in ROWS]))
    with pytest.raises(SchemaError, match=r"dup.csv: column headers must be unique; got "
                                          r"total_debt more than once"):
        read_panel(p)


def test_extra_columns_ignored_with_note(tmp_path):
    p = tmp_path / "extra.csv"
    p.write_text(_csv(header=HEADER + ["analyst"], rows=[r + ["x"] for r in ROWS]))
    panel = read_panel(p)
    assert "analyst" not in panel.data.columns
    assert any("analyst" in w for w in panel.warnings)


def test_missing_required_columns_one_line(tmp_path):
    p = tmp_path / "short.csv"
    header = [h for h in HEADER if h not in ("ppe_net", "ebitda")]
    rows = [[v for h, v in zip(HEADER, r, strict=True) if h in header] for r in ROWS]
    p.write_text(_csv(rows, header=header))
    with pytest.raises(SchemaError) as err:
        read_panel(p)
    msg = str(err.value)
    assert "\n" not in msg
    assert str(p) in msg
    assert "missing ppe_net, ebitda" in msg
    assert "columns found: firm_id, fiscal_year, industry" in msg


def test_mapped_header_absent(tmp_path, plain):
    cfg = RunConfig(columns={"total_debt": "Debt (m)"})
    with pytest.raises(SchemaError, match=r"\[columns\] total_debt = 'Debt \(m\)' must name"):
        read_panel(plain, config=cfg)


@pytest.mark.parametrize(
    ("content", "pattern"),
    [
        (b"", "empty file"),
        (b"\n\n  \n", "empty file"),
        (b"firm_id,fiscal_year\n1,2\n", "missing industry"),
        (_csv().replace("0207,2021", "0207,2021,extra").encode(), r"row 3 must have 10 fields"),
        (b"PK\x03\x04garbage", "must be a readable .xlsx"),
        (b"PAR1garbage", "must be a readable Parquet"),
        (b"\xd0\xcf\x11\xe0\xa1\xb1\x1a\xe1rest", r"old binary Excel"),
    ],
)
def test_unreadable_files_are_one_line_schema_errors(tmp_path, content, pattern):
    p = tmp_path / "bad.csv"
    p.write_bytes(content)
    with pytest.raises(SchemaError, match=pattern) as err:
        read_panel(p)
    assert "\n" not in str(err.value) and str(p) in str(err.value)


def test_missing_file_and_folder(tmp_path):
    with pytest.raises(SchemaError, match="no such file"):
        read_panel(tmp_path / "nope.csv")
    with pytest.raises(SchemaError, match="got a folder"):
        read_panel(tmp_path)


def test_header_only_gives_empty_panel(tmp_path):
    p = tmp_path / "h.csv"
    p.write_text(",".join(HEADER) + "\n")
    panel = read_panel(p)
    assert len(panel.data) == 0 and panel.n_input_rows == 0 and panel.exclusions.empty


def test_units_scale_and_fx(tmp_path):
    header = HEADER + ["currency", "fx_rate"]
    rows = [ROWS[0] + ["EUR", "1.1"], ROWS[1] + ["USD", "1"], ROWS[2] + ["USD", ""]]
    p = tmp_path / "fx.csv"
    p.write_text(_csv(rows, header=header))
    panel = read_panel(p, config=RunConfig(units=Units(scale=0.001, currency="USD")))
    d = panel.data
    assert d["total_assets"].tolist() == pytest.approx([1520.4 * 0.0011, 1.604, 0.88025])
    assert d["fiscal_year"].tolist() == [2020, 2021, 2021]
    # several currencies need fx_rate: without the column the file is refused
    header = HEADER + ["currency"]
    rows = [ROWS[0] + ["EUR"], ROWS[1] + ["USD"]]
    p.write_text(_csv(rows, header=header))
    with pytest.raises(SchemaError, match=r"fx_rate column must be given.*EUR, USD"):
        read_panel(p)


def test_market_equity_from_shares(tmp_path):
    header = HEADER + ["shares_outstanding", "share_price"]
    rows = [r + ["10", "2.5"] for r in ROWS]
    p = tmp_path / "sh.csv"
    p.write_text(_csv(rows, header=header))
    d = read_panel(p).data
    assert d.loc[2, "market_equity"] == 25.0
    assert d.loc[2, "flags"] == "negative_book_equity;market_equity_from_shares"
    assert d.loc[0, "market_equity"] == 955.0


def test_read_table_keeps_raw_cells(plain):
    raw = read_table(plain, InputOptions())
    assert raw.frame.columns.tolist() == HEADER
    assert raw.frame.loc[0, "firm_id"] == "0101"
    assert raw.n_input_rows == 4


def _mutations(seed_bytes: bytes, n: int) -> list[bytes]:
    rng = random.Random(20240601)
    out = []
    kinds = ["delete", "insert", "flip", "quote", "nul", "huge", "newline", "delim"]
    for i in range(n):
        b = bytearray(seed_bytes)
        kind = kinds[i % len(kinds)]
        for _ in range(1 + i % 3):
            pos = rng.randrange(len(b))
            if kind == "delete":
                del b[pos:pos + rng.randint(1, 8)]
            elif kind == "insert":
                b[pos:pos] = bytes(rng.randrange(256) for _ in range(rng.randint(1, 6)))
            elif kind == "flip":
                b[pos] ^= 1 << rng.randrange(8)
            elif kind == "quote":
                b[pos:pos] = b'"'
            elif kind == "nul":
                b[pos:pos] = b"\x00"
            elif kind == "huge":
                b[pos:pos] = b"9" * rng.choice([20, 400, 5000])
            elif kind == "newline":
                b[pos:pos] = b"\n"
            else:
                b[pos:pos] = rng.choice([b",", b";", b"\t"])
        out.append(bytes(b))
    return out


def test_byte_fuzz_never_escapes(tmp_path):
    seed = _csv().encode("utf-8")
    outcomes = {"panel": 0, "error": 0}
    for i, data in enumerate(_mutations(seed, 40)):
        p = tmp_path / f"fuzz{i}.csv"
        p.write_bytes(data)
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", DataWarning)
            try:
                panel = read_panel(p)
            except LevgapError as exc:
                assert "\n" not in str(exc)
                outcomes["error"] += 1
                continue
        outcomes["panel"] += 1
        used = set(panel.data["source_row"]) | set(panel.exclusions["source_row"])
        assert len(panel.data) + len(panel.exclusions) == panel.n_input_rows
        assert len(used) == panel.n_input_rows
    assert outcomes["panel"] > 0 and outcomes["error"] > 0


def test_benchmark_panel_generator_is_deterministic_and_valid(tmp_path):
    import importlib.util

    spec = importlib.util.spec_from_file_location(
        "bench_read", Path(__file__).resolve().parents[1] / "benchmark" / "bench_read.py"
    )
    bench = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(bench)
    a = bench.make_csv(4000, tmp_path / "a.csv")
    b = bench.make_csv(4000, tmp_path / "b.csv")
    assert a.read_bytes() == b.read_bytes()
    panel = read_panel(a)
    assert panel.n_input_rows == 4000
    reasons = panel.exclusions["reason"].value_counts().to_dict()
    assert reasons["non_numeric"] == reasons["assets_not_positive"] == 1
    assert reasons["missing_value"] == 1
    assert len(panel.data) + len(panel.exclusions) == 4000


def _binary_seeds(tmp_path):
    frame = pd.DataFrame(ROWS, columns=HEADER)
    for c in HEADER[3:8]:
        frame[c] = pd.to_numeric(frame[c])
    frame.to_parquet(tmp_path / "seed.parquet")
    _xlsx(tmp_path / "seed.xlsx", HEADER, ROWS, sheet="Data")
    return {"parquet": (tmp_path / "seed.parquet").read_bytes(),
            "xlsx": (tmp_path / "seed.xlsx").read_bytes()}


def _read_or_levgap_error(path, **kw):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", DataWarning)
        try:
            read_panel(path, **kw)
        except LevgapError as exc:
            assert "\n" not in str(exc)
            return "error"
    return "panel"


@pytest.mark.parametrize("kind", ["parquet", "xlsx"])
def test_byte_fuzz_binary_formats(tmp_path, kind):
    seed = _binary_seeds(tmp_path)[kind]
    rng = random.Random(11)
    for i in range(60):
        b = bytearray(seed)
        for _ in range(rng.randint(1, 4)):
            pos = rng.randrange(len(b))
            op = rng.randrange(3)
            if op == 0:
                b[pos] ^= 1 << rng.randrange(8)
            elif op == 1:
                del b[pos:pos + rng.randint(1, 20)]
            else:
                b[pos:pos] = bytes(rng.randrange(256) for _ in range(rng.randint(1, 5)))
        p = tmp_path / f"f{i}.{kind}"
        p.write_bytes(bytes(b))
        _read_or_levgap_error(p)


def test_damaged_xml_inside_workbook(tmp_path):
    import io
    import zipfile

    seed = _binary_seeds(tmp_path)["xlsx"]
    members = {n: zipfile.ZipFile(io.BytesIO(seed)).read(n)
               for n in zipfile.ZipFile(io.BytesIO(seed)).namelist()}
    rng = random.Random(3)
    outcomes = set()
    for i in range(60):
        target = sorted(members)[i % len(members)]
        b = bytearray(members[target])
        pos = rng.randrange(len(b))
        b[pos:pos] = rng.choice([b"<", b">", b'"', b"&", b"\x00", b"</x>", b"9" * 30])
        buf = io.BytesIO()
        with zipfile.ZipFile(buf, "w") as out:
            for name, data in members.items():
                out.writestr(name, bytes(b) if name == target else data)
        p = tmp_path / f"x{i}.xlsx"
        p.write_bytes(buf.getvalue())
        outcomes.add(_read_or_levgap_error(p, config=RunConfig(input=InputOptions(sheet="Data"))))
    assert outcomes == {"panel", "error"}


def test_parquet_with_index_and_no_pandas_metadata(tmp_path, plain):
    frame = pd.DataFrame(ROWS, columns=HEADER).set_index("firm_name")
    for c in HEADER[3:8] + ["market_equity"]:
        frame[c] = pd.to_numeric(frame[c])
    p = tmp_path / "indexed.parquet"
    frame.to_parquet(p)
    panel = read_panel(p)
    # the index was stored as a named column and is read as firm_name
    assert panel.data["firm_name"].tolist() == read_panel(plain).data["firm_name"].tolist()
