"""The group-sum design: products, layout, compression and the identification checks.

Each product of ``Design`` is checked against the same product with an explicit design
matrix built here from the documented layout (constant, centred drivers, dummies of every
non-reference level present, the parent mix on small levels' rows, a column per penalised
deviation), so that the group sums are tested against plain matrix algebra.
"""

from __future__ import annotations

import re

import numpy as np
import pytest

from levgap.errors import ModelError
from levgap.models import design as design_module
from levgap.models.design import Design, Pooling, compress
from levgap.models.fractional import fit_fractional
from levgap.models.identify import check_identified, suspicious
from levgap.models.linalg import cho_apply, inverse_rows, solve
from levgap.models.linear import fit_linear


def _data(seed: int = 0, n: int = 600, k: int = 3) -> dict:
    rng = np.random.default_rng(seed)
    ind = rng.integers(0, 9, n)
    ind[ind == 4] = 5  # level 4 absent: codes need not be contiguous
    yr = rng.integers(0, 5, n) + 2  # codes 0 and 1 absent
    X = rng.normal(size=(n, k)) * np.array([1.0, 3.0, 0.5])[:k] + np.array([2.0, -1.0, 9.0])[:k]
    return {"ind": ind, "yr": yr, "X": X, "rng": rng}


def _pooling(penalty: float) -> Pooling:
    """Levels 7 and 8 small: 7 pooled toward {0, 1}, 8 toward every own level; level 9 (no
    rows) small as well."""
    small = np.zeros(10, dtype=bool)
    small[[7, 8, 9]] = True
    members = np.zeros((2, 10), dtype=bool)
    members[0, [0, 1]] = True
    members[1, [0, 1, 2, 3, 5, 6]] = True
    parent = np.full(10, -1)
    parent[[7, 8, 9]] = [0, 1, 1]
    pen = np.where(small, penalty, np.inf)
    return Pooling(small, parent, members, pen, np.where(small, 0.5, np.nan))


def _explicit(d: dict, pooling: Pooling | None) -> tuple[np.ndarray, np.ndarray]:
    """The design matrix and the penalty, from the documented layout."""
    ind, yr, X = d["ind"], d["yr"], d["X"]
    n = len(ind)
    small = np.zeros(n, dtype=bool) if pooling is None else pooling.small[ind]
    own0 = np.unique(ind[~small])
    cnt = np.array([(ind[~small] == g).sum() for g in own0], dtype=float)
    cols = [np.ones(n), *(X - X.mean(axis=0)).T]
    block0 = (ind[:, None] == own0[None, :]).astype(float)
    if pooling is not None:
        for i in np.flatnonzero(small):
            w = pooling.members[pooling.parent[ind[i]], own0] * cnt
            block0[i] = w / w.sum()
    cols += list(block0[:, 1:].T)
    years = np.unique(yr)
    cols += list((yr[:, None] == years[None, 1:]).astype(float).T)
    penalty = [0.0] * len(cols)
    if pooling is not None:
        dev = [g for g in np.unique(ind[small]) if np.isfinite(pooling.penalty[g])]
        for g in dev:
            cols.append((ind == g).astype(float))
            penalty.append(pooling.penalty[g])
    return np.column_stack(cols), np.array(penalty)


@pytest.mark.parametrize("penalty", [None, np.inf, 25.0])
def test_products_equal_the_explicit_design_matrix(penalty) -> None:
    d = _data()
    pooling = None if penalty is None else _pooling(penalty)
    design = Design(d["X"], [d["ind"], d["yr"]], pooling)
    Z, pen = _explicit(d, pooling)
    assert design.layout.n_params == Z.shape[1]
    w = d["rng"].uniform(0.1, 2.0, len(d["ind"]))
    np.testing.assert_allclose(design.gram(), Z.T @ Z + np.diag(pen), rtol=0, atol=1e-9)
    np.testing.assert_allclose(design.gram(w), Z.T @ (Z * w[:, None]) + np.diag(pen),
                               rtol=0, atol=1e-9)
    v = d["rng"].normal(size=len(w))
    np.testing.assert_allclose(design.rmatvec(v), Z.T @ v, rtol=0, atol=1e-9)
    theta = d["rng"].normal(size=Z.shape[1])
    np.testing.assert_allclose(design.matvec(theta), Z @ theta, rtol=0, atol=1e-12)
    R = d["rng"].normal(size=(4, Z.shape[1]))
    # the rows' influences u_i = R z_i e_i, summed within clusters and as sum_i u_i u_i'
    e = d["rng"].normal(size=len(w))
    U = (Z @ R.T) * e[:, None]
    firms = d["rng"].integers(0, 37, len(w))
    for codes in (firms, np.sort(firms), d["ind"]):
        G = int(codes.max()) + 1
        want = np.zeros((G, 4))
        np.add.at(want, codes, U)
        np.testing.assert_allclose(design.cluster_sums(R, e, [codes])[0], want, rtol=0,
                                   atol=1e-10)
    np.testing.assert_allclose(design.cluster_sums(R, e, [])[0], U.T @ U, rtol=0, atol=1e-9)
    np.testing.assert_array_equal(design.penalty, pen)
    assert design.any_dense == (pooling is not None)
    if pooling is not None:
        assert design.layout.n_dev == (0 if np.isinf(penalty) else 2)


