"""The CSV tables written by pyarrow's columnar writer read back the same through every reader.

The format is stated in ``levgap.report.columnar``: shortest round-trip numbers, quoted text,
CRLF line ends, UTF-8, formula-like text neutralised. Each reader of the project (the checked
table reader behind ``explain``/``report``/``table``, the pyarrow-only reader behind
``screen``), pandas with both engines, Python's ``csv`` module and pyarrow read the file back to
the same values.
"""

from __future__ import annotations

import csv
import io
import math
from decimal import Decimal

import numpy as np
import pandas as pd
import pyarrow.csv as pacsv
import pytest

from levgap.report.columnar import write_csv
from levgap.report.tables import read_table_file, write_table

FLOATS = [0.1, 1.0, -0.0, 1 / 3, 2.0 / 3.0, 1e-5, 1.5e-7, 123456.789, 1e16, 2e16,
          1.2345678901234568e17, 5e-324, 2.2250738585072014e-308, 1.7976931348623157e308, -12.5,
          0.30000000000000004, float("nan"), float("inf"), float("-inf"), 3.0, 1e21, 1e22]
TEXTS = ["plain", "with, comma", 'with "quote"', "line\nbreak", "carriage\rreturn", "",
         None, "=1+1", " -2", "@SUM(A1)", "＝fullwidth", "\ttab", "café Ünïcode ✓", "0100",
         "x" * 300, "'already", "+", "tail,", "end", "ok"]


def _frame(seed: int, n: int = 400) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    x = np.concatenate([FLOATS, rng.normal(size=n) * 10.0 ** rng.integers(-9, 12, n),
                        rng.random(n)])
    m = len(x)
    return pd.DataFrame({
        "firm_id": pd.array([TEXTS[i % len(TEXTS)] for i in range(m)], dtype="str"),
        "fiscal_year": rng.integers(1990, 2030, m),
        "value": x,
        "contribution": rng.normal(size=m) * 1e-3,
        "peer_count": rng.integers(0, 50, m),
    })


def _neutralised(text: object) -> str:
    if text is None or (isinstance(text, float) and math.isnan(text)):
        return ""
    s = str(text)
    from levgap.outputs import is_formula_like

    return "'" + s if is_formula_like(s) else s


def _same(a: np.ndarray, b: np.ndarray) -> bool:
    a, b = np.asarray(a, dtype=float), np.asarray(b, dtype=float)
    return bool(np.array_equal(a, b, equal_nan=True))


@pytest.mark.parametrize("seed", [0, 1, 2])
def test_round_trip_through_every_reader(tmp_path, seed):
    frame = _frame(seed)
    path = write_table(frame, tmp_path / "targets.csv")
    want_text = [_neutralised(t) for t in frame["firm_id"].tolist()]
    readers = {
        "read_table_file": read_table_file(path, "unchecked"),
        "pandas-c": pd.read_csv(path, dtype={"firm_id": "str"}, keep_default_na=False,
                                na_values=[""], encoding="utf-8"),
        "pandas-pyarrow": pd.read_csv(path, dtype={"firm_id": "str"}, keep_default_na=False,
                                      na_values=[""], encoding="utf-8", engine="pyarrow"),
    }
    for name, got in readers.items():
        assert list(got.columns) == list(frame.columns), name
        assert got["firm_id"].fillna("").tolist() == want_text, name
        for col in ("fiscal_year", "peer_count"):
            assert got[col].tolist() == frame[col].tolist(), (name, col)
        for col in ("value", "contribution"):
            assert _same(got[col].to_numpy(dtype=float), frame[col].to_numpy()), (name, col)
    arrow = pacsv.read_csv(path)
    assert _same(arrow["value"].to_numpy(zero_copy_only=False), frame["value"].to_numpy())
    with open(path, newline="", encoding="utf-8") as fh:
        rows = list(csv.reader(fh))
    assert rows[0] == list(frame.columns)
    assert [r[0] for r in rows[1:]] == want_text
    assert _same([float(r[2]) if r[2] else np.nan for r in rows[1:]], frame["value"])


