"""Writing and reading the tabular outputs (CSV or Parquet) and the run manifest, safely.

Safety rules, each tested (the mechanisms live in ``levgap.outputs``):

- text cells that a spreadsheet would run as a formula (starting with ``=``, ``+``, ``-``,
  ``@`` or their fullwidth forms, possibly after spaces, or with a tab or a carriage return)
  get a leading apostrophe (the usual guidance against spreadsheet formula injection);
  numeric columns are untouched;
- CSV is written by pyarrow's columnar writer (``levgap.report.columnar`` states the format:
  shortest round-trip numbers, every text cell quoted, lines ending in CRLF as RFC 4180);
- a run's files are staged and swapped in as one unit with one run id; readers refuse a
  folder holding an interrupted run, a damaged or newer ``run.json``, a missing file, or a
  table without a contract column or with a wrong type;
- a folder that holds files levgap did not write is refused unless ``force=True``, and such a
  file is never replaced or removed; an input file never is either.
"""

from __future__ import annotations

import re
from collections.abc import Iterable, Mapping
from pathlib import Path
from typing import Any

import pandas as pd

from levgap.errors import OutputError
from levgap.outputs import (  # one layer under every file levgap writes
    FORMULA_PREFIXES,
    RUN_FILE,
    RunWriter,
    atomic_file,
    neutralise,
    new_run_id,
)
from levgap.report.reading import TEXT_COLUMNS, read_run_tables, read_table, to_frame

__all__ = ["FORMULA_PREFIXES", "FORMATS", "MANIFEST", "TEXT_COLUMNS", "neutralise",
           "read_outputs", "stage_tables", "write_table", "write_tables"]

MANIFEST = RUN_FILE
FORMATS: dict[str, str] = {"csv": ".csv", "parquet": ".parquet"}


_NAME = re.compile(r"^[A-Za-z0-9_][A-Za-z0-9_.-]*$")


def write_tables(
    tables: Mapping[str, pd.DataFrame],
    manifest: Mapping[str, Any],
    out_dir: str | Path,
    *,
    fmt: str = "csv",
    force: bool = False,
    inputs: Iterable[str | Path] = (),
) -> list[Path]:
    """Write each table and ``run.json`` into a folder as one run, atomically and without harm.

    Parameters
    ----------
    tables : mapping of str to pandas.DataFrame
        Table name (``targets``, ``exclusions``, ...) -> frame; written as ``<name>.csv`` or
        ``<name>.parquet``, text cells neutralised (see :func:`neutralise`).
    manifest : mapping
        Written as ``run.json`` (indent 2; values JSON cannot hold are written as text, NaN
        as null), with the new run's ``run_id`` and ``files``.
    out_dir : str or pathlib.Path
        Output folder; created if absent.
    fmt : {"csv", "parquet"}, default="csv"
        File format of the tables.
    force : bool, default=False
        Write even into a folder that holds files levgap did not write (those files are
        left alone; one with the name of an output refuses the run).
    inputs : iterable of path, default=()
        Input files, never replaced or removed.

    Returns
    -------
    list of pathlib.Path
        The files written, tables first, then ``run.json``.

    Raises
    ------
    OutputError
        Unknown format or table name, a folder with foreign files (without ``force``), an
        output path that is an input or a file levgap did not write, or a file system error.
    """
    _check_tables(tables, fmt)
    run_id = new_run_id()
    with RunWriter(out_dir, run_id=run_id, inputs=inputs, force=force) as run:
        stage_tables(run, tables, fmt=fmt)
        return list(run.commit(manifest).written)


def stage_tables(run: RunWriter, tables: Mapping[str, pd.DataFrame], *, fmt: str = "csv"
                 ) -> list[Path]:
    """Stage each table into a run being written (see ``levgap.outputs.RunWriter``).

    Returns
    -------
    list of pathlib.Path
        Where the tables will be once the run is committed.
    """
    from levgap.analysis import TABLE_COLUMNS

    _check_tables(tables, fmt)
    out = []
    for name, frame in tables.items():
        if frame.shape[1] == 0 and name in TABLE_COLUMNS:  # an empty table keeps its header
            frame = pd.DataFrame(columns=list(TABLE_COLUMNS[name]))
        out.append(run.add(f"{name}{FORMATS[fmt]}", _table_writer(frame, fmt, run.run_id)))
    return out