def test_layout_reported_terms_effects_and_deviations() -> None:
    d = _data(1)
    design = Design(d["X"], [d["ind"], d["yr"]], _pooling(25.0))
    lay = design.layout
    own0 = np.unique(d["ind"][d["ind"] < 7])
    assert lay.k == 3 and lay.sizes == (len(own0), 5)
    assert lay.starts == (4, 4 + len(own0) - 1)
    assert lay.dev_start == 4 + len(own0) - 1 + 4 and lay.n_dev == 2
    theta = np.arange(1.0, lay.n_params + 1)
    rep = design.reported(theta)
    np.testing.assert_allclose(rep[1:], theta[1:4])
    assert rep[0] == pytest.approx(theta[0] - d["X"].mean(axis=0) @ theta[1:4])
    assert theta[0] == 1.0  # reported() does not write into theta
    J = design.uncentre()
    np.testing.assert_allclose(J @ theta[:4], rep)
    eff = design.effects(theta, [12, 9])
    assert eff[0].shape == (12,) and eff[1].shape == (9,)
    assert eff[0][own0[0]] == 0.0 and eff[1][2] == 0.0  # reference levels
    np.testing.assert_array_equal(eff[0][own0[1:]], theta[4:4 + len(own0) - 1])
    assert np.isnan(eff[0][[4, 7, 8, 9, 10, 11]]).all() and np.isnan(eff[1][[0, 1, 7]]).all()
    np.testing.assert_array_equal(eff[1][3:7], theta[lay.starts[1]:lay.starts[1] + 4])
    dev = design.deviations(theta, 10)
    np.testing.assert_array_equal(dev[[7, 8]], theta[lay.dev_start:])
    assert np.isnan(dev[[0, 1, 9]]).all()


def test_parent_mix_weights_member_levels_by_rows() -> None:
    d = _data(2)
    design = Design(d["X"], [d["ind"], d["yr"]], _pooling(np.inf))
    own0 = design.present[0]
    cnt = np.array([(d["ind"] == g).sum() for g in own0], dtype=float)
    mix = design.parent_mix()
    np.testing.assert_allclose(mix[0], np.where(np.isin(own0, [0, 1]), cnt, 0) /
                               cnt[np.isin(own0, [0, 1])].sum())
    np.testing.assert_allclose(mix[1], cnt / cnt.sum())
    given = np.arange(1.0, len(own0) + 1)
    np.testing.assert_allclose(design.parent_mix(given)[1], given / given.sum())
    shares = given / 100  # weights below one in total are still normalised
    np.testing.assert_allclose(design.parent_mix(shares)[1], given / given.sum())
    # a parent whose present members hold one row between them takes that level outright
    one = d["ind"].copy()
    one[one == 1] = 2
    one[np.flatnonzero(one == 0)[1:]] = 3
    mix = Design(d["X"], [one, d["yr"]], _pooling(np.inf)).parent_mix()
    np.testing.assert_array_equal(mix[0], np.eye(len(mix[0]))[0])
    # a parent whose members have no rows in the fit: every own level, by rows
    p = _pooling(np.inf)
    members = p.members.copy()
    members[0] = False
    members[0, 4] = True  # level 4 has no rows
    lone = Design(d["X"], [d["ind"], d["yr"]],
                  Pooling(p.small, p.parent, members, p.penalty, p.weight))
    np.testing.assert_allclose(lone.parent_mix()[0], cnt / cnt.sum())


