"""``Estimates``: the result of an estimator that serves the estimation table only.

The target models return :class:`~levgap.models.result.Fit`, which predicts. The within
(firm effects) and Fama-MacBeth estimators do not predict a held-out firm, so they return
this plainer type: terms, estimates, standard errors, the t distribution's degrees of
freedom per term, and what the table needs to say about the fit.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

import numpy as np


@dataclass(frozen=True, slots=True)
class Estimates:
    """Slopes of one specification, without a prediction rule.

    Parameters
    ----------
    estimator : str
        ``within`` or ``fama-macbeth``.
    names : tuple of str
        The drivers.
    coef, std_error : numpy.ndarray
        Estimates and the standard errors inference uses.
    df : numpy.ndarray
        Degrees of freedom of each term's t distribution.
    n_obs, n_firms : int
        Firm-years and firms used.
    r2 : float
        In-sample R² (within: with the firm and year effects; Fama-MacBeth: the mean of the
        yearly R²).
    columns : dict of str to numpy.ndarray
        Further per-term columns for ``coefficients.csv`` (``n_years``, ``std_error_nw``, ...).
    info : dict
        Conventions and counts for ``run.json`` and the table (JSON-able).
    notes : tuple of str
        What the user should know (years left out, a repaired covariance, ...).
    """

    estimator: str
    names: tuple[str, ...]
    coef: np.ndarray
    std_error: np.ndarray
    df: np.ndarray
    n_obs: int
    n_firms: int
    r2: float
    columns: dict[str, np.ndarray] = field(default_factory=dict)
    info: dict[str, Any] = field(default_factory=dict)
    notes: tuple[str, ...] = ()

    def tidy(self, coverage: float = 0.95) -> dict[str, np.ndarray]:
        """Terms, estimates, standard errors, t statistics, p-values, intervals and the
        estimator's own columns, as arrays (the same keys as ``Fit.tidy`` first)."""
        from levgap.models.result import inference_table

        return {**inference_table(self.names, self.coef, self.std_error, self.df, coverage),
                **self.columns}
