r"""Linear model with absorbed fixed effects and cluster-robust covariance.

Estimating equation, for observation :math:`i` in levels :math:`g_1(i), \dots, g_m(i)` of
``m`` fixed-effect factors (industry and fiscal year in levgap):

.. math:: y_i = c + x_i'\beta + \sum_{j=1}^{m} \alpha_{j, g_j(i)} + e_i,

with the first level of each factor as its reference (:math:`\alpha_{j,0} = 0`), so that the
coefficients equal ordinary least squares on explicit dummy columns (``y ~ x + C(f1) + C(f2)``).

The normal equations are built from group sums (``np.bincount``) instead of a dense dummy
matrix: the cost is :math:`O(N K^2)` for the driver block plus :math:`O(N K)` per factor, and
memory stays at a few copies of the driver matrix, so a million firm-years fit in well under a
second on two cores.

Covariance conventions
----------------------
- ``classical``: :math:`s^2 (Z'Z)^{-1}` with :math:`s^2 = e'e / (N - P)`, where :math:`P` counts
  the constant, the drivers and every non-reference level of every factor.
- one-way cluster: :math:`\frac{G}{G-1} \frac{N-1}{N-P} (Z'Z)^{-1} \big(\sum_g s_g s_g'\big)
  (Z'Z)^{-1}` with :math:`s_g = \sum_{i \in g} z_i e_i`: Stata's small-sample factor, the one
  behind Petersen (2009)'s published test-data figures, and statsmodels' default for
  ``cov_type="cluster"``.
- two-way cluster (firm and year): :math:`V_{firm} + V_{year} - V_{firm \cap year}`, each of
  the three built as above with its own factor (its own :math:`G`). This is the convention of
  Petersen's published two-way figures and of Thompson (2011); other libraries apply one
  common factor instead and differ by up to a few per cent.

Inference on a clustered covariance uses Student's t with :math:`G - 1` degrees of freedom
(the smallest :math:`G` for two-way); classical inference uses :math:`N - P`.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
import scipy.linalg
from scipy import special

from levgap.errors import ModelError


@dataclass(frozen=True, slots=True)
class Borrow:
    """Observations of one factor that take a parent group's effect.

    Parameters
    ----------
    parent : numpy.ndarray of int, shape (n,)
        Parent-group id of each observation, ``-1`` for observations with a level of their own.
    members : numpy.ndarray of bool, shape (n_parents, n_levels)
        ``members[p, l]`` is true when level ``l`` belongs to parent group ``p``.
    """

    parent: np.ndarray
    members: np.ndarray


@dataclass(frozen=True, slots=True)
class LinearFit:
    """Result of :func:`fit_linear`.

    Parameters
    ----------
    names : tuple of str
        Names of the reported terms: ``const`` then the regressors.
    coef : numpy.ndarray
        Estimates of the reported terms.
    vcov : numpy.ndarray or None
        Their covariance matrix (``None`` when not requested).
    effects : tuple of numpy.ndarray
        For each factor, the estimated effect of every level code ``0 .. n_levels - 1``
        (reference level, the first present, is 0; levels absent from the fit are NaN).
    effect_weights : tuple of numpy.ndarray
        Observation counts of each level in the fit (borrowing observations not counted); they
        weight the average effect given to borrowing observations and to unseen levels.
    n_obs, n_params : int
        Observations and estimated parameters (constant, regressors, factor levels).
    n_clusters : tuple of int
        Clusters in each clustering dimension (empty for classical errors).
    df_inference : int
        Degrees of freedom of the t distribution used for p-values and intervals.
    r2 : float
        Centred R² of the full model (fixed effects included).
    rss : float
        Residual sum of squares.
    cov_type : str
        ``classical``, ``cluster`` or ``cluster2``.
    """

    names: tuple[str, ...]
    coef: np.ndarray
    vcov: np.ndarray | None
    effects: tuple[np.ndarray, ...]
    effect_weights: tuple[np.ndarray, ...]
    n_obs: int
    n_params: int
    n_clusters: tuple[int, ...]
    df_inference: int
    r2: float
    rss: float
    cov_type: str

    @property
    def std_error(self) -> np.ndarray:
        """Standard errors of the reported terms."""
        if self.vcov is None:
            raise ModelError("standard errors were not computed for this fit; pass cov=True.")
        return np.sqrt(np.diag(self.vcov))

    def effect_of(
        self, j: int, codes: np.ndarray, borrow: Borrow | None = None
    ) -> np.ndarray:
        """Effect of factor ``j`` for each observation.

        A level the fit never saw, and an observation that borrows from a parent group, take
        the observation-weighted mean of the fitted effects of the parent's members (or of all
        levels of the factor).
        """
        alpha, weight = self.effects[j], self.effect_weights[j]
        codes = np.asarray(codes)
        known = ~np.isnan(alpha)
        filled = np.where(known, alpha, 0.0)
        w = np.where(known, weight, 0.0)
        overall = float(filled @ w / w.sum())
        inside = (codes >= 0) & (codes < len(filled))
        known_row = inside & known[np.clip(codes, 0, len(filled) - 1)]
        out = np.where(known_row, filled[np.clip(codes, 0, len(filled) - 1)], overall)
        if borrow is not None:
            parent_value = _parent_means(borrow.members, filled, w, overall)
            rows = borrow.parent >= 0
            out[rows] = parent_value[borrow.parent[rows]]
        return out

    def predict(
        self,
        X: np.ndarray,
        effects: Sequence[np.ndarray] = (),
        borrow: Sequence[Borrow | None] | None = None,
    ) -> np.ndarray:
        """Fitted values for regressors ``X`` and factor level codes ``effects``."""
        X = np.asarray(X, dtype=float)
        out = self.coef[0] + X @ self.coef[1:]
        for j, codes in enumerate(effects):
            out = out + self.effect_of(j, codes, borrow[j] if borrow else None)
        return out

    def tidy(self, coverage: float = 0.95) -> dict[str, np.ndarray]:
        """Estimates, standard errors, t statistics, p-values and intervals as arrays."""
        se = self.std_error
        t = self.coef / se
        # Student's t through scipy.special (what scipy.stats.t calls: the same numbers),
        # sparing every run the import of scipy.stats (about a second on two cores).
        p = 2.0 * special.stdtr(self.df_inference, -np.abs(t))
        q = special.stdtrit(self.df_inference, 0.5 + coverage / 2.0)
        return {
            "term": np.array(self.names, dtype=object),
            "estimate": self.coef,
            "std_error": se,
            "t_stat": t,
            "p_value": p,
            "ci_low": self.coef - q * se,
            "ci_high": self.coef + q * se,
        }


def _parent_means(
    members: np.ndarray, values: np.ndarray, weights: np.ndarray, overall: float
) -> np.ndarray:
    mw = members[:, : len(weights)] * weights[None, : members.shape[1]]
    total = mw.sum(axis=1)
    with np.errstate(invalid="ignore", divide="ignore"):
        means = (mw @ values[: members.shape[1]]) / total
    return np.where(total > 0, means, overall)


def fit_linear(
    y: np.ndarray,
    X: np.ndarray,
    *,
    effects: Sequence[np.ndarray] = (),
    clusters: Sequence[np.ndarray] = (),
    names: Sequence[str] | None = None,
    n_levels: Sequence[int] | None = None,
    borrow: Sequence[Borrow | None] | None = None,
    cov: bool = True,
) -> LinearFit:
    """Least squares with a constant, regressors ``X`` and absorbed fixed effects.

    Parameters
    ----------
    y : numpy.ndarray of shape (n,)
        Dependent variable.
    X : numpy.ndarray of shape (n, k)
        Regressors (without a constant; one is added).
    effects : sequence of integer arrays of shape (n,), default=()
        Level codes (``>= 0``) of each fixed-effect factor; codes need not be contiguous.
        ``-1`` marks an observation that borrows its effect (see ``borrow``).
    clusters : sequence of arrays of shape (n,), default=()
        ``()`` gives classical errors, one array one-way clustered errors, two arrays two-way
        clustered errors (see the module docstring for the conventions).
    names : sequence of str, optional
        Names of the columns of ``X``; default ``x0, x1, ...``.
    n_levels : sequence of int, optional
        Number of level codes of each factor, so that the result's ``effects`` cover codes the
        fit did not see; default ``max(code) + 1``.
    borrow : sequence of Borrow or None, optional
        Per factor, which observations borrow their effect from a parent group instead of
        having a level of their own. A borrowing observation's effect is the
        observation-weighted mean of the effects of the parent's member levels present in the
        fit (or of all levels when none is present): its row of the design holds those
        weights instead of a dummy, so the model stays linear and exact.
    cov : bool, default=True
        Whether to compute the covariance matrix (cross-fit folds skip it).

    Returns
    -------
    LinearFit

    Raises
    ------
    ModelError
        Too few observations, non-finite values, or regressors without variation.
    """
    y = np.asarray(y, dtype=float)
    X = np.asarray(X, dtype=float)
    if X.ndim == 1:
        X = X[:, None]
    n, k = X.shape
    if y.shape != (n,):
        raise ModelError(f"y must have {n} values to match X; got shape {y.shape}.")
    if not (np.isfinite(y).all() and np.isfinite(X).all()):
        raise ModelError("the model's inputs must be finite; got NaN or infinite values.")
    names = tuple(names) if names is not None else tuple(f"x{j}" for j in range(k))
    if len(names) != k:
        raise ModelError(f"names must have {k} entries; got {len(names)}.")
    if len(clusters) > 2:
        raise ModelError(f"clusters must have at most two dimensions; got {len(clusters)}.")
    borrow = list(borrow) if borrow is not None else [None] * len(effects)
    if len(borrow) != len(effects):
        raise ModelError("borrow must have one entry per factor.")

    # Rows that borrow in any factor get a dense design row; all others go through group sums.
    dense = np.zeros(n, dtype=bool)
    for codes, b in zip(effects, borrow, strict=True):
        codes = np.asarray(codes)
        if codes.shape != (n,):
            raise ModelError("effect codes must be integers, one per observation.")
        neg = codes < 0
        if b is not None:
            if not np.array_equal(neg, np.asarray(b.parent) >= 0):
                raise ModelError("borrowing observations must have effect code -1 and a parent.")
            dense |= neg
        elif neg.any():
            raise ModelError("effect codes must be non-negative unless they borrow.")
    sparse = ~dense

    # Compress each factor to the levels present among own-level rows; the first is reference.
    local: list[np.ndarray] = []
    present: list[np.ndarray] = []
    for codes in effects:
        levels, inv = _compress(np.asarray(codes))
        present.append(levels)
        local.append(inv)
    sizes = [len(lv) for lv in present]
    if any(s == 0 for s in sizes):
        raise ModelError("every fixed-effect factor needs at least one level of its own.")
    p = 1 + k + sum(s - 1 for s in sizes)
    if n <= p:
        raise ModelError(
            f"the model needs more observations than parameters; got {n} observations for "
            f"{p} parameters."
        )
    totals = [
        int(n_levels[j]) if n_levels is not None else int(present[j].max()) + 1
        for j in range(len(effects))
    ]
    counts = [np.bincount(inv[inv >= 0], minlength=s).astype(float)
              for inv, s in zip(local, sizes, strict=True)]

    W = np.empty((n, k + 1))
    W[:, 0] = 1.0
    W[:, 1:] = X
    any_dense = bool(dense.any())
    # Without borrowing rows, use the full arrays rather than boolean-mask copies of them.
    ws, ys = (W[sparse], y[sparse]) if any_dense else (W, y)
    A, b_vec = _normal_equations(ws, ys, [inv[sparse] for inv in local] if any_dense else local,
                                 sizes)
    Zd = None
    if dense.any():
        Zd = _dense_rows(W[dense], [inv[dense] for inv in local], sizes, present, borrow,
                         dense, counts)
        A += Zd.T @ Zd
        b_vec += Zd.T @ y[dense]
    theta, A_inv_rows = _solve(A, b_vec, k + 1)

    alphas = []
    offset = k + 1
    for size in sizes:
        alphas.append(np.concatenate([[0.0], theta[offset : offset + size - 1]]))
        offset += size - 1
    fitted = W @ theta[: k + 1]
    for inv, alpha in zip(local, alphas, strict=True):
        if any_dense:
            fitted[sparse] += alpha[inv[sparse]]
        else:
            fitted += alpha[inv]
    if Zd is not None:
        fitted[dense] = Zd @ theta
    resid = y - fitted
    rss = float(resid @ resid)
    tss = float(((y - y.mean()) ** 2).sum())
    r2 = 1.0 - rss / tss if tss > 0 else float("nan")

    full_effects: list[np.ndarray] = []
    full_weights: list[np.ndarray] = []
    for levels, alpha, cnt, total in zip(present, alphas, counts, totals, strict=True):
        e = np.full(total, np.nan)
        e[levels] = alpha
        w = np.zeros(total)
        w[levels] = cnt
        full_effects.append(e)
        full_weights.append(w)

    vcov = None
    n_clusters: tuple[int, ...] = ()
    df_inf = n - p
    cov_type = "classical"
    if cov:
        if not clusters:
            vcov = (rss / (n - p)) * A_inv_rows[:, : k + 1]
        else:
            # Influence of each observation on the reported terms: z_i' (Z'Z)^-1 e_i.
            U = W @ A_inv_rows[:, : k + 1].T
            offset = k + 1
            for inv, size in zip(local, sizes, strict=True):
                block = np.zeros((size, k + 1))
                block[1:] = A_inv_rows[:, offset : offset + size - 1].T
                if any_dense:
                    U[sparse] += block[inv[sparse]]
                else:
                    U += block[inv]
                offset += size - 1
            if Zd is not None:
                U[dense] = Zd @ A_inv_rows.T
            U *= resid[:, None]
            codes = [_compress(np.asarray(c))[1] if np.issubdtype(np.asarray(c).dtype,
                                                                  np.integer)
                     else np.unique(np.asarray(c), return_inverse=True)[1] for c in clusters]
            if len(codes) == 1:
                vcov, g = _cluster_meat(U, codes[0], n, p)
                n_clusters = (g,)
                cov_type = "cluster"
            else:
                v1, g1 = _cluster_meat(U, codes[0], n, p)
                v2, g2 = _cluster_meat(U, codes[1], n, p)
                both = np.unique(
                    codes[0].astype(np.int64) * (int(codes[1].max()) + 1) + codes[1],
                    return_inverse=True,
                )[1]
                v12, _ = _cluster_meat(U, both, n, p)
                vcov = v1 + v2 - v12
                n_clusters = (g1, g2)
                cov_type = "cluster2"
            df_inf = min(n_clusters) - 1
            if df_inf < 1:
                raise ModelError(
                    f"clustered errors need at least two clusters; got {min(n_clusters)}."
                )
    return LinearFit(
        names=("const", *names),
        coef=theta[: k + 1].copy(),
        vcov=vcov,
        effects=tuple(full_effects),
        effect_weights=tuple(full_weights),
        n_obs=n,
        n_params=p,
        n_clusters=n_clusters,
        df_inference=df_inf,
        r2=r2,
        rss=rss,
        cov_type=cov_type,
    )


def _compress(codes: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Levels present among non-negative codes, and each row's position among them (-1 else).

    Linear in the number of rows (a count per code) rather than a sort, which matters when
    the same factor is compressed for every cross-fit fold.
    """
    own = codes >= 0
    if not own.any():
        return np.empty(0, dtype=np.int64), np.full(len(codes), -1, dtype=np.intp)
    top = int(codes.max()) + 1
    if top > 4 * len(codes) + 1024:  # sparse, huge codes: sorting is cheaper than a table
        levels, inverse = np.unique(codes[own], return_inverse=True)
        inv = np.full(len(codes), -1, dtype=np.intp)
        inv[own] = inverse
        return levels, inv
    counts = np.bincount(codes[own], minlength=top)
    levels = np.flatnonzero(counts)
    lookup = np.full(top, -1, dtype=np.intp)
    lookup[levels] = np.arange(len(levels))
    inv = np.where(own, lookup[np.where(own, codes, 0)], -1)
    return levels, inv


