"""Target-leverage models behind one interface.

``MODELS`` maps a model key to its fit function. Every fit function takes
``(y, X, *, effects, clusters, names, n_levels, pooling, cov, check, start)`` and returns a
frozen :class:`~levgap.models.result.Fit` that predicts (``predict``, ``offset``), gives exact
additive driver contributions between two driver profiles (``contributions``) and tabulates
itself (``tidy``). The pipeline only uses that surface and never branches on a model's name.

The fit modules (and scipy, which solves their equations) load when a fit function is first
looked up, so that scoring a saved model (``levgap proforma``, ``levgap explain``) and the
quick commands never pay for them.
"""

from __future__ import annotations

from collections.abc import Callable, Iterator, Mapping
from importlib import import_module
from typing import TYPE_CHECKING, Any

if TYPE_CHECKING:
    from levgap.models.fractional import fit_fractional
    from levgap.models.linear import fit_linear
    from levgap.models.result import Fit

_WHERE: dict[str, tuple[str, str]] = {
    "fractional": ("levgap.models.fractional", "fit_fractional"),
    "linear": ("levgap.models.linear", "fit_linear"),
}


class _Models(Mapping[str, "Callable[..., Fit]"]):
    """The dispatch table: model key -> fit function (imported on first look-up)."""

    def __getitem__(self, key: str) -> Callable[..., Fit]:
        module, name = _WHERE[key]
        return getattr(import_module(module), name)  # type: ignore[no-any-return]

    def __iter__(self) -> Iterator[str]:
        return iter(_WHERE)

    def __len__(self) -> int:
        return len(_WHERE)

    def __repr__(self) -> str:
        return f"MODELS({', '.join(_WHERE)})"


MODELS: Mapping[str, Callable[..., Fit]] = _Models()


def __getattr__(name: str) -> Any:
    if name == "Fit":
        from levgap.models.result import Fit

        return Fit
    for module, attr in _WHERE.values():
        if name == attr:
            return getattr(import_module(module), attr)
    raise AttributeError(f"module 'levgap.models' has no attribute {name!r}")


__all__ = ["MODELS", "Fit", "fit_fractional", "fit_linear"]