def test_parent_mix_ignores_levels_beyond_the_pooling_arrays() -> None:
    # the pooling structure covers levels 0-9; a level 11 of the fit is in no parent
    d = _data(3)
    d["ind"] = np.where(d["ind"] == 6, 11, d["ind"])
    design = Design(d["X"], [d["ind"], d["yr"]], _pooling(np.inf))
    mix = design.parent_mix()
    own0 = design.present[0]
    assert own0[-1] == 11 and mix[1][-1] == 0.0 and mix[1].sum() == pytest.approx(1.0)
    # level 10, one past the arrays' last level, as well
    d["ind"] = np.where(d["ind"] == 11, 10, d["ind"])
    mix = Design(d["X"], [d["ind"], d["yr"]], _pooling(np.inf)).parent_mix()
    assert mix[1][-1] == 0.0 and mix[1].sum() == pytest.approx(1.0)


def test_compress_gives_present_levels_and_positions() -> None:
    levels, inv = compress(np.array([5, -1, 2, 5, 9]))
    np.testing.assert_array_equal(levels, [2, 5, 9])
    np.testing.assert_array_equal(inv, [1, -1, 0, 1, 2])
    none, inv = compress(np.array([-1, -3]))
    assert len(none) == 0 and none.dtype == np.int64
    np.testing.assert_array_equal(inv, [-1, -1])
    # huge sparse codes take the sorting branch with the same result
    levels, inv = compress(np.array([10**9, 3, 10**9, -1]))
    np.testing.assert_array_equal(levels, [3, 10**9])
    np.testing.assert_array_equal(inv, [1, 0, 1, -1])


def test_effect_codes_must_be_non_negative_and_each_factor_needs_a_level() -> None:
    X = np.ones((4, 1))
    with pytest.raises(ModelError, match="non-negative integers, one per row"):
        Design(X, [np.array([0, 1, -1, 0])])
    with pytest.raises(ModelError, match="non-negative integers, one per row"):
        Design(X, [np.array([0, 1, 0])])
    every_small = Pooling(np.array([True, True]), np.array([0, 0]),
                          np.zeros((1, 2), dtype=bool), np.full(2, np.inf), np.full(2, np.nan))
    with pytest.raises(ModelError, match="at least one level of its own"):
        Design(X, [np.array([0, 1, 0, 1])], every_small)


def test_near_constant_drivers_are_flat_whatever_their_units() -> None:
    rng = np.random.default_rng(4)
    n = 1000
    base = rng.normal(size=(n, 1))
    for size in (1.0, 1e4, 1e-6):
        for level in (5.0, -5.0):  # the size of a negative driver is its absolute value
            X = np.column_stack([base[:, 0] * size,
                                 size * (level + 1e-12 * rng.normal(size=n))])  # rounding
            np.testing.assert_array_equal(Design(X, []).flat(), [1])
    # a driver in tiny units that does vary is not flat, and fits
    y = base[:, 0] + rng.normal(size=n)
    tiny = base * 1e-12
    assert len(Design(tiny, []).flat()) == 0
    fit = fit_linear(y, tiny, names=["x"])
    assert fit.coef[1] == pytest.approx(fit_linear(y, base, names=["x"]).coef[1] * 1e12)
    zeros = Design(np.column_stack([base[:, 0], np.zeros(n)]), [])
    np.testing.assert_array_equal(zeros.flat(), [1])


@pytest.mark.parametrize("fit", [fit_linear, fit_fractional])
def test_a_constant_driver_is_named(fit) -> None:
    rng = np.random.default_rng(5)
    n = 400
    X = np.column_stack([rng.normal(size=n), np.full(n, 3.0) + 1e-13 * rng.normal(size=n)])
    y = 1 / (1 + np.exp(-X[:, 0] - rng.normal(size=n)))
    with pytest.raises(ModelError, match="every driver must vary across rows; got b constant"):
        fit(y, X, effects=[rng.integers(0, 4, n)], names=["a", "b"])


