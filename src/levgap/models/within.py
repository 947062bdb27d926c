r"""Firm fixed effects by the within transformation (``levgap estimate --effects firm,year``).

Estimating equation, for firm :math:`i` in fiscal year :math:`t`:

.. math:: y_{it} = x_{it}'\beta + a_i + d_t + e_{it},

with one effect per firm and (optionally) per year. A firm effect holds one parameter per
firm, so 100,000 firms cannot enter dense normal equations. Instead the firm effects are
absorbed exactly: every variable is demeaned within its firm (:math:`\tilde v = v - \bar
v_i`), and the year block is solved in the reduced normal equations

.. math:: \begin{pmatrix} \tilde X'\tilde X & \tilde X'D \\ D'\tilde X & D'D - C'N^{-1}C
          \end{pmatrix} \begin{pmatrix}\beta \\ \gamma\end{pmatrix}
          = \begin{pmatrix}\tilde X'\tilde y \\ D'\tilde y\end{pmatrix},

where :math:`D` holds the year dummies (the first year the reference), :math:`C` the
firm-by-year counts and :math:`N` the firms' row counts; every block is a group sum, so the
system has :math:`k + T - 1` unknowns whatever the number of firms (Frisch-Waugh-Lovell: the
slopes equal least squares on explicit firm and year dummies, tested against statsmodels to
1e-8). It is solved by Cholesky and refined twice with residuals computed from the data.

Standard errors
---------------
Cluster-robust sandwich with Stata's small-sample factor :math:`\frac{G}{G-1}\frac{N-1}{N-P}`
per clustering dimension (two-way: :math:`V_1 + V_2 - V_{12}`, each with its own factor and
:math:`P`). What :math:`P` counts is the degrees-of-freedom convention:

- ``nested`` (default): absorbed firm effects that are nested within the clusters (every firm
  in one cluster, as with firm clustering) are not counted: :math:`P = k + (T - 1) + 1`. This
  is the convention of Stata's ``xtreg, fe vce(cluster)`` and the recommendation of Cameron
  and Miller (2015, JHR 50(2), section IV.C; memory); counting them would inflate the errors
  by :math:`\sqrt{(N-1-k-T+1)/(N-k-T-F+1)}`, some 5% at ten years a firm.
- ``dummies``: every firm counts (:math:`P = k + (T - 1) + F`), which is what least squares
  on explicit firm dummies gives (statsmodels' ``OLS(...).fit(cov_type="cluster")``, equal to
  it to 1e-8, tested).

Inference uses Student's t with :math:`G - 1` degrees of freedom (the smaller :math:`G` for
two-way clustering).
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np
import scipy.linalg
import scipy.sparse

from levgap.errors import ModelError
from levgap.models.covariance import cluster_codes, influence_meat, psd_repair
from levgap.models.design import compress
from levgap.models.estimates import Estimates
from levgap.models.identify import IDENTIFIED_TOL
from levgap.models.linalg import cho_apply, solve

DF_CONVENTIONS = ("nested", "dummies")


def _demean(v: np.ndarray, firm: np.ndarray, counts: np.ndarray) -> np.ndarray:
    """``v`` minus its firm mean (columns of a 2-d ``v`` alike), in two passes for accuracy."""
    two = v.ndim == 2
    V = v if two else v[:, None]
    out = np.empty_like(V, dtype=float)
    for j in range(V.shape[1]):
        col = V[:, j].astype(float)
        for _ in range(2):
            col = col - (np.bincount(firm, weights=col, minlength=len(counts)) / counts)[firm]
        out[:, j] = col
    return out if two else out[:, 0]


def fit_within(
    y: np.ndarray,
    X: np.ndarray,
    *,
    firm: np.ndarray,
    year: np.ndarray | None = None,
    clusters: Sequence[np.ndarray] = (),
    names: Sequence[str] | None = None,
    df_convention: str = "nested",
) -> Estimates:
    """Least squares with absorbed firm (and year) effects; see the module docstring.

    Parameters
    ----------
    y : numpy.ndarray of shape (n,)
    X : numpy.ndarray of shape (n, k)
        Drivers (no constant: the firm effects hold it).
    firm : numpy.ndarray of shape (n,)
        Firm of each row (any labels).
    year : numpy.ndarray of shape (n,), optional
        Year of each row; absent: firm effects only.
    clusters : sequence of arrays, default=()
        ``()`` classical errors (:math:`s^2` over :math:`N - P` with every dummy counted),
        one array one-way clustered errors, two arrays two-way.
    names : sequence of str, optional
    df_convention : {"nested", "dummies"}, default="nested"
        What the small-sample factor counts (module docstring).

    Returns
    -------
    Estimates
        ``info`` holds the counts and the convention; ``columns`` is empty.

    Raises
    ------
    ModelError
        A driver constant within every firm (and year), collinear drivers, too few rows, or
        non-finite values.
    """
    if df_convention not in DF_CONVENTIONS:
        raise ModelError(f"df_convention must be one of {list(DF_CONVENTIONS)}; got "
                         f"{df_convention!r}.")
    y = np.asarray(y, dtype=float)
    X = np.asarray(X, dtype=float)
    if X.ndim == 1:
        X = X[:, None]
    n, k = X.shape
    names = tuple(names) if names is not None else tuple(f"x{j}" for j in range(k))
    if y.shape != (n,) or len(names) != k or k == 0:
        raise ModelError(f"y, X and names must agree and hold at least one driver; got {n} "
                         f"rows, {k} drivers, {len(names)} names.")
    if not (np.isfinite(y).all() and np.isfinite(X).all()):
        raise ModelError("the model's inputs must be finite; got NaN or infinite values.")
    f = cluster_codes(np.asarray(firm))
    counts = np.bincount(f).astype(float)
    F = len(counts)
    yt = _demean(y, f, counts)
    Xt = _demean(X, f, counts)
    if year is not None:
        t = compress(cluster_codes(np.asarray(year)))[1]
        T = int(t.max()) + 1
    else:
        t = np.zeros(n, dtype=np.intp)
        T = 1
    p_dummies = k + (T - 1) + F
    if n <= p_dummies:
        raise ModelError(f"the model needs more observations than parameters; got {n} "
                         f"observations for {p_dummies} parameters (firm effects included).")
    A, C_over_n = _normal_equations(Xt, f, t, counts, T)
    _check_identified(A, X, Xt, names, k)
    try:
        factor, d = solve(A)
    except (np.linalg.LinAlgError, scipy.linalg.LinAlgError):
        raise ModelError("the drivers must not be collinear once the firm and year effects "
                         "are absorbed; got a singular system. Drop one of them.") from None
    theta = cho_apply(factor, d, _rhs(Xt, yt, t, T))
    for _ in range(2):  # iterative refinement with residuals from the data
        r = _residual(yt, Xt, theta, f, t, counts, k, T)
        theta = theta + cho_apply(factor, d, _rhs(Xt, r, t, T))
    r = _residual(yt, Xt, theta, f, t, counts, k, T)
    rss = float(r @ r)
    beta = theta[:k]
    vcov, n_cl, df_inf, cov_type, notes = _covariance(
        factor, d, Xt, r, f, t, counts, k, T, clusters, n, p_dummies, rss, df_convention)
    tss = float(((y - y.mean()) ** 2).sum())
    tss_w = float(yt @ yt)
    info = {
        "df_convention": df_convention, "firms": F, "years": T,
        "parameters_with_dummies": p_dummies, "n_clusters": list(n_cl), "cov_type": cov_type,
        "r2_within": 1.0 - rss / tss_w if tss_w > 0 else float("nan"),
        "singleton_firms": int((counts == 1).sum()),
    }
    return Estimates(
        estimator="within", names=names, coef=beta, std_error=np.sqrt(np.diag(vcov)),
        df=np.full(k, float(df_inf)), n_obs=n, n_firms=F,
        r2=1.0 - rss / tss if tss > 0 else float("nan"), info=info, notes=notes)


def _normal_equations(Xt: np.ndarray, f: np.ndarray, t: np.ndarray, counts: np.ndarray,
                      T: int) -> tuple[np.ndarray, scipy.sparse.csr_matrix | None]:
    k = Xt.shape[1]
    P = k + T - 1
    A = np.zeros((P, P))
    A[:k, :k] = Xt.T @ Xt
    if T > 1:
        xd = np.stack([np.bincount(t, weights=Xt[:, j], minlength=T) for j in range(k)])
        A[:k, k:] = xd[:, 1:]
        A[k:, :k] = xd[:, 1:].T
        C = scipy.sparse.csr_matrix((np.ones(len(f)), (f, t)), shape=(len(counts), T))
        CtNC = (C.multiply(1.0 / counts[:, None]).T @ C).toarray()
        DD = np.diag(np.bincount(t, minlength=T).astype(float)) - CtNC
        A[k:, k:] = DD[1:, 1:]
        return A, C
    return A, None


def _rhs(Xt: np.ndarray, v: np.ndarray, t: np.ndarray, T: int) -> np.ndarray:
    """``[X~'v, D'v]`` for a firm-demeaned ``v`` (then ``D~'v = D'v``)."""
    out = Xt.T @ v
    if T > 1:
        out = np.concatenate([out, np.bincount(t, weights=v, minlength=T)[1:]])
    return out


def _year_part(gamma: np.ndarray, f: np.ndarray, t: np.ndarray, counts: np.ndarray
               ) -> np.ndarray:
    """``D~ gamma``: each row's year effect minus its firm's mean year effect."""
    g = np.concatenate([[0.0], gamma])[t]
    return g - (np.bincount(f, weights=g, minlength=len(counts)) / counts)[f]


def _residual(yt: np.ndarray, Xt: np.ndarray, theta: np.ndarray, f: np.ndarray,
              t: np.ndarray, counts: np.ndarray, k: int, T: int) -> np.ndarray:
    r = yt - Xt @ theta[:k]
    if T > 1:
        r -= _year_part(theta[k:], f, t, counts)
    return r


def _check_identified(A: np.ndarray, X: np.ndarray, Xt: np.ndarray, names: tuple[str, ...],
                      k: int) -> None:
    """Refuse a driver the firm (and year) effects absorb: little of its variance left."""
    spread = ((X - X.mean(axis=0)) ** 2).sum(axis=0)
    left = np.diag(A)[:k].copy()
    if A.shape[0] > k:  # the share left after the year block too (Schur complement)
        E = A[k:, k:]
        try:
            factor, d = solve(E)
            left = np.diag(A[:k, :k] - A[:k, k:] @ cho_apply(factor, d, A[k:, :k]))
        except (np.linalg.LinAlgError, scipy.linalg.LinAlgError):
            pass
    flat = spread <= 0
    absorbed = [names[j] for j in range(k)
                if flat[j] or left[j] < IDENTIFIED_TOL * spread[j]]
    if absorbed:
        raise ModelError(
            f"every driver must vary within firms; got {', '.join(absorbed)} constant within "
            "every firm (and year), which the firm effects absorb. Drop it from [model] "
            "drivers, or estimate without firm effects.")


def _covariance(factor: tuple, d: np.ndarray, Xt: np.ndarray, r: np.ndarray, f: np.ndarray,
                t: np.ndarray, counts: np.ndarray, k: int, T: int,
                clusters: Sequence[np.ndarray], n: int, p_dummies: int, rss: float,
                convention: str) -> tuple[np.ndarray, tuple[int, ...], int, str,
                                          tuple[str, ...]]:
    P = k + T - 1
    eye = np.zeros((P, k))
    eye[np.arange(k), np.arange(k)] = 1.0
    R = cho_apply(factor, d, eye).T  # first k rows of the inverse (k x P)
    if not clusters:
        vcov = rss / (n - p_dummies) * R[:, :k]
        return 0.5 * (vcov + vcov.T), (), n - p_dummies, "classical", ()
    if len(clusters) > 2:
        raise ModelError(f"clusters must have at most two dimensions; got {len(clusters)}.")
    # each row's influence on the slopes: R z~_i r_i, with the year part demeaned by firm
    U = Xt @ R[:, :k].T
    if T > 1:
        for j in range(k):
            U[:, j] += _year_part(R[j, k:], f, t, counts)
    U *= r[:, None]
    codes = [cluster_codes(np.asarray(c)) for c in clusters]
    if len(codes) == 2:
        both = codes[0].astype(np.int64) * (int(codes[1].max()) + 1) + codes[1]
        codes.append(cluster_codes(both))

    def p_for(c: np.ndarray) -> int:
        if convention == "dummies":
            return p_dummies
        nested = len(np.unique(c.astype(np.int64) * len(counts) + f)) == len(counts)
        return k + (T - 1) + 1 if nested else p_dummies

    parts, sizes = [], []
    for c in codes:
        v, g = influence_meat(U, c, n, p_for(c))
        parts.append(v)
        sizes.append(g)
    notes: tuple[str, ...] = ()
    if len(parts) == 1:
        vcov, n_cl, cov_type = parts[0], (sizes[0],), "cluster"
    else:
        vcov, notes = psd_repair(parts[0] + parts[1] - parts[2])
        n_cl, cov_type = (sizes[0], sizes[1]), "cluster2"
    df = min(n_cl) - 1
    if df < 1:
        raise ModelError(f"clustered errors need at least two clusters; got {min(n_cl)}.")
    return 0.5 * (vcov + vcov.T), n_cl, df, cov_type, notes
