"""Reading a run's tables back with pyarrow alone: the one reader under every command.

``levgap screen`` and ``levgap explain`` answer from Arrow tables without importing pandas
(which would cost more than the whole answer); ``read_outputs`` (``report``, ``table``, the
Python API) turns the same tables into data frames with :func:`to_frame`. Each table is
checked here against the output contract (``analysis.check_table_columns``: its columns,
what each holds, the columns filled in every row), after ``levgap.outputs`` has checked that
it is the file the run wrote.

CSV is read as pandas' ``read_csv`` with ``keep_default_na=False, na_values=[""]`` read it:
only an empty cell is blank; text columns (``TEXT_COLUMNS``) stay text (``0100`` keeps its
zero) with blanks as ``""``; a whole-number column with blanks holds floats.
"""

from __future__ import annotations

from collections.abc import Iterable
from pathlib import Path
from typing import TYPE_CHECKING, Any

from levgap.errors import OutputError

if TYPE_CHECKING:
    import pandas as pd

    from levgap.outputs import RunFolder

TEXT_COLUMNS: tuple[str, ...] = (
    "firm_id", "firm_name", "industry", "measure", "driver", "status", "reason", "detail",
    "flags", "model", "term", "currency", "peer_group", "expected_sign", "agrees",
    "sign_source", "effect_group",
)
"""Output columns read back as text (so that codes such as ``0100`` keep their zeros)."""


def read_run_tables(out_dir: str | Path, names: Iterable[str] | None = None
                    ) -> tuple[dict[str, Any], RunFolder]:
    """The tables of one run as ``pyarrow.Table``, checked, and the verified run.

    Parameters
    ----------
    out_dir : str or pathlib.Path
        A folder written by ``levgap analyze``; checked first with
        ``levgap.outputs.verify_run``; each table read is checked against the size and
        SHA-256 ``run.json`` records for it (by file name, as ``RunFolder.tables`` orders them).
    names : iterable of str, optional
        Only these tables (e.g. ``["targets"]``); default every table of the run.

    Raises
    ------
    OutputError
        The folder does not hold one complete run, a table is not the file the run wrote, or
        a table cannot be read, lacks a contract column or holds a wrong type (the message
        names the file and column).
    """
    from levgap.outputs import verify_run

    run = verify_run(out_dir)
    wanted = None if names is None else set(names)
    tables = {}
    for name, p in run.tables.items():
        if wanted is None or name in wanted:
            tables[name] = read_table(run.check(p.name), name, legacy=run.run_id is None)
    return tables, run


def read_table(path: Path, name: str, *, legacy: bool = False) -> Any:
    """One output table as a ``pyarrow.Table``, checked against the contract.

    ``legacy``: a table levgap 0.1 wrote, checked against the 0.1 columns. A table of a run
    written before ``analysis.ADDED_COLUMNS`` existed gets them (:func:`_with_added`).
    """
    import pyarrow as pa

    from levgap.analysis import check_table_columns

    try:
        if path.suffix == ".parquet":
            import pyarrow.parquet as pq

            with pq.ParquetFile(path) as fh:  # pq.read_table would import pandas
                table = fh.read()
        else:
            import pyarrow.csv as pv

            table = pv.read_csv(path, convert_options=pv.ConvertOptions(
                column_types={c: pa.string() for c in TEXT_COLUMNS},
                null_values=[""], strings_can_be_null=False))
    except (OSError, pa.ArrowException) as exc:
        raise OutputError(
            f"{path}: a levgap table must be readable; got {' '.join(str(exc).split())[:200]}. "
            "Re-run `levgap analyze`."
        ) from None
    check_table_columns(path, name, {c: _kind(table[c]) for c in table.column_names},
                        lambda c: _example(table[c]), legacy=legacy,
                        blanks=lambda c: _blanks(table[c]))
    for i, c in enumerate(table.column_names):
        if c in TEXT_COLUMNS:
            table = table.set_column(i, c, _text(table[c]))
        elif pa.types.is_null(table[c].type):  # a column of blanks: blank numbers
            table = table.set_column(i, c, table[c].cast(pa.float64()))
    return table if legacy else _with_added(name, table)


def to_frame(table: Any) -> pd.DataFrame:
    """A table of :func:`read_table` as a pandas data frame (text columns as ``str``)."""
    frame = table.to_pandas()
    for c in TEXT_COLUMNS:
        if c in frame.columns:
            frame[c] = frame[c].astype("str")
    return frame


