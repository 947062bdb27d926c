"""Columns of cells, the form in which a table reaches validation, without pandas.

Readers hand validation one column per header, of one of three kinds:

- text: a pyarrow string array (a CSV file's cells; a Parquet file's text columns), null
  where a value is missing;
- numbers: a numpy integer or float array (float NaN where missing);
- values: a numpy object array of Python values (a workbook's cells, a Parquet file's other
  types: dates, decimals, booleans), None where missing.

``as_column`` brings any pyarrow or numpy array to one of these kinds; ``frame_columns`` does
it for a pandas DataFrame given to :func:`~levgap.ingest.validate.validate_panel` (pandas is
then loaded already, and only there is it used), and ``to_frame`` builds a frame back for the
callers that ask for one (``RawTable.frame``, ``Panel.data``). ``levgap check`` thus reads and
validates a panel without importing pandas.

pyarrow imports pandas whenever it converts between its arrays and numpy or Python values
(``pa.array``, ``pa.scalar``, ``to_numpy``: pyarrow 26), so the conversions here go through
the arrays' buffers instead (``to_numpy_bool``, ``to_numpy_number``, ``arrow_ints``,
``arrow_strings``, ...): zero-copy where the layout allows, the same values either way.
"""

from __future__ import annotations

from collections.abc import Sequence
from typing import TYPE_CHECKING, Any

import numpy as np
import pyarrow as pa
import pyarrow.compute as pc

if TYPE_CHECKING:
    import pandas as pd

Column = pa.Array | pa.ChunkedArray | np.ndarray


def is_text(col: Column) -> bool:
    """Whether a column is of the text kind (a pyarrow string array)."""
    return isinstance(col, pa.Array | pa.ChunkedArray) and (
        pa.types.is_string(col.type) or pa.types.is_large_string(col.type))


def is_number(col: Column) -> bool:
    """Whether a column is of the numbers kind (numpy integers or floats, not booleans)."""
    return isinstance(col, np.ndarray) and col.dtype.kind in "iuf"


# ---------------------------------------------------------------------------------------------
# pyarrow <-> numpy through buffers (see the module docstring)


def _chunks(arr: pa.Array | pa.ChunkedArray) -> list[pa.Array]:
    return list(arr.chunks) if isinstance(arr, pa.ChunkedArray) else [arr]


def _bits(buf: pa.Buffer | None, offset: int, n: int) -> np.ndarray:
    if n == 0 or buf is None:
        return np.zeros(n, dtype=bool)
    return np.unpackbits(np.frombuffer(buf, dtype=np.uint8), count=offset + n,
                         bitorder="little")[offset:].astype(bool)


def _valid(ch: pa.Array) -> np.ndarray | None:
    """Validity of each value of a chunk, or None when none is null."""
    if ch.null_count == 0:
        return None
    return _bits(ch.buffers()[0], ch.offset, len(ch))


def to_numpy_bool(arr: pa.Array | pa.ChunkedArray) -> np.ndarray:
    """A pyarrow boolean array as a numpy bool array, null as False."""
    parts = []
    for ch in _chunks(arr):
        bits = _bits(ch.buffers()[1], ch.offset, len(ch))
        valid = _valid(ch)
        parts.append(bits if valid is None else bits & valid)
    return np.concatenate(parts) if parts else np.zeros(0, dtype=bool)


def to_numpy_number(arr: pa.Array | pa.ChunkedArray) -> np.ndarray:
    """A pyarrow integer or float array as numpy; with nulls, float64 with NaN there."""
    dtype = np.dtype(arr.type.to_pandas_dtype())
    parts = []
    for ch in _chunks(arr):
        n, buf = len(ch), ch.buffers()[1]
        vals = (np.zeros(n, dtype=dtype) if buf is None or n == 0 else
                np.frombuffer(buf, dtype=dtype, count=ch.offset + n)[ch.offset:])
        valid = _valid(ch)
        if valid is not None:
            vals = np.where(valid, vals, np.nan)
        parts.append(vals)
    if not parts:
        return np.zeros(0, dtype=dtype)
    if any(p.dtype != parts[0].dtype for p in parts):
        parts = [p.astype(np.float64) for p in parts]
    return np.concatenate(parts) if len(parts) > 1 else parts[0]


