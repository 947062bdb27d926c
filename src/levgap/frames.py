"""Assembling the output tables from the per-measure arrays (no file I/O).

The frames are gathered from the panel frame's own arrays (no Python string objects per row,
no concatenation of ten-million-row frames), each part's arrays released as soon as gathered.
"""

from __future__ import annotations

from collections.abc import Sequence
from typing import Any

import numpy as np
import pandas as pd

from levgap.analysis import COEF_COLUMNS, TARGET_COLUMNS
from levgap.band import STATUS
from levgap.features import add_flag
from levgap.panel import EXCLUSION_COLUMNS


def row_ledger(
    frame: pd.DataFrame, mask: np.ndarray, measure: str, reason: str, detail: str
) -> pd.DataFrame:
    sub = frame.loc[mask]
    return pd.DataFrame(
        {
            "source_row": sub["source_row"].to_numpy(dtype=np.int64),
            "firm_id": sub["firm_id"].to_numpy(),
            "fiscal_year": sub["fiscal_year"].to_numpy(),
            "measure": measure,
            "reason": reason,
            "detail": detail,
        }
    )


def concat_ledger(parts: list[pd.DataFrame]) -> pd.DataFrame:
    parts = [p for p in parts if len(p)]
    if not parts:
        from levgap.panel import empty_exclusions

        return empty_exclusions()
    out = pd.concat([p.reindex(columns=list(EXCLUSION_COLUMNS)) for p in parts],
                    ignore_index=True)
    out["measure"] = out["measure"].fillna("").astype(str)
    return out.sort_values(["source_row", "measure"], kind="stable", ignore_index=True)


def _labels(values: Sequence[str]) -> Any:
    """Text labels as the array type pandas gives a text column, to ``take`` from."""
    return pd.Series(np.array(list(values), dtype=object)).array


def targets_frame(frame: pd.DataFrame, parts: list[dict[str, Any]]) -> pd.DataFrame:
    # Each part's arrays are released as soon as they are gathered (pop), and the frame takes
    # the gathered arrays without another copy: the peak stays near the size of the output.
    rows = np.concatenate([p.pop("rows") for p in parts]).astype(np.intp)
    which = np.repeat(np.arange(len(parts), dtype=np.int32),
                      [len(p["actual"]) for p in parts])
    cols: dict[str, Any] = {}
    extra = [p.pop("extra_flags") for p in parts]
    sizes = [len(p["actual"]) for p in parts]
    for c in TARGET_COLUMNS:
        if c in ("firm_id", "firm_name", "industry", "flags"):
            cols[c] = frame[c].array.take(rows)
        elif c == "fiscal_year":
            cols[c] = frame[c].to_numpy()[rows]
        elif c == "measure":
            cols[c] = _labels([p["measure"] for p in parts]).take(which)
        elif c == "status":
            cols[c] = _labels(STATUS).take(np.concatenate([p.pop("status") for p in parts]))
        else:
            cols[c] = np.concatenate([p.pop(c) for p in parts])
    out = pd.DataFrame(cols, copy=False)
    # measure-specific flags (cross-fit, peers) after the row's own
    codes = sorted({code for e in extra for code in e})
    for code in codes:
        mask = np.concatenate([e.get(code, np.zeros(size, dtype=bool))
                               for e, size in zip(extra, sizes, strict=True)])
        if mask.any():
            out["flags"] = add_flag(out["flags"], mask, code)
    return out


def drivers_frame(
    frame: pd.DataFrame, parts: list[dict[str, Any]], names: tuple[str, ...]
) -> pd.DataFrame:
    k = len(names)
    sizes = [len(p["rows"]) for p in parts]
    # 32-bit gather indices: ten million of them are 40 MB instead of 80.
    index = np.int32 if len(frame) < 2**31 else np.intp
    long_rows = np.repeat(np.concatenate([p.pop("rows") for p in parts]).astype(index), k)
    cols: dict[str, Any] = {
        "firm_id": frame["firm_id"].array.take(long_rows),
        "fiscal_year": frame["fiscal_year"].to_numpy()[long_rows],
    }
    del long_rows
    which = np.repeat(np.arange(len(parts), dtype=np.int32), [s * k for s in sizes])
    cols["measure"] = _labels([p["measure"] for p in parts]).take(which)
    del which
    cols["driver"] = _labels(names).take(np.tile(np.arange(k, dtype=np.int32), sum(sizes)))
    for c in ("firm_value", "raw_value", "peer_value", "contribution"):
        cols[c] = np.concatenate([p.pop(c).reshape(-1) for p in parts])
    return pd.DataFrame(cols, copy=False)


def fold_coef_frame(fits: Sequence[Any], fold_ids: Sequence[int], measure: str,
                    model: str) -> pd.DataFrame:
    """Constant and slopes of every cross-fit fold's fit (``fold_coefficients``)."""
    parts = []
    for fold, fit in zip(fold_ids, fits, strict=True):
        parts.append(pd.DataFrame({"measure": measure, "model": model, "fold": int(fold),
                                   "term": list(fit.names), "estimate": fit.coef}))
    return pd.concat(parts, ignore_index=True)


def coef_frame(fit: Any, measure: str, model: str) -> pd.DataFrame:
    tidy = fit.tidy()
    df = pd.DataFrame(tidy)
    df = df[df["term"] != "const"]
    df.insert(0, "model", model)
    df.insert(0, "measure", measure)
    return with_signs(df.reset_index(drop=True)[list(COEF_COLUMNS)])


SIGN_COLUMNS = ("expected_sign", "agrees", "sign_source")
"""The theory check of ``coefficients.csv`` (``levgap.definitions``)."""


def with_signs(df: pd.DataFrame) -> pd.DataFrame:
    """Add each term's expected sign, whether the estimate agrees, and the sign's source."""
    from levgap.definitions import agrees, expected

    df = df.copy()
    signs = [expected(str(t), str(m)) for t, m in zip(df["term"], df["measure"], strict=True)]
    df["expected_sign"] = pd.Series([s for s, _ in signs], index=df.index, dtype=object)
    df["agrees"] = pd.Series([agrees(str(t), float(e)) for t, e in
                              zip(df["term"], df["estimate"], strict=True)], index=df.index,
                             dtype=object)
    df["sign_source"] = pd.Series([src for _, src in signs], index=df.index, dtype=object)
    return df


