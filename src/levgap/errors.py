"""Exceptions a caller of levgap may want to handle differently.

Every error a user can cause derives from :class:`LevgapError`; the CLI catches that
class once, prints its message on one line and exits with code 2.
"""

from __future__ import annotations

import warnings
from typing import TYPE_CHECKING

if TYPE_CHECKING:  # pandas is heavy; the CLI's quick commands must not pay for it
    import pandas as pd


class LevgapError(Exception):
    """Base class of every error levgap raises on bad input or bad options."""


class SchemaError(LevgapError, ValueError):
    """The input does not follow schema v1 (missing columns, unreadable file, ...).

    Parameters
    ----------
    message : str
        One line: what must hold, what was found, how to fix it.
    failures : pandas.DataFrame, optional
        One row per failure with columns ``row``, ``column``, ``check``, ``value``.
    """

    def __init__(self, message: str, failures: pd.DataFrame | None = None) -> None:  # noqa: F821
        super().__init__(message)
        self.failures = failures


class ConfigError(LevgapError, ValueError):
    """A run configuration or an option has a value levgap cannot use."""


class OutputError(LevgapError, OSError):
    """An output folder or file cannot be written safely."""


class ModelError(LevgapError, RuntimeError):
    """The model cannot be estimated on the data given (too few rows, no variation)."""


class DataWarning(UserWarning):
    """Something in the data deserves the user's attention but does not stop the run."""


def warn_data(message: str, stacklevel: int = 2) -> None:
    """Issue a :class:`DataWarning` attributed to the caller's caller."""
    warnings.warn(message, DataWarning, stacklevel=stacklevel + 1)
