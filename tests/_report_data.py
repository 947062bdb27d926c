"""A fabricated output folder in the v1 contract, for the report tests.

The numbers follow the contract's identities (``gap = actual - target``, contributions sum to
``target - peer_target``, status from the band) so the report code meets the shapes and
edge cases the pipeline produces, without running the pipeline. Firm names include markup,
mathtext dollars, leading underscores and spreadsheet formulas on purpose.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

DRIVERS = ("tangibility", "profitability", "earnings_volatility", "size", "market_to_book")
TRUE = {
    "book": {"tangibility": 0.22, "profitability": -0.35, "earnings_volatility": -0.40,
             "size": 0.018, "market_to_book": -0.025},
    "market": {"tangibility": 0.18, "profitability": -0.50, "earnings_volatility": -0.30,
               "size": 0.025, "market_to_book": -0.060},
}
NASTY_NAMES = (
    "<script>document.title='pwned'</script>",
    "Alpha </svg> Beta & Co",
    "=HYPERLINK(\"http://example.invalid\")",
    "Cost $5$ Ltd",
    "_hidden label",
    "<img src=x onerror=alert(1)>",
)


def make_outputs(
    n_firms: int = 60, n_years: int = 4, *, seed: int = 0,
    measures: tuple[str, ...] = ("book", "market"),
) -> tuple[dict[str, pd.DataFrame], dict]:
    """Tables and manifest of an invented run with ``n_firms`` firms over ``n_years`` years."""
    rng = np.random.default_rng(seed)
    industries = np.array(["2834", "3714", "4911", "5812", "7372", "<b>Retail</b>", "1311"])
    firm_ind = industries[rng.integers(0, len(industries), n_firms)]
    firm_ids = np.array([f"F{i:05d}" for i in range(n_firms)])
    names = np.array([f"Firm {i:05d} Holdings" for i in range(n_firms)], dtype=object)
    for k, nasty in enumerate(NASTY_NAMES[: min(len(NASTY_NAMES), n_firms)]):
        names[k] = nasty
    years = np.arange(2015, 2015 + n_years)
    fy = pd.DataFrame({
        "firm_id": np.repeat(firm_ids, n_years),
        "firm_name": np.repeat(names, n_years),
        "industry": np.repeat(firm_ind, n_years),
        "fiscal_year": np.tile(years, n_firms),
    })
    n = len(fy)
    x = pd.DataFrame({
        "tangibility": rng.uniform(0.05, 0.8, n),
        "profitability": rng.normal(0.12, 0.06, n),
        "earnings_volatility": np.abs(rng.normal(0.03, 0.015, n)),
        "size": rng.normal(7.0, 1.5, n),
        "market_to_book": rng.lognormal(0.3, 0.3, n),
    })
    ind_effect = dict(zip(industries, rng.normal(0, 0.05, len(industries)), strict=True))
    target_rows, contributions = [], {}
    for measure in measures:
        beta = pd.Series(TRUE[measure])
        base = 0.15 + fy["industry"].map(ind_effect).to_numpy()
        target = base + x[list(DRIVERS)].to_numpy() @ beta.to_numpy()
        key = fy["industry"] + "|" + fy["fiscal_year"].astype(str)
        peer = x.groupby(key.to_numpy()).transform("median")
        contrib = (x - peer) * beta
        peer_target = target - contrib.sum(axis=1).to_numpy()
        resid = rng.normal(0, 0.06, n)
        # The firms with awkward names get large gaps, so that they reach the top tables and
        # the step charts: even positions over-levered, odd ones under-levered.
        firm_index = np.repeat(np.arange(n_firms), n_years)
        awkward = firm_index < len(NASTY_NAMES)
        resid[awkward] += np.where(firm_index[awkward] % 2 == 0, 0.3, -0.22)
        actual = np.clip(target + resid, 0.0, 0.98)
        gap = actual - target
        q = 0.08
        status = np.where(gap > q, "over", np.where(gap < -q, "under", "within"))
        peer_median = pd.Series(actual).groupby(key.to_numpy()).transform("median").to_numpy()
        assets = np.exp(x["size"].to_numpy())
        frame = fy.copy()
        frame["measure"] = measure
        frame["actual"] = actual
        frame["target"] = target
        frame["gap"] = gap
        frame["gap_z"] = gap / 0.06
        frame["band_low"] = target - q
        frame["band_high"] = target + q
        frame["status"] = status
        frame["peer_median"] = peer_median
        frame["peer_count"] = pd.Series(1, index=fy.index).groupby(key.to_numpy()).transform(
            "sum").to_numpy() - 1
        frame["peer_target"] = peer_target
        frame["debt_to_target"] = -gap * assets
        frame["target_full"] = target + rng.normal(0, 0.005, n)
        frame["fold"] = np.repeat(np.arange(n_firms) % 5, n_years)
        frame["flags"] = np.where(rng.random(n) < 0.1, "volatility_imputed", "")
        target_rows.append(frame)
        contributions[measure] = contrib[list(DRIVERS)].to_numpy()
    from levgap.history import with_history

    targets = with_history(pd.concat(target_rows, ignore_index=True))
    drivers = _driver_rows(fy, x, peer, contributions)
    coef_rows, fit_rows = [], []
    for measure in measures:
        for d in DRIVERS:
            est = TRUE[measure][d] * (1 + rng.normal(0, 0.1))
            se = abs(est) * rng.uniform(0.15, 0.8)
            t = est / se
            p = float(2 * (1 - _norm_cdf(abs(t))))
            coef_rows.append({"measure": measure, "model": "linear", "term": d, "estimate": est,
                              "std_error": se, "t_stat": t, "p_value": p,
                              "ci_low": est - 1.96 * se, "ci_high": est + 1.96 * se})
        fit_rows.append({"measure": measure, "model": "linear", "n_obs": n, "n_firms": n_firms,
                         "n_industries": len(industries), "r2": 0.41, "r2_oos": 0.33,
                         "rmse_oos": 0.071, "coverage": 0.8, "coverage_industry_min": 0.7,
                         "coverage_industry_max": 0.9, "coverage_industries": 5,
                         "coverage_out_of_time": 0.78, "out_of_time_year": int(years[-1])})
    exclusions = pd.DataFrame({
        "source_row": [3, 17, 25, 40],
        "firm_id": ["F99990", "=cmd|' /C calc'!A0", "X2", "X3"],
        "fiscal_year": [2016, 2017, 2017, 2018],
        "measure": ["", "", "market", ""],
        "reason": ["assets_not_positive", "duplicate_row", "no_market_equity",
                   "missing_value"],
        "detail": ["total_assets must be > 0; got -3", "<b>dup</b>",
                   "market leverage needs market_equity", "ebitda must have a value; got a blank"],
    })
    manifest = {
        "levgap_version": "0.1.0", "schema_version": 1,
        "inputs": [{"path": "panels/<odd> name.csv", "sha256": "0" * 64, "rows": n + 3}],
        "options": {"model": {"measures": list(measures), "cluster": "firm", "coverage": 0.8,
                              "model": "linear", "folds": 5, "seed": 0}},
        "versions": {"python": "3.11", "pandas": pd.__version__},
        "counts": {"rows_in": n + 3, "rows_used": n, "rows_excluded": 3, "firms": n_firms,
                   "industries": len(industries), "years": n_years,
                   "by_reason": {"assets_not_positive": 1, "duplicate_row": 1,
                                 "missing_value": 1},
                   "measure_omissions": {"market:no_market_equity": 1}},
        "pooled_industries": [{"industry": "1311", "parent": "industries with code prefix 13",
                               "firms": 3, "members": ["1312"], "weight": {"book": 0.4}}],
        "warnings": ["3 firms have <3 years of history; earnings_volatility imputed"],
    }
    tables = {"targets": targets, "drivers": drivers, "coefficients": pd.DataFrame(coef_rows),
              "model_fit": pd.DataFrame(fit_rows), "exclusions": exclusions}
    return tables, manifest


def _driver_rows(fy: pd.DataFrame, x: pd.DataFrame, peer: pd.DataFrame,
                 contributions: dict[str, np.ndarray]) -> pd.DataFrame:
    """One row per firm-year, measure (in sorted order) and driver (in ``DRIVERS`` order):
    the order of the firm-years (``fy`` is sorted by firm and year) built directly, as a
    stable sort by firm, year and measure would leave it."""
    n, k = len(fy), len(DRIVERS)
    names = sorted(contributions)
    m = len(names)

    def spread(values: np.ndarray) -> np.ndarray:  # (n, k) -> each measure's copy per row
        return np.broadcast_to(values[:, None, :], (n, m, k)).reshape(-1)

    def text(values, codes: np.ndarray) -> pd.Series:  # strings taken by code, not rebuilt
        return pd.Series(pd.array(values, dtype=fy["firm_id"].dtype).take(codes))

    return pd.DataFrame({
        "firm_id": text(fy["firm_id"], np.repeat(np.arange(n), m * k)),
        "fiscal_year": np.repeat(fy["fiscal_year"].to_numpy(), m * k),
        "measure": text(names, np.tile(np.repeat(np.arange(m), k), n)),
        "driver": text(list(DRIVERS), np.tile(np.arange(k), n * m)),
        "firm_value": spread(x[list(DRIVERS)].to_numpy()),
        "raw_value": np.nan,
        "peer_value": spread(peer[list(DRIVERS)].to_numpy()),
        "contribution": np.stack([contributions[c] for c in names], axis=1).reshape(-1),
    })


def _norm_cdf(z: float) -> float:
    from math import erf, sqrt

    return 0.5 * (1 + erf(z / sqrt(2)))
