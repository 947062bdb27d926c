r"""Sandwich covariances shared by every model.

With :math:`A` the (penalised) Hessian of the fit and :math:`s_i = z_i e_i` the score of row
:math:`i` (:math:`e_i = y_i - \hat y_i` on the response scale; for least squares the residual),
each row's influence on the reported terms is :math:`u_i = (A^{-1})_{r\cdot} z_i e_i`.

- one-way cluster: :math:`\frac{G}{G-1} \frac{N-1}{N-P} \sum_g u_g u_g'` with
  :math:`u_g = \sum_{i \in g} u_i`: Stata's small-sample factor, the one behind Petersen
  (2009)'s published test-data figures, and statsmodels' default for ``cov_type="cluster"``
  (OLS and GLM alike).
- two-way (firm and year): :math:`V_{firm} + V_{year} - V_{firm \cap year}`, each built as
  above with its own :math:`G` (Cameron, Gelbach and Miller 2011; Thompson 2011; Petersen's
  published two-way figures). A result that is not positive semi-definite is repaired by
  setting its negative eigenvalues to zero (Cameron, Gelbach and Miller 2011, section 2.3),
  with a note.
- no clusters: each row its own cluster without a factor (HC0), the convention of the
  published reference values for the fractional logit.
"""

from __future__ import annotations

from collections.abc import Callable, Sequence
from dataclasses import dataclass

import numpy as np

from levgap.errors import ModelError
from levgap.models.design import compress


@dataclass(frozen=True, slots=True)
class Sandwich:
    """A covariance matrix and what it rests on."""

    vcov: np.ndarray
    n_clusters: tuple[int, ...]
    df_inference: int
    cov_type: str
    notes: tuple[str, ...] = ()


def cluster_codes(c: np.ndarray) -> np.ndarray:
    """Dense codes ``0 .. G-1`` of a cluster array of any type."""
    c = np.asarray(c)
    if np.issubdtype(c.dtype, np.integer) and (c.size == 0 or c.min() >= 0):
        return compress(c)[1]
    return np.unique(c, return_inverse=True)[1]


Sums = Callable[[Sequence[np.ndarray]], list[np.ndarray]]
"""``sums(codes)``: the influences summed within each cluster, one ``(G, m)`` array per code
array; with no codes, ``[sum_i u_i u_i']`` (``levgap.models.design.Design.cluster_sums``)."""


def meat(S: np.ndarray, n: int, p: int) -> tuple[np.ndarray, int]:
    """Clustered outer product of the cluster sums ``S`` (G x m) with Stata's factor."""
    g = S.shape[0]
    factor = g / (g - 1) * (n - 1) / (n - p) if g > 1 and n > p else np.nan
    return factor * (S.T @ S), g


def influence_meat(U: np.ndarray, codes: np.ndarray, n: int, p: int) -> tuple[np.ndarray, int]:
    """:func:`meat` from row influences ``U`` (n x m): their sums within each cluster of
    ``codes`` (for estimators that hold the influences, e.g. ``models.within``)."""
    g = int(codes.max()) + 1
    S = np.stack([np.bincount(codes, weights=U[:, c], minlength=g) for c in range(U.shape[1])],
                 axis=1)
    return meat(S, n, p)


def sandwich(sums: Sums, clusters: Sequence[np.ndarray], n: int, n_params: int) -> Sandwich:
    r"""Covariance of the reported terms from the rows' influences.

    Parameters
    ----------
    sums : callable
        ``sums(codes)`` sums the influences :math:`(A^{-1})_{r\cdot} z_i e_i` within each
        cluster of each code array (see :data:`Sums`).
    clusters : sequence of arrays
        ``()`` (HC0), one array (one-way) or two arrays (two-way).
    n : int
        Observations.
    n_params : int
        Parameters of the fit, for the factor :math:`(N-1)/(N-P)`.
    """
    if len(clusters) > 2:
        raise ModelError(f"clusters must have at most two dimensions; got {len(clusters)}.")
    if not clusters:
        return Sandwich(sums(())[0], (), n - n_params, "robust")
    codes = [cluster_codes(c) for c in clusters]
    if len(codes) == 1:
        v, g = meat(sums(codes)[0], n, n_params)
        n_cl: tuple[int, ...] = (g,)
        cov_type, notes = "cluster", ()
    else:
        both = cluster_codes(codes[0].astype(np.int64) * (int(codes[1].max()) + 1) + codes[1])
        s1, s2, s12 = sums([*codes, both])
        v1, g1 = meat(s1, n, n_params)
        v2, g2 = meat(s2, n, n_params)
        v12, _ = meat(s12, n, n_params)
        v, notes = psd_repair(v1 + v2 - v12)
        n_cl, cov_type = (g1, g2), "cluster2"
    df = min(n_cl) - 1
    if df < 1:
        raise ModelError(f"clustered errors need at least two clusters; got {min(n_cl)}.")
    return Sandwich(v, n_cl, df, cov_type, notes)


def psd_repair(v: np.ndarray) -> tuple[np.ndarray, tuple[str, ...]]:
    """Set negative eigenvalues of a symmetric matrix to zero, saying so when it happens."""
    v = 0.5 * (v + v.T)
    vals, vecs = np.linalg.eigh(v)
    tol = 1e-12 * max(float(np.abs(vals).max()), np.finfo(float).tiny)
    if (vals >= -tol).all():
        return v, ()
    fixed = (vecs * np.clip(vals, 0.0, None)) @ vecs.T
    note = (f"the two-way covariance had {int((vals < -tol).sum())} negative eigenvalue(s); "
            "they were set to zero (Cameron, Gelbach and Miller 2011)")
    return fixed, (note,)