def arrow_numbers(values: np.ndarray) -> pa.Array:
    """A numpy integer, float or bool array as a pyarrow array without nulls."""
    values = np.ascontiguousarray(values)
    if values.dtype == bool:
        bits = np.packbits(values, bitorder="little")
        return pa.Array.from_buffers(pa.bool_(), len(values), [None, pa.py_buffer(bits)])
    return pa.Array.from_buffers(pa.from_numpy_dtype(values.dtype), len(values),
                                 [None, pa.py_buffer(values)])


def arrow_ints(values: Any) -> pa.Array:
    """Positions (any integer sequence) as a pyarrow int64 array, e.g. for ``take``."""
    return arrow_numbers(np.asarray(values, dtype=np.int64))


def arrow_strings(items: Sequence[str]) -> pa.Array:
    """Python strings as a pyarrow string array without nulls."""
    data = [s.encode("utf-8") for s in items]
    offsets = np.zeros(len(data) + 1, dtype=np.int64)
    np.cumsum(np.fromiter(map(len, data), dtype=np.int64, count=len(data)), out=offsets[1:])
    big = offsets[-1] >= 2**31
    return pa.Array.from_buffers(
        pa.large_string() if big else pa.string(), len(data),
        [None, pa.py_buffer(offsets if big else offsets.astype(np.int32)),
         pa.py_buffer(b"".join(data))])


def text_scalar(text: str) -> pa.Scalar:
    """A pyarrow string scalar, for comparisons."""
    return arrow_strings([text])[0]


def bool_scalar(value: bool) -> pa.Scalar:
    """A pyarrow boolean scalar."""
    return arrow_numbers(np.array([value], dtype=bool))[0]


def null_text() -> pa.Scalar:
    """A null pyarrow string scalar."""
    return pa.nulls(1, pa.string())[0]


def empty_text(n: int) -> pa.Array:
    """``n`` empty strings."""
    return pa.repeat(text_scalar(""), n)


def is_empty_text(arr: pa.Array | pa.ChunkedArray) -> np.ndarray:
    """Cells equal to ``""`` (null cells are not)."""
    return to_numpy_bool(pc.equal(arr, text_scalar("")))


# ---------------------------------------------------------------------------------------------
# the three kinds


def as_column(col: Any) -> Column:
    """A pyarrow or numpy array (or a pandas Series) as text, numbers or values.

    Integers with missing values become floats (NaN), as pandas reads them; booleans,
    dates, decimals and other types become Python values.
    """
    if _is_pandas_series(col):
        return _series_column(col)
    if isinstance(col, np.ndarray):
        if col.dtype.kind in "iufO":
            return col
        return _values(col.tolist())
    if isinstance(col, pa.Array | pa.ChunkedArray):
        t = col.type
        if pa.types.is_string(t) or pa.types.is_large_string(t):
            return col
        if pa.types.is_string_view(t):
            return col.cast(pa.string())
        if pa.types.is_integer(t) or pa.types.is_floating(t):
            out = to_numpy_number(col)
            return out.astype(np.float64) if out.dtype.kind == "f" else out
        if pa.types.is_dictionary(t):
            return as_column(col.cast(t.value_type) if isinstance(col, pa.Array)
                             else pa.chunked_array([c.dictionary_decode() for c in col.chunks],
                                                   t.value_type))
        if (pa.types.is_timestamp(t) or pa.types.is_duration(t)) and t.unit == "ns":
            # Python values hold microseconds (pyarrow would otherwise reach for pandas)
            t2 = (pa.timestamp("us", t.tz) if pa.types.is_timestamp(t) else pa.duration("us"))
            col = col.cast(t2, safe=False)
        return _values(col.to_pylist())
    return _values(list(col))


