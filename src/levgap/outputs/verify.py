"""The check every reader makes before it reads a results folder (see ``outputs.runs``)."""

from __future__ import annotations

import os
import re
import stat
from collections.abc import Mapping
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from levgap.errors import OutputError
from levgap.outputs.digests import parse_digests
from levgap.outputs.files import file_digest, is_own_name, load_json, read_bounded
from levgap.outputs.marker import Marker, read_marker
from levgap.outputs.runs import _RUN_ID, RUN_FILE, _names

_MAX_RUN_JSON = 64 << 20


@dataclass(frozen=True, slots=True)
class RunFolder:
    """A results folder that passed :func:`verify_run`.

    Parameters
    ----------
    folder : pathlib.Path
    manifest : dict
        The parsed ``run.json``.
    run_id : str or None
        None for a folder written by levgap 0.1 (no run id to check).
    files : dict of str to pathlib.Path
        Every file of the run by name, ``run.json`` included.
    digests : mapping of str to (int, str), default={}
        Size and SHA-256 of every file but ``run.json``, as ``run.json`` records them (empty
        for a 0.1 folder).
    marker : Marker, default=Marker()
        The folder's marker as read (absent after ``cp results/*``: then only the digests
        decide).
    """

    folder: Path
    manifest: dict[str, Any]
    run_id: str | None
    files: dict[str, Path]
    digests: Mapping[str, tuple[int, str]] = field(default_factory=dict)
    marker: Marker = field(default_factory=Marker)

    @property
    def tables(self) -> dict[str, Path]:
        """The run's tables (CSV or Parquet) by name (``targets``, ``drivers``, ...)."""
        return {p.stem: p for n, p in sorted(self.files.items())
                if p.suffix in (".csv", ".parquet")}

    def check(self, name: str) -> Path:
        """The path of the run's file ``name``, after checking it is the file the run wrote.

        Fast path: the marker records the file for this run, with the digest ``run.json``
        gives, and the file still has the recorded inode, modification time and size.
        Otherwise the size, then the SHA-256, must be those ``run.json`` records (a file is
        hashed only when the fast path fails). A 0.1 folder has nothing to check.

        Raises
        ------
        OutputError
            One line naming the file: it was edited, or copied in from another run.
        """
        path = self.files[name]
        if self.run_id is None or name == RUN_FILE:
            return path
        want = self.digests.get(name, (-1, ""))
        try:
            st = path.lstat()
            same = stat.S_ISREG(st.st_mode) and st.st_size == want[0]
            rec = self.marker.records.get(name)
            if same and not (self.marker.run_id == self.run_id and rec is not None
                             and (rec.size, rec.sha256) == want and rec.ino == st.st_ino
                             and rec.mtime_ns == st.st_mtime_ns):
                same = file_digest(path)[1] == want[1]
        except OSError as exc:
            raise OutputError(f"{path}: the run's file must be readable; got "
                              f"{exc.strerror or exc}.") from None
        if not same:
            raise OutputError(
                f"{path}: {name} is not the file run {self.run_id} wrote: edited, or copied "
                "from another run. Re-run `levgap analyze` (or `levgap report --accept-edits` "
                "to keep edited tables)."
            )
        return path

    def table(self, stem: str) -> Path | None:
        """The run's table ``stem`` (``targets``, ...) after :meth:`check`; None when absent."""
        path = self.tables.get(stem)
        return None if path is None else self.check(path.name)

    def inputs(self) -> list[tuple[Path, str | None]]:
        """The run's input files as recorded in ``run.json``: path and SHA-256."""
        out = []
        for i in self.manifest.get("inputs") or []:
            if isinstance(i, Mapping) and isinstance(i.get("path"), str):
                sha = i.get("sha256")
                out.append((Path(i["path"]), sha if isinstance(sha, str) else None))
        return out


DERIVED = frozenset({"report.html", "workbook.xlsx"})
"""Files of a run drawn from its tables, which no reader reads: a run missing one of them
(removed by the user) is still complete."""


