"""Clustered sandwich covariances: factors, two-way, PSD repair and HC0.

Each covariance is recomputed here from its textbook form with explicit loops over clusters
(Cameron, Gelbach and Miller 2011 for the two-way sum; Stata's small-sample factor
G/(G-1) (N-1)/(N-P), the convention of Petersen's published figures, REFERENCES.md).
"""

from __future__ import annotations

import numpy as np
import pytest

from levgap.errors import ModelError
from levgap.models.covariance import (
    cluster_codes,
    influence_meat,
    meat,
    psd_repair,
    sandwich,
)


def _outer_by_cluster(U: np.ndarray, c: np.ndarray) -> np.ndarray:
    out = np.zeros((U.shape[1], U.shape[1]))
    for g in np.unique(c):
        s = U[c == g].sum(axis=0)
        out += np.outer(s, s)
    return out


def _one_way(U: np.ndarray, c: np.ndarray, p: int) -> np.ndarray:
    n, g = len(U), len(np.unique(c))
    return g / (g - 1) * (n - 1) / (n - p) * _outer_by_cluster(U, c)


def _by_cluster(U: np.ndarray):
    """The influences' sums the sandwich asks for (``levgap.models.covariance.Sums``), by
    explicit loops: one (G, m) array per code array, or [U'U] without codes."""
    def sums(codes):
        if not len(codes):
            return [U.T @ U]
        out = []
        for c in codes:
            S = np.zeros((int(c.max()) + 1, U.shape[1]))
            for g in np.unique(c):
                S[g] = U[c == g].sum(axis=0)
            out.append(S)
        return out

    return sums


def test_cluster_codes_are_dense_whatever_the_type() -> None:
    np.testing.assert_array_equal(cluster_codes(np.array([7, 3, 7, 100])), [1, 0, 1, 2])
    np.testing.assert_array_equal(cluster_codes(np.array([-2, 5, -2])), [0, 1, 0])
    np.testing.assert_array_equal(cluster_codes(np.array(["b", "a", "b"])), [1, 0, 1])
    np.testing.assert_array_equal(cluster_codes(np.array([2.5, 1.0, 2.5])), [1, 0, 1])
    assert len(cluster_codes(np.array([], dtype=int))) == 0


def test_meat_has_stata_s_factor() -> None:
    rng = np.random.default_rng(0)
    U = rng.normal(size=(50, 3))
    codes = rng.integers(0, 7, 50)
    v, g = meat(_by_cluster(U)([codes])[0], 50, 4)
    assert g == 7
    np.testing.assert_allclose(v, 7 / 6 * 49 / 46 * _outer_by_cluster(U, codes), rtol=1e-13)
    v, g = meat(_by_cluster(U)([np.zeros(50, dtype=int)])[0], 50, 4)
    assert g == 1 and np.isnan(v).all()  # one cluster: no factor
    v, _ = meat(_by_cluster(U)([codes])[0], 4, 4)
    assert np.isnan(v).all()  # no degrees of freedom


def test_influence_meat_sums_row_influences_within_clusters() -> None:
    rng = np.random.default_rng(3)
    n, m = 40, 3
    U = rng.normal(size=(n, m))
    codes = rng.integers(0, 7, n)
    codes[0] = 6  # the last cluster is present: seven clusters
    S = np.zeros((7, m))
    np.add.at(S, codes, U)
    V, g = influence_meat(U, codes, n, 4)
    assert g == 7
    np.testing.assert_allclose(V, 7 / 6 * (n - 1) / (n - 4) * S.T @ S, rtol=1e-12)