def test_solve_and_inverse_rows() -> None:
    rng = np.random.default_rng(6)
    M = rng.normal(size=(6, 6))
    A = M @ M.T + np.diag([1e3, 1, 1e-2, 1, 1, 5])
    factor, d = solve(A)
    b = rng.normal(size=6)
    np.testing.assert_allclose(cho_apply(factor, d, b), np.linalg.solve(A, b), rtol=1e-10)
    B = rng.normal(size=(6, 2))
    np.testing.assert_allclose(cho_apply(factor, d, B), np.linalg.solve(A, B), rtol=1e-10)
    np.testing.assert_allclose(inverse_rows(factor, d, 3), np.linalg.inv(A)[:3], rtol=1e-9,
                               atol=1e-12)
    for bad in (np.diag([4.0, 0.0]), np.diag([4.0, np.inf]), np.diag([4.0, np.nan])):
        with pytest.raises(np.linalg.LinAlgError):
            solve(bad)
    factor, d = solve(np.diag([1.0, 4.0]))  # a diagonal of exactly 1 is fine
    np.testing.assert_allclose(cho_apply(factor, d, np.ones(2)), [1.0, 0.25])


def test_suspicious_screens_absorbed_and_collinear_drivers() -> None:
    d = _data(7, n=2000)
    ind, yr = d["ind"], d["yr"]
    good = Design(d["X"], [ind, yr])
    assert not suspicious(good.gram(), 3)
    assert not suspicious(Design(np.empty((len(ind), 0)), [ind]).gram(), 0)
    by_industry = d["X"].copy()
    by_industry[:, 1] = ind * 0.7  # constant within industry: absorbed by its effect
    assert suspicious(Design(by_industry, [ind, yr]).gram(), 3)
    collinear = d["X"].copy()
    collinear[:, 2] = collinear[:, 0] - 2 * collinear[:, 1] + yr  # collinear after effects
    assert suspicious(Design(collinear, [ind, yr]).gram(), 3)
    nearly = d["X"].copy()
    nearly[:, 2] = nearly[:, 0] + 1e-3 * d["rng"].normal(size=len(ind))
    assert not suspicious(Design(nearly, [ind, yr]).gram(), 3)
    # absorbed in large units: the share left is judged against the driver's own size
    large = d["X"].copy()
    large[:, 1] = 700.0 * ind + 1000.0 * yr
    assert suspicious(Design(large, [ind, yr]).gram(), 3)
    # industry 9 seen only in year 7, alone there: the effects themselves are confounded
    ind9, yr9 = np.append(ind, [9, 9]), np.append(yr, [7, 7])
    X9 = np.vstack([d["X"], d["rng"].normal(size=(2, 3))])
    assert suspicious(Design(X9, [ind9, yr9]).gram(), 3)


def test_an_exactly_constant_driver_is_named_without_warnings() -> None:
    rng = np.random.default_rng(17)
    n = 300
    X = np.column_stack([rng.normal(size=n), np.full(n, 3.0)])
    with pytest.raises(ModelError, match="got b constant"):
        fit_linear(X[:, 0] + rng.normal(size=n), X, effects=[rng.integers(0, 4, n)],
                   names=["a", "b"])


def test_messages_name_the_rd_driver_the_user_set() -> None:
    d = _data(18)
    X = np.column_stack([d["X"][:, 0], np.full(len(d["ind"]), 1.0)])
    design = Design(X, [d["ind"], d["yr"]])
    added = "got rd_intensity (its indicator rd_missing of a blank rd_expense) constant"
    with pytest.raises(ModelError, match=re.escape(added)):
        check_identified(design, ["a", "rd_missing"])
    both = Design(np.column_stack([X[:, 1], X]), [d["ind"], d["yr"]])
    with pytest.raises(ModelError, match="got rd_intensity constant. Drop it"):
        check_identified(both, ["rd_intensity", "a", "rd_missing"])


def test_check_identified_judges_the_residuals_after_penalised_effects(monkeypatch) -> None:
    # The share of each driver left after the effects, and the smallest singular value of
    # the unit-scaled residuals relative to the largest, equal those of an explicit ridge
    # fit on the effects (penalised deviations of small levels included): bracket each
    # bound just above and just below the explicit value.
    from levgap.models import identify

    d = _data(19, n=800)
    pooling = _pooling(25.0)
    X = d["X"][:, :2].copy()
    X[:, 1] = 0.6 * X[:, 0] + 0.4 * d["rng"].normal(size=len(X)) + 2.0 * (d["ind"] == 8)
    design = Design(X, [d["ind"], d["yr"]], pooling)
    Z, pen = _explicit({**d, "X": X}, pooling)
    E = np.delete(Z, [1, 2], axis=1)
    Xc = X - X.mean(axis=0)
    gamma = np.linalg.solve(E.T @ E + np.diag(np.delete(pen, [1, 2])), E.T @ Xc)
    resid = Xc - E @ gamma
    share = (resid**2).sum(axis=0) / (Xc**2).sum(axis=0)
    s = np.linalg.svd(resid / np.linalg.norm(resid, axis=0), compute_uv=False)
    monkeypatch.setattr(identify, "IDENTIFIED_TOL", share.min() * (1 + 1e-6))
    with pytest.raises(ModelError, match="explained entirely"):
        check_identified(design, ["a", "b"])
    monkeypatch.setattr(identify, "IDENTIFIED_TOL", share.min() * (1 - 1e-6))
    monkeypatch.setattr(identify, "COLLINEAR_TOL", s[-1] / s[0] * (1 + 1e-6))
    with pytest.raises(ModelError, match="got a, b linearly dependent"):
        check_identified(design, ["a", "b"])
    monkeypatch.setattr(identify, "COLLINEAR_TOL", s[-1] / s[0] * (1 - 1e-6))
    check_identified(design, ["a", "b"])


