"""Exact driver contributions: brute force over orders, efficiency, and the path integral."""

from __future__ import annotations

from itertools import permutations

import numpy as np
import pytest
from scipy import special

from levgap.models.shapley import MAX_EXACT, shapley


def _brute(offset: float, a: np.ndarray, b: np.ndarray) -> np.ndarray:
    """Shapley values by their definition: the mean over all K! orders of each driver's
    marginal change when it moves from the peer value to the firm's."""
    k = len(a)
    out = np.zeros(k)
    orders = list(permutations(range(k)))
    for order in orders:
        cur = b.copy()
        prev = special.expit(offset + cur.sum())
        for j in order:
            cur[j] = a[j]
            now = special.expit(offset + cur.sum())
            out[j] += now - prev
            prev = now
    return out / len(orders)


@pytest.mark.parametrize("k", [1, 2, 3, 4, 5])
def test_equals_the_definition_over_all_orders(k: int) -> None:
    rng = np.random.default_rng(k)
    n = 20
    offset = rng.normal(-1, 1, n)
    a, b = rng.normal(0, 1.5, (n, k)), rng.normal(0, 1.5, (n, k))
    got, peer, method = shapley(offset, a, b, special.expit)
    assert method == "shapley"
    for i in range(n):
        np.testing.assert_allclose(got[i], _brute(offset[i], a[i], b[i]), atol=1e-14)
    np.testing.assert_allclose(peer, special.expit(offset + b.sum(axis=1)), atol=0)


@pytest.mark.parametrize("k", [1, 3, 6, 8, MAX_EXACT])
def test_contributions_sum_exactly_to_the_change(k: int) -> None:
    rng = np.random.default_rng(10 + k)
    n = 500
    offset = rng.normal(0, 2, n)
    a, b = rng.normal(0, 1, (n, k)), rng.normal(0, 1, (n, k))
    got, peer, _ = shapley(offset, a, b, special.expit)
    target = special.expit(offset + a.sum(axis=1))
    assert np.abs(target - peer - got.sum(axis=1)).max() <= 1e-12


def test_identity_link_gives_the_linear_terms() -> None:
    rng = np.random.default_rng(2)
    a, b = rng.normal(size=(50, 4)), rng.normal(size=(50, 4))
    got, peer, _ = shapley(np.zeros(50), a, b, lambda eta: eta)
    np.testing.assert_allclose(got, a - b, atol=1e-13)
    np.testing.assert_allclose(peer, b.sum(axis=1), atol=1e-13)


def test_a_driver_at_the_peer_value_contributes_nothing() -> None:
    rng = np.random.default_rng(3)
    a, b = rng.normal(size=(30, 5)), rng.normal(size=(30, 5))
    a[:, 2] = b[:, 2]
    got, _, _ = shapley(rng.normal(size=30), a, b, special.expit)
    assert np.abs(got[:, 2]).max() <= 1e-15


def test_above_ten_drivers_the_path_integral_is_used_and_exact() -> None:
    rng = np.random.default_rng(4)
    k, n = MAX_EXACT + 2, 40
    offset = rng.normal(size=n)
    a, b = rng.normal(0, 0.5, (n, k)), rng.normal(0, 0.5, (n, k))
    got, peer, method = shapley(offset, a, b, special.expit)
    assert method == "aumann-shapley"
    target = special.expit(offset + a.sum(axis=1))
    assert np.abs(target - peer - got.sum(axis=1)).max() <= 1e-12
    # Independent computation: the integral of the gradient along the straight path from
    # the peer profile to the firm, by the trapezoid rule on a fine grid.
    t = np.linspace(0.0, 1.0, 20001)
    for i in range(5):
        eta = offset[i] + b[i].sum() + t * (a[i] - b[i]).sum()
        slope = special.expit(eta) * (1 - special.expit(eta))
        integral = np.trapezoid(slope, t)
        np.testing.assert_allclose(got[i], (a[i] - b[i]) * integral, atol=1e-9)


@pytest.mark.parametrize("k", [1, 2, 4])
def test_coalition_weights_follow_the_formula(k: int) -> None:
    from math import factorial

    from levgap.models.shapley import coalition_weights

    member, weights = coalition_weights(k)
    assert member.shape == weights.shape == (2**k, k)
    for mask in range(2**k):
        inside = [(mask >> j) & 1 for j in range(k)]
        np.testing.assert_array_equal(member[mask], inside)
        s = sum(inside)
        for j in range(k):
            if inside[j]:  # f(S) enters phi_j with the weight of S without j
                w = factorial(s - 1) * factorial(k - s) / factorial(k)
            else:
                w = -factorial(s) * factorial(k - s - 1) / factorial(k)
            assert weights[mask, j] == pytest.approx(w, rel=1e-15)


