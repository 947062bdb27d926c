"""levgap: a statistical peer benchmark of corporate leverage.

Public API::

    panel = levgap.read_panel("panel.csv")
    result = levgap.analyze(panel)
    result.targets, result.drivers, result.coefficients, result.model_fit, result.exclusions
    result.write("out/")
    res = levgap.open_results("out/")         # screen, one firm, its history and peers

Heavy modules (pandas, statsmodels, ...) are imported on first use, so that
``import levgap`` and the CLI's quick commands stay fast.
"""

from __future__ import annotations

from importlib import import_module
from typing import Any

__version__ = "0.1.0"
"""The release, written here as text (equal to pyproject.toml's ``version``, which
``tests/test_cli.py`` checks) so that no command scans the installed packages' metadata."""

_EXPORTS = {
    "read_panel": "levgap.ingest",
    "validate_panel": "levgap.ingest",
    "import_sec": "levgap.ingest.sec",
    "analyze": "levgap.pipeline",
    "Analysis": "levgap.analysis",
    "proforma": "levgap.deal.api",
    "DealCheck": "levgap.deal.result",
    "Scenario": "levgap.deal.scenario",
    "load_model": "levgap.models.saved",
    "open_results": "levgap.results",
    "Results": "levgap.results",
    "SavedModel": "levgap.models.saved",
    "Panel": "levgap.panel",
    "RunConfig": "levgap.config",
    "ModelSpec": "levgap.config",
    "InputOptions": "levgap.config",
    "Units": "levgap.config",
    "Industry": "levgap.config",
    "demo_panel": "levgap.demo",
    "LevgapError": "levgap.errors",
    "SchemaError": "levgap.errors",
    "DataWarning": "levgap.errors",
}

__all__ = ["__version__", *_EXPORTS]


def __getattr__(name: str) -> Any:
    if name in _EXPORTS:
        return getattr(import_module(_EXPORTS[name]), name)
    raise AttributeError(f"module 'levgap' has no attribute {name!r}")


def __dir__() -> list[str]:
    return sorted(__all__)