def _dense_rows(
    Wd: np.ndarray,
    local: list[np.ndarray],
    sizes: list[int],
    present: list[np.ndarray],
    borrow: list[Borrow | None],
    dense: np.ndarray,
    counts: list[np.ndarray],
) -> np.ndarray:
    """Full design rows (constant, regressors, every factor's columns) of borrowing rows."""
    blocks = [Wd]
    for inv, size, levels, b, cnt in zip(local, sizes, present, borrow, counts, strict=True):
        block = np.zeros((len(Wd), size))
        own = inv >= 0
        block[np.flatnonzero(own), inv[own]] = 1.0
        if b is not None:
            rows = ~own
            parent = np.asarray(b.parent)[dense][rows]
            members = np.asarray(b.members)
            mw = np.zeros((members.shape[0], size))
            inside = levels < members.shape[1]
            mw[:, inside] = members[:, levels[inside]] * cnt[None, inside]
            total = mw.sum(axis=1, keepdims=True)
            mix = np.where(total > 0, mw / np.where(total > 0, total, 1.0), cnt / cnt.sum())
            block[rows] = mix[parent]
        blocks.append(block[:, 1:])
    return np.hstack(blocks)


def _normal_equations(
    W: np.ndarray, y: np.ndarray, local: list[np.ndarray], sizes: list[int]
) -> tuple[np.ndarray, np.ndarray]:
    kw = W.shape[1]
    p = kw + sum(s - 1 for s in sizes)
    A = np.zeros((p, p))
    b = np.zeros(p)
    A[:kw, :kw] = W.T @ W
    b[:kw] = W.T @ y
    starts = []
    offset = kw
    for inv, size in zip(local, sizes, strict=True):
        sl = slice(offset, offset + size - 1)
        counts = np.bincount(inv, minlength=size).astype(float)
        A[sl, sl] = np.diag(counts[1:])
        sums = np.stack([np.bincount(inv, weights=W[:, c], minlength=size) for c in range(kw)])
        A[:kw, sl] = sums[:, 1:]
        A[sl, :kw] = sums[:, 1:].T
        b[sl] = np.bincount(inv, weights=y, minlength=size)[1:]
        starts.append(offset)
        offset += size - 1
    for a in range(len(local)):
        for c in range(a + 1, len(local)):
            cross = np.bincount(
                local[a] * sizes[c] + local[c], minlength=sizes[a] * sizes[c]
            ).reshape(sizes[a], sizes[c])[1:, 1:]
            sa = slice(starts[a], starts[a] + sizes[a] - 1)
            sc = slice(starts[c], starts[c] + sizes[c] - 1)
            A[sa, sc] = cross
            A[sc, sa] = cross.T
    return A, b


