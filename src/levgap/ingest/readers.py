"""Readers for panel files: CSV, Parquet and XLSX, into columns of raw cells.

The readers only turn bytes into a table of cells under the user's own headers; they do not
interpret values (``levgap.ingest.validate`` does). The cells are columns (pyarrow and numpy
arrays, ``levgap.ingest.columns``), not a pandas frame, so that reading and validating a
panel (``levgap check``) does not load pandas. CSV cells are read as text, so that a
stray word in a numeric column becomes an exclusion with its row number rather than a
failed read, and so that ``firm_id`` and ``industry`` keep their leading zeros.

Row numbering
-------------
``source_rows`` holds, for every row of the table, its 1-based data row as a spreadsheet shows
it: the first record below the header is row 1, and blank records (empty lines, or records
whose every cell is empty) count as rows but are not data. A quoted field that spans several
lines is one record. Lines skipped with ``[input] skip_rows`` and blank lines above the header
are not counted. So in a spreadsheet the row of a record is ``source_row + 1 + skip_rows``
(when there are no blank lines above the header).
"""

from __future__ import annotations

import codecs
import csv
import hashlib
import io
import re
import warnings
import zipfile
import zlib
from collections.abc import Callable
from dataclasses import dataclass
from pathlib import Path
from typing import TYPE_CHECKING
from xml.etree.ElementTree import ParseError

import numpy as np
import pyarrow as pa
import pyarrow.csv as pacsv

from levgap.config import InputOptions
from levgap.errors import ConfigError, SchemaError, warn_data
from levgap.ingest.columns import Column, as_column, blank_rows, take, to_frame

if TYPE_CHECKING:
    import pandas as pd

DELIMITERS: tuple[str, ...] = (",", ";", "\t", "|")
"""Candidates tried, in this order of preference, when no delimiter is configured."""

_UTF8_NAMES = frozenset({"utf-8", "utf_8", "utf8", "u8", "utf-8-sig", "utf_8_sig"})
_MAX_SHOWN = 60


@dataclass(frozen=True, slots=True)
class RawTable:
    """Cells of a panel file under the user's headers, before validation.

    Parameters
    ----------
    names : tuple of str
        The file's headers, one per column (a header may repeat; validation refuses that).
    columns : tuple of arrays
        One column of cells per header, one cell per non-blank data record
        (``levgap.ingest.columns``). CSV cells are text; Parquet and XLSX cells keep the type
        the file gave them.
    source_rows : numpy.ndarray
        1-based data row of each record (int64), see the module docstring.
    source : str
        Path of the file.
    sha256 : str
        Digest of the file's bytes.
    notes : tuple of str
        Things the reader did that the user should know (encoding fallback, ...).
    """

    names: tuple[str, ...]
    columns: tuple[Column, ...]
    source_rows: np.ndarray
    source: str
    sha256: str
    notes: tuple[str, ...] = ()

    @property
    def n_input_rows(self) -> int:
        """Number of non-blank data records."""
        return len(self.source_rows)

    @property
    def frame(self) -> pd.DataFrame:
        """The cells as a pandas DataFrame under the file's headers (built on each call)."""
        return to_frame(self.names, self.columns)


def _table(names: list[str], columns: list[Column], rows: np.ndarray, p: Path, sha: str,
           notes: tuple[str, ...]) -> RawTable:
    """A RawTable without the records whose every cell is blank."""
    keep = ~blank_rows(columns, len(rows))
    if not keep.all():
        idx = np.flatnonzero(keep)
        columns = [take(c, idx) for c in columns]
        rows = rows[keep]
    return RawTable(tuple(names), tuple(columns), rows, str(p), sha, notes)


def read_table(path: str | Path, options: InputOptions | None = None) -> RawTable:
    """Read a panel file into raw cells, choosing the reader from its content and suffix.

    Parameters
    ----------
    path : str or pathlib.Path
        A ``.csv`` (or other delimited text), ``.parquet`` or ``.xlsx`` file.
    options : InputOptions, optional
        Delimiter, decimal mark, encoding, sheet and lines to skip; defaults detect.

    Returns
    -------
    RawTable

    Raises
    ------
    SchemaError
        The file is missing, empty, not a table levgap can read, or malformed; the one-line
        message names the file and, where known, the row and column.
    """
    options = options or InputOptions()
    p = Path(path)
    data = _read_bytes(p)
    kind = _sniff_kind(p, data)
    return READERS[kind](p, data, options)