def _text(col: Any) -> Any:
    """A text column as strings, blanks as ``""``.

    No Python value is turned into an Arrow one here: that makes pyarrow import pandas.
    """
    import pyarrow as pa
    import pyarrow.compute as pc

    if not (pa.types.is_string(col.type) or pa.types.is_large_string(col.type)):
        col = col.cast(pa.string())
    if col.null_count:
        empty = pc.utf8_slice_codeunits(pc.cast(pc.is_null(col), col.type), 0, 0)
        col = pc.coalesce(col, empty)
    return col


def _with_added(name: str, table: Any) -> Any:
    """A table of a run written before ``analysis.ADDED_COLUMNS`` existed, with them: the
    history from the targets' own rows (:func:`_with_history`), ``raw_value`` blank."""
    import pyarrow as pa

    from levgap.analysis import ADDED_COLUMNS

    missing = [c for c in ADDED_COLUMNS.get(name, ()) if c not in table.column_names]
    if not missing:
        return table
    if name == "targets":
        return _with_history(table)
    names = table.column_names
    at = names.index("firm_value") + 1 if "firm_value" in names else len(names)
    for c in missing:
        table = table.add_column(at, c, pa.nulls(table.num_rows, pa.float64()))
        at += 1
    return table


def _with_history(table: Any) -> Any:
    """A targets table written before the history columns existed, with them
    (``levgap.history``). Only for such folders: building the new columns lets pyarrow load
    pandas."""
    import numpy as np
    import pyarrow as pa
    import pyarrow.compute as pc

    from levgap.history import HISTORY_COLUMNS, SIDES, history_arrays

    def codes(column: str) -> Any:
        enc = pc.dictionary_encode(table[column]).combine_chunks()
        return np.asarray(enc.indices.to_numpy(zero_copy_only=False)), enc.dictionary

    firm, _ = codes("firm_id")
    measure, _ = codes("measure")
    status, labels = codes("status")
    side = np.array([SIDES.get(v, 0) for v in labels.to_pylist()], dtype=np.int64)[status]
    gap = np.asarray(table["gap"].to_numpy(), dtype=float)
    hist = history_arrays(measure.astype(np.int64) * (int(firm.max()) + 1) + firm,
                          np.asarray(table["fiscal_year"].to_numpy()), gap, side)
    flags = table["flags"].to_pylist()
    for code, mask in hist.pop("flags").items():
        for i in np.flatnonzero(mask):
            flags[i] = f"{flags[i]};{code}" if flags[i] else code
    at = table.column_names.index("flags")
    for name in HISTORY_COLUMNS:
        values = hist[name]
        arr = pa.array(values, mask=np.isnan(values)) if values.dtype.kind == "f" \
            else pa.array(values)
        table = table.add_column(at, name, arr)
        at += 1
    return table.set_column(table.column_names.index("flags"), "flags",
                            pa.array(flags, type=pa.string()))


def _kind(col: Any) -> str:
    import pyarrow as pa
    import pyarrow.compute as pc

    t = col.type
    if pa.types.is_integer(t):
        return "integer"
    if pa.types.is_floating(t):
        vals = pc.drop_null(col)
        vals = pc.filter(vals, pc.invert(pc.is_nan(vals)))
        if len(vals) == 0:
            return "integer"
        if pc.any(pc.is_inf(vals)).as_py():
            return "number"
        return "integer" if pc.all(pc.equal(vals, pc.round(vals))).as_py() else "number"
    if pa.types.is_null(t):
        return "integer"  # an empty column: nothing of the wrong type in it
    if pa.types.is_string(t) or pa.types.is_large_string(t):
        return "text"
    return "other"


def _blanks(col: Any) -> int:
    import pyarrow as pa
    import pyarrow.compute as pc

    n = col.null_count
    if pa.types.is_floating(col.type):
        n += pc.sum(pc.is_nan(col)).as_py() or 0
    elif pa.types.is_string(col.type) or pa.types.is_large_string(col.type):
        # no Python scalar in a comparison: making an Arrow scalar would import pandas
        filled = pc.utf8_length(pc.utf8_trim_whitespace(col)).cast(pa.bool_())
        n += pc.sum(pc.invert(filled)).as_py() or 0
    return int(n)


def _example(col: Any) -> str:
    import pyarrow as pa

    if not (pa.types.is_string(col.type) or pa.types.is_large_string(col.type)):
        return ""
    for v in col.to_pylist():
        if v and v.strip():
            try:
                float(v)
            except ValueError:
                return repr(v if len(v) <= 30 else v[:27] + "...")
    return ""
