"""The fractional limit: a plain Newton loop for the fractional logit with industry and year
effects, on group-sum normal equations, in numpy and scipy.

Written independently of levgap's code (like ``limit.py`` for the linear model): it is the
yardstick that levgap's fractional fit is measured against (issue 10: within 2x).

Model (Papke and Wooldridge 1996, Bernoulli quasi-likelihood, logit link)::

    E[y_i] = 1 / (1 + exp(-eta_i)),   eta_i = c + a_industry(i) + g_year(i) + x_i' b

with the first level of each effect dropped (the parametrisation of a GLM with a constant and
dummy columns). Each Newton step solves ``H d = s`` with the Hessian ``H = F'WF`` of the whole
design ``F = [1, D_industry, D_year, X]`` and ``W = diag(mu (1 - mu))``, and the score
``s = F'(y - mu)``. ``H`` is assembled from weighted group sums (``np.bincount``) and a
weighted cross-tabulation of the two effects; ``X'WX`` is one matrix product. The loop starts
from the constant at the logit of the mean of ``y`` and stops when no fitted value moves by
more than ``tol`` (1e-12, as levgap). No step halving: from that start the Bernoulli
quasi-likelihood is well behaved, and the loop raises if it does not converge.

Covariance of the slopes: the sandwich ``S^-1 (sum_g u_g u_g') S^-1`` with ``u_g`` the
cluster sums of ``x~_i (y_i - mu_i)``, ``x~ = X - F_e Gamma`` the drivers partialled on the
effects with weights ``W`` and ``S`` the Schur complement of the drivers' block of ``H``
(the partitioned inverse), times Stata's factor ``G/(G-1) (N-1)/(N-P)``.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy import linalg, special


@dataclass(frozen=True, slots=True)
class NewtonFit:
    """Estimates of the plain Newton loop.

    Parameters
    ----------
    coef : numpy.ndarray
        Slopes ``b`` (k,).
    cov : numpy.ndarray or None
        Firm-clustered covariance of ``b``; None when not asked for.
    const : float
    effects : tuple of numpy.ndarray
        Effect of every level (first level 0), one array per effect.
    iterations : int
        Newton steps taken.
    """

    coef: np.ndarray
    cov: np.ndarray | None
    const: float
    effects: tuple[np.ndarray, ...]
    iterations: int

    @property
    def std_error(self) -> np.ndarray:
        assert self.cov is not None
        return np.sqrt(np.diag(self.cov))


def fit(
    y: np.ndarray,
    X: np.ndarray,
    codes: tuple[np.ndarray, np.ndarray],
    cluster: np.ndarray | None = None,
    *,
    tol: float = 1e-12,
    max_iter: int = 50,
) -> NewtonFit:
    """Fit the model; ``codes`` are the 0-based industry and year codes of each row."""
    n, k = X.shape
    ind, yr = codes
    m_i, m_y = int(ind.max()) + 1, int(yr.max()) + 1
    keep_i = np.flatnonzero(np.bincount(ind, minlength=m_i) > 0)[1:]
    keep_y = np.flatnonzero(np.bincount(yr, minlength=m_y) > 0)[1:]
    p_i, p_y = len(keep_i), len(keep_y)
    # parameter vector: [c, a (p_i), g (p_y), b (k)]
    si, sy, sx = 1, 1 + p_i, 1 + p_i + p_y
    p = sx + k
    cross_code = ind * m_y + yr

    def eta_of(theta: np.ndarray) -> np.ndarray:
        a = np.zeros(m_i)
        a[keep_i] = theta[si:sy]
        g = np.zeros(m_y)
        g[keep_y] = theta[sy:sx]
        return theta[0] + a[ind] + g[yr] + X @ theta[sx:]

    def hessian(w: np.ndarray) -> np.ndarray:
        H = np.empty((p, p))
        H[0, 0] = w.sum()
        wi = np.bincount(ind, weights=w, minlength=m_i)[keep_i]
        wy = np.bincount(yr, weights=w, minlength=m_y)[keep_y]
        H[0, si:sy] = H[si:sy, 0] = wi
        H[0, sy:sx] = H[sy:sx, 0] = wy
        H[si:sy, si:sy] = np.diag(wi)
        H[sy:sx, sy:sx] = np.diag(wy)
        cross = np.bincount(cross_code, weights=w, minlength=m_i * m_y).reshape(m_i, m_y)
        H[si:sy, sy:sx] = cross[np.ix_(keep_i, keep_y)]
        H[sy:sx, si:sy] = H[si:sy, sy:sx].T
        WX = X * w[:, None]
        H[0, sx:] = H[sx:, 0] = WX.sum(axis=0)
        for j in range(k):
            H[si:sy, sx + j] = H[sx + j, si:sy] = np.bincount(
                ind, weights=WX[:, j], minlength=m_i)[keep_i]
            H[sy:sx, sx + j] = H[sx + j, sy:sx] = np.bincount(
                yr, weights=WX[:, j], minlength=m_y)[keep_y]
        H[sx:, sx:] = WX.T @ X
        return H

    def score(r: np.ndarray) -> np.ndarray:
        return np.concatenate([[r.sum()], np.bincount(ind, weights=r, minlength=m_i)[keep_i],
                               np.bincount(yr, weights=r, minlength=m_y)[keep_y], X.T @ r])

    ybar = float(y.mean())
    theta = np.zeros(p)
    theta[0] = np.log(ybar / (1.0 - ybar))
    mu = special.expit(eta_of(theta))
    for it in range(1, max_iter + 1):  # noqa: B007 (the count is reported)
        w = mu * (1.0 - mu)
        H = hessian(w)
        theta = theta + linalg.cho_solve(linalg.cho_factor(H, check_finite=False),
                                         score(y - mu), check_finite=False)
        new_mu = special.expit(eta_of(theta))
        moved = float(np.abs(new_mu - mu).max())
        mu = new_mu
        if moved < tol:
            break
    else:
        raise RuntimeError(f"no convergence in {max_iter} Newton steps")
    effects = []
    for keep, m, sl in ((keep_i, m_i, slice(si, sy)), (keep_y, m_y, slice(sy, sx))):
        e = np.zeros(m)
        e[keep] = theta[sl]
        effects.append(e)
    cov = None
    if cluster is not None:
        w = mu * (1.0 - mu)
        H = hessian(w)
        # partial the drivers on [1, effects] with weights w: x~ = X - F_e Gamma
        Hee = H[:sx, :sx]
        gamma = linalg.cho_solve(linalg.cho_factor(Hee, check_finite=False), H[:sx, sx:],
                                 check_finite=False)
        S = H[sx:, sx:] - H[sx:, :sx] @ gamma
        ga = np.zeros((m_i, k))
        ga[keep_i] = gamma[si:sy]
        gy = np.zeros((m_y, k))
        gy[keep_y] = gamma[sy:sx]
        xt = X - gamma[0] - ga[ind] - gy[yr]
        r = y - mu
        G = int(cluster.max()) + 1
        U = np.empty((G, k))
        for j in range(k):
            U[:, j] = np.bincount(cluster, weights=xt[:, j] * r, minlength=G)
        g_used = int(np.count_nonzero(np.bincount(cluster, minlength=G)))
        factor = g_used / (g_used - 1) * (n - 1) / (n - p)
        Sinv = linalg.cho_solve(linalg.cho_factor(S, check_finite=False), np.eye(k),
                                check_finite=False)
        cov = factor * (Sinv @ (U.T @ U) @ Sinv)
    return NewtonFit(theta[sx:].copy(), cov, float(theta[0]), tuple(effects), it)
