"""Leave-one-out peer medians and exact contributions."""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from levgap.attribution import attribute_gap, loo_median, peer_profile
from levgap.errors import ModelError


def _brute(values: np.ndarray, groups: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    med = np.full(len(values), np.nan)
    cnt = np.zeros(len(values), dtype=int)
    for i in range(len(values)):
        same = (groups == groups[i]) & ~np.isnan(values)
        if not np.isnan(values[i]):
            same[i] = False
        if same.any():
            med[i] = np.median(values[same])
        cnt[i] = same.sum()
    return med, cnt


@settings(max_examples=60, deadline=None)
@given(
    st.lists(st.tuples(st.integers(0, 4), st.one_of(st.floats(-5, 5), st.just(float("nan")))),
             min_size=1, max_size=40)
)
def test_loo_median_equals_brute_force(rows: list[tuple[int, float]]) -> None:
    groups = np.array([g for g, _ in rows])
    values = np.array([v for _, v in rows])
    med, cnt = loo_median(values, groups)
    ref_med, ref_cnt = _brute(values, groups)
    np.testing.assert_allclose(med, ref_med, equal_nan=True)
    np.testing.assert_array_equal(cnt, ref_cnt)
    assert cnt.dtype == np.int64


def test_peer_profile_falls_back_to_wider_group() -> None:
    X = np.array([[1.0], [2.0], [3.0], [10.0]])
    narrow = np.array([0, 0, 0, 1])  # the last row is alone in its group
    wide = np.array([0, 0, 0, 0])
    prof, cnt, level = peer_profile(X, [[(None, narrow)], [(None, wide)]])
    assert prof[0, 0] == 2.5 and level[0] == 0 and cnt[0] == 2
    assert prof[3, 0] == 2.0 and level[3] == 1 and cnt[3] == 3


def test_peer_profile_partition_looks_across_parent_members_only() -> None:
    # rows 0-2: industry A; rows 3-4: industry B; row 5: tiny industry C borrowing from A
    X = np.array([[1.0], [2.0], [3.0], [50.0], [60.0], [9.0]])
    industry = np.array([0, 0, 0, 1, 1, 2])
    alone = industry.copy()
    alone[5] = 7  # C has no peer of its own
    parent = np.array([True, True, True, False, False, True])
    year = np.zeros(6, dtype=int)
    prof, cnt, level = peer_profile(
        X, [[(None, alone)], [(parent, year)], [(None, year)]])
    assert level[5] == 1 and cnt[5] == 3 and prof[5, 0] == 2.0  # A's firms, not B's
    assert level[0] == 0 and prof[0, 0] == 2.5  # A's own peers unchanged


@settings(max_examples=40, deadline=None)
@given(st.integers(0, 2**31 - 1), st.integers(1, 60), st.integers(1, 6))
def test_contributions_sum_to_target_minus_peer_target(seed: int, n: int, k: int) -> None:
    rng = np.random.default_rng(seed)
    X, Xp = rng.normal(size=(n, k)), rng.normal(size=(n, k))
    beta = rng.normal(size=(n, k))
    offset = rng.normal(size=n)
    target = offset + np.einsum("ij,ij->i", X, beta)
    a = attribute_gap(X, Xp, beta, offset, target)
    assert np.abs(a.contributions.sum(axis=1) - (target - a.peer_target)).max() <= 1e-9


def test_identity_is_checked_where_built() -> None:
    X = np.ones((2, 1))
    with pytest.raises(ModelError, match="sum to target - peer_target"):
        attribute_gap(X, X * 0, np.ones((2, 1)), np.zeros(2), np.array([1.0, 5.0]))


def test_group_order_holds_for_wide_and_negative_codes() -> None:
    from levgap.attribution import _group_value_order, _narrow

    rng = np.random.default_rng(3)
    values = rng.normal(size=400)
    for top in (40, 40_000, 3_000_000_000):
        groups = rng.integers(0, top, 400)
        groups[:50] = groups[50]  # one large group
        order = _group_value_order(values, groups)
        key = np.lexsort((values, groups))
        np.testing.assert_array_equal(groups[order], groups[key])
        np.testing.assert_array_equal(values[order], values[key])
    assert _narrow(np.array([0, 32767])).dtype == np.int16
    assert _narrow(np.array([0, 32768])).dtype == np.int32
    assert _narrow(np.array([0, 2**31])).dtype == np.int64
    for kept in (np.array([-1, 5]), np.array([0.5, 2.0]), np.array([], dtype=np.int64)):
        assert _narrow(kept) is kept


@settings(max_examples=40, deadline=None)
@given(st.integers(0, 2**31 - 1), st.integers(1, 60), st.integers(1, 4), st.booleans())
def test_medians_of_every_column_equal_brute_force(seed: int, n: int, k: int,
                                                    with_nan: bool) -> None:
    from levgap.attribution import _loo_medians

    rng = np.random.default_rng(seed)
    X = np.round(rng.normal(size=(n, k)), 1)  # ties
    if with_nan:
        X[rng.random((n, k)) < 0.2] = np.nan
    groups = rng.integers(0, 6, n) * 7 + 3
    for j, (med, cnt) in enumerate(_loo_medians(X, groups)):
        ref_med, ref_cnt = _brute(X[:, j], groups)
        np.testing.assert_allclose(med, ref_med, rtol=0, atol=1e-15, equal_nan=True)
        np.testing.assert_array_equal(cnt, ref_cnt)
        assert cnt.dtype == np.int64


def test_wider_level_is_computed_over_whole_groups_only_where_needed() -> None:
    # rows 0-2 (narrow group 0) have peers; row 3 is alone in narrow group 1 and takes its
    # wide group {0, 1, 2, 3}; rows 4-5 (narrow group 2) have peers, and their wide group
    # {4, 5} is not needed
    X = np.array([[1.0], [2.0], [3.0], [10.0], [4.0], [6.0]])
    narrow = np.array([0, 0, 0, 1, 2, 2])
    wide = np.array([7, 7, 7, 7, 9, 9])
    prof, cnt, level = peer_profile(X, [[(None, narrow)], [(None, wide)]])
    np.testing.assert_array_equal(prof[:, 0], [2.5, 2.0, 1.5, 2.0, 6.0, 4.0])
    np.testing.assert_array_equal(cnt, [2, 2, 2, 3, 1, 1])
    np.testing.assert_array_equal(level, [0, 0, 0, 1, 0, 0])
    alone = peer_profile(np.array([[1.0], [2.0]]), [[(None, np.array([0, 1]))]])
    assert np.isnan(alone[0]).all() and (alone[1] == 0).all() and (alone[2] == -1).all()
    assert cnt.dtype == np.int64 and level.dtype == np.int64


def test_every_partition_of_a_level_is_tried() -> None:
    # level 1 has two partitions (two parents); the first one's rows all have peers at
    # level 0, the second holds a row that needs it
    X = np.array([[1.0], [3.0], [5.0], [7.0], [20.0]])
    narrow = np.array([0, 0, 1, 1, 2])
    first = np.array([True, True, False, False, False])
    second = ~first
    year = np.zeros(5, dtype=int)
    prof, cnt, level = peer_profile(X, [[(None, narrow)], [(first, year), (second, year)]])
    np.testing.assert_array_equal(level, [0, 0, 0, 0, 1])
    assert prof[4, 0] == 6.0 and cnt[4] == 2


def test_identity_tolerance_is_relative_to_the_target() -> None:
    X, Xp = np.array([[2.0]]), np.array([[1.0]])
    beta, offset = np.array([[1.0]]), np.array([0.0])
    attribute_gap(X, Xp, beta, offset, np.array([2.0 + 1e-13]))
    with pytest.raises(ModelError, match="got a difference of 1e-11 on 1 rows"):
        attribute_gap(X, Xp, beta, offset, np.array([2.0 + 1e-11]))
    big = 1e6
    attribute_gap(X * big, Xp * big, beta, offset, np.array([2e6 + 1e-7]))
    with pytest.raises(ModelError, match="sum to target - peer_target"):
        attribute_gap(X * big, Xp * big, beta, offset, np.array([2e6 + 1e-5]))
    # a difference equal to the tolerance passes; above it (at a target of 1) it does not
    attribute_gap(np.array([[1e-12]]), Xp * 0, beta, offset, np.array([2e-12]))
    with pytest.raises(ModelError, match="sum to target - peer_target"):
        attribute_gap(X / 2, Xp * 0, beta, offset, np.array([1.0 + 1.5e-12]))
    a = attribute_gap(X, Xp, beta, offset, np.array([2.0]), link="identity")
    assert a.peer_target[0] == 1.0 and a.contributions[0, 0] == 1.0 and a.method == "shapley"
    lg = attribute_gap(X, Xp, beta, offset, 1 / (1 + np.exp(-np.array([2.0]))), link="logit")
    assert lg.peer_target[0] == pytest.approx(1 / (1 + np.exp(-1.0)))


def test_many_drivers_report_the_path_integral() -> None:
    rng = np.random.default_rng(9)
    k = 11
    X, Xp, beta = rng.normal(size=(4, k)), rng.normal(size=(4, k)), rng.normal(0, 0.2, (4, k))
    offset = rng.normal(size=4)
    target = 1 / (1 + np.exp(-(offset + (X * beta).sum(axis=1))))
    a = attribute_gap(X, Xp, beta, offset, target, link="logit")
    assert a.method == "aumann-shapley"
    assert attribute_gap(X[:, :3], Xp[:, :3], beta[:, :3], offset,
                         1 / (1 + np.exp(-(offset + (X[:, :3] * beta[:, :3]).sum(axis=1)))),
                         link="logit").method == "shapley"


@pytest.mark.parametrize("k", [3, 12])
def test_identity_link_gives_exactly_beta_times_the_driver_gap(k: int) -> None:
    # the documented identity case, bit for bit: beta_j x_j - beta_j x_peer_j, not a
    # coalition average (exact in theory, rounded differently) nor the path integral
    rng = np.random.default_rng(11)
    X, Xp, beta = rng.normal(size=(40, k)), rng.normal(size=(40, k)), rng.normal(size=(40, k))
    offset = rng.normal(size=40)
    a = attribute_gap(X, Xp, beta, offset, offset + np.einsum("ij,ij->i", X, beta))
    np.testing.assert_array_equal(a.contributions, X * beta - Xp * beta)
    assert a.method == "shapley"
