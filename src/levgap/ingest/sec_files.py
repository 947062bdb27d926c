"""Reading the SEC Financial Statement Data Sets: members, layouts, quoting, streaming, limits.

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
again as Latin-1 and a warning says so. No file is ever held in memory whole: each is
parsed in blocks by pyarrow's streaming reader and each block is filtered before the next
is read.

Hostile input
-------------
Every limit is in :class:`ReadLimits`; crossing one is a :class:`~levgap.errors.SchemaError`
naming the file (one line, exit code 2 on the command line), never a crash:

* the decompressed bytes read from each member are counted and capped (a zip bomb stops at
  the cap, whatever the sizes its directory claims);
* the header line is read with a bounded length;
* a row longer than two blocks (8 MiB) is refused, not a reason to grow the block;
* malformed rows (a wrong number of fields) are skipped and counted, but past
  ``malformed_rows`` of them, or when they outnumber the good rows, the file is refused as
  not being the data sets' text;
* the rows kept per submission (facts, presentation lines) and the submissions kept per
  quarter are capped, so a file of repeated rows cannot fill the memory;
* unsupported compression (deflate64, ...), encrypted members and corrupt members (a CRC
  mismatch, a truncated stream) are refused with the member named.
"""

from __future__ import annotations

import io
import zipfile
import zlib
from collections.abc import Callable, Iterator, Sequence
from contextlib import contextmanager
from dataclasses import dataclass, field
from pathlib import Path
from typing import IO, Literal

import pyarrow as pa
import pyarrow.compute as pc
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

#: Bytes parsed per block by the streaming reader; bounds the memory of one block and the
#: length of one row.
BLOCK_SIZE = 4 << 20

BatchFilter = Callable[[pa.RecordBatch], pa.Array]

_GIB = 1 << 30


@dataclass(frozen=True, slots=True)
class ReadLimits:
    """Bounds on what one quarter may make the importer read and keep.

    The defaults are far above any real quarter (a modern ``num.txt`` holds about 3-5
    million facts, under 1 GiB; one 10-K about 1,000-5,000 of the facts the importer reads)
    and far below what would exhaust a machine's memory.

    Parameters
    ----------
    member_bytes : dict of str to int
        Decompressed bytes read from each file (``"sub"``, ``"num"``, ``"tag"``, ``"pre"``).
    header_bytes : int, default=65536
        Longest header line.
    malformed_rows : int, default=10000
        Malformed rows skipped in one file before it is refused.
    rows_per_submission : int, default=200000
        Rows kept (after filtering) for one submission in one file.
    submissions : int, default=200000
        Submissions kept from one ``sub.txt``.
    """

    member_bytes: dict[str, int] = field(default_factory=lambda: {
        "sub": 1 * _GIB, "tag": 2 * _GIB, "pre": 16 * _GIB, "num": 16 * _GIB})
    header_bytes: int = 64 << 10
    malformed_rows: int = 10_000
    rows_per_submission: int = 200_000
    submissions: int = 200_000