def _solve(A: np.ndarray, b: np.ndarray, n_rows: int) -> tuple[np.ndarray, np.ndarray]:
    """Solve the normal equations; also return the first ``n_rows`` rows of the inverse."""
    # Scale to unit diagonal so the Cholesky test of rank is not fooled by units.
    d = np.sqrt(np.diag(A))
    if np.any(d == 0):
        raise ModelError("a regressor or fixed-effect level has no observations or is all zero.")
    As = A / np.outer(d, d)
    try:
        factor = scipy.linalg.cho_factor(As, lower=False, check_finite=False)
        rcond = 1.0 / np.linalg.cond(As, 1) if As.shape[0] < 400 else None
    except (np.linalg.LinAlgError, scipy.linalg.LinAlgError):
        factor, rcond = None, 0.0
    if factor is None or (rcond is not None and rcond < 1e-12):
        raise ModelError(
            "the drivers are collinear with each other or with the industry and year effects "
            "(for example a driver that is constant, or identical within every industry); "
            "drop that driver or widen the panel."
        )
    theta = scipy.linalg.cho_solve(factor, b / d, check_finite=False) / d
    eye = np.zeros((A.shape[0], n_rows))
    eye[np.arange(n_rows), np.arange(n_rows)] = 1.0
    rows = (scipy.linalg.cho_solve(factor, eye, check_finite=False) / d[:, None] / d[:n_rows]).T
    return theta, rows


def _cluster_meat(U: np.ndarray, codes: np.ndarray, n: int, p: int) -> tuple[np.ndarray, int]:
    g = int(codes.max()) + 1
    S = np.stack([np.bincount(codes, weights=U[:, c], minlength=g) for c in range(U.shape[1])],
                 axis=1)
    factor = g / (g - 1) * (n - 1) / (n - p) if g > 1 else np.nan
    return factor * (S.T @ S), g
