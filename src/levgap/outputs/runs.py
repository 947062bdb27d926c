"""One run's files as one unit: staged, swapped in under a journal, verified by every reader.

Writing (:class:`RunWriter`)
    1. The run gets an id (:func:`new_run_id`). Every file is written into a staging folder
       ``OUT/.levgap-stage-<random>/`` (hashing while writing) and recorded in that folder's own
       marker; ``OUT`` itself is untouched, so readers keep reading the previous run.
    2. ``run.json`` is written last into the stage, with the run id, the run's file names and
       each file's size and SHA-256 (``digests``).
    3. The swap: ``OUT/.levgap-output`` is replaced by a journal (state ``committing``); each file
       is renamed into ``OUT`` (``os.replace``, atomic per file); files of the previous run that
       this run does not replace are removed (only when verifiably levgap's, never an input);
       ``run.json`` is renamed in last; the marker is replaced by the final one (state
       ``complete``); the stage folder is removed.

    A run killed before the swap leaves the previous run complete and readable; killed during
    the swap, the journal says so and every reader refuses the folder; killed after it, the new
    run is complete. Stage folders and ``.levgap-tmp-*`` files left by a killed run are removed
    by the next run in that folder; until then they prove, through their own markers, which
    files they put there.

Reading (``outputs.verify.verify_run``)
    The one check every reader makes before reading a table: the folder's journal is complete,
    ``run.json`` is a JSON object from this levgap or an older one, every file it lists is
    present, and the marker (when the folder still has it) names the same run. Each file a
    reader then reads is checked against ``run.json``'s digests (``RunFolder.check``).

What counts as levgap's
    A file is replaced or removed only when the marker and a run record of the same run
    (``run.json`` in the folder, or in a stage folder during an interrupted swap) both list it
    with the same SHA-256, and the file still has it (``outputs.marker.is_ours``).
"""

from __future__ import annotations

import contextlib
import json
import os
import re
import secrets
import stat
from collections.abc import Callable, Iterable, Mapping
from dataclasses import dataclass
from pathlib import Path
from typing import Any, BinaryIO

from levgap.errors import OutputError
from levgap.outputs.digests import RUN_FILE, RUN_ID, RunRecord, read_run_record
from levgap.outputs.files import (
    _jsonable,
    is_own_name,
    is_temp_name,
    refuse_inputs,
    same_file,
    temp_path,
    write_hashed,
)
from levgap.outputs.marker import (
    MARKER,
    Marker,
    Record,
    is_ours,
    read_marker,
    record_file,
    refuse_foreign_marker,
    verifies,
    witnessed,
    write_marker,
)

STAGE_PREFIX = ".levgap-stage-"
_STAGE = re.compile(r"^\.levgap-stage-[0-9a-f]{16}$")
_RUN_ID = RUN_ID


def new_run_id() -> str:
    """A fresh run id: 16 random hexadecimal digits."""
    return secrets.token_hex(8)


def is_stage_name(name: str) -> bool:
    return _STAGE.match(name) is not None


@dataclass(frozen=True, slots=True)
class Committed:
    """What a run wrote into its folder.

    Parameters
    ----------
    run_id : str
    folder : pathlib.Path
    written : tuple of pathlib.Path
        The run's files, in the order they were staged (``run.json`` last).
    removed : tuple of str
        Files of the previous run in the folder that this run removed.
    """

    run_id: str
    folder: Path
    written: tuple[Path, ...]
    removed: tuple[str, ...]


