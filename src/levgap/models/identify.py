"""Are the drivers identified? A cheap screen in the normal equations, an exact test in data
space (collinear or absorbed drivers are named in a one-line error)."""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np

from levgap.errors import ModelError
from levgap.models.design import Design
from levgap.models.linalg import cho_apply, solve

IDENTIFIED_TOL = 1e-10
"""A driver whose variance left after the effects is below this share of its own is absorbed."""
COLLINEAR_TOL = 1e-9
"""Smallest singular value (columns scaled to unit length) below which drivers are collinear."""
SUSPECT_TOL = 1e-8
"""A driver's variance share after the effects (or a correlation eigenvalue) below this, in the
normal equations, sends the fit to the exact data-space test."""


def suspicious(A: np.ndarray, k: int) -> bool:
    """A cheap screen in the normal equations: could a driver be absorbed or collinear?

    The Schur complement of the drivers after the constant and the effects
    (:math:`A_{xx} - A_{xe} A_{ee}^{-1} A_{ex}`) loses precision with the condition of the
    effects block, so it only screens; :func:`check_identified` decides in data space."""
    kw = k + 1
    if k == 0:
        return False
    D = A[1:kw, 1:kw]
    E = np.delete(np.delete(A, np.s_[1:kw], axis=0), np.s_[1:kw], axis=1)
    C = np.delete(A[1:kw], np.s_[1:kw], axis=1)
    try:
        factor, d = solve(E)
    except np.linalg.LinAlgError:
        return True
    S = D - C @ cho_apply(factor, d, C.T)
    diag = np.diag(S)
    if np.any(diag <= SUSPECT_TOL * np.diag(D)):
        return True
    corr = S / np.sqrt(np.outer(diag, diag))
    return bool(np.linalg.eigvalsh(corr)[0] < SUSPECT_TOL)


ADDED_FOR = {"rd_missing": "rd_intensity"}
"""Drivers levgap adds for one the user set, named in messages by what the user set."""


def _shown(names: Sequence[str]) -> str:
    out = []
    for n in names:
        parent = ADDED_FOR.get(n)
        if parent is None:
            out.append(n)
        elif parent not in names:
            out.append(f"{parent} (its indicator {n} of a blank rd_expense)")
    return ", ".join(out)


def check_identified(design: Design, names: Sequence[str]) -> None:
    """Refuse drivers that the effects absorb or that are collinear with each other.

    Each driver is residualised on the effects (the constant, every factor's levels and the
    small levels' penalised deviations) in data space, so the test does not lose precision
    with the number of parameters: a driver left with less than ``IDENTIFIED_TOL`` of its
    variance is absorbed (constant, or constant within every industry and year); the
    residualised drivers, scaled to unit length, with a singular value below
    ``COLLINEAR_TOL`` are collinear.

    Raises
    ------
    ModelError
        Naming the driver(s).
    """
    k = design.k
    if k == 0:
        return
    X = design.XT.T
    spread = np.einsum("ij,ij->j", X, X)
    flat = [names[j] for j in design.flat()]
    if flat:
        raise ModelError(
            f"every driver must vary across rows; got {_shown(flat)} constant. Drop it "
            "from [model] drivers in the run configuration."
        )
    # Effects-only design: the same structure without the drivers.
    eff = Design(np.empty((design.n, 0)), design.codes, design.pooling)
    A = eff.gram()
    try:
        factor, d = solve(A)
    except np.linalg.LinAlgError:
        raise ModelError(
            "the industry and year effects must be identifiable; got levels that are confounded "
            "with each other (for example an industry observed in one year only, alone in "
            "that year). Widen the panel or merge small industries."
        ) from None
    G = np.column_stack([eff.rmatvec(X[:, j]) for j in range(k)])
    gamma = cho_apply(factor, d, G)
    resid = X - np.column_stack([eff.matvec(gamma[:, j]) for j in range(k)])
    for _ in range(2):  # refine in data space
        G = np.column_stack([eff.rmatvec(resid[:, j]) for j in range(k)])
        G -= eff.penalty[:, None] * gamma
        step = cho_apply(factor, d, G)
        gamma += step
        resid -= np.column_stack([eff.matvec(step[:, j]) for j in range(k)])
    left = np.einsum("ij,ij->j", resid, resid) / spread
    absorbed = [names[j] for j in range(k) if left[j] < IDENTIFIED_TOL]
    if absorbed:
        raise ModelError(
            f"every driver must vary within industries and years; got {_shown(absorbed)} "
            "explained entirely by the industry and year effects (constant within every "
            "industry, for example). Drop it from [model] drivers, or group industries more "
            "coarsely ([model] industry_digits)."
        )
    scaled = resid / np.sqrt(np.einsum("ij,ij->j", resid, resid))
    _, s, vt = np.linalg.svd(scaled, full_matrices=False)
    if s[-1] < COLLINEAR_TOL * s[0]:
        involved = [names[j] for j in np.flatnonzero(np.abs(vt[-1]) > 0.1)]
        raise ModelError(
            f"the drivers must not be collinear once the effects are absorbed; got "
            f"{_shown(involved)} linearly dependent. Drop one of them from [model] drivers."
        )
