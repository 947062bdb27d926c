"""Reading the SEC Financial Statement Data Sets: members, layouts, quoting and streaming.

A quarter is a zip (``2010q1.zip``) or a folder with its files extracted. Its ``sub.txt``
and ``num.txt`` are required; ``tag.txt`` and ``pre.txt`` are read when present. Every
file is tab-delimited with a header line of lowercase column names; columns are mapped by
name, never by position.

Two layouts exist and are told apart by the header of ``num.txt``:

* current: ``adsh tag version ddate qtrs uom segments coreg value footnote``; a field
  holding ``"`` is quoted and its inner quotes doubled (standard CSV quoting);
* old: ``adsh tag version coreg ddate qtrs uom value footnote``; fields hold raw,
  unbalanced quotes, so quoting is switched off for every file of that quarter (reading it
  with standard quoting joins rows and loses them without an error).

Text is UTF-8 (a byte-order mark is allowed); a file that is not valid UTF-8 is read
again as Latin-1 and a warning says so. ``num.txt`` is never held in memory whole: it is
parsed in blocks by pyarrow's streaming reader and each block is filtered before the next
is read.
"""

from __future__ import annotations

import zipfile
from collections.abc import Callable, Iterator, Sequence
from contextlib import contextmanager
from dataclasses import dataclass
from pathlib import Path
from typing import IO, Literal

import pyarrow as pa
import pyarrow.csv as pacsv

from levgap.errors import SchemaError

Layout = Literal["current", "old"]

#: Columns each file must have (by name, in any order).
REQUIRED_COLUMNS: dict[str, tuple[str, ...]] = {
    "sub": ("adsh", "cik", "name", "sic", "form", "period", "fp", "filed"),
    "num": ("adsh", "tag", "version", "ddate", "qtrs", "uom", "coreg", "value"),
    "tag": ("tag", "version", "custom", "abstract"),
    "pre": ("adsh", "tag", "version", "stmt", "inpth"),
}
REQUIRED_FILES: tuple[str, ...] = ("sub", "num")
OPTIONAL_FILES: tuple[str, ...] = ("tag", "pre")

#: Bytes parsed per block by the streaming reader; bounds the memory of one block.
BLOCK_SIZE = 4 << 20

BatchFilter = Callable[[pa.RecordBatch], pa.Array]


@dataclass(frozen=True, slots=True)
class Quarter:
    """One quarter of the data sets, located on disk.

    Parameters
    ----------
    path : pathlib.Path
        The zip file or folder given by the user.
    members : dict of str to str
        File key (``"sub"``, ``"num"``, ``"tag"``, ``"pre"``) -> member name inside the
        zip, or file path inside the folder.
    headers : dict of str to tuple of str
        File key -> its lowercase column names, in file order.
    layout : {"current", "old"}
        Layout of ``num.txt``: ``"current"`` when its header has ``segments``.
    """

    path: Path
    members: dict[str, str]
    headers: dict[str, tuple[str, ...]]
    layout: Layout

    @property
    def is_zip(self) -> bool:
        """Whether the quarter is a zip file (else a folder)."""
        return self.path.is_file()

    def where(self, key: str) -> str:
        """Human-readable location of one member, for messages."""
        return f"{self.path}:{self.members[key]}" if self.is_zip else self.members[key]


def locate_quarter(path: str | Path) -> Quarter:
    """Find the files of one quarter and read their headers.

    Parameters
    ----------
    path : str or pathlib.Path
        A quarterly zip or a folder holding ``sub.txt`` and ``num.txt``.

    Returns
    -------
    Quarter

    Raises
    ------
    SchemaError
        If the path does not exist, is not a readable zip, lacks ``sub.txt`` or ``num.txt``,
        or a file lacks a required column.
    """
    p = Path(path)
    if p.is_dir():
        names = {f.name.lower(): str(f) for f in sorted(p.iterdir()) if f.is_file()}
    elif p.is_file():
        try:
            with zipfile.ZipFile(p) as zf:
                names = {}
                for info in zf.infolist():
                    if not info.is_dir():
                        names.setdefault(Path(info.filename).name.lower(), info.filename)
        except (zipfile.BadZipFile, OSError) as exc:
            raise SchemaError(
                f"{p} must be a zip of the SEC Financial Statement Data Sets or a folder; "
                f"got an unreadable file ({exc}). Give the quarterly zip or its extracted folder."
            ) from None
    else:
        raise SchemaError(
            f"{p} must be an existing zip or folder; got nothing at that path. Check the path."
        )
    members: dict[str, str] = {}
    for key in REQUIRED_FILES + OPTIONAL_FILES:
        name = names.get(f"{key}.txt")
        if name is not None:
            members[key] = name
        elif key in REQUIRED_FILES:
            raise SchemaError(
                f"{p} must hold {key}.txt; got {sorted(names) or 'no files'}. Give a quarter "
                "of the SEC Financial Statement Data Sets (sub.txt and num.txt are required)."
            )
    provisional = Quarter(p, members, {}, "current")
    headers = {key: _read_header(provisional, key) for key in members}
    for key, cols in headers.items():
        missing = [c for c in REQUIRED_COLUMNS[key] if c not in cols]
        if missing:
            raise SchemaError(
                f"{provisional.where(key)} must have columns {list(REQUIRED_COLUMNS[key])}; "
                f"column {missing[0]!r} is missing (header: {list(cols)}). Give an unmodified "
                "file of the SEC data sets."
            )
    layout: Layout = "current" if "segments" in headers["num"] else "old"
    return Quarter(p, members, headers, layout)