class RunWriter:
    """Write one run's files into ``out_dir`` as one unit (see the module docstring).

    Parameters
    ----------
    out_dir : str or pathlib.Path
        Output folder; created if absent.
    run_id : str
        The run's id, written into ``run.json`` and the marker.
    inputs : iterable of path, default=()
        The run's input files: never replaced or removed; kept inside ``out_dir`` they are
        recorded as known files.
    force : bool, default=False
        Write into a folder that holds files levgap did not write (they are left alone).
    amend : tuple of str, default=()
        Files of the run already in the folder that stay part of it (``levgap report``
        rebuilding ``report.html`` of an existing run).

    Raises
    ------
    OutputError
        ``out_dir`` is a file or cannot be created, holds foreign files (without ``force``),
        or a file of the run would replace an input or a file levgap did not write.
    """

    def __init__(self, out_dir: str | Path, *, run_id: str, inputs: Iterable[str | Path] = (),
                 force: bool = False, amend: Iterable[str] = ()) -> None:
        if not _RUN_ID.match(run_id):
            raise OutputError(f"run id must be letters, digits, - and _; got {run_id!r}.")
        self.out = Path(out_dir)
        self.run_id = run_id
        self.inputs = [Path(i) for i in inputs if i is not None and str(i)]
        self.force = force
        self.amend = tuple(amend)
        self._staged: dict[str, Record] = {}
        self._stage: Path | None = None
        self._swapping = False

    # ------------------------------------------------------------------ staging

    def __enter__(self) -> RunWriter:
        self._open()
        return self

    def __exit__(self, kind: Any, exc: Any, tb: Any) -> None:
        # once the swap has begun, the stage's marker is the proof of what moved: keep it
        if kind is not None and self._stage is not None and not self._swapping:
            _clear_stage(self._stage)

    def _open(self) -> None:
        out = self.out
        if out.exists() and not out.is_dir():
            raise OutputError(
                f"{out}: the output path must be a folder; got a file. Choose another --out."
            )
        _io(lambda: out.mkdir(parents=True, exist_ok=True), out,
            "the output folder must be creatable")
        self._marker = read_marker(out)
        stages = [out / n for n in _names(out) if is_stage_name(n) and _real_dir(out / n)]
        self._old_stages = stages
        self._markers = [self._marker, *(read_marker(s) for s in stages)]
        here = read_run_record(out / RUN_FILE)
        self._previous = here.run_id if here is not None else None
        self._runs: list[RunRecord] = [r for r in (here, *(read_run_record(s / RUN_FILE)
                                                           for s in stages)) if r is not None]
        refuse_foreign_marker(out)  # the run writes its marker: never over a user's file
        if not self.force:
            refuse_foreign(out, self.inputs)
        self._check_target(RUN_FILE)
        stage = out / f"{STAGE_PREFIX}{secrets.token_hex(8)}"
        _io(lambda: stage.mkdir(), stage, "the output folder must be writable")
        self._stage = stage
        self._save_stage_marker()

    def expect(self, names: Iterable[str]) -> None:
        """Refuse now, before any work, a file of the run that could not be swapped in."""
        for name in names:
            self._check_target(name)

    def add(self, name: str, write: bytes | Callable[[BinaryIO], None]) -> Path:
        """Stage one file of the run: ``write`` is its bytes or writes them to a handle.

        Returns
        -------
        pathlib.Path
            Where the file will be once the run is committed.
        """
        return self._stage_file(name, lambda tmp: write_hashed(tmp, write))

    def add_path(self, name: str, write: Callable[[Path], None]) -> Path:
        """Stage one file of the run written by ``write(path)`` (for writers that need a path)."""
        return self._stage_file(name, lambda tmp: write(tmp))

    def _stage_file(self, name: str, write: Callable[[Path], Any]) -> Path:
        # written under a temporary name, recorded in the stage's marker, then renamed: a kill
        # at any point leaves only temporary files and recorded files, both removable
        stage = self._prepare(name)
        tmp = temp_path(stage, Path(name).suffix)
        try:
            digest = write(tmp)
            self._staged[name] = record_file(tmp, "output", digest)
            self._save_stage_marker()
            os.replace(tmp, stage / name)
        except OSError as exc:
            self._staged.pop(name, None)
            raise OutputError(
                f"{self.out / name}: the file must be writable; got {exc.strerror or exc}. "
                "Check the folder's permissions and free space."
            ) from None
        finally:
            with contextlib.suppress(OSError):
                tmp.unlink()
        return self.out / name

    def _prepare(self, name: str) -> Path:
        if self._stage is None:
            raise OutputError("RunWriter must be entered (with ...) before files are added.")
        if name in self._staged:
            raise OutputError(f"{name}: the run already holds a file of that name.")
        self._check_target(name)
        return self._stage

    def _check_target(self, name: str) -> None:
        if not is_own_name(name) or name == MARKER:
            raise OutputError(f"output file name must be a plain file name levgap writes; got "
                              f"{name!r}.")
        target = self.out / name
        refuse_inputs([target], self.inputs)
        if os.path.lexists(target) and not self._ours(name):
            raise OutputError(
                f"{target}: the file exists and levgap did not write it (or it was changed "
                "since); levgap never replaces such a file, even with --force. Move it or "
                "choose another --out."
            )

    def _save_stage_marker(self) -> None:
        assert self._stage is not None
        write_marker(self._stage, Marker(self.run_id, "complete", dict(self._staged)))

    def _is_input(self, p: Path) -> bool:
        return any(same_file(p, i) for i in self.inputs)

    def _ours(self, name: str) -> bool:
        return is_ours(self.out, name, self._markers, self._runs)

    # ------------------------------------------------------------------ the swap

    def commit(self, manifest: Mapping[str, Any]) -> Committed:
        """Write ``run.json`` (with the run id and file list) and swap the run into the folder.

        Returns
        -------
        Committed
        """
        out, stage = self.out, self._stage
        if stage is None:
            raise OutputError("RunWriter must be entered (with ...) before it commits.")
        members = [n for n in self.amend if n != RUN_FILE and n not in self._staged]
        members += [n for n in self._staged if n != RUN_FILE]
        final: dict[str, Record] = dict(self._staged)
        for name in members:
            if name not in final:  # a file of the run that stays (amend)
                rec = self._marker.records.get(name)
                path = out / name
                final[name] = rec if rec is not None and verifies(path, rec) else _io(
                    lambda p=path, n=name: record_file(p, "output", None, written=self._ours(n)),
                    path, "the run's file must be readable")
        record = dict(_jsonable(manifest))
        record["run_id"] = self.run_id
        record["files"] = sorted(members)
        record["digests"] = {n: {"size": final[n].size, "sha256": final[n].sha256}
                             for n in sorted(members)}
        body = json.dumps(record, default=str, indent=2, allow_nan=False) + "\n"
        self.add(RUN_FILE, body.encode("utf-8"))
        final[RUN_FILE] = self._staged[RUN_FILE]
        stale = []
        known = {*(n for m in self._markers for n in m.records), *self._marker.legacy}
        known |= {n for n in _names(out) if is_own_name(n) and self._is_input(out / n)}
        for name in sorted(known - set(final)):
            path = out / name
            if not os.path.lexists(path) or not is_own_name(name):
                continue
            ours = self._ours(name)
            if self.amend and name in self._marker.records:
                final[name] = self._marker.records[name]  # amending: nothing else changes
            elif self._is_input(path) or not ours or self._kept(name):
                # kept, never replaced by a run; whether levgap wrote it (a single file such as
                # the demo's panel, which no run record lists) is the marker's word, as for
                # ``atomic_file``
                written = ours or is_ours(out, name, self._markers)
                with contextlib.suppress(OSError):
                    final[name] = record_file(path, "kept", None, written=written)
            else:
                stale.append(name)

        journal = {**{n: r for m in self._markers[::-1] for n, r in m.records.items()}}
        self._swapping = True
        write_marker(out, Marker(self.run_id, "committing", journal, self._marker.legacy,
                                 previous=self._previous))
        order = [n for n in self._staged if n != RUN_FILE]
        for name in order:
            _io(lambda n=name: os.replace(stage / n, out / n), out / name,
                "the file must be writable")
        removed = []
        # before run.json moves in: until then the previous run's record witnesses its files
        for name in stale:
            if self._ours(name) and not self._is_input(out / name):
                with contextlib.suppress(FileNotFoundError):
                    _io(lambda n=name: (out / n).unlink(), out / name,
                        "the previous run's file must be removable")
                removed.append(name)
        order.append(RUN_FILE)
        _io(lambda: os.replace(stage / RUN_FILE, out / RUN_FILE), out / RUN_FILE,
            "the file must be writable")
        write_marker(out, Marker(self.run_id, "complete", final))
        for s in [stage, *self._old_stages]:
            _clear_stage(s)
        for name in _names(out):
            p = out / name
            if is_temp_name(name) and _regular(p):
                with contextlib.suppress(OSError):
                    p.unlink()
        self._stage = None
        self._swapping = False
        return Committed(self.run_id, out, tuple(out / n for n in order), tuple(removed))

    def _kept(self, name: str) -> bool:
        """A known file levgap keeps rather than removes: an input kept in the folder."""
        return any(m.records.get(name, _NO).kind == "kept" for m in self._markers)


