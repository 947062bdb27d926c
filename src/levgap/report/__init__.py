"""Outputs: tables and the run manifest (``tables``), and the reports built on them.

Submodules load on first use: ``levgap screen`` reads its table through ``report.quick``
without paying for pandas.
"""

from __future__ import annotations

from importlib import import_module
from typing import Any

__all__ = ["neutralise", "read_outputs", "write_tables", "write_template"]


def __getattr__(name: str) -> Any:
    if name in __all__:
        module = "levgap.report.files" if name == "write_template" else "levgap.report.tables"
        return getattr(import_module(module), name)
    raise AttributeError(f"module 'levgap.report' has no attribute {name!r}")
