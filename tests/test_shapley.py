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
