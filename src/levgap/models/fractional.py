r"""Fractional logit with absorbed fixed effects (``--model fractional``, the default for targets).

Papke and Wooldridge (1996, Journal of Applied Econometrics 11(6)) model a ratio
:math:`y_i \in [0, 1]` by its conditional mean

.. math:: E[y_i \mid x_i] = \Lambda(\eta_i), \qquad
          \eta_i = c + x_i'\beta + \sum_j \alpha_{j, g_j(i)} + u_{s(i)},

with :math:`\Lambda` the logistic function, estimated by maximising the Bernoulli
quasi-log-likelihood :math:`\sum_i y_i \log \Lambda(\eta_i) + (1 - y_i)\log(1 - \Lambda(\eta_i))`
(minus the pooling penalty :math:`\sum_s \lambda_s u_s^2 / 2`). The estimator is consistent
whenever the mean is right, whatever the distribution of :math:`y` (many firms at zero debt
included), and every target lies in :math:`(0, 1)`. The score equations make the mean fitted
value equal the mean of :math:`y` (with a constant and no penalty).

Solved by Newton's method (the canonical link makes it IRLS) on the group-sum normal equations
of ``levgap.models.design``: each step solves :math:`(Z'WZ + \Lambda)\delta = Z'(y - \mu) -
\Lambda\theta` with :math:`W = \mu(1 - \mu)`, halving a step that would lower the penalised
quasi-likelihood; the fit stops when no fitted value moves by more than 1e-12. A warm start
(``start``, a linear predictor per row) saves iterations in the cross-fit folds.

Covariance (``levgap.models.covariance``): the sandwich :math:`A^{-1} B A^{-1}` with
:math:`A = Z'WZ + \Lambda` and scores :math:`z_i (y_i - \mu_i)`; clustered with the same
conventions as the linear model (Stata's factor per dimension, two-way as three one-way
terms); without clusters, HC0 (the convention of the published reference values).
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np

from levgap.errors import ModelError
from levgap.models.assemble import factorise, make_fit, prepare
from levgap.models.design import Design, Pooling
from levgap.models.identify import check_identified, suspicious
from levgap.models.linalg import cho_apply
from levgap.models.result import INVERSE_LINKS, Fit

MAX_ITER = 100
TOL_MU = 1e-12


def quasi_deviance(y: np.ndarray, mu: np.ndarray) -> float:
    """Twice the Bernoulli quasi-log-likelihood ratio of the saturated model."""
    with np.errstate(divide="ignore", invalid="ignore"):
        own = np.where(y > 0, y * np.log(y / mu), 0.0)
        other = np.where(y < 1, (1 - y) * np.log((1 - y) / (1 - mu)), 0.0)
    return float(2.0 * (own + other).sum())


def _objective(design: Design, theta: np.ndarray, y: np.ndarray
               ) -> tuple[float, np.ndarray, np.ndarray]:
    """Penalised negative quasi-log-likelihood, linear predictor and mean at ``theta``.

    ``log(1 + e^eta)`` and the logistic mean share one exponential, ``exp(-|eta|)``, so that
    neither overflows."""
    eta = design.matvec(theta)
    e = np.abs(eta)
    total_abs = float(e.sum())
    np.negative(e, out=e)
    np.exp(e, out=e)
    softplus = float(np.log1p(e).sum()) + 0.5 * (float(eta.sum()) + total_abs)
    nll = softplus - float(y @ eta)
    r = e + 1.0
    np.reciprocal(r, out=r)
    np.multiply(e, r, out=e)
    mu = np.where(eta >= 0.0, r, e)
    return nll + 0.5 * float(design.penalty @ (theta * theta)), eta, mu


def fit_fractional(
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
    """Bernoulli quasi-likelihood logit of a ratio on drivers with absorbed fixed effects.

    Parameters
    ----------
    y : numpy.ndarray of shape (n,)
        Ratios in [0, 1].
    X, effects, clusters, names, n_levels, pooling, cov, check
        As for :func:`levgap.models.linear.fit_linear`.
    start : numpy.ndarray of shape (n,), optional
        A linear predictor to start from (e.g. a full-sample fit's, in a cross-fit fold).

    Returns
    -------
    Fit

    Raises
    ------
    ModelError
        Ratios outside [0, 1], no variation, drivers that are not identified, or no
        convergence.
    """
    y, design, names, totals = prepare(y, X, effects, names, n_levels, pooling)
    if y.size and (y.min() < 0.0 or y.max() > 1.0):
        raise ModelError(
            f"the fractional model needs ratios between 0 and 1; got values from {y.min():.4g} "
            f"to {y.max():.4g}. Use --model linear for other outcomes."
        )
    ybar = float(y.mean())
    if ybar <= 0.0 or ybar >= 1.0:
        raise ModelError(
            f"the fractional model needs some variation in the ratio; got every value equal to "
            f"{ybar:g}."
        )
    check = cov if check is None else check
    if check and (len(design.flat(A0 := design.gram())) or suspicious(A0, design.k)):
        check_identified(design, names)
    theta = np.zeros(design.layout.n_params)
    if start is not None:
        # One weighted least-squares step on the working response from the given predictor.
        eta = np.asarray(start, dtype=float)
        mu = INVERSE_LINKS["logit"](eta)
        w = np.maximum(mu * (1.0 - mu), 1e-300)
        A, g = design.normal_equations(w, w * eta + (y - mu))
        factor, d = factorise(design, A, names, check)
        theta = cho_apply(factor, d, g)
    else:
        theta[0] = np.log(ybar / (1.0 - ybar))
    value, eta, mu = _objective(design, theta, y)
    for iteration in range(1, MAX_ITER + 1):  # noqa: B007 (the count is reported)
        w = mu * (1.0 - mu)
        A, g = design.normal_equations(w, y - mu)
        factor, d = factorise(design, A, names, check)
        step = cho_apply(factor, d, g - design.penalty * theta)
        for _ in range(40):  # step halving keeps every iteration an improvement
            new_value, new_eta, new_mu = _objective(design, theta + step, y)
            if new_value <= value + 1e-12 * abs(value):
                break
            step = 0.5 * step
        theta, value, eta = theta + step, new_value, new_eta
        moved = float(np.abs(new_mu - mu).max()) if len(mu) else 0.0
        mu = new_mu
        if moved < TOL_MU:
            break
    else:
        raise ModelError(
            f"the fractional model must converge; got no convergence in {MAX_ITER} Newton "
            "steps. Check for industries in which every firm has the same ratio, or use "
            "--model linear."
        )
    if cov:  # the Hessian at the solution, for the sandwich
        factor, d = factorise(design, design.gram(mu * (1.0 - mu)), names, check)
    return make_fit(
        model="fractional", link="logit", design=design, theta=theta, factor=factor, d=d,
        scores=y - mu, fitted=mu, y=y, names=names, totals=totals, clusters=clusters,
        cov=cov, deviance=quasi_deviance(y, mu), iterations=iteration,
    )
