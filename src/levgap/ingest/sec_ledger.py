"""The import ledger: firm-years filed but not in the panel, and the row-level checks behind it.

Every annual report of the quarters given ends up either as a panel row or as a line of the
ledger (``panel.excluded.csv``) with a reason code from :data:`levgap.codes.SEC_REASONS`.

Subsidiaries
    A subsidiary that files its own 10-K (an operating partnership beside its REIT, a
    finance arm) repeats its parent's economics. Firm-years whose total assets equal
    another filer's, exactly and at the same balance-sheet date, form a group; the filer
    with the largest cover-page public float is taken for the parent (then the one with
    the most cover-page shares, then the lowest CIK) and the others are flagged
    ``subsidiary_duplicate``, or left out with ``--drop-subsidiaries`` (ledger reason
    ``subsidiary_duplicate``).
Industries
    Rows whose SIC code lies in an ``exclude_sic`` range (by default financials 6000-6999
    and utilities 4900-4999, as leverage studies do) go to the ledger (reason
    ``excluded_industry``).
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from levgap.ingest.sec_years import LEDGER_COLUMNS


def ledger_lines(rows: pd.DataFrame, reason: str, detail: pd.Series | str) -> pd.DataFrame:
    """Ledger lines for panel rows left out (``own_adsh`` names the filing)."""
    return pd.DataFrame({
        "firm_id": rows["firm_id"].to_numpy(), "fiscal_year": rows["fiscal_year"].to_numpy(),
        "firm_name": rows["firm_name"].to_numpy(), "industry": rows["industry"].to_numpy(),
        "adsh": rows["own_adsh"].to_numpy(), "form": rows["own_form"].to_numpy(),
        "period": rows["row_date"].to_numpy(), "reason": reason,
        "detail": detail.to_numpy() if isinstance(detail, pd.Series) else detail,
    }).reindex(columns=list(LEDGER_COLUMNS))


def find_subsidiaries(rows: pd.DataFrame) -> tuple[np.ndarray, np.ndarray]:
    """Rows that duplicate another filer's balance sheet.

    Parameters
    ----------
    rows : pandas.DataFrame
        ``firm_id``, ``row_date``, ``total_assets``, ``public_float``,
        ``shares_outstanding``.

    Returns
    -------
    flagged : numpy.ndarray of bool
        The rows taken for subsidiaries.
    parent : numpy.ndarray of object
        The CIK of the filer taken for the parent ("" where not flagged).
    """
    n = len(rows)
    flagged = np.zeros(n, dtype=bool)
    parent = np.full(n, "", dtype=object)
    assets = rows["total_assets"].to_numpy(dtype=float)
    ok = ~np.isnan(assets) & (assets > 0)
    if not ok.any():
        return flagged, parent
    frame = pd.DataFrame({
        "pos": np.arange(n)[ok], "firm": rows["firm_id"].to_numpy()[ok],
        "date": rows["row_date"].to_numpy()[ok], "assets": assets[ok],
        "float": np.nan_to_num(rows["public_float"].to_numpy(dtype=float)[ok], nan=-1.0),
        "shares": np.nan_to_num(rows["shares_outstanding"].to_numpy(dtype=float)[ok],
                                nan=-1.0),
        "cik": pd.to_numeric(rows["firm_id"], errors="coerce").to_numpy()[ok],
    })
    groups = frame.groupby(["date", "assets"])["firm"].transform("nunique")
    frame = frame.loc[groups > 1]
    if frame.empty:
        return flagged, parent
    frame = frame.sort_values(["date", "assets", "float", "shares", "cik"],
                              ascending=[True, True, False, False, True])
    head = frame.groupby(["date", "assets"])["firm"].transform("first")
    sub = frame["firm"] != head
    flagged[frame.loc[sub, "pos"].to_numpy()] = True
    parent[frame.loc[sub, "pos"].to_numpy()] = head[sub].to_numpy()
    return flagged, parent


def industry_ranges(rows: pd.DataFrame, ranges: tuple[tuple[int, int], ...]) -> np.ndarray:
    """The ``LOW-HIGH`` range text each row's SIC code falls in (``""`` when none)."""
    sic = pd.to_numeric(rows["industry"], errors="coerce").to_numpy(dtype=float)
    matched = np.full(len(rows), "", dtype=object)
    for lo, hi in reversed(ranges):
        inside = (sic >= lo) & (sic <= hi)
        matched = np.where(inside, f"{lo:04d}-{hi:04d}", matched)
    return matched