def test_rows_beyond_one_block_and_no_driver() -> None:
    from levgap.models.shapley import BLOCK

    rng = np.random.default_rng(5)
    n = BLOCK + 7
    offset = rng.normal(size=n)
    a, b = rng.normal(size=(n, 2)), rng.normal(size=(n, 2))
    got, peer, _ = shapley(offset, a, b, special.expit)
    target = special.expit(offset + a.sum(axis=1))
    assert np.abs(target - peer - got.sum(axis=1)).max() <= 1e-12
    # two drivers: phi_1 = (f(1) - f(0) + f(12) - f(2)) / 2, on the last rows too
    f = special.expit
    o = offset[-3:]
    phi1 = (f(o + a[-3:, 0] + b[-3:, 1]) - f(o + b[-3:].sum(axis=1))
            + f(o + a[-3:].sum(axis=1)) - f(o + b[-3:, 0] + a[-3:, 1])) / 2
    np.testing.assert_allclose(got[-3:, 0], phi1, rtol=1e-12)
    none, peer0, method = shapley(offset[:4], np.zeros((4, 0)), np.zeros((4, 0)),
                                  special.expit)
    assert none.shape == (4, 0) and method == "shapley"
    np.testing.assert_allclose(peer0, special.expit(offset[:4]))


def test_linear_flag_and_the_exact_limit() -> None:
    rng = np.random.default_rng(6)
    a, b = rng.normal(size=(20, 3)), rng.normal(size=(20, 3))
    got, peer, method = shapley(np.ones(20), a, b, lambda e: 2.0 * e, linear=True)
    np.testing.assert_array_equal(got, a - b)  # the linear terms, not 2 (a - b)
    np.testing.assert_allclose(peer, 2.0 * (1.0 + b.sum(axis=1)))
    got, _, method = shapley(np.ones(20), a, b, special.expit, linear=False)
    assert method == "shapley" and not np.allclose(got, a - b)
    k = MAX_EXACT
    a, b = rng.normal(0, 0.3, (5, k)), rng.normal(0, 0.3, (5, k))
    assert shapley(np.zeros(5), a, b, special.expit)[2] == "shapley"
    a1, b1 = rng.normal(0, 0.3, (5, k + 1)), rng.normal(0, 0.3, (5, k + 1))
    assert shapley(np.zeros(5), a1, b1, special.expit)[2] == "aumann-shapley"


def test_path_integral_when_the_linear_predictor_does_not_move() -> None:
    # drivers that move in opposite directions by the same amount: the target does not move,
    # and each contribution is beta_j dx_j times the slope of the link at that point
    k = MAX_EXACT + 1
    delta = np.zeros((3, k))
    delta[:, 0], delta[:, 1] = 0.4, -0.4
    delta[1, 2], delta[1, 3] = 1e-13, -1e-13
    peer = np.full((3, k), 0.1)
    offset = np.array([0.0, 1.0, -2.0])
    firm = peer + delta
    got, _, _ = shapley(offset, firm, peer, special.expit)
    eta = offset + peer.sum(axis=1)
    slope = special.expit(eta) * (1 - special.expit(eta))
    np.testing.assert_allclose(got, (firm - peer) * slope[:, None], rtol=1e-8, atol=1e-20)
    assert np.abs(got.sum(axis=1)).max() <= 1e-15


def test_path_integral_puts_the_rounding_on_the_largest_term() -> None:
    rng = np.random.default_rng(7)
    k = MAX_EXACT + 3
    a, b = rng.normal(0, 2, (50, k)), rng.normal(0, 2, (50, k))
    offset = rng.normal(size=50)
    got, peer, _ = shapley(offset, a, b, special.expit)
    target = special.expit(offset + a.sum(axis=1))
    assert np.abs(target - peer - got.sum(axis=1)).max() <= 1e-15
    change = target - peer
    step = (a - b).sum(axis=1)
    np.testing.assert_allclose(got, (a - b) * (change / step)[:, None], rtol=1e-9,
                               atol=1e-15)


def _kinked(e: np.ndarray) -> np.ndarray:
    """A link whose slope jumps at 0 (1 below, 2 above): path ratio and slope differ there."""
    return np.where(e < 0, e, 2.0 * e)


def _two_opposite_moves(s: float) -> np.ndarray:
    delta = np.zeros((1, MAX_EXACT + 1))
    delta[0, 0], delta[0, 1] = 2.0 * s, -s  # beta' dx = s exactly
    return delta


def test_path_integral_guard_is_strict_at_its_limit() -> None:
    # |beta' dx| = 1e-12 is not "does not move": the path ratio (f(x) - f(peer)) / beta' dx
    # is used (2 for this link), not the central slope at the peer (1.5)
    s = 1e-12
    delta = _two_opposite_moves(s)
    got, _, method = shapley(np.zeros(1), delta, np.zeros_like(delta), _kinked)
    assert method == "aumann-shapley"
    np.testing.assert_allclose(got[0, :2], [4.0 * s, -2.0 * s], rtol=1e-9)


def test_below_the_guard_the_remainder_keeps_the_sum_exact() -> None:
    # below the guard each term is beta_j dx_j times the central slope (1.5 here); the sum
    # then misses f(x) - f(peer) = 2 s by 0.5 s, which goes onto the largest term
    s = 1e-13
    delta = _two_opposite_moves(s)
    got, _, _ = shapley(np.zeros(1), delta, np.zeros_like(delta), _kinked)
    np.testing.assert_allclose(got[0, :2], [3.5 * s, -1.5 * s], rtol=1e-6)
    assert got.sum() == pytest.approx(2.0 * s, rel=1e-9)
