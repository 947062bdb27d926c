"""The atomic writer, the digest written beside it, and the one comparison with input files.

Pandas-free: the quick commands use it.
"""

from __future__ import annotations

import contextlib
import hashlib
import io
import json
import math
import os
import re
import secrets
from collections.abc import Callable, Iterable, Iterator, Mapping
from pathlib import Path
from typing import Any, BinaryIO

from levgap.errors import OutputError

TEMP_PREFIX = ".levgap-tmp-"
_TEMP = re.compile(r"^\.levgap-tmp-[0-9a-f]{16}(\.[A-Za-z0-9]{1,10})?$")
_NAME = re.compile(r"^[A-Za-z0-9_][A-Za-z0-9_.-]{0,200}$")
OWN_SUFFIXES: tuple[str, ...] = (
    ".csv", ".parquet", ".json", ".html", ".xlsx", ".tex", ".md", ".svg", ".png", ".toml",
)
"""Kinds of file levgap writes; a name recorded in a marker with another suffix is not ours."""


def is_temp_name(name: str) -> bool:
    """Whether ``name`` is one of levgap's temporary file names: ``.levgap-tmp-`` then 8 random
    hex digits and the 8 of their tag (``_temp_tag``), so that a user's file of a lookalike
    name (1 in 2**32 by chance) is never taken for a stray temporary file and removed."""
    if _TEMP.match(name) is None:
        return False
    digits = name[len(TEMP_PREFIX) : len(TEMP_PREFIX) + 16]
    return digits[8:] == _temp_tag(digits[:8])


def _temp_tag(random_part: str) -> str:
    return hashlib.sha256((TEMP_PREFIX + random_part).encode("ascii")).hexdigest()[:8]


def is_own_name(name: str) -> bool:
    """Whether ``name`` can be a file levgap wrote: a plain name, no folder part, own suffix.

    A name with a separator, ``..``, a drive or a leading ``/`` never qualifies, so that a
    marker naming ``../elsewhere/x`` or ``/home/user/x`` can never make levgap touch it.
    """
    return (
        isinstance(name, str)
        and _NAME.match(name) is not None
        and ".." not in name
        and Path(name).suffix.lower() in OWN_SUFFIXES
    )


class Digest:
    """Size and SHA-256 of bytes as they are written (see :class:`HashingWriter`)."""

    __slots__ = ("_hash", "size")

    def __init__(self) -> None:
        self._hash = hashlib.sha256()
        self.size = 0

    def update(self, data: bytes | bytearray | memoryview) -> None:
        self._hash.update(data)
        self.size += len(data)

    @property
    def sha256(self) -> str:
        return self._hash.hexdigest()


class HashingWriter(io.RawIOBase):
    """A binary file that hashes what passes through it (pandas and pyarrow write to it)."""

    def __init__(self, fh: BinaryIO, digest: Digest) -> None:
        super().__init__()
        self._fh = fh
        self._digest = digest

    def writable(self) -> bool:
        return True

    def write(self, data: Any) -> int:
        view = memoryview(data).cast("B")
        self._digest.update(view)
        self._fh.write(view)
        return len(view)

    def tell(self) -> int:
        return self._digest.size

    def flush(self) -> None:
        self._fh.flush()


def file_digest(path: str | Path) -> tuple[int, str]:
    """Size and SHA-256 of a file's bytes, read in chunks."""
    d = Digest()
    with open(path, "rb") as fh:
        for chunk in iter(lambda: fh.read(1 << 20), b""):
            d.update(chunk)
    return d.size, d.sha256


def same_file(a: str | Path, b: str | Path) -> bool:
    """Whether two paths name one file: same inode where both exist, else same resolved path.

    The one comparison every writer uses before it replaces or removes anything.
    """
    pa, pb = Path(a), Path(b)
    with contextlib.suppress(OSError):
        if pa.exists() and pb.exists():
            return os.path.samefile(pa, pb)
    try:
        return pa.resolve() == pb.resolve()
    except (OSError, RuntimeError):
        return os.path.abspath(pa) == os.path.abspath(pb)


