"""The validated panel that every later stage takes as input."""

from __future__ import annotations

from dataclasses import dataclass
from typing import TYPE_CHECKING

if TYPE_CHECKING:  # the output readers use EXCLUSION_COLUMNS without pandas
    import pandas as pd

EXCLUSION_COLUMNS: tuple[str, ...] = (
    "source_row", "firm_id", "fiscal_year", "measure", "reason", "detail"
)


@dataclass(frozen=True, slots=True)
class Panel:
    """A schema-v1 panel after reading and validation.

    Parameters
    ----------
    data : pandas.DataFrame
        Rows kept for analysis: schema columns under their schema names, numbers as float,
        money scaled to the reference unit and currency, ``market_equity`` filled from
        ``shares_outstanding * share_price`` where absent; plus ``source_row`` (1-based data
        row of the input file) and ``flags`` (``;``-joined codes, empty when none).
    exclusions : pandas.DataFrame
        The ledger of rows left out, columns ``EXCLUSION_COLUMNS``; ``measure`` is empty for
        a row left out of every measure.
    source : str
        Path of the input file, or ``"<memory>"``.
    sha256 : str or None
        Digest of the input file.
    n_input_rows : int
        Data rows in the input (header and blank lines not counted).
    warnings : tuple of str
        Notes for ``run.json`` (encoding fallback, dropped optional values, ...).
    """

    data: pd.DataFrame
    exclusions: pd.DataFrame
    source: str = "<memory>"
    sha256: str | None = None
    n_input_rows: int = 0
    warnings: tuple[str, ...] = ()


def empty_exclusions() -> pd.DataFrame:
    """An exclusion ledger with no rows and the contract's columns."""
    import pandas as pd

    return pd.DataFrame(
        {
            "source_row": pd.Series(dtype="int64"),
            "firm_id": pd.Series(dtype="object"),
            "fiscal_year": pd.Series(dtype="Int64"),
            "measure": pd.Series(dtype="object"),
            "reason": pd.Series(dtype="object"),
            "detail": pd.Series(dtype="object"),
        }
    )