def test_drivers_in_very_different_units_and_a_single_driver_are_identified() -> None:
    d = _data(20)
    X = d["X"][:, :2] * [1.0, 1e6]
    check_identified(Design(X, [d["ind"], d["yr"]]), ["a", "b"])
    check_identified(Design(d["X"][:, :1], [d["ind"], d["yr"]]), ["a"])


def test_check_identified_names_the_driver_and_passes_good_designs() -> None:
    d = _data(8, n=1500)
    ind, yr = d["ind"], d["yr"]
    names = ["a", "b", "c"]
    check_identified(Design(d["X"], [ind, yr]), names)
    check_identified(Design(d["X"], [ind, yr], _pooling(25.0)), names)
    check_identified(Design(np.empty((len(ind), 0)), [ind, yr]), [])
    X = d["X"].copy()
    X[:, 1] = 0.3 * ind + 0.1 * yr  # explained by the effects
    with pytest.raises(ModelError, match="got b explained entirely by the industry and year"):
        check_identified(Design(X, [ind, yr]), names)
    X = d["X"].copy()
    X[:, 2] = 2 * X[:, 0] + 0.5 * ind
    with pytest.raises(ModelError, match=r"got a, c linearly dependent\. Drop one"):
        check_identified(Design(X, [ind, yr]), names)


def test_a_driver_constant_within_a_pooled_level_is_identified() -> None:
    # A small level without an effect of its own (hard pooling), or with a penalised
    # deviation, does not absorb a driver that is constant within it; its own dummy does.
    d = _data(9, n=1500)
    X = d["X"].copy()
    X[:, 1] = 0.2 * d["ind"] + (d["ind"] == 8)
    effects = [d["ind"], d["yr"]]
    check_identified(Design(X, effects, _pooling(np.inf)), ["a", "b", "c"])
    check_identified(Design(X, effects, _pooling(25.0)), ["a", "b", "c"])
    with pytest.raises(ModelError, match="got b explained entirely"):
        check_identified(Design(X, effects), ["a", "b", "c"])


def _explicit_plain(X: np.ndarray, factors: list[np.ndarray]) -> np.ndarray:
    """The design matrix without pooling: constant, centred drivers, dummies of every level
    present but the first, factor by factor."""
    cols = [np.ones(len(X)), *(X - X.mean(axis=0)).T]
    for f in factors:
        cols += list((f[:, None] == np.unique(f)[None, 1:]).astype(float).T)
    return np.column_stack(cols)


