"""Solving the normal equations: Cholesky of the equilibrated system (scipy, loaded on use).

:func:`solve` factorises :math:`D^{-1} A D^{-1}` with :math:`D = \\sqrt{\\mathrm{diag}(A)}`, so the
factor's accuracy does not depend on the drivers' units; ``levgap.models.assemble.refine``
corrects a solution with residuals computed from the data (iterative refinement), so that the
accuracy of a least-squares fit follows the condition number of :math:`Z`, not its square.
"""

from __future__ import annotations

import numpy as np


def solve(A: np.ndarray) -> tuple[tuple[np.ndarray, bool], np.ndarray]:
    """Cholesky factor of the equilibrated ``A`` and the scaling; raises on a singular ``A``."""
    import scipy.linalg

    d = np.sqrt(np.diag(A))
    if np.any(~np.isfinite(d)) or np.any(d == 0):
        raise np.linalg.LinAlgError("zero or non-finite diagonal")
    factor = scipy.linalg.cho_factor(A / np.outer(d, d), lower=False, check_finite=False)
    return factor, d


def cho_apply(factor: tuple[np.ndarray, bool], d: np.ndarray, b: np.ndarray) -> np.ndarray:
    """``A^{-1} b`` from :func:`solve`'s factor and scaling (``b`` a vector or columns)."""
    import scipy.linalg

    if b.ndim == 1:
        return scipy.linalg.cho_solve(factor, b / d, check_finite=False) / d
    return scipy.linalg.cho_solve(factor, b / d[:, None], check_finite=False) / d[:, None]


def inverse_rows(factor: tuple[np.ndarray, bool], d: np.ndarray, m: int) -> np.ndarray:
    """The first ``m`` rows of ``A^{-1}``."""
    eye = np.zeros((len(d), m))
    eye[np.arange(m), np.arange(m)] = 1.0
    return cho_apply(factor, d, eye).T