def _read_bytes(p: Path) -> bytes:
    import stat

    try:
        if not stat.S_ISREG(p.stat().st_mode) and not p.is_dir():
            # a device (/dev/zero) or a pipe never ends: refused before any read
            raise SchemaError(
                f"{p}: the panel must be a regular file; got a device or pipe. Save the data "
                "to a CSV, Parquet or XLSX file first."
            )
        return p.read_bytes()
    except FileNotFoundError:
        raise SchemaError(
            f"{p}: the panel file must exist; got no such file. Check the path."
        ) from None
    except IsADirectoryError:
        raise SchemaError(
            f"{p}: the panel must be a file; got a folder. Give the path of a CSV, Parquet "
            "or XLSX file."
        ) from None
    except OSError as exc:
        raise SchemaError(
            f"{p}: the panel file must be readable; got {exc.strerror or exc}. Check its "
            "permissions."
        ) from None


def _sniff_kind(p: Path, data: bytes) -> str:
    if data[:4] == b"PAR1":
        return "parquet"
    if data[:4] == b"PK\x03\x04":
        return "xlsx"
    if data[:8] == b"\xd0\xcf\x11\xe0\xa1\xb1\x1a\xe1":
        raise SchemaError(
            f"{p}: the panel must be CSV, Parquet or XLSX; got an old binary Excel (.xls) "
            "file. Save it as .xlsx or .csv."
        )
    suffix = p.suffix.lower()
    if suffix in {".parquet", ".pq"}:
        raise SchemaError(
            f"{p}: a .parquet file must start with the Parquet signature; got other bytes. "
            "Re-export the file."
        )
    if suffix in {".xlsx", ".xlsm"}:
        raise SchemaError(
            f"{p}: an .xlsx file must be a zipped workbook; got other bytes. Re-save it "
            "from the spreadsheet program."
        )
    return "csv"


# ---------------------------------------------------------------------------------------------
# CSV


def _read_csv(p: Path, data: bytes, options: InputOptions) -> RawTable:
    sha = hashlib.sha256(data).hexdigest()
    data, notes = _to_utf8(p, data, options.encoding)
    if b"\n" not in data[:1 << 16] and b"\r" in data and b"\n" not in data:
        data = data.replace(b"\r", b"\n")  # classic Mac line ends
    if re.search(rb"[^ \t\r\n]", data) is None:  # no copy, unlike data.strip()
        raise SchemaError(
            f"{p}: the panel file must hold a header line and data rows; got an empty file. "
            "Start from `levgap template`."
        )
    start = _skip_lines(p, data, options.skip_rows)
    start = _skip_blank_lines(data, start)
    if start >= len(data):
        raise SchemaError(
            f"{p}: a header line must follow the {options.skip_rows} skipped line(s); got the "
            "end of the file. Lower [input] skip_rows."
        )
    header_end = data.find(b"\n", start)
    header_end = len(data) if header_end < 0 else header_end
    if data.count(b'"', start, header_end) % 2:
        raise SchemaError(
            f"{p}: the header line must have balanced quotes; got an unclosed quote in "
            f"{_short(data[start:header_end])}. Fix the header line."
        )
    header_text = data[start:header_end].decode("utf-8").rstrip("\r\n")
    delimiter = options.delimiter or _detect_delimiter(header_text)
    names = _header_names(header_text, delimiter)
    body_start = min(header_end + 1, len(data))
    body = memoryview(data)[body_start:]

    if re.search(rb"[^ \t\r\n]", body) is None:
        empty = tuple(pa.nulls(0, pa.string()) for _ in names)
        return RawTable(tuple(names), empty, np.zeros(0, dtype=np.int64), str(p), sha,
                        tuple(notes))

    column_names = _unique(names)
    has_quotes = data.find(b'"', body_start) >= 0  # bytes.find is memchr; `in` on a view is not
    try:
        table = pacsv.read_csv(
            pa.BufferReader(pa.py_buffer(body)),
            read_options=pacsv.ReadOptions(column_names=column_names, block_size=1 << 24),
            parse_options=pacsv.ParseOptions(
                delimiter=delimiter,
                quote_char='"',
                double_quote=True,
                newlines_in_values=has_quotes,
                ignore_empty_lines=True,
            ),
            convert_options=pacsv.ConvertOptions(
                column_types={n: pa.string() for n in column_names},
                strings_can_be_null=False,
                quoted_strings_can_be_null=False,
                null_values=[],
            ),
        )
    except pa.ArrowException as exc:
        raise _locate_csv_problem(p, bytes(body), delimiter, len(names), exc) from None

    # the file's own headers, duplicates included: validation refuses a repeated header
    columns = [table.column(j) for j in range(table.num_columns)]
    n = table.num_rows
    del table
    if _has_empty_lines(body):
        rows = _record_numbers(bytes(body), delimiter)
        if len(rows) != n:
            rows = np.arange(1, n + 1, dtype=np.int64)
            notes.append(
                "blank lines and multi-line quoted cells both occur; row numbers count "
                "records without the blank lines"
            )
    else:
        rows = np.arange(1, n + 1, dtype=np.int64)
    return _table(names, columns, rows, p, sha, tuple(notes))