def test_one_way_two_way_and_hc0() -> None:
    rng = np.random.default_rng(1)
    n, p = 300, 6
    U = rng.normal(size=(n, 3))
    firm = rng.integers(0, 40, n)
    year = rng.integers(0, 12, n)
    hc0 = sandwich(_by_cluster(U), (), len(U), p)
    np.testing.assert_allclose(hc0.vcov, U.T @ U, rtol=1e-13)
    assert hc0.cov_type == "robust" and hc0.n_clusters == () and hc0.df_inference == n - p
    one = sandwich(_by_cluster(U), (firm,), len(U), p)
    np.testing.assert_allclose(one.vcov, _one_way(U, firm, p), rtol=1e-12)
    assert one.cov_type == "cluster" and one.n_clusters == (40,) and one.df_inference == 39
    two = sandwich(_by_cluster(U), (firm, year), len(U), p)
    both = firm * 100 + year
    expected = _one_way(U, firm, p) + _one_way(U, year, p) - _one_way(U, both, p)
    assert np.linalg.eigvalsh(expected).min() > 0  # positive definite: no repair
    np.testing.assert_allclose(two.vcov, expected, rtol=1e-12)
    assert two.notes == ()
    assert two.cov_type == "cluster2" and two.n_clusters == (40, 12)
    assert two.df_inference == 11  # the smaller dimension
    swapped = sandwich(_by_cluster(U), (year, firm), len(U), p)
    np.testing.assert_allclose(swapped.vcov, two.vcov, rtol=1e-12)
    assert swapped.n_clusters == (12, 40) and swapped.df_inference == 11
    text = sandwich(_by_cluster(U), (firm.astype(str),), len(U), p)
    np.testing.assert_allclose(text.vcov, one.vcov, rtol=1e-12)


def test_cluster_counts_are_checked() -> None:
    U = np.ones((10, 1))
    c = np.arange(10) % 2
    with pytest.raises(ModelError, match="at most two dimensions; got 3"):
        sandwich(_by_cluster(U), (c, c, c), len(U), 1)
    with pytest.raises(ModelError, match="at least two clusters; got 1"):
        sandwich(_by_cluster(U), (np.zeros(10, dtype=int),), len(U), 1)
    with pytest.raises(ModelError, match="at least two clusters; got 1"):
        sandwich(_by_cluster(U), (c, np.zeros(10, dtype=int)), len(U), 1)
    col = np.arange(10.0)[:, None]
    two = sandwich(_by_cluster(col), (c,), 10, 1)  # two clusters: the fewest
    assert two.df_inference == 1
    sums = np.array([np.arange(0, 10, 2).sum(), np.arange(1, 10, 2).sum()], dtype=float)
    assert two.vcov[0, 0] == pytest.approx(2 / 1 * 9 / 9 * float(sums @ sums))


def test_psd_repair_zeroes_negative_eigenvalues_only_when_needed() -> None:
    rng = np.random.default_rng(2)
    M = rng.normal(size=(4, 4))
    good = M @ M.T
    fixed, notes = psd_repair(good + 1e-15 * np.triu(np.ones((4, 4)), 1))
    np.testing.assert_allclose(fixed, good, rtol=1e-12)
    np.testing.assert_array_equal(fixed, fixed.T)  # symmetrised
    assert notes == ()
    vecs = np.linalg.qr(M)[0]
    vals = np.array([3.0, 1.0, -0.5, -1e-3])
    bad = (vecs * vals) @ vecs.T
    fixed, notes = psd_repair(bad)
    np.testing.assert_allclose(fixed, (vecs * np.clip(vals, 0, None)) @ vecs.T, atol=1e-12)
    assert notes == ("the two-way covariance had 2 negative eigenvalue(s); they were set to "
                     "zero (Cameron, Gelbach and Miller 2011)",)
    # a negative eigenvalue within rounding of the largest one is not a repair
    tiny = (vecs * np.array([100.0, 1.0, 0.5, -1e-12])) @ vecs.T
    fixed, notes = psd_repair(tiny)
    assert notes == () and np.allclose(fixed, tiny, atol=1e-14)
    zero, notes = psd_repair(np.zeros((2, 2)))
    assert notes == () and (zero == 0).all()


def test_psd_repair_tolerance_is_inclusive() -> None:
    # an eigenvalue of exactly -1e-12 times the largest is rounding, kept as it is;
    # just beyond it the repair happens and says so
    kept, notes = psd_repair(np.diag([1.0, -1e-12]))
    assert notes == () and kept[1, 1] == -1e-12
    fixed, notes = psd_repair(np.diag([1.0, -1.0000001e-12]))
    assert len(notes) == 1 and fixed[1, 1] == 0.0
