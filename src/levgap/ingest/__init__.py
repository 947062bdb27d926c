"""Reading panels: files in, a validated :class:`~levgap.panel.Panel` out.

``read_panel`` = ``readers.read_table`` (bytes -> columns of cells under the user's headers)
followed by ``validate.validate_columns`` (cells -> schema-v1 columns, row rules, exclusion
ledger), neither of which loads pandas; ``validate_panel`` takes a pandas DataFrame instead.
"""

from __future__ import annotations

from importlib import import_module
from pathlib import Path
from typing import TYPE_CHECKING, Any

from levgap.codes import FLAGS, REASONS

if TYPE_CHECKING:
    from levgap.config import RunConfig
    from levgap.ingest.readers import RawTable, read_table
    from levgap.ingest.validate import resolve_columns, validate_panel
    from levgap.panel import Panel

# Readers and validation need pyarrow (not pandas); they load on first use so that importing
# a module of this package that needs neither (the template) stays quick.
_LAZY = {
    "RawTable": "levgap.ingest.readers",
    "read_table": "levgap.ingest.readers",
    "resolve_columns": "levgap.ingest.validate",
    "validate_panel": "levgap.ingest.validate",
}


def __getattr__(name: str) -> Any:
    if name in _LAZY:
        return getattr(import_module(_LAZY[name]), name)
    raise AttributeError(f"module 'levgap.ingest' has no attribute {name!r}")

__all__ = [
    "FLAGS",
    "REASONS",
    "RawTable",
    "read_panel",
    "read_table",
    "resolve_columns",
    "validate_panel",
]


def read_panel(path: str | Path, *, config: RunConfig | None = None) -> Panel:
    """Read and validate a schema-v1 panel file.

    Parameters
    ----------
    path : str or pathlib.Path
        A CSV (any of ``, ; tab |`` as delimiter), Parquet or XLSX file, one row per firm
        and fiscal year.
    config : RunConfig, optional
        Column map (``[columns]``), reading options (``[input]``) and money units
        (``[units]``); defaults read the file as it is.

    Returns
    -------
    Panel
        Kept rows in ``data``, excluded rows in ``exclusions``, the file's digest and row
        count, and notes in ``warnings``.

    Raises
    ------
    SchemaError
        The file cannot be read, a required column is missing, or several currencies appear
        without ``fx_rate``; the one-line message names the file (and row and column where
        known).
    ConfigError
        ``[input] encoding`` names no known encoding.

    Warns
    -----
    DataWarning
        The text was not UTF-8 and was read as Windows-1252/Latin-1; optional values were
        invalid and set missing.

    Examples
    --------
    >>> panel = read_panel("panel.csv")  # doctest: +SKIP
    >>> panel.data.head(), panel.exclusions  # doctest: +SKIP
    """
    from levgap.config import RunConfig
    from levgap.ingest.readers import read_table
    from levgap.ingest.validate import validate_columns

    config = config or RunConfig()
    raw = read_table(path, config.input)
    return validate_columns(
        raw.names,
        raw.columns,
        raw.n_input_rows,
        source=raw.source,
        config=config,
        n_input_rows=raw.n_input_rows,
        sha256=raw.sha256,
        source_rows=raw.source_rows,
        notes=raw.notes,
    )