def test_screen_reader_reads_the_same_targets(tmp_path):
    """``levgap screen`` reads targets with pyarrow alone: the same text and numbers."""
    from levgap import analyze
    from levgap.demo import make_panel
    from levgap.report.quick import read_targets

    panel = make_panel(7)
    first = panel["firm_id"] == panel["firm_id"].iloc[0]
    panel.loc[first, "firm_name"] = '=HYPERLINK("x"), "quoted", café'
    res = analyze(panel)
    res.write(tmp_path / "out", report=False)
    got = read_targets(tmp_path / "out")
    t = res.targets
    assert got["firm_id"].to_pylist() == [_neutralised(v) for v in t["firm_id"]]
    assert got["firm_name"].to_pylist() == [_neutralised(v) for v in t["firm_name"]]
    assert "'=HYPERLINK" in got["firm_name"][0].as_py()
    for col in ("target", "gap", "band_low", "peer_median", "debt_to_target"):
        assert _same(got[col].to_numpy(zero_copy_only=False), t[col].to_numpy(dtype=float)), col
    back = read_table_file(tmp_path / "out" / "drivers.csv", "drivers")
    for col in ("firm_value", "peer_value", "contribution"):
        assert _same(back[col].to_numpy(), res.drivers[col].to_numpy()), col


def test_numbers_print_every_digit_and_no_more(tmp_path):
    """Each number is printed with the digits of the shortest repr that reads back exactly
    (Python's ``repr``, itself the shortest round-trip form): same value to the last digit."""
    frame = _frame(5)
    buf = io.BytesIO()
    from levgap.report.columnar import arrow_table

    write_csv(arrow_table(frame), buf)
    text = buf.getvalue().decode("utf-8")
    cells = [r[2] for r in csv.reader(io.StringIO(text, newline=""))][1:]
    for cell, x in zip(cells, frame["value"], strict=True):
        if math.isnan(x):
            assert cell == ""
        elif math.isinf(x):
            assert cell == ("inf" if x > 0 else "-inf")
        else:
            assert Decimal(cell) == Decimal(repr(x)), (cell, repr(x))
            digits = lambda s: Decimal(s).normalize().as_tuple().digits  # noqa: E731
            assert digits(cell) == digits(repr(x)), (cell, repr(x))


def test_format_lines_header_quotes(tmp_path):
    frame = pd.DataFrame({"firm_id": pd.array(["a,b", None, "=x"], dtype="str"),
                          "n": [1, 2, 3], "x": [0.5, np.nan, 1e-7]})
    path = write_table(frame, tmp_path / "t.csv")
    raw = path.read_bytes()
    assert raw.decode("utf-8") == (
        'firm_id,n,x\r\n"a,b",1,0.5\r\n,2,\r\n"\'=x",3,1e-7\r\n')


def test_chunks_in_parallel_keep_the_order(tmp_path):
    """A table larger than one chunk is written in order, each chunk neutralised."""
    import pyarrow as pa

    n = 5000
    table = pa.table({"k": np.arange(n), "s": ["=a" if i % 7 == 0 else f"r{i}" for i in range(n)],
                      "v": np.arange(n) / 7.0})
    buf = io.BytesIO()
    write_csv(table, buf, chunk_rows=333)
    back = pd.read_csv(io.BytesIO(buf.getvalue()), dtype={"s": "str"})
    assert back["k"].tolist() == list(range(n))
    assert back["s"].tolist() == [("'=a" if i % 7 == 0 else f"r{i}") for i in range(n)]
    assert _same(back["v"].to_numpy(), np.arange(n) / 7.0)


def test_categories_and_text_views_are_neutralised_too():
    import pyarrow as pa

    from levgap.report.columnar import arrow_table, neutralise_arrow

    frame = pd.DataFrame({"c": pd.Categorical(["=a", "b", "=a"]), "s": ["+1", "x", "y"]})
    table = neutralise_arrow(arrow_table(frame))
    assert table["c"].to_pylist() == ["'=a", "b", "'=a"]
    assert table["s"].to_pylist() == ["'+1", "x", "y"]
    view = pa.table({"v": pa.array(["@x", "ok"], pa.string_view())})
    assert neutralise_arrow(view)["v"].to_pylist() == ["'@x", "ok"]
