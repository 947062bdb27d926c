"""Steps every fit function shares: input checks, and building the frozen ``Fit``."""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np

from levgap.errors import ModelError
from levgap.models.covariance import sandwich
from levgap.models.design import Design, Pooling
from levgap.models.identify import check_identified
from levgap.models.linalg import cho_apply, inverse_rows, solve
from levgap.models.result import Fit, PooledLevels


def prepare(
    y: np.ndarray,
    X: np.ndarray,
    effects: Sequence[np.ndarray],
    names: Sequence[str] | None,
    n_levels: Sequence[int] | None,
    pooling: Pooling | None,
) -> tuple[np.ndarray, Design, tuple[str, ...], list[int]]:
    """Check shapes and values; build the design. Returns ``y``, the design, names, level counts.
    """
    y = np.asarray(y, dtype=float)
    X = np.asarray(X, dtype=float)
    if X.ndim == 1:
        X = X[:, None]
    n, k = X.shape
    if y.shape != (n,):
        raise ModelError(f"y must have {n} values to match X; got shape {y.shape}.")
    if not np.isfinite(y).all():  # the drivers are checked as the design is built
        raise ModelError("the model's inputs must be finite; got NaN or infinite values.")
    names = tuple(names) if names is not None else tuple(f"x{j}" for j in range(k))
    if len(names) != k:
        raise ModelError(f"names must have {k} entries; got {len(names)}.")
    design = Design(X, effects, pooling)
    p = design.layout.n_params
    if n <= p:
        raise ModelError(
            f"the model needs more observations than parameters; got {n} observations for "
            f"{p} parameters."
        )
    totals = [int(n_levels[j]) if n_levels is not None else int(np.max(e)) + 1
              for j, e in enumerate(design.codes)]
    return y, design, names, totals


def factorise(design: Design, A: np.ndarray, names: Sequence[str], check: bool) -> tuple:
    """Cholesky of the normal equations; a singular system gets a message naming drivers."""
    try:
        return solve(A)
    except np.linalg.LinAlgError:
        if check:
            check_identified(design, names)
        raise ModelError(
            "the drivers are collinear with each other or with the industry and year effects "
            "(for example a driver that is constant, or identical within every industry); "
            "drop that driver or widen the panel."
        ) from None


def refine(design: Design, factor: tuple, d: np.ndarray, theta: np.ndarray, y: np.ndarray,
           steps: int = 2) -> np.ndarray:
    """Least-squares iterative refinement with residuals computed from the data."""
    for _ in range(steps):
        g = design.residual_gradient(theta, y) - design.penalty * theta
        theta = theta + cho_apply(factor, d, g)
    return theta


def make_fit(
    *,
    model: str,
    link: str,
    design: Design,
    theta: np.ndarray,
    factor: tuple,
    d: np.ndarray,
    scores: np.ndarray,
    fitted: np.ndarray,
    y: np.ndarray,
    names: tuple[str, ...],
    totals: list[int],
    clusters: Sequence[np.ndarray],
    cov: bool,
    deviance: float,
    iterations: int,
    classical_scale: float | None = None,
) -> Fit:
    """Assemble the frozen result: reported terms, effects, pooling and covariance.

    ``scores`` is each row's response-scale residual (the score's multiplier of ``z_i``);
    ``classical_scale`` (least squares without clusters) gives :math:`s^2 (Z'Z)^{-1}`.
    """
    k = design.k
    lay = design.layout
    J = design.uncentre()
    vcov, n_cl, df_inf, cov_type, notes = None, (), int(design.n - lay.n_params), "none", ()
    if cov:
        R = inverse_rows(factor, d, k + 1)
        if classical_scale is not None and not clusters:
            vcov = J @ (classical_scale * R[:, : k + 1]) @ J.T
            cov_type = "classical"
        else:
            JR = J @ R  # influences on the reported terms

            def sums(codes: Sequence[np.ndarray]) -> list[np.ndarray]:
                return design.cluster_sums(JR, scores, codes)

            sw = sandwich(sums, clusters, design.n, lay.n_params)
            vcov, n_cl, df_inf, cov_type, notes = (sw.vcov, sw.n_clusters, sw.df_inference,
                                                   sw.cov_type, sw.notes)
    tss = float(((y - y.mean()) ** 2).sum())
    rss = float(((y - fitted) ** 2).sum())
    effects = design.effects(theta, totals)
    weights = []
    for levels, cnt, total in zip(design.present, design.counts, totals, strict=True):
        w = np.zeros(total)
        w[levels] = cnt
        weights.append(w)
    pooled = None
    if design.pooling is not None:
        p = design.pooling
        L = totals[0] if totals else 0
        small = np.zeros(L, dtype=bool)
        small[: len(p.small)] = p.small[:L]
        parent = np.full(L, -1, dtype=np.int64)
        parent[: len(p.parent)] = p.parent[:L]
        members = np.zeros((p.members.shape[0], L), dtype=bool)
        members[:, : p.members.shape[1]] = p.members[:, :L]
        wts = np.full(L, np.nan)
        wts[: len(p.weight)] = p.weight[:L]
        pooled = PooledLevels(small=small, parent=parent, members=members,
                              deviation=design.deviations(theta, L), weight=wts)
    return Fit(
        model=model, link=link, names=("const", *names), coef=design.reported(theta),
        vcov=vcov, effects=tuple(effects), effect_weights=tuple(weights), pooled=pooled,
        n_obs=design.n, n_params=lay.n_params, n_clusters=n_cl, df_inference=df_inf,
        r2=1.0 - rss / tss if tss > 0 else float("nan"), deviance=deviance,
        cov_type=cov_type, iterations=iterations, notes=notes,
    )
