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


def test_folds_deal_each_stratum_round_robin_by_first_row() -> None:
    rng = np.random.default_rng(11)
    firm = np.repeat(rng.permutation(np.arange(0, 600, 3))[:140], 4)  # sparse firm codes
    strata = np.repeat(rng.integers(0, 5, 140), 4)
    strata[1::4] = 9  # a firm's later rows do not decide its stratum
    folds = assign_folds(firm, strata, 4, 7)
    first = np.unique(firm, return_index=True)[1]
    for s in np.unique(strata[first]):
        mine = np.unique(firm[first][strata[first] == s])
        count = np.bincount(folds[np.isin(firm, mine)][::4], minlength=4)
        assert count.max() - count.min() <= 1, (s, count)
    assert set(np.unique(folds)) == {0, 1, 2, 3} and folds.dtype == np.int64
    assert not np.array_equal(folds, assign_folds(firm, strata, 4, 8))  # the seed matters
    # a stratum's deal starts at a random fold: one firm per stratum spreads over the folds
    solo = assign_folds(np.arange(60), np.arange(60), 3, 0)
    assert set(solo) == {0, 1, 2}


def test_cross_fit_records_each_folds_fit_and_the_rows_from_a_parent() -> None:
    rng = np.random.default_rng(12)
    n_firms, t = 60, 9  # year codes 0-8: industry code 7 is also a year code
    firm = np.repeat(np.arange(n_firms), t)
    ind = np.repeat(rng.integers(0, 4, n_firms), t)
    ind[firm == 5] = 7  # an industry of one firm: absent from its own fold's fit
    yr = np.tile(np.arange(t), n_firms)
    X = rng.normal(size=(len(firm), 2))
    y = X @ np.array([0.5, -0.5]) + 0.1 * ind + rng.normal(size=len(firm))
    folds = assign_folds(firm, ind, 3, 0)
    calls, seen = [], []

    def pooling_for(train):
        seen.append(train.copy())

    cf = crossfit_targets(fit_linear, y, X, effects=[ind, yr], n_levels=[8, t], folds=folds,
                          names=["a", "b"], pooling_for=pooling_for,
                          progress=lambda d, tot: calls.append((d, tot)))
    assert calls == [(1, 3), (2, 3), (3, 3)] and cf.fold_ids == (0, 1, 2)
    for f, fit, train in zip(cf.fold_ids, cf.fits, seen, strict=True):
        np.testing.assert_array_equal(train, folds != f)
        test = folds == f
        np.testing.assert_allclose(cf.target[test], fit.predict(X[test], [ind[test], yr[test]]))
        np.testing.assert_array_equal(cf.beta[test], np.tile(fit.coef[1:], (test.sum(), 1)))
        assert fit.n_obs == (~test).sum()
    np.testing.assert_array_equal(cf.from_parent, ind == 7)
    assert cf.from_parent.dtype == bool
    for fit in cf.fits:  # each fold's fit: named, every level code, no covariance
        assert fit.names == ("const", "a", "b") and fit.vcov is None
        assert [len(e) for e in fit.effects] == [8, t]
    np.testing.assert_array_equal(cf.fold, folds)
    assert cf.offset.shape == (len(y),) and cf.beta.shape == (len(y), 2)
    # without effects (a public use; the pipeline always has them) the offset is the constant
    none = crossfit_targets(fit_linear, y, X, effects=[], n_levels=[], folds=folds,
                            names=["a", "b"])
    assert not none.from_parent.any()
    for f, fit in zip(none.fold_ids, none.fits, strict=True):
        assert (none.offset[folds == f] == fit.coef[0]).all()
        np.testing.assert_allclose(none.target[folds == f], fit.predict(X[folds == f]))


def test_fold_fits_start_from_the_given_predictor() -> None:
    from levgap.models.fractional import fit_fractional

    rng = np.random.default_rng(13)
    n_firms, t = 80, 5
    firm = np.repeat(np.arange(n_firms), t)
    ind = np.repeat(rng.integers(0, 4, n_firms), t)
    yr = np.tile(np.arange(t), n_firms)
    X = rng.normal(size=(len(firm), 2))
    y = 1 / (1 + np.exp(-(X @ np.array([0.8, -0.5]) + 0.2 * ind + rng.normal(size=len(firm)))))
    folds = assign_folds(firm, ind, 4, 0)
    full = fit_fractional(y, X, effects=[ind, yr], cov=False)
    eta = full.offset([ind, yr]) + X @ full.coef[1:]
    kw = {"effects": [ind, yr], "n_levels": [4, t], "folds": folds, "names": ["a", "b"]}
    warm = crossfit_targets(fit_fractional, y, X, start=eta, **kw)
    cold = crossfit_targets(fit_fractional, y, X, **kw)
    np.testing.assert_allclose(warm.target, cold.target, atol=1e-10)
    assert sum(f.iterations for f in warm.fits) < sum(f.iterations for f in cold.fits)


def test_fold_assignment_is_the_documented_deal() -> None:
    # An independent reading of the docstring: firms shuffled with the seed, then dealt
    # round-robin within each stratum (in shuffled order) from a random first fold.
    rng = np.random.default_rng(14)
    firm = np.repeat(np.arange(3000), 2)
    strata = np.repeat(rng.integers(0, 7, 3000), 2)
    got = assign_folds(firm, strata, 5, 21)
    draw = np.random.default_rng(21)
    perm = draw.permutation(3000)
    stratum = strata[::2][perm]
    shift = draw.integers(0, 5, size=len(np.unique(stratum)))
    fold_of = np.empty(3000, dtype=np.int64)
    for i, s in enumerate(np.unique(stratum)):
        dealt = perm[stratum == s]  # in shuffled order
        fold_of[dealt] = (np.arange(len(dealt)) + shift[i]) % 5
    np.testing.assert_array_equal(got, fold_of[firm])
