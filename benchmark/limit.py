"""The limit (a): a linear model with industry and year effects solved by group-sum normal
equations on arrays already in memory, with firm-clustered covariance, in plain numpy and scipy.

Written independently of levgap's code: it is the yardstick that levgap's fit is measured
against, and (reused by ``lean.py``) the fitting core of the lean end-to-end implementation.

Model::

    y_i = c + a_industry(i) + g_year(i) + x_i' b + e_i

with the first level of each effect dropped (the parametrisation of OLS with a constant and
dummy columns, so estimates equal dummy-variable OLS). The normal equations are assembled
from group sums (``np.bincount``) and a cross-tabulation of the effects instead of a dense
dummy matrix: with ``F = [1, D_industry, D_year]`` (p_F columns) and ``X`` (k columns)::

    [F'F  F'X] [c, a, g]   [F'y]
    [X'F  X'X] [   b   ] = [X'y]

F'F holds counts (and the industry-by-year cross-tab), F'X and F'y are group sums. For the
covariance of ``b`` the partitioned-inverse identity gives the X rows of the inverse times the
design as ``(X~'X~)^-1 x~_i`` with ``x~ = X - F (F'F)^-1 F'X``: the cluster-robust sandwich
needs only the k partialled columns. Small-sample factor as Stata's ``regress, vce(cluster)``
and statsmodels' ``cov_type="cluster"`` defaults: ``G/(G-1) * (N-1)/(N-p)`` with p counting the
constant and every dummy column.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy import linalg


@dataclass(frozen=True, slots=True)
class LimitFit:
    """Estimates of the limit implementation.

    Parameters
    ----------
    coef : numpy.ndarray
        Slopes ``b`` (k,).
    cov : numpy.ndarray or None
        Firm-clustered covariance of ``b`` (k, k); None when not asked for.
    const : float
        Constant ``c``.
    effects : tuple of numpy.ndarray
        Effect of every level (first level 0), one array per effect.
    n_params : int
        Constant + dummy columns + slopes.
    """

    coef: np.ndarray
    cov: np.ndarray | None
    const: float
    effects: tuple[np.ndarray, ...]
    n_params: int

    @property
    def std_error(self) -> np.ndarray:
        assert self.cov is not None
        return np.sqrt(np.diag(self.cov))

    def predict(self, X: np.ndarray, codes: tuple[np.ndarray, ...]) -> np.ndarray:
        out = X @ self.coef + self.const
        for eff, c in zip(self.effects, codes, strict=True):
            out += eff[c]
        return out


def fit(
    y: np.ndarray,
    X: np.ndarray,
    codes: tuple[np.ndarray, ...],
    cluster: np.ndarray | None = None,
    *,
    n_levels: tuple[int, ...] | None = None,
) -> LimitFit:
    """Solve the model; ``codes`` are 0-based level codes, one array per effect.

    ``cluster`` (0-based codes) asks for the firm-clustered covariance of the slopes.
    ``n_levels`` fixes the number of levels of each effect (so a fold that lacks a level
    still gets an effect array of full length; levels without rows get effect 0).
    """
    n, k = X.shape
    if n_levels is None:
        n_levels = tuple(int(c.max()) + 1 for c in codes)
    counts = [np.bincount(c, minlength=m).astype(float)
              for c, m in zip(codes, n_levels, strict=True)]
    # The first level with rows is the reference; levels without rows are dropped too.
    keep = [np.flatnonzero(cn > 0)[1:] for cn in counts]
    sizes = [len(kp) for kp in keep]
    pf = 1 + sum(sizes)
    FF = np.empty((pf, pf))
    FF[0, 0] = n
    pos = [1]
    for s in sizes:
        pos.append(pos[-1] + s)
    for e, kp in enumerate(keep):
        sl = slice(pos[e], pos[e + 1])
        FF[0, sl] = FF[sl, 0] = counts[e][kp]
        FF[sl, sl] = np.diag(counts[e][kp])
        for f in range(e + 1, len(keep)):
            m_e, m_f = n_levels[e], n_levels[f]
            cross = np.bincount(codes[e] * m_f + codes[f], minlength=m_e * m_f).reshape(m_e, m_f)
            block = cross[np.ix_(kp, keep[f])].astype(float)
            sl_f = slice(pos[f], pos[f + 1])
            FF[sl, sl_f] = block
            FF[sl_f, sl] = block.T
    # F'[X y] from group sums.
    Xy = np.column_stack([X, y])
    FXy = np.empty((pf, k + 1))
    FXy[0] = Xy.sum(axis=0)
    for e, kp in enumerate(keep):
        sums = np.empty((n_levels[e], k + 1))
        for j in range(k + 1):
            sums[:, j] = np.bincount(codes[e], weights=Xy[:, j], minlength=n_levels[e])
        FXy[pos[e]:pos[e + 1]] = sums[kp]
    XXy = Xy.T @ Xy  # (k+1, k+1): X'X, X'y
    # Partial F out: Gamma = (F'F)^-1 F'[X y]; Schur complement gives X~'X~ and X~'y~.
    cf = linalg.cho_factor(FF, check_finite=False)
    gamma = linalg.cho_solve(cf, FXy, check_finite=False)
    schur = XXy - FXy.T @ gamma
    A, r = schur[:k, :k], schur[:k, k]
    ca = linalg.cho_factor(A, check_finite=False)
    b = linalg.cho_solve(ca, r, check_finite=False)
    # Effects: (F'F)^-1 (F'y - F'X b)
    theta = gamma[:, k] - gamma[:, :k] @ b
    effects = []
    for e, kp in enumerate(keep):
        eff = np.zeros(n_levels[e])
        eff[kp] = theta[pos[e]:pos[e + 1]]
        effects.append(eff)
    const = float(theta[0])
    p = pf + k
    cov = None
    if cluster is not None:
        # x~ = X - F Gamma_X, evaluated by gathering the level rows of Gamma.
        gx = gamma[:, :k]
        fitted_x = np.broadcast_to(gx[0], (n, k)).copy()
        resid = y - X @ b - const
        for e, kp in enumerate(keep):
            full = np.zeros((n_levels[e], k))
            full[kp] = gx[pos[e]:pos[e + 1]]
            fitted_x += full[codes[e]]
            resid -= effects[e][codes[e]]
        xt = X - fitted_x
        G = int(cluster.max()) + 1
        S = np.empty((G, k))
        for j in range(k):
            S[:, j] = np.bincount(cluster, weights=xt[:, j] * resid, minlength=G)
        Ainv = linalg.cho_solve(ca, np.eye(k), check_finite=False)
        g_used = int(np.count_nonzero(np.bincount(cluster, minlength=G)))
        factor = g_used / (g_used - 1) * (n - 1) / (n - p)
        cov = factor * (Ainv @ (S.T @ S) @ Ainv)
    return LimitFit(b, cov, const, tuple(effects), p)