_NO = Record(0, "0" * 64, "file")


def refuse_foreign(out_dir: str | Path, inputs: Iterable[str | Path] = ()) -> None:
    """Refuse an output folder holding files levgap did not write (and that are not inputs).

    Raises
    ------
    OutputError
        Naming up to five of them; ``--force`` writes beside them (they are left alone).
    """
    out = Path(out_dir)
    if not out.is_dir():
        return
    refuse_foreign_marker(out)
    stages = [out / n for n in _names(out) if is_stage_name(n) and _real_dir(out / n)]
    markers = [read_marker(out), *(read_marker(s) for s in stages)]
    runs = [r for r in (read_run_record(p / RUN_FILE) for p in (out, *stages)) if r is not None]
    inputs = [Path(i) for i in inputs]
    foreign = sorted(
        n for n in _names(out)
        if n != MARKER and not is_temp_name(n) and not is_stage_name(n)
        and not any(_known(n, m, runs) for m in markers)
        and not any(same_file(out / n, i) for i in inputs)
    )
    if foreign:
        shown = ", ".join(foreign[:5]) + (
            f" and {len(foreign) - 5} more" if len(foreign) > 5 else "")
        raise OutputError(
            f"{out}: the output folder must be empty or hold only levgap outputs; got files "
            f"levgap did not write ({shown}). Choose another --out or pass --force (they are "
            "left alone)."
        )


