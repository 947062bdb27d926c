"""The tables as Arrow columns, written as CSV or Parquet by pyarrow's columnar writers.

CSV format (the output contract's):

- UTF-8, a header line of the column names, lines ending in CRLF (RFC 4180);
- numbers in the shortest form that reads back as the same 64-bit value (every digit needed,
  none more: up to 17 significant digits), plain decimals from 1e-6 to 1e16 and exponent
  notation outside (``1.5e-07``, ``2e+16``); whole numbers without a decimal point (``3``,
  not ``3.0``); a missing value (NaN) is an empty cell, an infinity ``inf`` or ``-inf``;
- every text cell in double quotes (a quote inside doubled), so that commas, quotes and line
  breaks in names survive; a missing text is an empty cell;
- text cells that a spreadsheet would run as a formula get a leading apostrophe
  (``levgap.outputs.cells.FORMULA_PATTERN``), in CSV and Parquet alike.

pandas (``read_csv``, either engine), Python's ``csv`` module and pyarrow read the files back
with the same values (``tests/test_columnar.py``). Large tables are formatted in chunks of rows
on two threads while the writer hashes and writes the chunks before them in order, so the
memory held stays a few chunks whatever the table's size.
"""

from __future__ import annotations

import os
from collections import deque
from collections.abc import Callable
from concurrent.futures import Future, ThreadPoolExecutor
from typing import TYPE_CHECKING, Any, BinaryIO

from levgap.outputs.cells import FORMULA_PATTERN

if TYPE_CHECKING:
    import pandas as pd
    import pyarrow as pa

CHUNK_ROWS = 1 << 18
"""Rows formatted per task (about 25 MB of CSV for the drivers table)."""
EOL = "\r\n"


def arrow_table(frame: pd.DataFrame) -> pa.Table:
    """A frame as an Arrow table: NaN as missing, text as UTF-8 strings, no index."""
    import pyarrow as pa

    return pa.Table.from_pandas(frame, preserve_index=False)


_FIRST_BYTES = frozenset(b"\t\r =+-@") | {0xC2, 0xE3, 0xEF}
"""First bytes (UTF-8) of a cell ``FORMULA_PATTERN`` can match: the ASCII characters, and the
lead bytes of no-break space, ideographic space and the fullwidth forms."""


def _may_be_formula(col: pa.ChunkedArray) -> bool:
    """Whether any cell starts with a byte of ``_FIRST_BYTES`` (a quick look at one byte per
    cell from the Arrow buffers, before the exact test)."""
    import numpy as np

    risky = np.zeros(256, dtype=bool)
    risky[list(_FIRST_BYTES)] = True
    for chunk in col.chunks:
        if len(chunk) == 0:
            continue
        offsets_buf, data_buf = chunk.buffers()[1:3]
        if data_buf is None:
            continue
        wide = str(chunk.type) == "large_string"
        offsets = np.frombuffer(offsets_buf, dtype=np.int64 if wide else np.int32)
        offsets = offsets[chunk.offset : chunk.offset + len(chunk) + 1]
        data = np.frombuffer(data_buf, dtype=np.uint8)
        starts = offsets[:-1][offsets[1:] > offsets[:-1]]
        if len(starts) and risky[data[starts]].any():
            return True
    return False


def _is_text(kind: pa.DataType) -> bool:
    import pyarrow as pa

    return bool(pa.types.is_string(kind) or pa.types.is_large_string(kind))


def neutralise_arrow(table: pa.Table) -> pa.Table:
    """Prefix an apostrophe to text cells a spreadsheet would run as a formula (Arrow columns;
    the same rule as ``levgap.outputs.neutralise``)."""
    import pyarrow as pa
    import pyarrow.compute as pc

    for i, field in enumerate(table.schema):
        kind = field.type
        if pa.types.is_dictionary(kind):
            kind = kind.value_type
        if pa.types.is_string_view(kind) or (kind != field.type and _is_text(kind)):
            # other text layouts (categories, views) as plain strings, to check every cell
            table = table.set_column(i, field.name, table.column(i).cast(pa.large_string()))
            field = table.schema.field(i)
        if not _is_text(field.type):
            continue
        col = table.column(i)
        if not _may_be_formula(col):
            continue
        risky = pc.match_substring_regex(col, FORMULA_PATTERN)
        if pc.any(risky).as_py():
            quote, glue = pa.scalar("'", field.type), pa.scalar("", field.type)
            safe = pc.if_else(risky, pc.binary_join_element_wise(quote, col, glue), col)
            table = table.set_column(i, field.name, safe)
    return table


def csv_writer(frame: pd.DataFrame) -> Callable[[BinaryIO], None]:
    """A function writing ``frame`` as CSV (the module's format) to a binary handle."""
    table = arrow_table(frame)

    def write(fh: BinaryIO) -> None:
        write_csv(table, fh)

    return write


def write_csv(table: pa.Table, fh: BinaryIO, *, chunk_rows: int = CHUNK_ROWS) -> None:
    """Write an Arrow table as CSV to ``fh``, neutralising text cells chunk by chunk."""
    import pyarrow.csv as pacsv

    names = table.column_names
    try:
        header = pacsv.WriteOptions(include_header=True, eol=EOL, quoting_header="none")
        head = _format(table.slice(0, 0), header)
    except Exception:  # noqa: BLE001 - a name with a comma or a quote: quote the names
        header = pacsv.WriteOptions(include_header=True, eol=EOL, quoting_header="needed")
        head = _format(table.slice(0, 0), header)
    fh.write(head if names else EOL.encode())
    body = pacsv.WriteOptions(include_header=False, eol=EOL)
    starts = range(0, table.num_rows, chunk_rows)
    if len(starts) <= 1:
        fh.write(_format(neutralise_arrow(table), body))
        return
    workers = max(1, min(2, os.cpu_count() or 1))
    with ThreadPoolExecutor(max_workers=workers) as pool:
        pending: deque[Future[Any]] = deque()
        for start in starts:
            part = table.slice(start, chunk_rows)
            pending.append(pool.submit(lambda p: _format(neutralise_arrow(p), body), part))
            if len(pending) > workers + 1:  # bounded: write the oldest before going on
                fh.write(pending.popleft().result())
        while pending:
            fh.write(pending.popleft().result())


def _format(table: pa.Table, options: Any) -> memoryview:
    import pyarrow as pa
    import pyarrow.csv as pacsv

    sink = pa.BufferOutputStream()
    pacsv.write_csv(table, sink, options)
    return memoryview(sink.getvalue())


def parquet_writer(frame: pd.DataFrame, run_id: str | None) -> Callable[[BinaryIO], None]:
    """A function writing ``frame`` (text neutralised) as Parquet to a binary handle."""
    table = arrow_table(frame)

    def write(fh: BinaryIO) -> None:
        import pyarrow.parquet as pq

        out = neutralise_arrow(table)
        if run_id is not None:
            meta = dict(out.schema.metadata or {})
            meta[b"levgap_run_id"] = run_id.encode("ascii")
            out = out.replace_schema_metadata(meta)
        pq.write_table(out, fh)

    return write