def _to_utf8(p: Path, data: bytes, encoding: str | None) -> tuple[bytes, list[str]]:
    notes: list[str] = []
    if encoding is not None:
        try:
            name = codecs.lookup(encoding).name
        except LookupError:
            raise ConfigError(
                f"[input] encoding must be a known text encoding such as 'utf-8' or 'latin-1'; "
                f"got {encoding!r}."
            ) from None
        if name.replace("_", "-") in _UTF8_NAMES or name in _UTF8_NAMES:
            data = data.removeprefix(codecs.BOM_UTF8)
            _check_utf8(p, data, f"{encoding} (as configured)")
            return data, notes
        try:
            text = data.decode(name)
        except UnicodeDecodeError as exc:
            line = data.count(b"\n", 0, exc.start) + 1
            raise SchemaError(
                f"{p}: line {line} must be valid {encoding} text; got byte "
                f"0x{data[exc.start]:02x}. Fix [input] encoding or re-save the file."
            ) from None
        return text.lstrip("\ufeff").encode("utf-8"), notes
    if data[:2] in (codecs.BOM_UTF16_LE, codecs.BOM_UTF16_BE):
        try:
            text = data.decode("utf-16")
        except UnicodeDecodeError:
            raise SchemaError(
                f"{p}: a file starting with a UTF-16 mark must be UTF-16 text; got invalid "
                "bytes. Re-save it as UTF-8 CSV."
            ) from None
        notes.append("read as UTF-16 (byte-order mark found)")
        return text.lstrip("\ufeff").encode("utf-8"), notes
    data = data.removeprefix(codecs.BOM_UTF8)
    head = data[:4096]
    if head.count(b"\x00") * 4 > len(head) > 0:
        # ASCII text saved as UTF-16 without a byte-order mark: every other byte is NUL
        even, odd = head[0::2].count(b"\x00"), head[1::2].count(b"\x00")
        guess = "utf-16-le" if odd > even else "utf-16-be"
        raise SchemaError(
            f"{p}: the panel must be text in UTF-8 (or a configured [input] encoding); got "
            f"bytes that look like UTF-16 without a byte-order mark. Re-save it as UTF-8 CSV, "
            f"or set [input] encoding = \"{guess}\" in run.toml."
        )
    if data.isascii():
        return data, notes
    try:
        data.decode("utf-8")
    except UnicodeDecodeError:
        try:
            text = data.decode("cp1252")
            used = "Windows-1252 (Latin-1)"
        except UnicodeDecodeError:
            text = data.decode("latin-1")
            used = "Latin-1"
        msg = (
            f"{p}: text is not valid UTF-8; read it as {used}. Set [input] encoding to "
            "silence this or re-save the file as UTF-8."
        )
        warn_data(msg, stacklevel=5)  # the caller of read_panel
        notes.append(msg)
        return text.encode("utf-8"), notes
    return data, notes


def _check_utf8(p: Path, data: bytes, what: str) -> None:
    if data.isascii():
        return
    try:
        data.decode("utf-8")
    except UnicodeDecodeError as exc:
        line = data.count(b"\n", 0, exc.start) + 1
        raise SchemaError(
            f"{p}: line {line} must be valid {what} text; got byte 0x{data[exc.start]:02x}. "
            "Set [input] encoding (e.g. 'latin-1') or re-save the file as UTF-8."
        ) from None


def _skip_lines(p: Path, data: bytes, n: int) -> int:
    pos = 0
    for _ in range(n):
        nl = data.find(b"\n", pos)
        if nl < 0:
            raise SchemaError(
                f"{p}: [input] skip_rows must be less than the number of lines; got {n}. "
                "Lower it."
            )
        pos = nl + 1
    return pos


