"""Drivers built from other firms' data: the industry median leverage (pure functions).

Frank and Goyal (2009) find the median leverage of a firm's industry the most reliable
factor of its own. levgap builds it per measure: for a firm-year, the median of the measure
among the *other* firms of its industry (the code's first ``[model] industry_digits``
characters, or the code as given) in the same fiscal year, the firm itself left out, so that
its own debt never sets its own driver. With no other firm of the industry in that year, the
median of the year's other firms is used (else of the panel's), and the row is flagged
``industry_median_imputed``.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from levgap.attribution import loo_median
from levgap.config import ModelSpec
from levgap.schema import MEASURES

PREFIX = "industry_median_leverage"


def column(measure: str) -> str:
    """The frame column holding the industry median of one measure."""
    return f"{PREFIX}_{measure}"


def measure_values(f: pd.DataFrame, measure: str) -> np.ndarray:
    """The measure where it is used by the model (book leverage above 1 is not)."""
    y = f[measure].to_numpy(dtype=float).copy()
    if measure == "book":
        y[y > 1.0] = np.nan
    return y


def industry_median_columns(
    f: pd.DataFrame, spec: ModelSpec
) -> tuple[dict[str, np.ndarray], np.ndarray]:
    """Leave-one-out industry-year medians of each measure (see the module docstring).

    Parameters
    ----------
    f : pandas.DataFrame
        The features frame: ``industry``, ``fiscal_year`` and the measures.
    spec : ModelSpec
        ``industry_digits`` sets the industry level.

    Returns
    -------
    columns : dict of str to numpy.ndarray
        ``industry_median_leverage_<measure>`` and ``industry_median_leverage`` (the book
        one, so that the driver column is filled).
    imputed : numpy.ndarray of bool
        Rows where some measure's median came from the year (or the panel).
    """
    from levgap.features import peer_group

    industry = peer_group(f["industry"], spec.industry_digits).to_numpy(dtype=object)
    year = f["fiscal_year"].to_numpy()
    keys = cell_keys(industry, year)
    cell = pd.factorize(keys)[0]
    year_code = pd.factorize(year)[0]
    out: dict[str, np.ndarray] = {}
    imputed = np.zeros(len(f), dtype=bool)
    for measure in MEASURES:
        y = measure_values(f, measure)
        med, _ = loo_median(y, cell)
        gap = np.isnan(med)
        if gap.any():
            by_year, _ = loo_median(y, year_code)
            med = np.where(gap, by_year, med)
            gap2 = np.isnan(med)
            if gap2.any() and np.isfinite(y).any():
                med = np.where(gap2, float(np.nanmedian(y)), med)
            imputed |= gap & np.isfinite(y)
        out[column(measure)] = med
    out[PREFIX] = out[column("book")]
    return out, imputed


def cell_keys(industry: np.ndarray, year: np.ndarray) -> np.ndarray:
    """``industry|year`` keys of each row (the saved model looks medians up by them)."""
    return (pd.Series(industry).astype(str) + "|"
            + pd.Series(year).astype("int64").astype(str)).to_numpy(dtype=object)


def saved_medians(f: pd.DataFrame, rows: np.ndarray, y: np.ndarray
                  ) -> dict[str, dict[str, float]]:
    """Medians of the measure by industry-year and by year over the fit's rows (all firms),
    for the saved model: a new firm-year takes its industry-year's, else its year's, else
    the latest year's."""
    industry = f["median_group"].to_numpy(dtype=object)[rows]
    year = f["fiscal_year"].to_numpy()[rows]
    s = pd.Series(y)
    cells = s.groupby(cell_keys(industry, year)).median()
    years = s.groupby(year.astype(np.int64)).median()
    return {"industry_year": {str(k): float(v) for k, v in cells.items()},
            "year": {str(int(k)): float(v) for k, v in years.items()}}


def lookup_medians(saved: dict[str, dict[str, float]], industry: np.ndarray,
                   year: np.ndarray) -> np.ndarray:
    """Each row's saved industry-year median (else its year's, else the latest year's)."""
    keys = cell_keys(industry, year)
    by_year = saved["year"]
    latest = by_year[max(by_year, key=int)] if by_year else float("nan")
    out = np.empty(len(keys))
    for i, (k, t) in enumerate(zip(keys, np.asarray(year, dtype=np.int64), strict=True)):
        out[i] = saved["industry_year"].get(k, by_year.get(str(int(t)), latest))
    return out