def _check_tables(tables: Mapping[str, Any], fmt: str) -> None:
    if fmt not in FORMATS:
        raise OutputError(f"format must be one of {sorted(FORMATS)}; got {fmt!r}.")
    for name in tables:
        if not _NAME.match(name) or name == Path(MANIFEST).stem:
            raise OutputError(
                f"table name must be letters, digits and _ (not 'run'); got {name!r}."
            )


def read_outputs(
    out_dir: str | Path, names: Iterable[str] | None = None
) -> tuple[dict[str, pd.DataFrame], dict[str, Any]]:
    """Read the tables and manifest of one run (for ``table``, reports and the Python API).

    Parameters
    ----------
    out_dir : str or pathlib.Path
        A folder written by :func:`write_tables` or ``levgap analyze``; checked first with
        ``levgap.outputs.verify_run`` (one complete run, readable ``run.json``); each table
        read is checked against the size and SHA-256 ``run.json`` records for it.
    names : iterable of str, optional
        Only these tables (e.g. ``["targets"]``); default every table of the run.

    Returns
    -------
    tables : dict of str to pandas.DataFrame
        Table name -> frame, from ``<name>.csv`` or ``<name>.parquet``
        (``levgap.report.reading``, the reader of every command). Text columns
        (``TEXT_COLUMNS``) are text with blanks as ``""``; neutralising apostrophes are kept.
    manifest : dict
        The parsed ``run.json``.

    Raises
    ------
    OutputError
        The folder does not hold one complete run, a table is not the file the run wrote
        (edited, or copied from another run), or a table cannot be read, lacks a contract
        column or holds a wrong type (the message names the file and column).
    """
    tables, run = read_run_tables(out_dir, names)
    return {name: to_frame(t) for name, t in tables.items()}, run.manifest


def read_table_file(path: Path, name: str, *, legacy: bool = False) -> pd.DataFrame:
    """One output table, read back and checked against the contract (columns and types);
    ``legacy``: a table levgap 0.1 wrote, checked against the 0.1 columns."""
    return to_frame(read_table(path, name, legacy=legacy))


# ---------------------------------------------------------------------------------------------


def write_table(
    frame: pd.DataFrame, path: str | Path, *, inputs: Iterable[str | Path] = ()
) -> Path:
    """Write one neutralised table (CSV or Parquet, by suffix) atomically, never over an input.

    Parameters
    ----------
    frame : pandas.DataFrame
    path : str or pathlib.Path
        Destination ending in ``.csv`` or ``.parquet``; an existing file there is replaced
        only when levgap wrote it (``levgap.outputs.atomic_file``).
    inputs : iterable of path, default=()
        Input files, never replaced.

    Raises
    ------
    OutputError
        Unknown suffix, the path of an input or of a file levgap did not write, or a file
        system error.
    """
    target = Path(path)
    fmt = {v: k for k, v in FORMATS.items()}.get(target.suffix.lower())
    if fmt is None:
        raise OutputError(f"{target}: a table file must end in .csv or .parquet; got "
                          f"{target.suffix or 'no suffix'}.")
    write = _table_writer(frame, fmt, None)
    with atomic_file(target, inputs=inputs) as tmp, open(tmp, "wb") as fh:
        write(fh)
    return target


def _table_writer(frame: pd.DataFrame, fmt: str, run_id: str | None) -> Any:
    """A function writing ``frame`` as CSV or Parquet to a binary handle (text cells
    neutralised; the CSV format is ``levgap.report.columnar``'s)."""
    from levgap.report.columnar import csv_writer, parquet_writer

    return parquet_writer(frame, run_id) if fmt == "parquet" else csv_writer(frame)
