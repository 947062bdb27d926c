"""Numerics at scale: identification with hundreds of effects, ill conditioning, two-way PSD."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from levgap.config import ModelSpec
from levgap.errors import ModelError
from levgap.models.fractional import fit_fractional
from levgap.models.linear import fit_linear
from levgap.models.result import Fit
from levgap.pipeline import analyze


def _many_industries(seed: int, n_ind: int = 480) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    rows = []
    for g in range(n_ind):
        tang = rng.uniform(0.05, 0.9)  # one value for every firm-year of the industry
        for f in range(4):
            a0 = rng.lognormal(5, 1)
            for t in range(4):
                a = a0 * (1 + 0.05 * t)
                rows.append({"firm_id": f"F{g}-{f}", "fiscal_year": 2015 + t,
                             "industry": str(1000 + g), "total_assets": a,
                             "total_debt": a * rng.uniform(0, 0.6), "ppe_net": a * tang,
                             "ebitda": a * rng.normal(0.1, 0.05), "book_equity": a * 0.4,
                             "market_equity": a * rng.uniform(0.5, 2)})
    return pd.DataFrame(rows)


@pytest.mark.parametrize("winsorize", [(0.01, 0.99), (0.0, 1.0)])
def test_driver_constant_within_each_of_480_industries_is_named(winsorize) -> None:
    p = _many_industries(0)
    spec = ModelSpec(measures=("book",), winsorize=winsorize, min_industry_firms=2)
    with pytest.raises(ModelError, match="got tangibility explained entirely"):
        analyze(p, spec=spec)


@pytest.mark.parametrize("fit", [fit_linear, fit_fractional])
def test_collinear_drivers_are_named_beyond_400_parameters(fit) -> None:
    rng = np.random.default_rng(1)
    n = 9000
    ind, yr = rng.integers(0, 450, n), rng.integers(0, 10, n)
    X = rng.normal(size=(n, 3))
    X[:, 2] = 2.0 * X[:, 0] - X[:, 1] + 0.3 * ind  # collinear once industries are absorbed
    y = 1 / (1 + np.exp(-(X[:, 0] * 0.2 + rng.normal(size=n))))
    with pytest.raises(ModelError, match="got a, b, c linearly dependent"):
        fit(y, X, effects=[ind, yr], names=["a", "b", "c"])


def test_accuracy_holds_at_condition_number_1e7() -> None:
    # Independent computation: numpy's SVD least squares on the explicit dummy design.
    rng = np.random.default_rng(2)
    n = 4000
    ind, yr = rng.integers(0, 30, n), rng.integers(0, 8, n)
    x1 = rng.normal(size=n)
    X = np.column_stack([x1, x1 + 1e-6 * rng.normal(size=n), 50 + rng.normal(size=n)])
    y = X @ np.array([1.0, -0.5, 0.3]) + 0.1 * ind + rng.normal(size=n)
    D = np.column_stack([np.ones(n), X,
                         pd.get_dummies(pd.Categorical(ind), drop_first=True, dtype=float),
                         pd.get_dummies(pd.Categorical(yr), drop_first=True, dtype=float)])
    assert np.linalg.cond(D) > 1e7
    ref = np.linalg.lstsq(D, y, rcond=None)[0][:4]
    fit = fit_linear(y, X, effects=[ind, yr], cov=False)
    np.testing.assert_allclose(fit.coef, ref, rtol=1e-6, atol=1e-8)


def test_two_way_covariance_is_repaired_when_not_psd() -> None:
    # Few clusters and opposite signs across the two dimensions make V_firm + V_year - V_both
    # indefinite; the repair sets negative eigenvalues to zero (Cameron, Gelbach and Miller
    # 2011) and says so.
    for seed in range(200):
        rng = np.random.default_rng(seed)
        n = 60
        firm, yr = rng.integers(0, 4, n), rng.integers(0, 4, n)
        X = rng.normal(size=(n, 3))
        y = rng.normal(size=n)
        fit = fit_linear(y, X, clusters=[firm, yr])
        if fit.notes:
            break
    else:
        pytest.fail("no indefinite two-way covariance found in 200 seeds")
    assert "negative eigenvalue" in fit.notes[0]
    assert np.linalg.eigvalsh(fit.vcov).min() >= -1e-12 * np.abs(fit.vcov).max()
    assert np.isfinite(fit.std_error).all()


@pytest.mark.parametrize("fit", [fit_linear, fit_fractional])
def test_a_fit_survives_its_json_form(fit) -> None:
    rng = np.random.default_rng(3)
    n = 800
    ind, yr = rng.integers(0, 12, n), rng.integers(0, 5, n)
    X = rng.normal(size=(n, 2))
    y = 1 / (1 + np.exp(-(X @ [0.5, -0.3] + 0.1 * ind + rng.normal(size=n))))
    f = fit(y, X, effects=[ind, yr], n_levels=[14, 6], cov=False)
    back = Fit.from_dict(f.to_dict())
    codes = [np.r_[ind, 12, 13], np.r_[yr, 5, 0]]  # two codes the fit never saw
    Xs = np.vstack([X, rng.normal(size=(2, 2))])
    np.testing.assert_array_equal(back.predict(Xs, codes), f.predict(Xs, codes))
