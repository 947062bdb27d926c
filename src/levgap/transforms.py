"""Driver transforms learned from the panel and re-applied to new rows (pure functions).

Two steps turn raw drivers into model inputs: missing values of the imputed drivers take the
median of their industry and year (else of the year, else of every row), and every driver is
clipped to the quantiles of its fiscal year (winsorising). :func:`learn` records both from the
panel; :func:`apply` re-applies them, so that ``analyze`` and the saved model
(``levgap.models.saved``) transform a row identically. A value outside a year's limits is
clipped and its row flagged (``winsorised`` in the panel, ``outside_fitted_range`` when a saved
model scores a new row); the raw value stays available.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

import numpy as np
import pandas as pd

from levgap.definitions import NOT_WINSORISED

IMPUTED: dict[str, str] = {
    "earnings_volatility": "volatility_imputed",
    "market_to_book": "mtb_imputed",
}
"""Drivers whose missing values take a group median, and the flag they set."""


@dataclass(frozen=True, slots=True)
class DriverTransforms:
    """What the panel taught: imputation medians and winsorising limits.

    Parameters
    ----------
    quantiles : tuple of float
        Winsorising quantiles (low, high).
    years : numpy.ndarray of int
        Fiscal years with limits, sorted.
    limits : dict of str to numpy.ndarray
        Per driver, the (low, high) limits of each year in ``years`` (shape (n_years, 2)).
    medians : dict of str to dict
        Per imputed driver: ``group_year`` {"group|year": value}, ``year`` {year: value} and
        ``all`` (value).
    """

    quantiles: tuple[float, float]
    years: np.ndarray
    limits: dict[str, np.ndarray] = field(default_factory=dict)
    medians: dict[str, dict[str, Any]] = field(default_factory=dict)

    def to_dict(self) -> dict[str, Any]:
        """JSON-able form (floats round-trip exactly)."""
        return {
            "quantiles": list(self.quantiles),
            "years": [int(y) for y in self.years],
            "limits": {k: v.tolist() for k, v in self.limits.items()},
            "medians": self.medians,
        }

    @classmethod
    def from_dict(cls, d: dict[str, Any]) -> DriverTransforms:
        """Inverse of :meth:`to_dict`."""
        return cls(
            quantiles=(float(d["quantiles"][0]), float(d["quantiles"][1])),
            years=np.array(d["years"], dtype=np.int64),
            limits={k: np.array(v, dtype=float).reshape(-1, 2) for k, v in d["limits"].items()},
            medians=d["medians"],
        )


def impute_medians(
    values: np.ndarray, group: np.ndarray, year: np.ndarray
) -> dict[str, Any]:
    """Medians of ``values`` by group and year, by year, and overall (NaN ignored)."""
    s = pd.Series(values)
    ok = ~np.isnan(values)
    by_gy = s[ok].groupby([pd.Series(group)[ok].to_numpy(), pd.Series(year)[ok].to_numpy()])
    by_y = s[ok].groupby(pd.Series(year)[ok].to_numpy())
    return {
        "group_year": {f"{g}|{int(y)}": float(v) for (g, y), v in by_gy.median().items()},
        "year": {str(int(y)): float(v) for y, v in by_y.median().items()},
        "all": float(s[ok].median()) if ok.any() else float("nan"),
    }


def fill_missing(
    values: np.ndarray, group: np.ndarray, year: np.ndarray, medians: dict[str, Any]
) -> tuple[np.ndarray, np.ndarray]:
    """Fill NaN with the group-year median, else the year's (nearest earlier year for a year
    not seen), else the overall median. Returns the values and the mask of filled rows."""
    missing = np.isnan(values)
    if not missing.any():
        return values, missing
    out = values.copy()
    rows = np.flatnonzero(missing)
    keys = (pd.Series(np.asarray(group)[rows]).astype(str) + "|"
            + pd.Series(np.asarray(year)[rows]).astype("int64").astype(str))
    v = keys.map(medians["group_year"]).to_numpy(dtype=float, copy=True)
    by_year = medians["year"]
    seen = np.array(sorted(int(y) for y in by_year), dtype=np.int64)
    todo = np.isnan(v)
    if todo.any() and len(seen):
        yv = np.array([by_year[str(int(y))] for y in seen], dtype=float)
        pos = np.searchsorted(seen, np.asarray(year)[rows][todo], side="right") - 1
        v[todo] = yv[np.maximum(pos, 0)]
    v[np.isnan(v)] = medians["all"]
    out[rows] = v
    return out, missing


def year_limits(
    values: np.ndarray, year: np.ndarray, years: np.ndarray, lo: float, hi: float
) -> np.ndarray:
    """The ``lo`` and ``hi`` quantiles (linear interpolation) of ``values`` in each year."""
    out = np.full((len(years), 2), np.nan)
    order = np.argsort(year, kind="stable")
    ys, vs = year[order], values[order]
    starts = np.searchsorted(ys, years, side="left")
    ends = np.searchsorted(ys, years, side="right")
    for i, (a, b) in enumerate(zip(starts, ends, strict=True)):
        part = vs[a:b]
        part = part[~np.isnan(part)]
        if len(part):
            out[i] = np.quantile(part, [lo, hi])
    return out


def clip_to_limits(
    values: np.ndarray, year: np.ndarray, years: np.ndarray, limits: np.ndarray
) -> tuple[np.ndarray, np.ndarray]:
    """Clip to the limits of each row's year (nearest earlier year with limits for a year
    not seen, else the nearest later). Returns the values and the mask of clipped rows."""
    known = np.flatnonzero(~np.isnan(limits[:, 0]))
    if len(known) == 0:
        return values, np.zeros(len(values), dtype=bool)
    ky = years[known]
    pos = np.searchsorted(ky, year, side="right") - 1
    pos = np.where(pos >= 0, pos, 0)
    lim = limits[known[pos]]
    out = np.clip(values, lim[:, 0], lim[:, 1])
    return out, (values < lim[:, 0]) | (values > lim[:, 1])


def learn(
    raw: dict[str, np.ndarray],
    drivers: list[str],
    group: np.ndarray,
    year: np.ndarray,
    quantiles: tuple[float, float],
) -> DriverTransforms:
    """Imputation medians of the imputed drivers and winsorising limits of every driver.

    Limits are learned on the imputed values, as :func:`apply` clips after imputing.
    """
    years = np.unique(year)
    medians = {name: impute_medians(raw[name], group, year)
               for name in IMPUTED if name in drivers}
    lo, hi = quantiles
    limits: dict[str, np.ndarray] = {}
    if lo > 0.0 or hi < 1.0:
        for name in drivers:
            if name in NOT_WINSORISED:
                continue
            values = raw[name]
            if name in medians:
                values = fill_missing(values, group, year, medians[name])[0]
            limits[name] = year_limits(values, year, years, lo, hi)
    return DriverTransforms(quantiles=quantiles, years=years, limits=limits, medians=medians)


def apply(
    raw: dict[str, np.ndarray],
    drivers: list[str],
    group: np.ndarray,
    year: np.ndarray,
    transforms: DriverTransforms,
) -> tuple[dict[str, np.ndarray], dict[str, np.ndarray], np.ndarray]:
    """Impute and clip each driver as learned.

    Returns
    -------
    values : dict of str to numpy.ndarray
        Model inputs.
    imputed : dict of str to numpy.ndarray of bool
        Per imputed driver, the rows that took a median.
    clipped : numpy.ndarray of bool
        Rows with at least one driver clipped to its year's limits.
    """
    values: dict[str, np.ndarray] = {}
    imputed: dict[str, np.ndarray] = {}
    clipped = np.zeros(len(year), dtype=bool)
    for name in drivers:
        v = raw[name]
        if name in transforms.medians:
            v, imputed[name] = fill_missing(v, group, year, transforms.medians[name])
        if name in transforms.limits:
            v, hit = clip_to_limits(v, year, transforms.years, transforms.limits[name])
            clipped |= hit
        values[name] = v
    return values, imputed, clipped