@contextmanager
def _open_member(quarter: Quarter, key: str) -> Iterator[IO[bytes]]:
    if quarter.is_zip:
        with zipfile.ZipFile(quarter.path) as zf, zf.open(quarter.members[key]) as fh:
            yield fh
    else:
        with open(quarter.members[key], "rb") as fh:
            yield fh


def _read_header(quarter: Quarter, key: str) -> tuple[str, ...]:
    with _open_member(quarter, key) as fh:
        raw = fh.readline()
    try:
        line = raw.decode("utf-8-sig")
    except UnicodeDecodeError:
        line = raw.decode("latin-1")
    cols = tuple(c.strip().strip('"').lower() for c in line.rstrip("\r\n").split("\t"))
    if not raw or cols == ("",):
        raise SchemaError(
            f"{quarter.where(key)} must start with a header line of tab-separated column names; "
            "got an empty file. Give an unmodified file of the SEC data sets."
        )
    return cols


@dataclass(frozen=True, slots=True)
class ReadReport:
    """What a read had to work around, for the import's warnings.

    Parameters
    ----------
    latin1 : bool
        The file was not valid UTF-8 and was read as Latin-1.
    skipped_rows : int
        Data rows with a wrong number of fields, skipped.
    first_skipped : int or None
        1-based data row of the first skipped row, when known.
    """

    latin1: bool
    skipped_rows: int
    first_skipped: int | None

    def messages(self, where: str) -> list[str]:
        """One line per workaround, naming the file."""
        out = []
        if self.latin1:
            out.append(f"{where} is not valid UTF-8; it was read as Latin-1.")
        if self.skipped_rows:
            at = f" (first at data row {self.first_skipped})" if self.first_skipped else ""
            out.append(
                f"{where}: {self.skipped_rows} rows with a wrong number of fields were "
                f"skipped{at}."
            )
        return out


def read_filtered(
    quarter: Quarter,
    key: str,
    columns: Sequence[str],
    keep: BatchFilter | None = None,
) -> tuple[pa.Table, ReadReport]:
    """Stream one file of a quarter, keeping only some columns and rows.

    Parameters
    ----------
    quarter : Quarter
    key : {"sub", "num", "tag", "pre"}
        Which file.
    columns : sequence of str
        Columns to keep; those absent from the file (``segments`` in the old layout) come
        back as empty strings. Every column is read as text.
    keep : callable, optional
        Called on each parsed block; returns a boolean mask of the rows to keep. ``None``
        keeps every row.

    Returns
    -------
    table : pyarrow.Table
        The rows kept, in file order.
    report : ReadReport

    Raises
    ------
    SchemaError
        If the file cannot be parsed even as Latin-1.
    """
    try:
        return _read(quarter, key, columns, keep, "utf8")
    except pa.ArrowInvalid as exc:
        if "UTF8" not in str(exc) and "utf8" not in str(exc).lower():
            raise _parse_error(quarter, key, exc) from None
    try:
        return _read(quarter, key, columns, keep, "latin-1")
    except pa.ArrowInvalid as exc:
        raise _parse_error(quarter, key, exc) from None


def _parse_error(quarter: Quarter, key: str, exc: Exception) -> SchemaError:
    first = str(exc).splitlines()[0] if str(exc) else type(exc).__name__
    return SchemaError(
        f"{quarter.where(key)} must be tab-delimited text of the SEC data sets; got a parse "
        f"error ({first}). Give an unmodified file."
    )


def _read(
    quarter: Quarter,
    key: str,
    columns: Sequence[str],
    keep: BatchFilter | None,
    encoding: str,
) -> tuple[pa.Table, ReadReport]:
    header = quarter.headers[key]
    present = [c for c in columns if c in header]
    skipped = {"n": 0, "first": None}

    def on_invalid(row: pacsv.InvalidRow) -> str:
        skipped["n"] += 1
        if skipped["first"] is None and row.number is not None:
            skipped["first"] = row.number - 1  # the header is line 1
        return "skip"

    quoted = quarter.layout == "current"
    parse = pacsv.ParseOptions(
        delimiter="\t",
        quote_char='"' if quoted else False,
        double_quote=quoted,
        escape_char=False,
        newlines_in_values=quoted,
        ignore_empty_lines=True,
        invalid_row_handler=on_invalid,
    )
    read = pacsv.ReadOptions(
        column_names=list(header),
        skip_rows=1,
        block_size=BLOCK_SIZE,
        encoding=encoding,
        use_threads=False,
    )
    convert = pacsv.ConvertOptions(
        include_columns=present,
        column_types={c: pa.string() for c in present},
        strings_can_be_null=False,
        quoted_strings_can_be_null=False,
    )
    batches: list[pa.RecordBatch] = []
    with _open_member(quarter, key) as fh:
        reader = pacsv.open_csv(fh, read_options=read, parse_options=parse,
                                convert_options=convert)
        schema = reader.schema
        for batch in reader:
            if keep is not None:
                batch = batch.filter(keep(batch))
            if batch.num_rows:
                batches.append(batch)
    table = pa.Table.from_batches(batches, schema=schema)
    for c in columns:
        if c not in present:
            table = table.append_column(c, pa.array([""] * table.num_rows, pa.string()))
    table = table.select(list(columns))
    report = ReadReport(encoding != "utf8", int(skipped["n"]), skipped["first"])
    return table, report
