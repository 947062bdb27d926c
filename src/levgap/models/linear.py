r"""Linear model with absorbed fixed effects and cluster-robust covariance (``--model linear``).

Estimating equation, for observation :math:`i` in levels :math:`g_1(i), \dots, g_m(i)` of
``m`` fixed-effect factors (industry and fiscal year in levgap):

.. math:: y_i = c + x_i'\beta + \sum_{j=1}^{m} \alpha_{j, g_j(i)} + u_{s(i)} + e_i,

with the first level of each factor as its reference (:math:`\alpha_{j,0} = 0`), so that the
coefficients equal ordinary least squares on explicit dummy columns (``y ~ x + C(f1) + C(f2)``)
when no level is pooled. A small industry's rows take its parent group's average effect plus
an own deviation :math:`u_s` shrunk by a ridge penalty (``levgap.models.pooling``).

The normal equations are built from group sums (``levgap.models.design``), never from a dense
dummy matrix, solved by Cholesky and refined twice with residuals computed from the data.

Covariance conventions (``levgap.models.covariance``)
-----------------------------------------------------
- ``classical`` (no clusters): :math:`s^2 (Z'Z)^{-1}` with :math:`s^2 = e'e / (N - P)`,
  :math:`P` counting the constant, the drivers, every non-reference level and every pooled
  deviation.
- one-way cluster: Stata's factor :math:`\frac{G}{G-1}\frac{N-1}{N-P}`, the convention of
  Petersen (2009)'s published test-data figures and of statsmodels' ``cov_type="cluster"``.
- two-way: :math:`V_{firm} + V_{year} - V_{firm \cap year}`, each with its own factor (the
  convention of Petersen's published two-way figures and of Thompson 2011; statsmodels'
  two-way option applies the same per-component factor).

Inference on a clustered covariance uses Student's t with :math:`G - 1` degrees of freedom
(the smallest :math:`G` for two-way); classical inference uses :math:`N - P`.
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np

from levgap.models.assemble import factorise, make_fit, prepare, refine
from levgap.models.design import Pooling
from levgap.models.identify import check_identified, suspicious
from levgap.models.linalg import cho_apply
from levgap.models.result import Fit


def fit_linear(
    y: np.ndarray,
    X: np.ndarray,
    *,
    effects: Sequence[np.ndarray] = (),
    clusters: Sequence[np.ndarray] = (),
    names: Sequence[str] | None = None,
    n_levels: Sequence[int] | None = None,
    pooling: Pooling | None = None,
    cov: bool = True,
    check: bool | None = None,
    start: np.ndarray | None = None,
) -> Fit:
    """Least squares with a constant, drivers ``X`` and absorbed fixed effects.

    Parameters
    ----------
    y : numpy.ndarray of shape (n,)
        Dependent variable.
    X : numpy.ndarray of shape (n, k)
        Drivers (without a constant; one is added).
    effects : sequence of integer arrays of shape (n,), default=()
        Level codes (``>= 0``) of each fixed-effect factor; codes need not be contiguous.
    clusters : sequence of arrays of shape (n,), default=()
        ``()`` gives classical errors, one array one-way clustered errors, two arrays two-way
        clustered errors (see the module docstring for the conventions).
    names : sequence of str, optional
        Names of the columns of ``X``; default ``x0, x1, ...``.
    n_levels : sequence of int, optional
        Number of level codes of each factor, so that the result's ``effects`` cover codes the
        fit did not see; default ``max(code) + 1``.
    pooling : Pooling, optional
        Small levels of the first factor, pooled toward their parent group.
    cov : bool, default=True
        Whether to compute the covariance matrix (cross-fit folds skip it).
    check : bool, optional
        Whether to test that every driver is identified (default: when ``cov``).
    start : numpy.ndarray, optional
        Ignored (least squares needs no starting values); accepted so that every model takes
        the same arguments.

    Returns
    -------
    Fit

    Raises
    ------
    ModelError
        Too few observations, non-finite values, or drivers without variation of their own.
    """
    y, design, names, totals = prepare(y, X, effects, names, n_levels, pooling)
    check = cov if check is None else check
    A, zy = design.normal_equations(None, y)
    if check and (suspicious(A, design.k) or len(design.flat(A))):
        check_identified(design, names)
    factor, d = factorise(design, A, names, check)
    theta = cho_apply(factor, d, zy)
    theta = refine(design, factor, d, theta, y)
    fitted = design.matvec(theta)
    resid = y - fitted
    rss = float(resid @ resid)
    n_params = design.layout.n_params
    return make_fit(
        model="linear", link="identity", design=design, theta=theta, factor=factor, d=d,
        scores=resid, fitted=fitted, y=y, names=names, totals=totals, clusters=clusters,
        cov=cov, deviance=rss, iterations=1,
        classical_scale=rss / (design.n - n_params) if design.n > n_params else np.nan,
    )
