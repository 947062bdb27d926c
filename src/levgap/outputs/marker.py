"""The output marker: what levgap wrote in a folder, and the proof that a file is still that.

``.levgap-output`` is a small JSON file in every folder levgap writes into. For each file it
wrote there it records the size, the SHA-256 (computed while writing), the inode and the
modification time, and a kind: ``output`` (a file of the run in that folder), ``file`` (a file
a command wrote on request, such as ``table -o``) or ``kept`` (a file a run found there and
keeps: an input kept in the folder, or a file of an earlier run that is not verifiably
levgap's; known, so not foreign, and replaced only if levgap wrote it). A file counts as levgap's
only when its name is a plain file name of a kind levgap writes, the marker records it as
written by levgap, it is a regular file (not a link) and it still has the recorded size and
content: the same inode and modification time, else the same SHA-256. A run's writer asks
more: a second witness, a run record (``run.json``) of the marker's run that lists the file
with the same SHA-256 (``outputs.digests``), so that a planted marker alone proves nothing.

A 0.1 marker is a plain list of names with nothing to verify; see ``outputs.legacy``.
"""

from __future__ import annotations

import contextlib
import json
import os
import re
import stat
from collections.abc import Iterable, Iterator, Mapping
from dataclasses import dataclass, field, replace
from pathlib import Path
from typing import Any

from levgap.errors import OutputError
from levgap.outputs.digests import RUN_FILE, RunRecord
from levgap.outputs.files import (
    Digest,
    file_digest,
    is_own_name,
    load_json,
    refuse_inputs,
    replacing,
)

MARKER = ".levgap-output"
"""Name of the marker file in a folder levgap writes into."""
MARKER_FORMAT = 2
KINDS = ("output", "file", "kept")
_SHA = re.compile(r"^[0-9a-f]{64}$")
_MAX_MARKER = 8 << 20


@dataclass(frozen=True, slots=True)
class Record:
    """One file levgap knows in a folder.

    Parameters
    ----------
    size : int
    sha256 : str
    kind : {"output", "file", "kept"}
    written : bool, default=True
        Whether levgap wrote the file (an input kept in the folder may not be levgap's).
    mtime_ns, ino : int or None
        The file's modification time and inode right after writing (a quick check that the
        file is unchanged; the digest decides when they differ, e.g. after a copy).
    """

    size: int
    sha256: str
    kind: str
    written: bool = True
    mtime_ns: int | None = None
    ino: int | None = None

    def to_json(self) -> dict[str, Any]:
        return {"kind": self.kind, "written": self.written, "size": self.size,
                "sha256": self.sha256, "mtime_ns": self.mtime_ns, "ino": self.ino}

    @classmethod
    def from_json(cls, raw: Any) -> Record | None:
        """A record from the marker's JSON, or None when anything in it is malformed."""
        if not isinstance(raw, Mapping):
            return None
        size, sha, kind = raw.get("size"), raw.get("sha256"), raw.get("kind")
        written = raw.get("written", True)
        extra = [raw.get("mtime_ns"), raw.get("ino")]
        if (not _whole(size) or not isinstance(sha, str) or not _SHA.match(sha)
                or kind not in KINDS or not isinstance(written, bool)
                or any(v is not None and not _whole(v) for v in extra)):
            return None
        return cls(size, sha, kind, written, extra[0], extra[1])


def _whole(v: Any) -> bool:
    return isinstance(v, int) and not isinstance(v, bool) and v >= 0


@dataclass(frozen=True, slots=True)
class Marker:
    """A folder's marker as read (absent, damaged or from a newer levgap: it proves nothing).

    Parameters
    ----------
    run_id : str or None
        The run whose outputs the folder holds.
    state : {"complete", "committing"}
        ``committing`` while a run's files are being swapped in: readers refuse the folder.
    records : mapping of str to Record
    legacy : tuple of str
        Names listed by a levgap 0.1 marker (no digests; see ``outputs.legacy``).
    previous : str or None, default=None
        In a journal (``committing``): the run whose files the folder held before, so that
        its records stay witnessed by its ``run.json`` until the swap ends.
    """

    run_id: str | None = None
    state: str = "complete"
    records: Mapping[str, Record] = field(default_factory=dict)
    legacy: tuple[str, ...] = ()
    previous: str | None = None

    def knows(self, name: str) -> bool:
        """Whether the marker lists ``name`` (levgap's, a kept input, or a 0.1 name)."""
        return name in self.records or name in self.legacy