def verify_run(out_dir: str | Path, *, digests: bool = True) -> RunFolder:
    """Check that a folder holds one complete levgap run, and say where its files are.

    Parameters
    ----------
    out_dir : str or pathlib.Path
        A folder written by ``levgap analyze`` (or ``Analysis.write``).
    digests : bool, default=True
        Require ``run.json`` to record each file's size and SHA-256 (``RunFolder.check``
        compares them). False only to accept edited tables on request (``levgap report
        --accept-edits``), which re-records them.

    Returns
    -------
    RunFolder

    Raises
    ------
    OutputError
        One line naming the folder or file: no ``run.json``, a damaged or newer one, a run
        interrupted while it was swapped in, a file of the run missing, or files of two runs.
    """
    out = Path(out_dir)
    if not out.is_dir():
        raise OutputError(
            f"{out}: must be a folder written by `levgap analyze`; got "
            f"{'a file' if out.exists() else 'no such folder'}."
        )
    marker = read_marker(out)
    if marker.state == "committing":
        raise OutputError(
            f"{out}: the folder holds an interrupted run ({marker.run_id} was being written "
            f"when it stopped), so its files may come from two runs. Run `levgap analyze PANEL "
            f"--out {out}` again."
        )
    path = out / RUN_FILE
    if not path.exists():
        raise OutputError(
            f"{out}: the folder must hold levgap outputs (run.json); got none. Run "
            f"`levgap analyze PANEL --out {out}` first."
        )
    manifest = _read_manifest(path)
    run_id = manifest.get("run_id")
    if run_id is None:
        return RunFolder(out, manifest, None, _legacy_files(out, marker))
    if not isinstance(run_id, str) or not _RUN_ID.match(run_id):
        raise OutputError(f"{path}: run_id must be a levgap run id; got {run_id!r}.")
    listed = manifest.get("files")
    if not isinstance(listed, list) or not all(
            isinstance(n, str) and is_own_name(n) and n != RUN_FILE for n in listed):
        raise OutputError(
            f"{path}: files must list the run's file names; got {str(listed)[:80]!r}. The "
            "file was edited or damaged; re-run `levgap analyze`."
        )
    if marker.run_id is not None and marker.run_id != run_id:
        raise OutputError(
            f"{out}: run.json belongs to run {run_id} but the folder's marker records run "
            f"{marker.run_id}: the folder mixes two runs. Re-run `levgap analyze`."
        )
    recorded = parse_digests(manifest.get("digests"), listed)
    if recorded is None and digests:
        raise OutputError(
            f"{path}: digests must give the size and SHA-256 of every file the run lists; got "
            f"{str(manifest.get('digests'))[:60]!r}. The file was edited or damaged; re-run "
            "`levgap analyze`."
        )
    files = {RUN_FILE: path}
    for name in listed:
        p = out / name
        if not p.is_file() and name in DERIVED and not os.path.lexists(p):
            continue  # removed by the user: no reader needs it, `levgap report` rebuilds it
        if not p.is_file():
            raise OutputError(
                f"{p}: run {run_id} lists this file but it is missing; the folder holds an "
                "incomplete run. Re-run `levgap analyze`."
            )
        files[name] = p
    return RunFolder(out, manifest, run_id, files, recorded or {}, marker)


def _read_manifest(path: Path) -> dict[str, Any]:
    from levgap import __version__ as ours
    from levgap.schema import SCHEMA_VERSION

    data = read_bounded(path, _MAX_RUN_JSON)
    try:
        raw = load_json(data.decode("utf-8"))
    except (UnicodeDecodeError, ValueError) as exc:
        raise OutputError(
            f"{path}: run.json must be valid JSON; got {' '.join(str(exc).split())[:120]}."
        ) from None
    if not isinstance(raw, dict):
        raise OutputError(
            f"{path}: run.json must be a JSON object; got "
            f"{'null' if raw is None else type(raw).__name__}. The file was edited or damaged; "
            "re-run `levgap analyze`."
        )
    schema = raw.get("schema_version", SCHEMA_VERSION)
    if not isinstance(schema, int) or isinstance(schema, bool):
        raise OutputError(f"{path}: schema_version must be a whole number; got {schema!r}.")
    if schema > SCHEMA_VERSION:
        raise OutputError(
            f"{path}: schema_version {schema} is newer than this levgap reads "
            f"({SCHEMA_VERSION}); upgrade levgap to read these outputs."
        )
    theirs = raw.get("levgap_version")
    if theirs is not None and not isinstance(theirs, str):
        raise OutputError(f"{path}: levgap_version must be text; got {theirs!r}.")
    if theirs and _release(theirs) > _release(ours):
        raise OutputError(
            f"{path}: written by levgap {theirs}, newer than this levgap {ours}; upgrade "
            "levgap to read these outputs."
        )
    _check_shape(path, raw)
    return raw


