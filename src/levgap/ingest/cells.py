"""Cells to values: text cells and numbers as the template README documents them.

- Text cells lose surrounding spaces and NUL bytes; the blank tokens (``NA_TOKENS``, any case)
  are blank in text columns as in number columns; codes (``firm_id``, ``industry``) written as
  a whole number with a ``.0`` fraction (``3711.0``, as spreadsheets export them) are the
  whole number (``3711``), as a workbook's or Parquet file's number cell is.
- Numbers: the decimal mark is ``[input] decimal``. A thousands mark (``[input] thousands``;
  with ``decimal = ","`` and none given, ``.``) must group digits by three (``1.234.567,8``);
  a cell where it does not (``1.5`` with ``decimal = ","``) is not a number, rather than a
  guess. With a decimal comma a dot is never a decimal point: with another thousands mark
  (``thousands = " "``) a cell holding a dot (``147.782``, ``.782``) is not a number, and a
  decimal comma needs a digit after it (``147.782,`` is not a number). Exponents and
  accounting negatives (``(12.5)``) are read.
"""

from __future__ import annotations

from typing import Any

import numpy as np
import pyarrow as pa
import pyarrow.compute as pc

from levgap.codes import NA_TOKENS
from levgap.config import InputOptions
from levgap.ingest.columns import (
    Column,
    arrow_numbers,
    arrow_strings,
    as_column,
    bool_scalar,
    is_number,
    is_text,
    null_text,
    text_scalar,
    to_numpy_bool,
    to_numpy_number,
)

NUMBER_RE = r"^[+-]?(\d+\.?\d*|\.\d+)([eE][+-]?\d+)?$"
STRICT_NUMBER_RE = r"^[+-]?(\d+(\.\d+)?|\.\d+)([eE][+-]?\d+)?$"
"""With a decimal comma (turned into ``.`` before this), the mark needs a digit after it."""
SPACES = (" ", "\u00a0", "\u202f")
CODE_COLUMNS = ("firm_id", "industry")
"""Text columns holding codes, whose ``3711.0`` is ``3711``."""
_WHOLE_CODE = r"^([0-9]+)\.0+$"


def text_cells(column: Column | Any, *, code: bool = False) -> pa.Array | pa.ChunkedArray:
    """Text cells stripped, without NUL bytes, blank tokens as ``""``.

    Parameters
    ----------
    column : pyarrow or numpy array, or pandas.Series
        Text, or numbers (a workbook's or Parquet file's cells): whole-number floats lose
        their ``.0``. See ``levgap.ingest.columns``.
    code : bool, default=False
        Also read text ``3711.0`` as ``3711`` (``firm_id`` and ``industry``).

    Returns
    -------
    pyarrow.Array or pyarrow.ChunkedArray
        Text, no missing values.
    """
    column = as_column(column)
    if is_text(column):
        out = pc.utf8_trim_whitespace(
            pc.replace_substring(pc.fill_null(column, text_scalar("")), "\x00", ""))
    elif is_number(column) and column.dtype.kind in "iu":
        out = arrow_numbers(column).cast(pa.string())
    else:
        out = arrow_strings([_cell_text(v) for v in column])
    out = pc.if_else(pc.is_in(pc.utf8_lower(out), value_set=arrow_strings(NA_TOKENS)),
                     text_scalar(""), out)
    if code:
        out = pc.replace_substring_regex(out, _WHOLE_CODE, r"\1")
    return out


def _cell_text(v: object) -> str:
    if v is None:
        return ""
    if isinstance(v, float | np.floating):
        if v != v:
            return ""
        if float(v).is_integer():
            return str(int(v))
    return str(v).replace("\x00", "").strip()