def _values(items: Sequence[Any]) -> np.ndarray:
    # fromiter does not unpack a cell that is itself a sequence
    return np.fromiter(items, dtype=object, count=len(items))


def cell(col: Column, i: int) -> Any:
    """The cell ``i`` of a column as a Python value (None where missing)."""
    if isinstance(col, np.ndarray):
        return col[i]
    return col[i].as_py()


def take(col: Column, idx: np.ndarray) -> Column:
    """The rows ``idx`` of a column."""
    if isinstance(col, np.ndarray):
        return col[idx]
    return col.take(arrow_ints(idx))


def blank_rows(columns: Sequence[Column], n: int) -> np.ndarray:
    """Rows whose every cell is missing or only spaces (text and values), or missing."""
    blank = np.ones(n, dtype=bool)
    for col in columns:
        if is_text(col):
            trimmed = pc.utf8_trim_whitespace(col)
            blank &= is_empty_text(trimmed) | ~to_numpy_bool(pc.is_valid(trimmed))
        elif is_number(col):
            if col.dtype.kind == "f":
                blank &= np.isnan(col)
            else:
                blank[:] = False
        else:  # as pandas' text of each value, stripped, or missing
            missing = np.fromiter((v is None or (isinstance(v, float) and v != v) for v in col),
                                  dtype=bool, count=len(col))
            texts = arrow_strings(["" if m else str(v) for v, m in zip(col, missing,
                                                                          strict=True)])
            blank &= is_empty_text(pc.utf8_trim_whitespace(texts))
        if not blank.any():
            break
    return blank


# ---------------------------------------------------------------------------------------------
# pandas, only for a frame given by a caller or asked for


def _is_pandas_series(obj: Any) -> bool:
    import sys

    pd = sys.modules.get("pandas")
    return pd is not None and isinstance(obj, pd.Series)


def _series_column(s: pd.Series) -> Column:
    import pandas as pd

    dtype = s.dtype
    if isinstance(dtype, pd.StringDtype):
        return pa.array(s.array, from_pandas=True) if len(s) else pa.array([], pa.string())
    if pd.api.types.is_bool_dtype(dtype):
        return s.to_numpy(dtype=object, na_value=None)
    if pd.api.types.is_numeric_dtype(dtype):
        if isinstance(dtype, np.dtype):
            return s.to_numpy() if dtype.kind in "iu" else s.to_numpy(dtype=np.float64)
        if not s.isna().any():  # a nullable or Arrow-backed type without missing values
            return s.to_numpy(dtype=np.float64 if pd.api.types.is_float_dtype(dtype)
                              else np.int64)
        if pd.api.types.is_float_dtype(dtype):
            return s.to_numpy(dtype=np.float64, na_value=np.nan)
        return s.to_numpy(dtype=object, na_value=None)
    return s.to_numpy(dtype=object, na_value=None)


def frame_columns(frame: pd.DataFrame) -> list[Column]:
    """The columns of a pandas DataFrame, by position (a repeated header names several)."""
    return [_series_column(frame.iloc[:, j]) for j in range(frame.shape[1])]


def to_series(col: Column) -> pd.Series:
    """A column as a pandas Series (text as pandas' ``str`` dtype)."""
    import pandas as pd

    if is_text(col):
        return pd.Series(pd.array(col, dtype="str"))
    return pd.Series(col, copy=False)


def to_frame(names: Sequence[str], columns: Sequence[Column]) -> pd.DataFrame:
    """A pandas DataFrame of columns under ``names`` (which may repeat), sharing the arrays."""
    import pandas as pd

    frame = pd.DataFrame({i: to_series(c) for i, c in enumerate(columns)}, copy=False)
    frame.columns = list(names)
    return frame