def refuse_inputs(targets: Iterable[str | Path], inputs: Iterable[str | Path]) -> None:
    """Raise if any target path is one of the input files (path or inode).

    Raises
    ------
    OutputError
        Naming the target; an input is never replaced, whatever the options.
    """
    inputs = [Path(i) for i in inputs if i is not None and str(i)]
    for t in targets:
        for i in inputs:
            if same_file(t, i):
                raise OutputError(
                    f"{t}: an output must never replace an input file; got the path of the "
                    f"input {i}. Choose another output path."
                )


def temp_path(folder: Path, suffix: str = "") -> Path:
    # a fresh random name rather than mkstemp, so the file gets the user's usual permissions
    part = secrets.token_hex(4)
    return folder / f"{TEMP_PREFIX}{part}{_temp_tag(part)}{suffix[:11]}"


@contextlib.contextmanager
def replacing(target: Path) -> Iterator[Path]:
    """Yield a temporary path beside ``target``; on success it is renamed over ``target``.

    The low-level step under every writer: callers decide beforehand whether ``target`` may
    be replaced (:func:`levgap.outputs.atomic_file` for single files, the run writer for run
    folders). An interrupted write leaves only a ``.levgap-tmp-*`` file.

    Raises
    ------
    OutputError
        If the folder cannot be created or the file cannot be written.
    """
    tmp = temp_path(target.parent, target.suffix)
    try:
        target.parent.mkdir(parents=True, exist_ok=True)
        yield tmp
        os.replace(tmp, target)
    except OSError as exc:
        raise OutputError(
            f"{target} must be writable; got {exc.strerror or exc}. Choose another output "
            "path, or check the folder's permissions and free space."
        ) from None
    finally:
        with contextlib.suppress(OSError):  # already renamed, or never created
            tmp.unlink()


def write_hashed(path: Path, write: Callable[[BinaryIO], None] | bytes) -> Digest:
    """Write bytes (or what ``write(handle)`` writes) to ``path``, hashing them on the way."""
    digest = Digest()
    with open(path, "wb") as fh:
        if isinstance(write, bytes | bytearray | memoryview):
            digest.update(write)
            fh.write(write)
        else:
            with HashingWriter(fh, digest) as hw:
                write(hw)  # type: ignore[arg-type]
    return digest


def read_bounded(path: Path, limit: int) -> bytes:
    """A regular file's bytes, refusing more than ``limit`` (devices and pipes never end).

    Raises
    ------
    OutputError
        The path is not a regular file, or is larger than ``limit``.
    """
    import stat

    try:
        st = path.stat()
    except OSError as exc:
        raise OutputError(f"{path}: must be a readable file; got {exc.strerror or exc}.") \
            from None
    if not stat.S_ISREG(st.st_mode):
        raise OutputError(f"{path}: must be a regular file; got a device, pipe or folder.")
    with open(path, "rb") as fh:
        data = fh.read(limit + 1)
    if len(data) > limit:
        raise OutputError(
            f"{path}: must be at most {limit // (1 << 20)} MB; got a larger file. It is not "
            "one levgap wrote."
        )
    return data


def _jsonable(obj: Any) -> Any:
    if isinstance(obj, Mapping):
        return {str(k): _jsonable(v) for k, v in obj.items()}
    if isinstance(obj, list | tuple | set | frozenset):
        return [_jsonable(v) for v in obj]
    if isinstance(obj, float) and not math.isfinite(obj):
        return None
    if hasattr(obj, "item") and not isinstance(obj, str | bytes):
        try:
            return _jsonable(obj.item())
        except (ValueError, TypeError):
            return str(obj)
    if isinstance(obj, Path):
        return str(obj)
    return obj


def load_json(data: bytes | str) -> Any:
    """Parse JSON text; nesting too deep for Python's parser is a ``ValueError`` like bad JSON.

    Every JSON file levgap reads back (markers, ``run.json``, ``model.json``) goes through
    this, so a hostile file nested 100,000 levels deep is refused with one line.
    """
    try:
        return json.loads(data)
    except RecursionError:
        raise ValueError("the JSON is nested too deeply") from None


def json_bytes(obj: Any) -> bytes:
    """JSON text of ``obj`` as levgap writes it (NaN as null, numpy scalars as numbers)."""
    return (json.dumps(_jsonable(obj), default=str, indent=2, allow_nan=False) + "\n").encode(
        "utf-8")
