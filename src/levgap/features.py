"""Leverage measures, drivers, winsorising and peer groups (pure functions).

Definitions (DESIGN.md, "Measures and drivers"):

- ``book`` = total_debt / total_assets
- ``market`` = total_debt / (total_debt + market_equity)
- ``tangibility`` = ppe_net / total_assets
- ``profitability`` = ebitda / total_assets
- ``earnings_volatility`` = standard deviation (ddof 1) of profitability over the firm's
  trailing window of up to 5 fiscal years ending at the current year, with at least 3
  observations; otherwise the industry-year median (else the year median), flagged
  ``volatility_imputed``
- ``size`` = ln(total_assets) in the reference currency
- ``market_to_book`` = (total_assets - book_equity + market_equity) / total_assets; where
  market equity is missing, the industry-year median, flagged ``mtb_imputed``
- ``rd_intensity`` = rd_expense / total_assets, missing treated as zero with the indicator
  driver ``rd_missing`` (common practice); the indicator is left out when rd_expense is given
  in every row or in none (it would be constant)
- ``log_revenue`` = ln(revenue), missing where revenue is not above zero
- ``dividend_payer`` = 1 where dividends_paid > 0, else 0 (blank: 0, flagged
  ``dividends_missing``)
- ``industry_median_leverage`` = leave-one-out median of the measure in the firm's industry
  (``ModelSpec.industry_digits``) and fiscal year, one column per measure
  (``industry_median_leverage_<measure>``; the driver column holds the book one)
- input drivers (``ModelSpec.input_drivers``): numeric input columns as given

Drivers are winsorised within fiscal year at the quantiles of ``ModelSpec.winsorize``, except
the indicators and the industry median (``levgap.definitions.NOT_WINSORISED``).
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass
from typing import Any

import numpy as np
import pandas as pd

from levgap.codes import ANALYSIS_FLAGS, ANALYSIS_REASONS
from levgap.config import ModelSpec
from levgap.errors import ModelError
from levgap.groups import WHOLE_SAMPLE, IndustryLevels, industry_levels
from levgap.transforms import IMPUTED, DriverTransforms, apply, learn

FLAGS = ANALYSIS_FLAGS
REASONS = ANALYSIS_REASONS

VOL_WINDOW = 5
VOL_MIN_OBS = 3
POOLED = WHOLE_SAMPLE


@dataclass(frozen=True, slots=True)
class Features:
    """Measures and drivers, one row per firm-year.

    Parameters
    ----------
    frame : pandas.DataFrame
        ``firm_id, firm_name, fiscal_year, industry, effect_group, peer_group, source_row,
        flags,
        total_assets, total_debt, market_equity, book, market`` and one column per driver, in
        the row order of the panel.
    drivers : tuple of str
        Driver columns, in model order.
    levels : IndustryLevels
        Levels of the industry effect, small industries and their parents.
    transforms : DriverTransforms
        Imputation medians and winsorising limits learned from the panel (or given).
    notes : tuple of str
        Drivers dropped because no row had the data they need, and why.
    """

    frame: pd.DataFrame
    drivers: tuple[str, ...]
    levels: IndustryLevels
    transforms: DriverTransforms
    notes: tuple[str, ...] = ()


def build_features(
    data: pd.DataFrame, spec: ModelSpec, transforms: DriverTransforms | None = None, *,
    parents: Mapping[str, str] | None = None,
) -> Features:
    """Compute measures and drivers for a validated panel.

    Parameters
    ----------
    data : pandas.DataFrame
        ``Panel.data``: schema-v1 columns, ``source_row`` and ``flags``.
    spec : ModelSpec
        Drivers, winsorising limits, lease treatment, peer grouping and minimum firms.
    transforms : DriverTransforms, optional
        Imputation medians and winsorising limits to apply (a saved model's); learned from
        ``data`` when absent. Given transforms flag clipped rows ``outside_fitted_range``
        instead of ``winsorised``.

    Returns
    -------
    Features
    """
    n = len(data)
    f = _identity_columns(data, spec, n)
    _measures(f, data, spec, n)
    raw, drivers, notes = raw_drivers(data, f, spec, n, keep_all=transforms is not None)
    # imputation medians are by industry (at the effect's level) whatever the effects absorb
    group = peer_group(f["industry"], spec.industry_digits).to_numpy(dtype=object)
    years = f["fiscal_year"].to_numpy()
    learned = transforms is None
    if transforms is None:
        transforms = learn(raw, drivers, group, years, spec.winsorize)
    values, imputed, clipped = apply(raw, drivers, group, years, transforms)
    for name, mask in imputed.items():
        f["flags"] = add_flag(f["flags"], mask, IMPUTED[name])
    for name in drivers:
        f[name] = values[name]
        f[name + "_raw"] = raw[name]
    f["flags"] = add_flag(f["flags"], clipped, "winsorised" if learned
                          else "outside_fitted_range")
    lagged = list(drivers)
    if "industry_median_leverage" in drivers:
        from levgap.derived import industry_median_columns

        columns, imputed_any = industry_median_columns(f, spec)
        for col, v in columns.items():
            f[col] = v
            if col not in lagged:
                lagged.append(col)
        f["industry_median_leverage_raw"] = f["industry_median_leverage"]
        f["median_group"] = peer_group(f["industry"], spec.industry_digits)
        f["flags"] = add_flag(f["flags"], imputed_any, "industry_median_imputed")
    for name in ("dividend_payer",):
        if name in drivers:
            f["flags"] = add_flag(f["flags"], np.isnan(f[name + "_raw"].to_numpy()),
                                  "dividends_missing")
            f[name] = np.nan_to_num(f[name].to_numpy(), nan=0.0)
    if spec.lag_drivers:
        lag_rows(f, lagged)
    levels = industry_levels(f["effect_group"], f["firm_id"], spec.min_industry_firms,
                             parents)
    f["flags"] = add_flag(f["flags"], levels.small[levels.codes], "industry_effect_pooled")
    return Features(frame=f, drivers=tuple(drivers), levels=levels, transforms=transforms,
                    notes=tuple(notes))


def _identity_columns(data: pd.DataFrame, spec: ModelSpec, n: int) -> pd.DataFrame:
    f = pd.DataFrame(
        {
            "firm_id": data["firm_id"].astype(str).array,
            "firm_name": _text(data, "firm_name", n),
            "fiscal_year": data["fiscal_year"].astype("int64").to_numpy(),
            "industry": data["industry"].astype(str).array,
            "source_row": data["source_row"].to_numpy() if "source_row" in data
            else np.arange(1, n + 1),
            "flags": _text(data, "flags", n),
        }
    )
    # without industry effects every row shares one level: the fits absorb nothing for it
    f["effect_group"] = (peer_group(f["industry"], spec.industry_digits)
                         if "industry" in spec.absorbs else WHOLE_SAMPLE)
    f["peer_group"] = peer_group(f["industry"], spec.peer_digits)
    return f


def _measures(f: pd.DataFrame, data: pd.DataFrame, spec: ModelSpec, n: int) -> None:
    assets = data["total_assets"].to_numpy(dtype=float)
    debt = data["total_debt"].to_numpy(dtype=float)
    if spec.leases_as_debt:
        leases = _num(data, "lease_liabilities", n)
        missing = np.isnan(leases)
        debt = debt + np.where(missing, 0.0, leases)
        f["flags"] = add_flag(f["flags"], missing, "no_lease_data")
        f["flags"] = add_flag(f["flags"], debt > assets, "debt_above_assets_with_leases")
    equity_mkt = _num(data, "market_equity", n)
    f["total_assets"] = assets
    f["total_debt"] = debt
    f["market_equity"] = equity_mkt
    f["book"] = debt / assets
    denom = debt + equity_mkt
    with np.errstate(invalid="ignore", divide="ignore"):
        f["market"] = np.where(denom > 0, debt / denom, np.nan)


def raw_drivers(
    data: pd.DataFrame, f: pd.DataFrame, spec: ModelSpec, n: int, *, keep_all: bool = False
) -> tuple[dict[str, np.ndarray], list[str], list[str]]:
    """Drivers from the statements, before imputation and winsorising.

    Returns the raw values by name, the drivers kept (``rd_intensity`` adds ``rd_missing``)
    and notes on drivers left out because no row has their data (``keep_all``: none left out,
    for a saved model that must keep its drivers)."""
    assets = f["total_assets"].to_numpy()
    profitability = data["ebitda"].to_numpy(dtype=float) / assets
    raw: dict[str, np.ndarray] = {
        "tangibility": data["ppe_net"].to_numpy(dtype=float) / assets,
        "profitability": profitability,
        "size": np.log(assets),
    }
    if "earnings_volatility" in spec.drivers:
        given = _num(data, "earnings_volatility", n) if "earnings_volatility" in data else None
        vol = trailing_volatility(pd.factorize(f["firm_id"])[0], f["fiscal_year"].to_numpy(),
                                  profitability)
        raw["earnings_volatility"] = vol if given is None else np.where(np.isnan(given), vol,
                                                                        given)
    if "market_to_book" in spec.drivers:
        equity = f["market_equity"].to_numpy()
        raw["market_to_book"] = (assets - data["book_equity"].to_numpy(dtype=float)
                                 + equity) / assets
    drivers = list(spec.drivers)
    if "rd_intensity" in spec.drivers:
        rd = _num(data, "rd_expense", n)
        missing = np.isnan(rd)
        raw["rd_intensity"] = np.where(missing, 0.0, rd) / assets
        raw["rd_missing"] = missing.astype(float)
        if keep_all or missing.any() and not missing.all():
            # constant (rd_expense in every row or none): no use
            drivers.insert(drivers.index("rd_intensity") + 1, "rd_missing")
    if "log_revenue" in spec.drivers:
        revenue = _num(data, "revenue", n)
        with np.errstate(invalid="ignore", divide="ignore"):
            raw["log_revenue"] = np.where(revenue > 0, np.log(np.where(revenue > 0, revenue,
                                                                       1.0)), np.nan)
    if "dividend_payer" in spec.drivers:
        paid = _num(data, "dividends_paid", n)
        with np.errstate(invalid="ignore"):
            raw["dividend_payer"] = np.where(np.isnan(paid), np.nan, (paid > 0).astype(float))
    if "industry_median_leverage" in spec.drivers:
        # a placeholder with the right missingness; the values, one column per measure, are
        # set after the transforms (industry medians are not winsorised)
        raw["industry_median_leverage"] = np.zeros(n)
    for name in spec.input_drivers:
        raw[name] = _num(data, name, n)
        drivers.append(name)
    notes = []
    why = {
        "earnings_volatility": "no firm has the three fiscal years of history it needs",
        "market_to_book": "no row has market_equity (or shares_outstanding and share_price)",
        "log_revenue": "no row has revenue above zero",
        "dividend_payer": "no row has dividends_paid",
    }
    for name in list(drivers):
        if not keep_all and np.isnan(raw[name]).all():
            drivers.remove(name)
            notes.append(f"driver {name} left out of the model: {why.get(name, 'no data')}.")
    if not drivers:
        raise ModelError("the model must keep at least one driver; got none with data.")
    return raw, drivers, notes


def lag_rows(f: pd.DataFrame, drivers: list[str]) -> None:
    """Replace each driver by the firm's value in the previous fiscal year (NaN if absent);
    ``has_prior_year`` says which rows found that year."""
    here = pd.MultiIndex.from_arrays([f["firm_id"], f["fiscal_year"]])
    prev = pd.MultiIndex.from_arrays([f["firm_id"], f["fiscal_year"] - 1])
    pos = here.get_indexer(prev)
    found = pos >= 0
    f["has_prior_year"] = found
    for name in dict.fromkeys([*drivers, *(d + "_raw" for d in drivers if d + "_raw" in f)]):
        values = f[name].to_numpy()
        f[name] = np.where(found, values[np.where(found, pos, 0)], np.nan)


def peer_group(industry: pd.Series, digits: int) -> pd.Series:
    """Peer group of each row: the industry code, or its first ``digits`` characters."""
    industry = industry.astype(str).str.strip()
    return industry if digits <= 0 else industry.str.slice(0, digits)


def add_flag(flags: pd.Series, mask: np.ndarray, code: str) -> pd.Series:
    """Append ``code`` to the ``;``-joined flags of the rows in ``mask``."""
    flags = flags.astype(str)
    if not mask.any():
        return flags
    # Only the flagged rows go through Python strings.
    sel = np.flatnonzero(np.asarray(mask, dtype=bool))
    cur = flags.iloc[sel].to_numpy(dtype=object)
    out = flags.copy()
    out.iloc[sel] = np.where(cur == "", code, cur + ";" + code)
    return out


def trailing_volatility(firm: np.ndarray, year: np.ndarray, values: np.ndarray) -> np.ndarray:
    """Sample standard deviation of ``values`` over each firm's trailing window.

    The window holds the firm's observations with fiscal year in ``[t - 4, t]``; fewer than
    three non-missing observations give NaN.
    """
    n = len(values)
    order = np.lexsort((year, firm))
    f, y, v = firm[order], year[order], values[order]
    window = np.full((n, VOL_WINDOW), np.nan)
    window[:, 0] = v
    for k in range(1, VOL_WINDOW):
        same = np.zeros(n, dtype=bool)
        same[k:] = (f[k:] == f[:-k]) & (y[k:] - y[:-k] <= VOL_WINDOW - 1)
        col = np.full(n, np.nan)
        col[k:] = v[:-k]
        window[:, k] = np.where(same, col, np.nan)
    count = np.sum(~np.isnan(window), axis=1)
    with np.errstate(invalid="ignore", divide="ignore"):
        mean = np.nansum(window, axis=1) / count
        ss = np.nansum((window - mean[:, None]) ** 2, axis=1)
        sd = np.sqrt(ss / (count - 1))
    sd[count < VOL_MIN_OBS] = np.nan
    out = np.empty(n)
    out[order] = sd
    return out


def _num(data: pd.DataFrame, col: str, n: int) -> np.ndarray:
    if col in data:
        return pd.to_numeric(data[col], errors="coerce").to_numpy(dtype=float)
    return np.full(n, np.nan)


def _text(data: pd.DataFrame, col: str, n: int) -> Any:
    if col in data:
        return data[col].fillna("").astype(str).array
    return np.full(n, "", dtype=object)
