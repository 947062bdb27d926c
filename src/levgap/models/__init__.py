"""Target-leverage models behind one interface.

``MODELS`` maps a model key to its fit function. Every fit function takes
``(y, X, *, effects, clusters, names, n_levels, pooling, cov, check, start)`` and returns a
frozen :class:`~levgap.models.result.Fit` that predicts (``predict``, ``offset``), gives exact
additive driver contributions between two driver profiles (``contributions``) and tabulates
itself (``tidy``). The pipeline only uses that surface and never branches on a model's name.
"""

from __future__ import annotations

from collections.abc import Callable

from levgap.models.fractional import fit_fractional
from levgap.models.linear import fit_linear
from levgap.models.result import Fit

MODELS: dict[str, Callable[..., Fit]] = {"fractional": fit_fractional, "linear": fit_linear}

__all__ = ["MODELS", "Fit", "fit_fractional", "fit_linear"]
