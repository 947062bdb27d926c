"""The estimation sample as one wide table (``analyze --sample``, ``estimate --sample``).

One row per firm-year that entered at least one measure's fit, with what a reader needs to
reproduce the estimates elsewhere: the keys and the effect codes (``effect_group`` is the
industry level the fit absorbed, ``(all industries)`` when it absorbed none), ``in_<measure>``
(1 when the row is in that measure's fit), each measure where used, and each driver as the
model used it (winsorised, imputed, lagged) beside its raw value (``<driver>_raw``: before
imputation and winsorising, lagged alike). The industry median leverage, which differs by
measure, has one column per measure (``industry_median_leverage_<measure>``).
"""

from __future__ import annotations

from collections.abc import Mapping
from typing import TYPE_CHECKING

import numpy as np
import pandas as pd

if TYPE_CHECKING:
    from levgap.features import Features

KEYS = ("firm_id", "firm_name", "fiscal_year", "industry", "effect_group", "peer_group",
        "source_row")


def sample_frame(feats: Features, used: Mapping[str, np.ndarray]) -> pd.DataFrame:
    """The estimation sample (see the module docstring).

    Parameters
    ----------
    feats : Features
        The run's features (rows as the fits saw them).
    used : mapping of str to numpy.ndarray
        Measure -> the rows of ``feats.frame`` in its fit.

    Returns
    -------
    pandas.DataFrame
    """
    from levgap.derived import PREFIX, column

    f = feats.frame
    n = len(f)
    inside = {m: np.zeros(n, dtype=bool) for m in used}
    for m, rows in used.items():
        inside[m][rows] = True
    keep = np.zeros(n, dtype=bool)
    for mask in inside.values():
        keep |= mask
    cols: dict[str, object] = {k: f[k].to_numpy()[keep] for k in KEYS if k in f}
    for m, mask in inside.items():
        cols[f"in_{m}"] = mask[keep].astype(np.int64)
    for m, mask in inside.items():
        cols[m] = np.where(mask, f[m].to_numpy(dtype=float), np.nan)[keep]
    for d in feats.drivers:
        if d == PREFIX:
            for m, mask in inside.items():
                cols[column(m)] = np.where(mask, f[column(m)].to_numpy(dtype=float),
                                           np.nan)[keep]
            continue
        cols[d] = f[d].to_numpy(dtype=float)[keep]
        if d + "_raw" in f:
            cols[d + "_raw"] = f[d + "_raw"].to_numpy(dtype=float)[keep]
    cols["flags"] = f["flags"].to_numpy(dtype=object)[keep]
    return pd.DataFrame(cols)