def _skip_blank_lines(data: bytes, pos: int) -> int:
    while pos < len(data):
        nl = data.find(b"\n", pos)
        end = len(data) if nl < 0 else nl
        if data[pos:end].strip(b" \t\r"):
            return pos
        pos = end + 1
    return pos


def _one_line(exc: BaseException, limit: int = 160) -> str:
    """A library's error text on one line (they can span several), shortened."""
    text = " ".join(str(exc).split()) or type(exc).__name__
    return text if len(text) <= limit else text[: limit - 3] + "..."


def _short(line: bytes) -> str:
    text = line.decode("utf-8", errors="replace").strip()
    return repr(text if len(text) <= 60 else text[:57] + "...")


def _detect_delimiter(header: str) -> str:
    counts = {d: _count_outside_quotes(header, d) for d in DELIMITERS}
    best = max(DELIMITERS, key=lambda d: counts[d])
    return best if counts[best] > 0 else ","


def _count_outside_quotes(text: str, ch: str) -> int:
    inside = False
    n = 0
    for c in text:
        if c == '"':
            inside = not inside
        elif c == ch and not inside:
            n += 1
    return n


def _header_names(header: str, delimiter: str) -> list[str]:
    try:
        fields = next(csv.reader([header], delimiter=delimiter, quotechar='"'))
    except (csv.Error, StopIteration):
        fields = header.split(delimiter)
    names = []
    for i, f in enumerate(fields):
        name = f.replace("\x00", "").strip()
        names.append(name if name else f"column_{i + 1}")
    return names


def _unique(names: list[str]) -> list[str]:
    seen: dict[str, int] = {}
    out = []
    for n in names:
        k = seen.get(n, 0)
        out.append(n if k == 0 else f"{n}.{k}")
        seen[n] = k + 1
    return out


def _has_empty_lines(body: memoryview) -> bool:
    head = bytes(body[:2])
    if head[:1] == b"\n" or head == b"\r\n":
        return True
    return re.search(rb"\n\r?\n", body) is not None


def _record_numbers(body: bytes, delimiter: str) -> np.ndarray:
    """1-based record number of every non-empty record, blank lines counted as records."""
    text = body.decode("utf-8", errors="replace").replace("\x00", "")
    rows = []
    n = 0
    try:
        for rec in csv.reader(io.StringIO(text, newline=""), delimiter=delimiter, quotechar='"'):
            n += 1
            if rec:
                rows.append(n)
    except csv.Error:
        return np.zeros(0, dtype=np.int64)
    # a final empty line after the last record is not a record
    return np.asarray(rows, dtype=np.int64)


def _locate_csv_problem(
    p: Path, body: bytes, delimiter: str, n_fields: int, exc: Exception
) -> SchemaError:
    """Find the first malformed record with the csv module, for a message naming its row."""
    text = body.decode("utf-8", errors="replace").replace("\x00", "")
    shown = "tab" if delimiter == "\t" else repr(delimiter)
    n = 0
    reader = csv.reader(io.StringIO(text, newline=""), delimiter=delimiter, quotechar='"')
    try:
        for rec in reader:
            n += 1
            if rec and len(rec) != n_fields:
                return SchemaError(
                    f"{p}: row {n} must have {n_fields} fields like the header (delimiter "
                    f"{shown}); got {len(rec)}. Fix the row, check its quotes, or set "
                    "[input] delimiter."
                )
    except csv.Error as err:
        return SchemaError(
            f"{p}: row {n + 1} must be well-formed CSV; got {_one_line(err)}. Fix the row's "
            "quotes."
        )
    detail = _one_line(exc)
    return SchemaError(
        f"{p}: the file must be well-formed CSV; got {detail[:200]}. Check quotes and the "
        "delimiter."
    )


# ---------------------------------------------------------------------------------------------
# Parquet


def _read_parquet(p: Path, data: bytes, options: InputOptions) -> RawTable:
    import pyarrow.parquet as pq

    sha = hashlib.sha256(data).hexdigest()
    try:
        # ParquetFile, not read_table: read_table loads pyarrow.dataset, which imports pandas
        table = pq.ParquetFile(pa.BufferReader(pa.py_buffer(data))).read()
        # an index that pandas wrote beside the columns is not panel data
        keep = [j for j, n in enumerate(table.column_names)
                if not n.startswith("__index_level_")]
        names = [str(table.column_names[j]) for j in keep]
        columns = [as_column(table.column(j)) for j in keep]
    except (pa.ArrowException, OSError, ValueError, KeyError, TypeError) as exc:
        detail = _one_line(exc)
        raise SchemaError(
            f"{p}: the file must be a readable Parquet table; got {detail}. Re-export it."
        ) from None
    rows = np.arange(1, table.num_rows + 1, dtype=np.int64)
    return _table(names, columns, rows, p, sha, ())


