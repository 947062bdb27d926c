"""Grouped, stratified folds: no firm's rows ever fit its own target."""

from __future__ import annotations

import numpy as np
import pytest

from levgap.models.crossfit import assign_folds, crossfit_targets
from levgap.models.linear import fit_linear


@pytest.mark.parametrize("seed", [0, 1, 2, 3])
def test_folds_group_firms_and_spread_industries(seed: int) -> None:
    rng = np.random.default_rng(seed)
    firm = np.repeat(np.arange(300), 6)
    strata = np.repeat(rng.integers(0, 12, 300), 6)
    folds = assign_folds(firm, strata, 5, seed)
    # every firm's rows share one fold
    per_firm = [np.unique(folds[firm == f]) for f in range(300)]
    assert all(len(u) == 1 for u in per_firm)
    # each stratum with >= 5 firms has firms in every fold
    for s in np.unique(strata):
        firms_s = np.unique(firm[strata == s])
        if len(firms_s) >= 5:
            assert set(np.unique(folds[strata == s])) == set(range(5))
    # the same seed gives the same folds
    np.testing.assert_array_equal(folds, assign_folds(firm, strata, 5, seed))


def test_prediction_never_uses_the_firms_own_rows() -> None:
    rng = np.random.default_rng(9)
    n_firms, t = 120, 5
    firm = np.repeat(np.arange(n_firms), t)
    ind = np.repeat(rng.integers(0, 6, n_firms), t)
    yr = np.tile(np.arange(t), n_firms)
    X = rng.normal(size=(len(firm), 2))
    y = X @ np.array([0.5, -0.5]) + rng.normal(size=len(firm))
    folds = assign_folds(firm, ind, 5, 0)
    cf = crossfit_targets(fit_linear, y, X, effects=[ind, yr], n_levels=[6, t], folds=folds,
                          names=["a", "b"])
    # Changing one firm's outcomes must leave its own targets unchanged.
    y2 = y.copy()
    y2[firm == 17] += 100.0
    cf2 = crossfit_targets(fit_linear, y2, X, effects=[ind, yr], n_levels=[6, t], folds=folds,
                           names=["a", "b"])
    np.testing.assert_allclose(cf.target[firm == 17], cf2.target[firm == 17], atol=1e-10)
    np.testing.assert_allclose(cf.target, cf.offset + np.einsum("ij,ij->i", X, cf.beta))
