"""Each firm-year's gap history: where the firm stood before, and for how long (pure functions).

Firm effects explain most of the variation in leverage (Lemmon, Roberts and Zender 2008), so a
gap that has stood for years says something else than one that opened this year. For every
firm-year and measure, from the firm's own rows of the same measure:

- ``gap_prev``: the gap of the firm's previous fiscal year (``t - 1``; blank when the firm has
  no row for that year);
- ``gap_change``: ``gap - gap_prev``;
- ``gap_mean_prior``: the mean gap over all the firm's earlier fiscal years (its standing
  deviation; blank in its first year);
- ``years_outside``: how many consecutive fiscal years, ending with this one, the firm has
  been outside its band on the same side (0 when within; a missing year or a change of side
  starts the count again).

Two flags follow: ``persistent`` (outside on the same side for ``PERSISTENT_YEARS`` or more
consecutive years) and ``newly_outside`` (outside this year and not on that side the year
before, when the firm has a row for the year before).
"""

from __future__ import annotations

from typing import TYPE_CHECKING, Any

import numpy as np

if TYPE_CHECKING:
    import pandas as pd

HISTORY_COLUMNS: tuple[str, ...] = ("gap_prev", "gap_change", "gap_mean_prior", "years_outside")
PERSISTENT_YEARS = 3
"""Consecutive years outside the band on the same side that make a firm ``persistent``."""
SIDES = {"under": -1, "within": 0, "over": 1}


def history_arrays(
    firm: np.ndarray, year: np.ndarray, gap: np.ndarray, side: np.ndarray
) -> dict[str, Any]:
    """History columns and flags of one measure's rows, in the rows' own order.

    Parameters
    ----------
    firm : numpy.ndarray, shape (n,)
        Firm of each row (any codes that compare equal within a firm).
    year : numpy.ndarray of int, shape (n,)
        Fiscal year of each row; a firm has at most one row a year.
    gap : numpy.ndarray of float, shape (n,)
        ``actual - target``.
    side : numpy.ndarray of int, shape (n,)
        -1 under the band, 0 within, +1 over.

    Returns
    -------
    dict
        ``gap_prev``, ``gap_change``, ``gap_mean_prior`` (float arrays, NaN where undefined),
        ``years_outside`` (int array) and ``flags``: ``{"persistent": mask,
        "newly_outside": mask}``.
    """
    n = len(gap)
    year = np.asarray(year, dtype=np.int64)
    side = np.asarray(side, dtype=np.int64)
    gap = np.asarray(gap, dtype=float)
    order = np.lexsort((year, np.asarray(firm)))
    f, y, g, s = np.asarray(firm)[order], year[order], gap[order], side[order]
    same_firm = np.zeros(n, dtype=bool)
    same_firm[1:] = f[1:] == f[:-1]
    follows = same_firm.copy()
    follows[1:] &= y[1:] == y[:-1] + 1
    prev = np.full(n, np.nan)
    prev[1:] = np.where(follows[1:], g[:-1], np.nan)
    # mean over the firm's earlier rows: cumulative sums restarted at each firm
    start = np.flatnonzero(~same_firm)
    size = np.diff(np.r_[start, n])
    first = np.repeat(start, size)
    cum = np.cumsum(g)
    before = cum - g - np.where(first > 0, cum[np.maximum(first - 1, 0)], 0.0)
    k = np.arange(n) - first
    with np.errstate(invalid="ignore", divide="ignore"):
        mean_prior = np.where(k > 0, before / np.maximum(k, 1), np.nan)
    # runs of consecutive years on the same side outside the band
    prev_side = np.zeros(n, dtype=np.int64)
    prev_side[1:] = s[:-1]
    cont = follows & (s != 0) & (s == prev_side)
    run_start = np.flatnonzero(~cont)
    run_len = np.diff(np.r_[run_start, n])
    pos = np.arange(n) - np.repeat(run_start, run_len) + 1
    outside = np.where(s != 0, pos, 0)
    newly = (s != 0) & follows & (prev_side != s)
    out: dict[str, Any] = {}
    for name, sorted_values in (("gap_prev", prev), ("gap_change", g - prev),
                                ("gap_mean_prior", mean_prior), ("years_outside", outside)):
        values = np.empty_like(sorted_values)
        values[order] = sorted_values
        out[name] = values
    flags = {}
    for name, mask in (("persistent", outside >= PERSISTENT_YEARS), ("newly_outside", newly)):
        m = np.empty(n, dtype=bool)
        m[order] = mask
        flags[name] = m
    out["flags"] = flags
    return out


def with_history(targets: pd.DataFrame) -> pd.DataFrame:
    """A targets table with its history columns and flags (re)computed from its own rows.

    Parameters
    ----------
    targets : pandas.DataFrame
        ``firm_id``, ``fiscal_year``, ``measure``, ``gap``, ``status`` and ``flags``; any
        fiscal years (only the years present count as history).

    Returns
    -------
    pandas.DataFrame
        A copy with ``HISTORY_COLUMNS`` set and ``persistent`` / ``newly_outside`` in
        ``flags`` (replacing any earlier history flags).
    """
    import pandas as pd

    from levgap.features import add_flag

    out = targets.copy()
    key = pd.factorize(pd.MultiIndex.from_arrays([out["measure"].astype(str),
                                                  out["firm_id"].astype(str)]))[0]
    side = out["status"].astype(str).map(SIDES).fillna(0).to_numpy(dtype=np.int64)
    hist = history_arrays(key, out["fiscal_year"].to_numpy(), out["gap"].to_numpy(dtype=float),
                          side)
    for name in HISTORY_COLUMNS:
        out[name] = hist[name]
    kept = [";".join(c for c in str(v).split(";") if c and c not in hist["flags"])
            for v in out["flags"].fillna("").astype(str)]
    out["flags"] = pd.Series(kept, index=out.index, dtype=object)
    for code, mask in hist["flags"].items():
        out["flags"] = add_flag(out["flags"], mask, code)
    return out