def _is_text_list(v: Any) -> bool:
    return isinstance(v, list) and all(isinstance(x, str) for x in v)


_SHAPE: dict[tuple[str, ...], tuple[str, Any]] = {
    ("options",): ("an object", lambda v: isinstance(v, dict)),
    ("options", "model"): ("an object", lambda v: isinstance(v, dict)),
    ("options", "input"): ("an object", lambda v: isinstance(v, dict)),
    ("options", "units"): ("an object", lambda v: isinstance(v, dict)),
    ("options", "columns"): ("an object", lambda v: isinstance(v, dict)),
    ("options", "model", "measures"): ("a list of names", _is_text_list),
    ("options", "model", "drivers"): ("a list of names", _is_text_list),
    ("counts",): ("an object", lambda v: isinstance(v, dict)),
    ("counts", "by_reason"): ("an object", lambda v: isinstance(v, dict)),
    ("inputs",): ("a list", lambda v: isinstance(v, list)),
    ("pooled_industries",): ("a list of objects", lambda v: isinstance(v, list) and all(
        isinstance(b, dict) and isinstance(b.get("weight", {}), dict | None) for b in v)),
    ("warnings",): ("a list", lambda v: isinstance(v, list)),
}
"""What the readers use from ``run.json``, and the JSON type each must have when present."""


def _check_shape(path: Path, raw: dict[str, Any]) -> None:
    """Refuse a ``run.json`` whose parts the readers use have the wrong JSON type."""
    for keys, (what, ok) in _SHAPE.items():
        v: Any = raw
        for k in keys:
            v = v.get(k) if isinstance(v, dict) else None
        if v is not None and not ok(v):
            raise OutputError(
                f"{path}: {'.'.join(keys)} must be {what}; got {str(v)[:60]!r}. The file was "
                "edited or damaged; re-run `levgap analyze`."
            )


def _release(v: str) -> tuple[int, ...]:
    parts = []
    for p in v.split("."):
        m = re.match(r"\d+", p)
        if not m:
            break
        parts.append(int(m.group()))
    return tuple(parts)


def _legacy_files(out: Path, marker: Marker) -> dict[str, Path]:
    """The tables of a 0.1 folder: the marker's names first, then the newest of each stem."""
    listed = set(marker.legacy)
    files: dict[str, Path] = {RUN_FILE: out / RUN_FILE}
    stems: dict[str, Path] = {}
    candidates = sorted(
        (out / n for n in _names(out) if Path(n).suffix in (".csv", ".parquet")
         and is_own_name(n) and (out / n).is_file()),
        key=lambda p: (p.name in listed, p.stat().st_mtime),
        reverse=True,
    )
    for p in candidates:
        if listed and p.name not in listed:
            continue
        stems.setdefault(p.stem, p)
    files.update({p.name: p for p in stems.values()})
    for extra in ("report.html", "workbook.xlsx", "model.json"):
        if (out / extra).is_file():
            files[extra] = out / extra
    return files


def saved_model_file(out_dir: str | Path, name: str = "model.json") -> Path:
    """The saved model of a verified run: listed by ``run.json`` and stamped with its run id.

    Raises
    ------
    OutputError
        The folder fails :func:`verify_run`, its run has no saved model, or the model's run id
        is not the run's (a ``model.json`` from another run).
    """
    run = verify_run(out_dir)
    path = run.files.get(name)
    if path is not None:
        run.check(name)
    if path is None:
        raise OutputError(
            f"{Path(out_dir) / name}: the results folder must hold {name} of its run; got "
            "none. Re-run `levgap analyze` with this version."
        )
    if run.run_id is not None:
        try:
            raw = load_json(read_bounded(path, _MAX_RUN_JSON * 16).decode("utf-8"))
        except (UnicodeDecodeError, ValueError) as exc:
            raise OutputError(f"{path}: {name} must be valid JSON; got "
                              f"{' '.join(str(exc).split())[:120]}.") from None
        if not isinstance(raw, dict):
            raise OutputError(f"{path}: must be a levgap saved model; got another file.")
        theirs = raw.get("run_id")
        if theirs != run.run_id:
            raise OutputError(
                f"{path}: {name} belongs to run {theirs} but run.json to run {run.run_id}: the "
                "folder mixes two runs. Re-run `levgap analyze`."
            )
    return path
