"""The validated panel that every later stage takes as input.

Validation builds it from columns (numpy and pyarrow arrays), without pandas; the pandas
frames the pipeline reads (``data``, ``exclusions``) are built from those columns the first
time they are asked for, so that ``levgap check`` never loads pandas.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass
from functools import cached_property
from typing import TYPE_CHECKING, Any

import numpy as np

if TYPE_CHECKING:  # the output readers use EXCLUSION_COLUMNS without pandas
    import pandas as pd

EXCLUSION_COLUMNS: tuple[str, ...] = (
    "source_row", "firm_id", "fiscal_year", "measure", "reason", "detail"
)


@dataclass(frozen=True, slots=True)
class PanelSummary:
    """What ``levgap check`` reports of a panel: counts of the kept rows and the ledger.

    ``years`` is ``None`` when no row is kept; ``excluded`` maps each reason code to its
    number of rows, in the order of the codes' names.
    """

    input_rows: int
    kept: int
    firms: int
    industries: int
    years: tuple[int, int] | None
    no_market_equity: int
    excluded: dict[str, int]


@dataclass(frozen=True, eq=False)
class Panel:
    """A schema-v1 panel after reading and validation.

    Parameters
    ----------
    columns : mapping of str to array
        The rows kept for analysis, one numpy or pyarrow array per column, in the order of
        ``data``'s columns (see ``data``).
    excluded : mapping of str to array
        The ledger of rows left out, one array per column of ``EXCLUSION_COLUMNS``, ordered by
        ``source_row``; ``fiscal_year`` is float, NaN where the row had no usable year.
    source : str
        Path of the input file, or ``"<memory>"``.
    sha256 : str or None
        Digest of the input file.
    n_input_rows : int
        Data rows in the input (header and blank lines not counted).
    warnings : tuple of str
        Notes for ``run.json`` (encoding fallback, dropped optional values, ...).

    Attributes
    ----------
    data : pandas.DataFrame
        Rows kept for analysis: schema columns under their schema names, numbers as float,
        money scaled to the reference unit and currency, ``market_equity`` filled from
        ``shares_outstanding * share_price`` where absent; plus ``source_row`` (1-based data
        row of the input file) and ``flags`` (``;``-joined codes, empty when none), then any
        ``[model] input_drivers`` columns. Built on first use (it shares ``columns``' arrays).
    exclusions : pandas.DataFrame
        The ledger, columns ``EXCLUSION_COLUMNS``; ``measure`` is empty for a row left out of
        every measure. Built on first use.
    """

    columns: Mapping[str, Any]
    excluded: Mapping[str, Any]
    source: str = "<memory>"
    sha256: str | None = None
    n_input_rows: int = 0
    warnings: tuple[str, ...] = ()

    @property
    def n_rows(self) -> int:
        """Number of kept rows."""
        return len(self.columns["source_row"])

    @cached_property
    def data(self) -> pd.DataFrame:
        from levgap.ingest.columns import to_frame

        return to_frame(list(self.columns), list(self.columns.values()))

    @cached_property
    def exclusions(self) -> pd.DataFrame:
        import pandas as pd

        from levgap.ingest.columns import to_series

        year = np.asarray(self.excluded["fiscal_year"], dtype=np.float64)
        good = ~np.isnan(year)
        fy = pd.array(np.where(good, year, 0).astype(np.int64), dtype="Int64")
        fy[~good] = pd.NA
        return pd.DataFrame(
            {
                "source_row": np.asarray(self.excluded["source_row"], dtype=np.int64),
                "firm_id": to_series(self.excluded["firm_id"]),
                "fiscal_year": fy,
                "measure": pd.Series(self.excluded["measure"], dtype="str"),
                "reason": pd.Series(self.excluded["reason"], dtype="str"),
                "detail": pd.Series(self.excluded["detail"], dtype="str"),
            },
            columns=list(EXCLUSION_COLUMNS),
        )

    def summary(self) -> PanelSummary:
        """Counts for ``levgap check``, from the columns (pandas is not loaded)."""
        import pyarrow as pa
        import pyarrow.compute as pc

        def distinct(col: Any) -> int:
            return int(pc.count_distinct(col).as_py()) if isinstance(
                col, pa.Array | pa.ChunkedArray) else len(np.unique(col))

        n = self.n_rows
        years = np.asarray(self.columns["fiscal_year"])
        reasons, counts = np.unique(np.asarray(self.excluded["reason"], dtype=str),
                                    return_counts=True)
        return PanelSummary(
            input_rows=self.n_input_rows,
            kept=n,
            firms=distinct(self.columns["firm_id"]) if n else 0,
            industries=distinct(self.columns["industry"]) if n else 0,
            years=(int(years.min()), int(years.max())) if n else None,
            no_market_equity=int(np.isnan(self.columns["market_equity"]).sum()),
            excluded={str(r): int(c) for r, c in zip(reasons, counts, strict=True)},
        )


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
