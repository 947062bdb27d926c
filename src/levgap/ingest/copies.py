"""Copies of a firm-year in a panel: exact copies (all but the first are left out) and
conflicting copies (all are left out, naming the columns that differ), for validation.

Every compared cell becomes an integer code of its value (NaN equal to NaN, a cell that is not
a number equal to another such cell, ``-0.0`` equal to ``0.0``), so copies are found with numpy
alone; only the details of the rows found are worded in Python.
"""

from __future__ import annotations

from collections.abc import Mapping

import numpy as np
import pyarrow as pa
import pyarrow.compute as pc

from levgap.ingest.columns import Column, cell, is_empty_text, take, to_numpy_number
from levgap.schema import NUMERIC

Texts = Mapping[str, pa.Array | pa.ChunkedArray]
Arrays = Mapping[str, np.ndarray]


def duplicates(
    text: Texts, values: Arrays, bad: Arrays, rows: np.ndarray
) -> tuple[np.ndarray, np.ndarray]:
    """Codes and details for exact copies and conflicting copies of a firm-year."""
    n = len(rows)
    code = np.full(n, "", dtype=object)
    detail = np.full(n, "", dtype=object)
    year = values["fiscal_year"]
    has_key = ~is_empty_text(text["firm_id"]) & ~np.isnan(year)
    if not has_key.any():
        return code, detail
    pos = np.flatnonzero(has_key)
    firm, yr = _value_codes(text["firm_id"], pos), _value_codes(year[pos])
    _, group, count = np.unique(firm * (int(yr.max()) + 1) + yr, return_inverse=True,
                                return_counts=True)
    group = group.ravel()
    dup = count[group] > 1
    idx, group = pos[dup], group[dup]
    if not len(idx):
        return code, detail
    # every column compared, as codes of its values (NaN equal to NaN, a bad cell to a bad
    # cell): a copy is exact when all codes agree
    compare: dict[str, np.ndarray] = {c: _value_codes(text[c], idx) for c in text}
    for c in NUMERIC:
        if c != "fiscal_year":
            compare[c] = _value_codes(np.where(bad[c][idx], np.inf, values[c][idx]))
    compare["fiscal_year"] = _value_codes(year[idx])
    versions = np.unique(np.column_stack([group, *compare.values()]), axis=0,
                         return_inverse=True)[1].ravel()
    pairs = np.unique(np.column_stack([group, versions]), axis=0)
    conflicted = (np.bincount(pairs[:, 0]) > 1)[group]
    if conflicted.any():
        _conflicts(np.flatnonzero(conflicted), group, idx, compare, text, year, rows,
                   code, detail)
    plain = ~conflicted
    if plain.any():
        first_row = np.full(int(group.max()) + 1, np.iinfo(np.int64).max, dtype=np.int64)
        np.minimum.at(first_row, group[plain], rows[idx[plain]])
        for pos_i, g in zip(idx[plain], group[plain], strict=True):
            orig = first_row[g]
            if rows[pos_i] != orig:
                code[pos_i] = "duplicate_row"
                detail[pos_i] = f"exact copy of row {orig}, which is kept"
    return code, detail


def _conflicts(sel: np.ndarray, group: np.ndarray, idx: np.ndarray,
               compare: Mapping[str, np.ndarray], text: Texts, year: np.ndarray,
               rows: np.ndarray, code: np.ndarray, detail: np.ndarray) -> None:
    """Mark the copies of firm-years whose copies differ, naming the columns that differ."""
    order = sel[np.argsort(group[sel], kind="stable")]  # by group, then by position
    starts = np.r_[0, np.flatnonzero(np.diff(group[order])) + 1]
    differs = {c: np.minimum.reduceat(v[order], starts) != np.maximum.reduceat(v[order], starts)
               for c, v in compare.items()}
    for k, members in enumerate(np.split(order, starts[1:])):
        at = idx[members]
        diff = ", ".join(c for c in compare if differs[c][k])
        first = int(at[0])
        head = (f"firm_id {cell(text['firm_id'], first)} and fiscal_year {int(year[first])} "
                "must be unique; also in row(s) ")
        for pos_i in at:
            row = rows[pos_i]
            others = ", ".join(str(r) for r in rows[at] if r != row)
            code[pos_i] = "conflicting_duplicate"
            detail[pos_i] = f"{head}{others}, which differ in {diff}"


def _value_codes(col: Column, idx: np.ndarray | None = None) -> np.ndarray:
    """Integer codes of the values of ``col`` (at ``idx``): equal values, equal codes."""
    if isinstance(col, np.ndarray):
        # np.unique counts NaN once and -0.0 as 0.0, as pandas' duplicate checks do
        sub = col if idx is None else col[idx]
        return np.unique(sub, return_inverse=True)[1].ravel().astype(np.int64)
    sub = col if idx is None else take(col, idx)
    if isinstance(sub, pa.ChunkedArray):
        sub = sub.combine_chunks()
    return to_numpy_number(pc.dictionary_encode(sub).indices).astype(np.int64)
