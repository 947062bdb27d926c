"""Target-leverage models. ``MODELS`` maps a model key to its fit function.

Every fit function takes ``(y, X, *, effects, clusters, names, n_levels, cov)`` and returns an
object with ``coef``, ``vcov``, ``predict(X, effects)`` and ``tidy()``; the cross-fit and the
attribution only use that surface, so a fractional-response model can join the dict later.
"""

from __future__ import annotations

from collections.abc import Callable
from typing import Any

from levgap.models.linear import LinearFit, fit_linear

MODELS: dict[str, Callable[..., Any]] = {"linear": fit_linear}

__all__ = ["MODELS", "LinearFit", "fit_linear"]