def parse_numbers(
    column: Column | Any, options: InputOptions | None = None
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Parse a column of cells as numbers, vectorised.

    Parameters
    ----------
    column : pyarrow or numpy array, or pandas.Series
        Numbers, text, or a mix (from a workbook). See ``levgap.ingest.columns``.
    options : InputOptions, optional
        ``decimal`` and ``thousands`` marks of text numbers (see the module docstring). A
        thousands mark that is a space also takes no-break spaces.

    Returns
    -------
    values : numpy.ndarray
        float64, NaN where blank or not a number.
    blank : numpy.ndarray
        bool, the cell is empty or one of ``NA_TOKENS``.
    bad : numpy.ndarray
        bool, the cell holds something that is not a finite number.
    """
    options = options or InputOptions()
    column = as_column(column)
    if is_number(column):
        values = column.astype(np.float64)
        blank = np.isnan(values)
        bad = np.isinf(values)
        values = np.where(bad, np.nan, values)
        return values, blank, bad
    if is_text(column):
        return _parse_text(column, options)
    obj = column
    isnum = np.fromiter(
        (
            isinstance(v, int | float | np.integer | np.floating)
            and not isinstance(v, bool | np.bool_)
            for v in obj
        ),
        dtype=bool,
        count=len(obj),
    )
    strs = arrow_strings(["" if (isnum[i] or v is None) else str(v) for i, v in enumerate(obj)])
    values, blank, bad = _parse_text(strs, options)
    if isnum.any():
        nums = obj[isnum].astype(np.float64)
        values[isnum] = np.where(np.isinf(nums), np.nan, nums)
        blank[isnum] = np.isnan(nums)
        bad[isnum] = np.isinf(nums)
    return values, blank, bad


def thousands_marks(options: InputOptions) -> tuple[str, ...]:
    """The characters read as thousands marks (see the module docstring)."""
    if options.thousands:
        return SPACES if options.thousands in SPACES else (options.thousands,)
    return (".",) if options.decimal == "," else ()


def _cls(chars: tuple[str, ...] | str) -> str:
    """A regular-expression character class holding exactly ``chars``."""
    return "[" + "".join("\\" + c if c in "]\\^-[" else c for c in chars) + "]"


def _parse_text(
    arr: pa.Array | pa.ChunkedArray, options: InputOptions
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    if not pa.types.is_string(arr.type) and not pa.types.is_large_string(arr.type):
        arr = pc.cast(arr, pa.string())
    arr = pc.utf8_trim_whitespace(pc.fill_null(arr, text_scalar("")))
    blank = pc.is_in(pc.utf8_lower(arr), value_set=arrow_strings(NA_TOKENS))
    # accounting negatives: (12.5) is -12.5
    if pc.any(pc.starts_with(arr, "(")).as_py():
        arr = pc.replace_substring_regex(arr, r"^\(\s*(.*?)\s*\)$", r"-\1")
    grouped = bool_scalar(True)
    seps = thousands_marks(options)
    if options.decimal != "." and "." not in seps:
        # a decimal comma: a dot is never a decimal point (nor, here, a thousands mark)
        grouped = pc.invert(pc.match_substring(arr, "."))
    if seps:
        sep, dec = _cls(seps), _cls(options.decimal)
        has_sep = pc.match_substring_regex(arr, sep)
        frac = r"\d*" if options.decimal == "." else r"\d+"
        well = pc.match_substring_regex(
            arr, rf"^[+-]?\d{{1,3}}(?:{sep}\d{{3}})+(?:{dec}{frac})?(?:[eE][+-]?\d+)?$")
        grouped = pc.and_(grouped, pc.or_(pc.invert(has_sep), well))
        for s in seps:
            arr = pc.replace_substring(arr, s, "")
    if options.decimal != ".":
        arr = pc.replace_substring(arr, options.decimal, ".")
    pattern = NUMBER_RE if options.decimal == "." else STRICT_NUMBER_RE
    ok = pc.and_(pc.match_substring_regex(arr, pattern), grouped)
    nums = pc.cast(pc.if_else(ok, arr, null_text()), pa.float64())
    values = to_numpy_number(nums).astype(np.float64, copy=True)
    blank_np = _bool(blank)
    ok_np = _bool(ok)
    finite = np.isfinite(values)
    bad = ~blank_np & ~(ok_np & finite)
    values[~finite] = np.nan
    values[blank_np] = np.nan
    return values, blank_np, bad


def _bool(arr: pa.Array | pa.ChunkedArray) -> np.ndarray:
    return to_numpy_bool(arr)