# ---------------------------------------------------------------------------------------------
# XLSX


def _read_xlsx(p: Path, data: bytes, options: InputOptions) -> RawTable:
    from openpyxl.utils.exceptions import InvalidFileException

    sha = hashlib.sha256(data).hexdigest()
    # what a damaged workbook raises inside openpyxl: broken zip, deflate stream or XML,
    # missing parts, and cells whose values do not parse
    broken = (zipfile.BadZipFile, zlib.error, ParseError, InvalidFileException, KeyError,
              OSError, ValueError, TypeError, IndexError, EOFError, NotImplementedError)
    # openpyxl warns about parts it skips (styles, extensions); they become notes
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        cells = _xlsx_cells(p, data, options, broken)
    notes = tuple(dict.fromkeys(f"workbook: {_one_line(w.message)}" for w in caught))[:5]
    return _xlsx_table(p, cells, options, sha, notes)


def _xlsx_cells(
    p: Path, data: bytes, options: InputOptions, broken: tuple[type[BaseException], ...]
) -> list[tuple]:
    import openpyxl

    try:
        wb = openpyxl.load_workbook(io.BytesIO(data), read_only=True, data_only=True)
    except broken as exc:
        raise SchemaError(
            f"{p}: the file must be a readable .xlsx workbook; got {type(exc).__name__}: "
            f"{_one_line(exc)}. Re-save it from the spreadsheet program."
        ) from None
    try:
        if options.sheet is None:
            ws = wb.worksheets[0] if wb.worksheets else None
            if ws is None:
                raise SchemaError(f"{p}: the workbook must hold a worksheet; got none.")
        elif options.sheet in wb.sheetnames:
            ws = wb[options.sheet]
        else:
            raise SchemaError(
                f"{p}: [input] sheet must name a worksheet of the workbook; got "
                f"{options.sheet!r}, sheets are {wb.sheetnames}. Fix the sheet name."
            )
        try:
            cells = list(ws.iter_rows(values_only=True))
        except broken as exc:
            raise SchemaError(
                f"{p}: the worksheet must be readable; got {type(exc).__name__}: "
                f"{_one_line(exc)}. Re-save the workbook."
            ) from None
    finally:
        wb.close()
    return cells


def _xlsx_table(
    p: Path, cells: list[tuple], options: InputOptions, sha: str, notes: tuple[str, ...]
) -> RawTable:
    if options.skip_rows >= len(cells) and options.skip_rows > 0:
        raise SchemaError(
            f"{p}: [input] skip_rows must be less than the number of rows; got "
            f"{options.skip_rows}. Lower it."
        )
    cells = cells[options.skip_rows:]
    while cells and _blank_record(cells[0]):
        cells.pop(0)
    if not cells:
        raise SchemaError(
            f"{p}: the worksheet must hold a header row and data rows; got an empty sheet. "
            "Start from `levgap template`."
        )
    header = list(cells[0])
    body = cells[1:]
    width = max([len(header), *(len(r) for r in body)]) if body else len(header)
    header += [None] * (width - len(header))
    # drop trailing columns with neither a header nor any value
    while width and header[width - 1] is None and all(
        len(r) < width or r[width - 1] is None for r in body
    ):
        width -= 1
    names = []
    for i, h in enumerate(header[:width]):
        name = "" if h is None else str(h).strip()
        if isinstance(h, float) and h.is_integer():
            name = str(int(h))
        names.append(name if name else f"column_{i + 1}")
    rows, records = [], []
    for i, r in enumerate(body, start=1):
        if _blank_record(r):
            continue
        rows.append(i)
        records.append(tuple(r[:width]) + (None,) * (width - min(len(r), width)))
    columns = tuple(as_column([r[j] for r in records]) for j in range(width))
    return RawTable(tuple(names), columns, np.asarray(rows, dtype=np.int64), str(p), sha, notes)


def _blank_record(r: tuple) -> bool:
    return all(v is None or (isinstance(v, str) and not v.strip()) for v in r)


READERS: dict[str, Callable[[Path, bytes, InputOptions], RawTable]] = {
    "csv": _read_csv,
    "parquet": _read_parquet,
    "xlsx": _read_xlsx,
}
"""Reader for each file kind, chosen from the file's first bytes, else its suffix."""
