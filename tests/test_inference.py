"""p-values and confidence intervals against statsmodels with ``use_t=True``, both models.

statsmodels (a general-purpose reference library) with ``cov_type="cluster"`` and
``use_t=True`` uses Student's t with G - 1 degrees of freedom (the smaller G for two-way
clusters), the convention levgap states in ``levgap.models.linear``; the covariance is the
same clustered sandwich with Stata's small-sample factor. Each comparison is on explicit dummy
columns, so the reference shares no code with levgap's absorbed effects.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm
from _synthetic import panel
from scipy import special

from levgap.config import ModelSpec
from levgap.models.fractional import fit_fractional
from levgap.models.linear import fit_linear
from levgap.pipeline import analyze


def _panel(seed: int, n_firms: int = 150, years: int = 10) -> dict[str, np.ndarray]:
    rng = np.random.default_rng(seed)
    firm = np.repeat(np.arange(n_firms), years)
    ind = np.repeat(rng.integers(0, 8, n_firms), years)
    yr = np.tile(np.arange(years), n_firms)
    X = rng.normal(size=(len(firm), 3)) + np.array([0.0, 0.5, 4.0])
    # one driver with a small effect, so that p-values are not all zero
    eta = -1.0 + X @ np.array([0.5, -0.05, 0.02]) + 0.2 * ind / 8 + 0.05 * yr
    eta += 0.4 * rng.normal(size=n_firms)[firm] + 0.3 * rng.normal(size=len(firm))
    y = special.expit(eta)
    y[rng.random(len(y)) < 0.1] = 0.0
    return {"y": y, "X": X, "ind": ind, "yr": yr, "firm": firm}


def _dummies(ind: np.ndarray, yr: np.ndarray, X: np.ndarray) -> np.ndarray:
    Di = pd.get_dummies(pd.Categorical(ind), drop_first=True, dtype=float).to_numpy()
    Dy = pd.get_dummies(pd.Categorical(yr), drop_first=True, dtype=float).to_numpy()
    return np.column_stack([np.ones(len(X)), X, Di, Dy])


def _reference(model: str, y, Z, groups, alpha: float = 0.05) -> dict[str, np.ndarray]:
    # Two-way, the covariance of some dummy columns (not compared) can have a negative
    # diagonal; statsmodels then warns on its square root.
    with np.errstate(invalid="ignore"):
        if model == "linear":
            res = sm.OLS(y, Z).fit(cov_type="cluster", cov_kwds={"groups": groups}, use_t=True)
        else:
            res = sm.GLM(y, Z, family=sm.families.Binomial()).fit(
                cov_type="cluster", cov_kwds={"groups": groups}, use_t=True, tol=1e-14)
        ci = np.asarray(res.conf_int(alpha=alpha))
        return {"use_t": res.use_t, "df": res.df_resid_inference,
                "estimate": np.asarray(res.params), "std_error": np.asarray(res.bse),
                "t_stat": np.asarray(res.tvalues), "p_value": np.asarray(res.pvalues),
                "ci_low": ci[:, 0], "ci_high": ci[:, 1]}


FITS = {"linear": fit_linear, "fractional": fit_fractional}


def _assert_same_inference(got: dict, ref: dict, terms: slice, atol: float) -> None:
    for col in ("estimate", "std_error", "p_value", "ci_low", "ci_high"):
        np.testing.assert_allclose(np.asarray(got[col], dtype=float), ref[col][terms],
                                   rtol=0, atol=atol, err_msg=col)
    np.testing.assert_allclose(np.asarray(got["t_stat"], dtype=float), ref["t_stat"][terms],
                               rtol=0, atol=1e-5, err_msg="t_stat")


@pytest.mark.parametrize("model", ["linear", "fractional"])
@pytest.mark.parametrize("two_way", [False, True])
def test_p_values_and_intervals_equal_statsmodels_use_t(model: str, two_way: bool) -> None:
    d = _panel(7)
    k = d["X"].shape[1] + 1
    clusters = [d["firm"], d["yr"]] if two_way else [d["firm"]]
    fit = FITS[model](d["y"], d["X"], effects=[d["ind"], d["yr"]], clusters=clusters)
    groups = np.column_stack(clusters) if two_way else d["firm"]
    ref = _reference(model, d["y"], _dummies(d["ind"], d["yr"], d["X"]), groups)
    assert ref["use_t"] and fit.df_inference == ref["df"]
    assert not fit.notes  # positive definite: no repair, so statsmodels has the same matrix
    tidy = fit.tidy()
    _assert_same_inference(tidy, ref, slice(0, k), atol=1e-7 if model == "linear" else 1e-6)
    # a p-value away from 0 and 1 is in the comparison (the driver with a small effect)
    assert ((tidy["p_value"] > 0.01) & (tidy["p_value"] < 0.99)).any()


def test_intervals_at_another_coverage_use_that_quantile() -> None:
    d = _panel(8)
    fit = fit_linear(d["y"], d["X"], effects=[d["ind"], d["yr"]], clusters=[d["firm"]])
    ref = _reference("linear", d["y"], _dummies(d["ind"], d["yr"], d["X"]), d["firm"],
                     alpha=0.10)
    _assert_same_inference(fit.tidy(coverage=0.90), ref, slice(0, 4), atol=1e-7)


@pytest.mark.parametrize("model", ["linear", "fractional"])
def test_analyze_coefficient_table_equals_statsmodels_on_its_own_design(model: str) -> None:
    # The whole path: analyze's coefficients.csv against statsmodels fitted on the design
    # rebuilt from analyze's own output tables (winsorised drivers from drivers.csv, the
    # measure from targets.csv), with explicit industry and year dummies and firm clusters.
    # No industry is small here, so no effect is pooled.
    data = panel(41, industries=8, firms=(8, 14), years=6).drop(
        columns=["true_target", "spread"])
    r = analyze(data, spec=ModelSpec(measures=("book",), model=model))
    t = r.targets.reset_index(drop=True)
    names = list(r.manifest["drivers"])
    X = (r.drivers.pivot(index=["firm_id", "fiscal_year"], columns="driver",
                         values="firm_value")
         .reindex(pd.MultiIndex.from_frame(t[["firm_id", "fiscal_year"]]))[names].to_numpy())
    Z = _dummies(t["industry"].to_numpy(), t["fiscal_year"].to_numpy(), X)
    ref = _reference(model, t["actual"].to_numpy(), Z, pd.factorize(t["firm_id"])[0])
    c = r.coefficients.set_index("term").loc[names]
    k = len(names)
    _assert_same_inference(c, ref, slice(1, k + 1), atol=1e-8 if model == "linear" else 1e-6)