def _known(name: str, marker: Marker, runs: list[RunRecord]) -> bool:
    """A name the marker may vouch for: a kept or single file, a 0.1 name, or a run's file
    that a run record of the marker's run lists with the same digest (not a planted entry)."""
    if name in marker.legacy:
        return True
    rec = marker.records.get(name)
    return rec is not None and (rec.kind != "output" or witnessed(name, rec, marker, runs))


def _names(folder: Path) -> list[str]:
    try:
        return sorted(os.listdir(folder))
    except OSError:
        return []


def _real_dir(p: Path) -> bool:
    try:
        return stat.S_ISDIR(p.lstat().st_mode)
    except OSError:
        return False


def _regular(p: Path) -> bool:
    try:
        return stat.S_ISREG(p.lstat().st_mode)
    except OSError:
        return False


def _clear_stage(stage: Path) -> None:
    """Remove a stage folder: its marker, its temporary files and the files it records."""
    if not _real_dir(stage):
        return
    m = read_marker(stage)
    for name in _names(stage):
        p = stage / name
        rec = m.records.get(name)
        if name != MARKER and (is_temp_name(name) and _regular(p)
                               or rec is not None and verifies(p, rec)):
            with contextlib.suppress(OSError):
                p.unlink()
    with contextlib.suppress(OSError):
        (stage / MARKER).unlink()
    with contextlib.suppress(OSError):
        stage.rmdir()  # fails, and leaves it, if anything else is inside


def _io(action: Callable[[], Any], path: Path, what: str) -> Any:
    try:
        return action()
    except OSError as exc:
        raise OutputError(
            f"{path}: {what}; got {exc.strerror or exc}. Check the folder's permissions and "
            "free space, or choose another --out."
        ) from None