def read_marker(folder: str | Path, name: str = MARKER) -> Marker:
    """The marker of ``folder``; an absent, damaged or unknown marker gives an empty one."""
    path = Path(folder) / name
    try:
        if not stat.S_ISREG(path.lstat().st_mode):
            return Marker()
        with open(path, "rb") as fh:
            data = fh.read(_MAX_MARKER + 1)
    except OSError:
        return Marker()
    if len(data) > _MAX_MARKER:
        return Marker()
    try:
        text = data.decode("utf-8")
    except UnicodeDecodeError:
        return Marker()
    if not text.lstrip().startswith("{"):
        # levgap 0.1: one name a line
        names = tuple(dict.fromkeys(ln.strip() for ln in text.splitlines() if ln.strip()))
        return Marker(legacy=names)
    try:
        raw = load_json(text)
    except ValueError:
        return Marker()
    if not isinstance(raw, dict) or raw.get("levgap_output") != MARKER_FORMAT:
        return Marker()
    files = raw.get("files")
    records: dict[str, Record] = {}
    if isinstance(files, dict):
        for k, v in files.items():
            rec = Record.from_json(v)
            if rec is not None and is_own_name(k):
                records[k] = rec
    legacy = raw.get("legacy")
    run_id, previous = raw.get("run_id"), raw.get("previous_run_id")
    return Marker(
        run_id=run_id if isinstance(run_id, str) else None,
        state="committing" if raw.get("state") == "committing" else "complete",
        records=records,
        legacy=tuple(n for n in legacy if isinstance(n, str)) if isinstance(legacy, list)
        else (),
        previous=previous if isinstance(previous, str) else None,
    )


def refuse_foreign_marker(folder: str | Path) -> None:
    """Refuse a folder whose ``.levgap-output`` exists but is not a levgap marker.

    A levgap marker is a regular UTF-8 file holding a JSON object with a whole-number
    ``levgap_output`` (this format or a newer one), or a 0.1 list of names that includes
    ``run.json`` (every 0.1 run wrote one). Anything else (a link, a folder, the user's own
    notes) is a file levgap did not write, never replaced, even with ``--force``.

    Raises
    ------
    OutputError
        One line naming the file.
    """
    path = Path(folder) / MARKER
    if not _foreign_marker(path):
        return
    raise OutputError(
        f"{path}: the file exists and is not a levgap marker, so levgap did not write it; "
        "levgap never replaces such a file, even with --force. Move it or choose another --out."
    )


def _foreign_marker(path: Path) -> bool:
    """Whether ``path`` exists and is not a levgap marker (see ``refuse_foreign_marker``)."""
    try:
        st = path.lstat()
    except OSError:
        return False  # absent (or unreadable: the write itself will say so)
    if not stat.S_ISREG(st.st_mode) or st.st_size > _MAX_MARKER:
        return True
    try:
        text = path.read_bytes()[: _MAX_MARKER + 1].decode("utf-8")
    except (OSError, UnicodeDecodeError):
        return True
    if not text.lstrip().startswith("{"):
        return RUN_FILE not in {ln.strip() for ln in text.splitlines()}
    try:
        raw = load_json(text)
    except ValueError:
        return True
    fmt = raw.get("levgap_output") if isinstance(raw, dict) else None
    return not (_whole(fmt) and fmt >= MARKER_FORMAT)


def marker_bytes(marker: Marker) -> bytes:
    from levgap import __version__ as ours

    body = {
        "levgap_output": MARKER_FORMAT,
        "written_by": f"levgap {ours}",
        "run_id": marker.run_id,
        "state": marker.state,
        "files": {k: marker.records[k].to_json() for k in sorted(marker.records)},
    }
    if marker.legacy:
        body["legacy"] = list(marker.legacy)
    if marker.previous:
        body["previous_run_id"] = marker.previous
    return (json.dumps(body, indent=1) + "\n").encode("utf-8")


def write_marker(folder: Path, marker: Marker) -> None:
    with replacing(folder / MARKER) as tmp:
        tmp.write_bytes(marker_bytes(marker))


def record_file(path: Path, kind: str, digest: Digest | None = None,
                written: bool = True) -> Record:
    """The record of a file just written (digest computed while writing, else read back)."""
    st = path.stat()
    size, sha = (digest.size, digest.sha256) if digest is not None else file_digest(path)
    return Record(size, sha, kind, written, st.st_mtime_ns, st.st_ino)


def verifies(path: Path, rec: Record) -> bool:
    """Whether ``path`` is a regular file that is still the one ``rec`` describes."""
    try:
        st = path.lstat()
    except OSError:
        return False
    if not stat.S_ISREG(st.st_mode) or st.st_size != rec.size:
        return False
    if rec.mtime_ns == st.st_mtime_ns and rec.ino == st.st_ino:
        return True
    try:
        return file_digest(path)[1] == rec.sha256
    except OSError:
        return False


def witnessed(name: str, rec: Record, marker: Marker, runs: Iterable[RunRecord]) -> bool:
    """Whether a run record of the marker's run lists ``name`` with the marker's SHA-256.

    ``run.json`` itself is witnessed by its own digest; a journal's records also by the run
    the folder held before (``Marker.previous``).
    """
    ids = {marker.run_id, marker.previous} - {None}
    for run in runs:
        if run.run_id not in ids:
            continue
        if name == RUN_FILE:
            if run.sha256 == rec.sha256:
                return True
        elif run.files.get(name) == (rec.size, rec.sha256) or name in run.undigested:
            return True
    return False


