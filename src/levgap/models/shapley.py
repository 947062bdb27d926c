r"""Exact additive driver contributions between two driver profiles.

For a model :math:`f(x) = h(o + \sum_j \beta_j x_j)` the contribution of driver :math:`j` to
:math:`f(x) - f(x^{peer})` is its Shapley value: the average, over all orders in which the
drivers move from the peer profile to the firm's values, of the change in :math:`f` when
:math:`j` moves,

.. math:: \phi_j = \sum_{S \subseteq N \setminus \{j\}} \frac{|S|!\,(K-|S|-1)!}{K!}
          \big(f(S \cup \{j\}) - f(S)\big),

where :math:`f(S)` is the prediction with the drivers in :math:`S` at the firm's values and
the others at the peer profile. The :math:`\phi_j` sum to :math:`f(x) - f(x^{peer})` exactly.
With an identity link they equal :math:`\beta_j (x_j - x^{peer}_j)`.

All :math:`2^K` coalitions are evaluated at once (a matrix of coalition indicators), in blocks
of rows to bound memory. Above ``MAX_EXACT`` drivers (:math:`2^{10}` coalitions) the
Aumann-Shapley value is used instead: the path integral of the gradient along the straight
line from the peer profile to the firm, which for a single-index model has the closed form
:math:`\phi_j = \beta_j \Delta x_j \, (f(x) - f(x^{peer})) / (\beta'\Delta x)` (the limit
:math:`\beta_j \Delta x_j h'(\eta)` when :math:`\beta'\Delta x = 0`); it is also exact and
additive, and it equals the Shapley value when the link is the identity.
"""

from __future__ import annotations

from collections.abc import Callable
from functools import lru_cache
from math import factorial

import numpy as np

MAX_EXACT = 10
BLOCK = 1 << 15


@lru_cache(maxsize=16)
def coalition_weights(k: int) -> tuple[np.ndarray, np.ndarray]:
    """Indicator matrix of all coalitions (2^k x k) and the Shapley weight matrix (2^k x k)."""
    masks = np.arange(1 << k)
    member = ((masks[:, None] >> np.arange(k)[None, :]) & 1).astype(float)
    size = member.sum(axis=1).astype(int)
    w = np.array([factorial(s) * factorial(k - s - 1) / factorial(k) for s in range(k)])
    # phi_j = sum over masks: +w(|S|-1) f(S) where j in S, -w(|S|) f(S) where j not in S
    weights = np.where(member == 1, w[np.clip(size - 1, 0, k - 1)][:, None],
                       -w[np.clip(size, 0, k - 1)][:, None])
    return member, weights


def shapley(
    offset: np.ndarray,
    firm_terms: np.ndarray,
    peer_terms: np.ndarray,
    inverse_link: Callable[[np.ndarray], np.ndarray],
    *,
    linear: bool = False,
) -> tuple[np.ndarray, np.ndarray, str]:
    """Contributions of each driver and the prediction at the peer profile.

    Parameters
    ----------
    offset : numpy.ndarray, shape (n,)
        Constant plus effects of each row.
    firm_terms, peer_terms : numpy.ndarray, shape (n, k)
        :math:`\\beta_j x_j` at the firm's values and at the peer profile.
    inverse_link : callable
        :math:`h`, applied elementwise to the linear predictor.
    linear : bool, default=False
        ``h`` is the identity: the contributions are the linear terms' differences (what every
        coalition average reduces to), computed directly.

    Returns
    -------
    contributions : numpy.ndarray, shape (n, k)
    peer_target : numpy.ndarray, shape (n,)
    method : str
        ``"shapley"`` (all coalitions) or ``"aumann-shapley"`` (above ``MAX_EXACT`` drivers).
    """
    n, k = firm_terms.shape
    peer_eta = offset + peer_terms.sum(axis=1)
    peer_target = inverse_link(peer_eta)
    if k == 0:
        return np.zeros((n, 0)), peer_target, "shapley"
    if linear:
        return firm_terms - peer_terms, peer_target, "shapley"
    if k > MAX_EXACT:
        return _aumann_shapley(offset, firm_terms, peer_terms, inverse_link), peer_target, \
            "aumann-shapley"
    member, weights = coalition_weights(k)
    out = np.empty((n, k))
    for start in range(0, n, BLOCK):
        sl = slice(start, min(n, start + BLOCK))
        a, b = firm_terms[sl], peer_terms[sl]
        eta = (offset[sl] + b.sum(axis=1))[:, None] + (a - b) @ member.T
        out[sl] = inverse_link(eta) @ weights
    return out, peer_target, "shapley"


def _aumann_shapley(
    offset: np.ndarray,
    firm_terms: np.ndarray,
    peer_terms: np.ndarray,
    inverse_link: Callable[[np.ndarray], np.ndarray],
) -> np.ndarray:
    delta = firm_terms - peer_terms
    start = offset + peer_terms.sum(axis=1)
    step = delta.sum(axis=1)
    change = inverse_link(start + step) - inverse_link(start)
    h = 1e-6
    slope = (inverse_link(start + h) - inverse_link(start - h)) / (2 * h)
    tiny = np.abs(step) < 1e-12
    ratio = np.where(tiny, slope, change / np.where(tiny, 1.0, step))
    out = delta * ratio[:, None]
    # make the sum exact: put the rounding remainder on the largest term
    rest = change - out.sum(axis=1)
    j = np.argmax(np.abs(out), axis=1)
    out[np.arange(len(out)), j] += rest
    return out