def _check_products(design: Design, Z: np.ndarray, pen: np.ndarray, rng, clusters) -> None:
    """Every product of ``design`` against the explicit ``Z`` (and penalty)."""
    n = len(Z)
    w = rng.uniform(0.1, 2.0, n)
    v = rng.normal(size=n)
    for _ in range(2):  # the second from the kept sums
        np.testing.assert_allclose(design.gram(), Z.T @ Z + np.diag(pen), rtol=0, atol=1e-9)
    for weights in (w, None):
        A, g = design.normal_equations(weights, v)
        Zw = Z if weights is None else Z * weights[:, None]
        np.testing.assert_allclose(A, Z.T @ Zw + np.diag(pen), rtol=0, atol=1e-9)
        np.testing.assert_allclose(g, Z.T @ v, rtol=0, atol=1e-9)
    np.testing.assert_allclose(design.gram(w), Z.T @ (Z * w[:, None]) + np.diag(pen),
                               rtol=0, atol=1e-9)
    np.testing.assert_allclose(design.rmatvec(v), Z.T @ v, rtol=0, atol=1e-9)
    theta = rng.normal(size=Z.shape[1])
    np.testing.assert_allclose(design.matvec(theta), Z @ theta, rtol=0, atol=1e-12)
    y = v + Z @ theta
    np.testing.assert_allclose(design.residual_gradient(theta, y), Z.T @ (y - Z @ theta),
                               rtol=0, atol=1e-9)
    # the one-pass form adds the same numbers in the same order as the two products
    np.testing.assert_array_equal(design.residual_gradient(theta, y),
                                  design.rmatvec(y - design.matvec(theta)))
    R = rng.normal(size=(3, Z.shape[1]))
    e = rng.normal(size=n)
    U = (Z @ R.T) * e[:, None]
    got = design.cluster_sums(R, e, clusters)
    assert len(got) == len(clusters)
    for codes, sums in zip(clusters, got, strict=True):
        want = np.zeros((int(codes.max()) + 1, 3))
        np.add.at(want, codes, U)
        np.testing.assert_allclose(sums, want, rtol=0, atol=1e-10)
    np.testing.assert_allclose(design.cluster_sums(R, e, [])[0], U.T @ U, rtol=0, atol=1e-9)


@pytest.mark.parametrize("penalty", [None, 25.0])
def test_products_taken_in_blocks_equal_the_explicit_design_matrix(monkeypatch, penalty
                                                                   ) -> None:
    # Small blocks (8 rows per cell): the rows are summed over several blocks, and sorted
    # cluster codes, more than a block's rows, are counted over each block's range only.
    monkeypatch.setattr(design_module, "BLOCK", 1)
    d = _data(11)
    # rows in industry-year order, so a block misses the last cells; and the last industry
    # never meets the last year
    d["yr"][(d["ind"] == 8) & (d["yr"] == 6)] = 5
    order = np.lexsort((d["yr"], d["ind"]))
    d.update(ind=d["ind"][order], yr=d["yr"][order], X=d["X"][order])
    pooling = None if penalty is None else _pooling(penalty)
    design = Design(d["X"], [d["ind"], d["yr"]], pooling)
    n_own = design._XT.shape[1]
    assert design._block == 8 * design.n_cells and n_own > 1.5 * design._block
    Z, pen = _explicit(d, pooling)
    rng = d["rng"]
    firms = np.sort(rng.integers(0, 3 * design._block, len(Z)))
    scattered = rng.permutation(firms)
    scattered[[0, np.argmin(scattered)]] = scattered[[np.argmin(scattered), 0]]
    assert scattered[0] == firms[0]  # unsorted, though no code is below the first
    _check_products(design, Z, pen, rng, [firms, d["yr"], scattered, firms])
    _check_products(design, Z, pen, rng, [firms])
    _check_products(design, Z, pen, rng, [d["ind"]])


def test_many_level_combinations_are_renumbered_with_the_same_products() -> None:
    # 60 x 60 combinations on 300 rows: the cell codes are renumbered to those present
    rng = np.random.default_rng(12)
    n = 300
    a, b, c = rng.integers(0, 60, n) + 3, rng.integers(0, 60, n), rng.integers(0, 3, n)
    X = rng.normal(size=(n, 2)) + [4.0, -2.0]
    design = Design(X, [a, b, c])
    assert design.n_cells == len({(i, j, t) for i, j, t in zip(a, b, c, strict=True)})
    for f, counts in zip((a, b, c), design.counts, strict=True):
        np.testing.assert_array_equal(counts, np.unique(f, return_counts=True)[1])
    Z = _explicit_plain(X, [a, b, c])
    _check_products(design, Z, np.zeros(Z.shape[1]), rng, [rng.integers(0, 50, n), b])


def test_level_counts_include_the_pooled_rows_of_the_other_factors() -> None:
    d = _data(13)
    d["yr"][d["ind"] >= 7] = 3  # the pooled rows miss the last years
    design = Design(d["X"], [d["ind"], d["yr"]], _pooling(25.0))
    own = d["ind"] < 7
    np.testing.assert_array_equal(design.counts[0],
                                  np.unique(d["ind"][own], return_counts=True)[1])
    np.testing.assert_array_equal(design.counts[1], np.unique(d["yr"], return_counts=True)[1])
    assert all(c.dtype == float for c in design.counts)