def is_ours(folder: Path, name: str, markers: Iterable[Marker],
            runs: Iterable[RunRecord] | None = None) -> bool:
    """Whether ``folder/name`` is verifiably a file levgap wrote (see the module docstring).

    Parameters
    ----------
    folder : pathlib.Path
    name : str
    markers : iterable of Marker
        The folder's marker (and those of stage folders inside it).
    runs : iterable of RunRecord, optional
        The run records found beside those markers. Given (by a run's writer), a record of a
        marker counts only when one of them witnesses it (:func:`witnessed`); omitted (a
        single file written on request, which no run lists), the marker and the file's
        content decide.
    """
    if not is_own_name(name):
        return False
    path = folder / name
    runs = None if runs is None else list(runs)
    for m in markers:
        rec = m.records.get(name)
        if rec is None or not rec.written:
            continue
        if runs is not None and not witnessed(name, rec, m, runs):
            continue
        if verifies(path, rec):
            return True
    from levgap.outputs.legacy import legacy_output

    return any(name in m.legacy for m in markers) and legacy_output(path)


def check_replaceable(target: Path, inputs: Iterable[str | Path] = ()) -> Marker:
    """Refuse to write ``target`` over an input, a run's file, or a file levgap did not write.

    Returns
    -------
    Marker
        The marker of the target's folder, as read.

    Raises
    ------
    OutputError
        One line naming the file and why it is kept.
    """
    refuse_inputs([target], inputs)
    if target.name == MARKER:
        raise OutputError(f"{target}: that name is levgap's marker file; choose another name.")
    folder = target.parent
    marker = read_marker(folder)
    if not os.path.lexists(target):
        return marker
    if target.is_dir() and not target.is_symlink():
        raise OutputError(f"{target}: the output must be a file; got a folder.")
    rec = marker.records.get(target.name)
    if rec is not None and rec.kind == "output":
        raise OutputError(
            f"{target}: the file belongs to the levgap run in {folder} and is replaced only by "
            "a new run there; choose another output path."
        )
    if not is_ours(folder, target.name, [marker]):
        raise OutputError(
            f"{target}: the file exists and levgap did not write it (or it was changed since); "
            "levgap never replaces such a file. Choose another output path or move the file."
        )
    return marker


def remember(target: Path, kind: str = "file", digest: Digest | None = None) -> None:
    """Record a file just written in its folder's marker, so a later write may replace it."""
    folder = target.parent
    marker = read_marker(folder)
    raw = _raw_format(folder)
    if (raw is not None and raw != MARKER_FORMAT) or _foreign_marker(folder / MARKER):
        return  # a marker this levgap cannot write without losing what it says, or not one
    records = dict(marker.records)
    records[target.name] = record_file(target, kind, digest)
    with contextlib.suppress(OutputError):  # the file is written; only the record is lost
        write_marker(folder, replace(marker, records=records))


def _raw_format(folder: Path) -> int | None:
    """The marker's format number (1 for a 0.1 list, None when absent or unreadable)."""
    path = folder / MARKER
    try:
        with open(path, "rb") as fh:
            head = fh.read(256).lstrip()
    except OSError:
        return None
    if not head.startswith(b"{"):
        return 1 if head else None
    m = re.search(rb'"levgap_output"\s*:\s*(\d+)', head)
    return int(m.group(1)) if m else -1


@contextlib.contextmanager
def atomic_file(path: str | Path, *, inputs: Iterable[str | Path] = ()) -> Iterator[Path]:
    """Yield a temporary path beside ``path``; on success it replaces ``path``.

    The way levgap writes a single file (``table -o``, ``check --ledger``, ``explain --plot``,
    the template, the SEC importer's panel): a reader never sees half a file; ``path`` is
    replaced only when it is absent or a file levgap wrote there unchanged, never when it is
    an input or a file of a run; the file written is recorded in the folder's marker.

    Parameters
    ----------
    path : str or pathlib.Path
    inputs : iterable of path, default=()
        Files the command read: never replaced.

    Raises
    ------
    OutputError
        The file may not be replaced (see above) or cannot be written.
    """
    target = Path(path)
    check_replaceable(target, inputs)
    with replacing(target) as tmp:
        yield tmp
    remember(target)


def atomic_write_bytes(path: str | Path, data: bytes, *,
                       inputs: Iterable[str | Path] = ()) -> Path:
    """Write ``data`` to ``path`` through :func:`atomic_file`."""
    with atomic_file(path, inputs=inputs) as tmp:
        tmp.write_bytes(data)
    return Path(path)