DEFAULT_LIMITS = ReadLimits()


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
    limits : ReadLimits
        What reading this quarter may cost.
    """

    path: Path
    members: dict[str, str]
    headers: dict[str, tuple[str, ...]]
    layout: Layout
    limits: ReadLimits = DEFAULT_LIMITS

    @property
    def is_zip(self) -> bool:
        """Whether the quarter is a zip file (else a folder)."""
        return self.path.is_file()

    def where(self, key: str) -> str:
        """Human-readable location of one member, for messages."""
        return f"{self.path}:{self.members[key]}" if self.is_zip else self.members[key]


def locate_quarter(path: str | Path, limits: ReadLimits = DEFAULT_LIMITS) -> Quarter:
    """Find the files of one quarter and read their headers.

    Parameters
    ----------
    path : str or pathlib.Path
        A quarterly zip or a folder holding ``sub.txt`` and ``num.txt``.
    limits : ReadLimits, default=DEFAULT_LIMITS

    Returns
    -------
    Quarter

    Raises
    ------
    SchemaError
        If the path does not exist, is not a readable zip, lacks ``sub.txt`` or ``num.txt``,
        or a file lacks a required column or has an unreadable header.
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
        except (zipfile.BadZipFile, OSError, ValueError, EOFError) as exc:
            raise SchemaError(
                f"{p} must be a zip of the SEC Financial Statement Data Sets or a folder; "
                f"got an unreadable file ({_first_line(exc)}). Give the quarterly zip or its "
                "extracted folder."
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
            found = sorted(names)[:10] or "no files"
            raise SchemaError(
                f"{p} must hold {key}.txt; got {found}. Give a quarter of the SEC Financial "
                "Statement Data Sets (sub.txt and num.txt are required)."
            )
    provisional = Quarter(p, members, {}, "current", limits)
    headers = {key: _read_header(provisional, key) for key in members}
    for key, cols in headers.items():
        missing = [c for c in REQUIRED_COLUMNS[key] if c not in cols]
        if missing:
            shown = [c[:40] for c in cols[:12]]
            raise SchemaError(
                f"{provisional.where(key)} must have columns {list(REQUIRED_COLUMNS[key])}; "
                f"column {missing[0]!r} is missing (header: {shown}). Give an unmodified "
                "file of the SEC data sets."
            )
    layout: Layout = "current" if "segments" in headers["num"] else "old"
    return Quarter(p, members, headers, layout, limits)


def _first_line(exc: BaseException) -> str:
    text = str(exc).strip()
    return text.splitlines()[0][:200] if text else type(exc).__name__


# Errors the zip module and its decompressors raise on members it cannot give back:
# BadZipFile (CRC mismatch, bad header), NotImplementedError (deflate64 and other methods),
# RuntimeError (encrypted member), zlib.error and EOFError (corrupt or truncated stream).
_MEMBER_ERRORS = (zipfile.BadZipFile, NotImplementedError, RuntimeError, zlib.error, EOFError,
                  OSError, ValueError)


class _Capped(io.RawIOBase):
    """A read-only stream that stops with an error after ``cap`` bytes."""

    def __init__(self, raw: IO[bytes], cap: int, where: str) -> None:
        self._raw = raw
        self._left = cap
        self._cap = cap
        self._where = where

    def readable(self) -> bool:
        return True

    def readinto(self, buffer: memoryview) -> int:  # type: ignore[override]
        if self._left <= 0:
            if self._raw.read(1):
                raise SchemaError(
                    f"{self._where} must be at most {self._cap:,} bytes uncompressed; it holds "
                    "more. Give an unmodified file of the SEC data sets."
                )
            return 0
        view = memoryview(buffer)[: min(len(buffer), self._left)]
        n = self._raw.readinto(view)  # type: ignore[attr-defined]
        n = n or 0
        self._left -= n
        return n


@contextmanager
def _open_member(quarter: Quarter, key: str) -> Iterator[IO[bytes]]:
    where = quarter.where(key)
    cap = quarter.limits.member_bytes.get(key, 16 * _GIB)
    try:
        if quarter.is_zip:
            with zipfile.ZipFile(quarter.path) as zf, zf.open(quarter.members[key]) as fh:
                yield io.BufferedReader(_Capped(fh, cap, where), buffer_size=1 << 20)
        else:
            with open(quarter.members[key], "rb") as fh:
                yield io.BufferedReader(_Capped(fh, cap, where), buffer_size=1 << 20)
    except (SchemaError, pa.ArrowException):  # parse errors are the reader's to word
        raise
    except _MEMBER_ERRORS as exc:
        raise SchemaError(
            f"{where} must be a readable member of the quarter; got {_member_problem(exc)}. "
            "Download the quarter again (the SEC's zips use plain deflate, no encryption)."
        ) from None


def _member_problem(exc: BaseException) -> str:
    text = _first_line(exc)
    if isinstance(exc, NotImplementedError):
        return f"an unsupported compression method ({text})"
    if isinstance(exc, RuntimeError) and "encrypt" in text.lower():
        return f"an encrypted member ({text})"
    if isinstance(exc, zipfile.BadZipFile | zlib.error | EOFError):
        return f"a corrupt member ({text})"
    return f"a read error ({text})"


def _read_header(quarter: Quarter, key: str) -> tuple[str, ...]:
    limit = quarter.limits.header_bytes
    with _open_member(quarter, key) as fh:
        raw = fh.readline(limit + 1)
    if len(raw) > limit:
        raise SchemaError(
            f"{quarter.where(key)} must start with a header line of at most {limit:,} bytes; "
            "got a longer first line. Give an unmodified file of the SEC data sets."
        )
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
    *,
    per: str | None = None,
    max_rows: int | None = None,
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
    per : str, optional
        A kept column (``"adsh"``): no value of it may keep more than
        ``quarter.limits.rows_per_submission`` rows.
    max_rows : int, optional
        Most rows kept in all.

    Returns
    -------
    table : pyarrow.Table
        The rows kept, in file order.
    report : ReadReport

    Raises
    ------
    SchemaError
        If the file cannot be parsed even as Latin-1, is not the data sets' text (too many
        malformed rows, a row longer than a block), crosses a limit of
        :class:`ReadLimits`, or is a corrupt, encrypted or unsupported zip member.

    Notes
    -----
    The member is decompressed here, in Python, in blocks of about ``BLOCK_SIZE`` bytes cut
    at line ends (outside quoted fields in the current layout), and each block is parsed by
    pyarrow from memory: pyarrow never holds a Python file object, so no background thread
    of its own calls back into Python (which could crash the interpreter at exit after an
    error). Blocks are checked as UTF-8 before parsing; a file that is not valid UTF-8 is
    read again as Latin-1, each block converted to UTF-8.
    """
    try:
        return _read(quarter, key, columns, keep, False, per, max_rows)
    except _NotUtf8:
        pass
    return _read(quarter, key, columns, keep, True, per, max_rows)


class _NotUtf8(Exception):
    """A block of the file is not valid UTF-8."""


def _parse_error(quarter: Quarter, key: str, exc: Exception) -> SchemaError:
    first = _first_line(exc)
    return SchemaError(
        f"{quarter.where(key)} must be tab-delimited text of the SEC data sets; got a parse "
        f"error ({first}). Give an unmodified file."
    )


def _blocks(fh: IO[bytes], quoted: bool, quarter: Quarter, key: str) -> Iterator[bytes]:
    """Blocks of whole rows: cut at a line end that is not inside a quoted field."""
    carry = b""
    while True:
        data = fh.read(BLOCK_SIZE)
        if not data:
            if carry:
                yield carry
            return
        data = carry + data
        cut = data.rfind(b"\n")
        # With standard quoting, a line end inside a quoted field is not a row end: keep the
        # quotes before the cut balanced (doubled quotes count twice and cancel out).
        tries = 0
        while quoted and cut >= 0 and data.count(b'"', 0, cut) % 2 and tries < 10_000:
            cut = data.rfind(b"\n", 0, cut)
            tries += 1
        if cut < 0:
            if len(data) > 2 * BLOCK_SIZE:
                raise SchemaError(
                    f"{quarter.where(key)} must be tab-delimited text of the SEC data sets; got "
                    f"a row longer than {2 * BLOCK_SIZE:,} bytes. Give an unmodified file."
                )
            carry = data
            continue
        yield data[: cut + 1]
        carry = data[cut + 1:]


def _read(
    quarter: Quarter,
    key: str,
    columns: Sequence[str],
    keep: BatchFilter | None,
    latin1: bool,
    per: str | None,
    max_rows: int | None,
) -> tuple[pa.Table, ReadReport]:
    header = quarter.headers[key]
    present = [c for c in columns if c in header]
    limits = quarter.limits
    skipped = {"n": 0, "first": None, "offset": 0}

    def on_invalid(row: pacsv.InvalidRow) -> str:
        skipped["n"] += 1
        if skipped["first"] is None and row.number is not None:
            skipped["first"] = skipped["offset"] + row.number
        # Past the limit the parser stops with an error rather than skim a file of garbage.
        return "skip" if skipped["n"] <= limits.malformed_rows else "error"

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
    read = pacsv.ReadOptions(column_names=list(header), use_threads=False,
                             block_size=4 * BLOCK_SIZE)
    convert = pacsv.ConvertOptions(
        include_columns=present,
        column_types={c: pa.string() for c in present},
        strings_can_be_null=False,
        quoted_strings_can_be_null=False,
    )
    schema = pa.schema([(c, pa.string()) for c in present])
    batches: list[pa.RecordBatch] = []
    counts: dict[str, int] = {}
    kept = good = 0
    with _open_member(quarter, key) as fh:
        fh.readline(limits.header_bytes + 1)  # the header, read (bounded) when located
        for block in _blocks(fh, quoted, quarter, key):
            if latin1:
                block = block.decode("latin-1").encode("utf-8")
            else:
                try:
                    block.decode("utf-8")
                except UnicodeDecodeError:
                    raise _NotUtf8() from None
            try:
                table = pacsv.read_csv(pa.py_buffer(block), read_options=read,
                                       parse_options=parse, convert_options=convert)
            except pa.ArrowInvalid as exc:
                raise _parse_error(quarter, key, exc) from None
            skipped["offset"] += block.count(b"\n")
            good += table.num_rows
            for batch in table.select(present).to_batches():
                if keep is not None:
                    batch = batch.filter(keep(batch))
                if not batch.num_rows:
                    continue
                kept += batch.num_rows
                if max_rows is not None and kept > max_rows:
                    raise SchemaError(
                        f"{quarter.where(key)} must hold at most {max_rows:,} rows of "
                        "interest; it holds more. Give an unmodified file of the SEC data sets."
                    )
                if per is not None:
                    _count_per(batch, per, counts, limits.rows_per_submission, quarter, key)
                batches.append(batch)
    if skipped["n"] and skipped["n"] > good:
        raise SchemaError(
            f"{quarter.where(key)} must be tab-delimited text of the SEC data sets; got "
            f"{skipped['n']:,} malformed rows against {good:,} readable ones. Give an "
            "unmodified file."
        )
    out = pa.Table.from_batches(batches, schema=schema)
    for c in columns:
        if c not in present:
            out = out.append_column(c, pa.array([""] * out.num_rows, pa.string()))
    out = out.select(list(columns))
    report = ReadReport(latin1, int(skipped["n"]), skipped["first"])
    return out, report


def _count_per(batch: pa.RecordBatch, column: str, counts: dict[str, int], limit: int,
               quarter: Quarter, key: str) -> None:
    values = pc.value_counts(batch.column(batch.schema.names.index(column)))
    for item in values.to_pylist():
        name, n = item["values"], item["counts"]
        total = counts.get(name, 0) + n
        counts[name] = total
        if total > limit:
            raise SchemaError(
                f"{quarter.where(key)} must hold at most {limit:,} rows of interest for one "
                f"submission; {column} {str(name)[:40]!r} has more. Give an unmodified file "
                "of the SEC data sets."
            )