def test_compress_keeps_dense_codes_and_handles_empty_input() -> None:
    levels, inv = compress(np.array([1, 0, 2, 1]))
    np.testing.assert_array_equal(levels, [0, 1, 2])
    np.testing.assert_array_equal(inv, [1, 0, 2, 1])
    assert inv.dtype == np.intp
    levels, inv = compress(np.array([], dtype=np.int64))
    assert len(levels) == 0 and len(inv) == 0
    assert levels.dtype == np.int64 and inv.dtype == np.intp  # usable as indices
    levels, inv = compress(np.array([10**9, 3, 10**9]))  # the sorting branch
    np.testing.assert_array_equal(inv, [1, 0, 1])
    assert inv.dtype == np.intp


def test_a_level_seen_only_on_pooled_rows_is_counted_and_fitted() -> None:
    # year 7 appears only on rows of the small industry 8: it has no own-level rows
    d = _data(14)
    d["yr"][np.flatnonzero(d["ind"] == 8)[:5]] = 7
    pooling = _pooling(25.0)
    design = Design(d["X"], [d["ind"], d["yr"]], pooling)
    assert design.counts[1][-1] == 5
    Z, pen = _explicit(d, pooling)
    _check_products(design, Z, pen, d["rng"], [d["yr"]])


def test_pooling_without_a_small_level_changes_nothing() -> None:
    rng = np.random.default_rng(15)
    X = rng.normal(size=(50, 2))
    one = np.zeros(50, dtype=np.int64)
    none_small = Pooling(np.array([False]), np.array([-1]), np.zeros((0, 1), dtype=bool),
                         np.array([np.inf]), np.array([np.nan]))
    design = Design(X, [one], none_small)
    assert not design.any_dense and design.layout.n_dev == 0
    np.testing.assert_allclose(design.gram(), Design(X, [one]).gram(), rtol=0, atol=1e-12)


def test_designs_without_rows_integer_drivers_and_no_pooling() -> None:
    empty = Design(np.empty((0, 2)), [])
    np.testing.assert_array_equal(empty.center, [0.0, 0.0])
    np.testing.assert_array_equal(empty.magnitude, [0.0, 0.0])
    with pytest.raises(ModelError, match="at least one level of its own"):
        Design(np.empty((0, 1)), [np.empty(0, dtype=np.int64)], _pooling(np.inf))
    d = _data(16)
    whole = np.round(d["X"] * 10).astype(np.int64)  # integer drivers fit as floats
    Z, pen = _explicit({**d, "X": whole.astype(float)}, None)
    _check_products(Design(whole, [d["ind"], d["yr"]]), Z, pen, d["rng"], [d["ind"]])
    plain = Design(d["X"], [d["ind"]])
    assert np.isnan(plain.deviations(np.ones(plain.layout.n_params), 10)).all()


def test_the_flat_bound_is_inclusive(monkeypatch) -> None:
    # spread sqrt(((0 - 1)^2 + (2 - 1)^2) / 2) = 1, exactly 0.5 of the largest value 2
    monkeypatch.setattr(design_module, "FLAT_TOL", 0.5)
    np.testing.assert_array_equal(Design(np.array([[0.0], [2.0]]), []).flat(), [0])


def test_drivers_centred_in_blocks_keep_their_means_extremes_and_the_finite_check(
        monkeypatch) -> None:
    # three rows a block: the sums, extremes and the check run across every block
    monkeypatch.setattr(design_module, "BLOCK", 3)
    rng = np.random.default_rng(21)
    X = rng.normal(size=(40, 3)) * [1.0, 50.0, 1e-3] + [2.0, -7.0, 0.0]
    X[17, 1] = -400.0  # the largest absolute value, negative, in a middle block
    design = Design(X, [np.arange(40) % 4])
    np.testing.assert_allclose(design.center, X.mean(axis=0), rtol=1e-14, atol=0)
    np.testing.assert_array_equal(design.magnitude, np.abs(X).max(axis=0))
    np.testing.assert_allclose(design.XT, (X - X.mean(axis=0)).T, rtol=0, atol=1e-12)
    assert design.XT.flags.c_contiguous and design.XT.shape == (3, 40)
    for bad in (np.nan, np.inf, -np.inf):
        Y = X.copy()
        Y[38, 2] = bad  # in the last block
        with pytest.raises(ModelError, match="finite"):
            Design(Y, [np.arange(40) % 4])
