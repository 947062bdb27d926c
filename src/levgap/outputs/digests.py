"""A run's own record of its files: the size and SHA-256 of each, kept in ``run.json``.

``run.json`` is written last and lists, under ``digests``, every other file of the run with its
size and SHA-256 (computed while the file was written). It is the second witness beside the
folder's marker:

- readers check each file they read against it, so a folder copied without its marker
  (``cp results/*``) stays readable and a table copied in from another run, or edited, is
  refused (``outputs.verify``);
- writers treat a file as levgap's only when the marker *and* a run record of the same run
  both list it with the same SHA-256 (``outputs.marker.is_ours``), so a planted marker alone
  proves nothing.

Pandas-free (the quick commands use it).
"""

from __future__ import annotations

import hashlib
import re
import stat
from collections.abc import Mapping
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from levgap.outputs.files import is_own_name, load_json

RUN_FILE = "run.json"
MAX_RUN_JSON = 64 << 20
RUN_ID = re.compile(r"^[A-Za-z0-9_-]{1,64}$")
_SHA = re.compile(r"^[0-9a-f]{64}$")


@dataclass(frozen=True, slots=True)
class RunRecord:
    """What a ``run.json`` says about its run's files, and the digest of ``run.json`` itself.

    Parameters
    ----------
    run_id : str
    sha256 : str
        SHA-256 of the ``run.json`` bytes (a marker's record of ``run.json`` must match it).
    files : mapping of str to (int, str)
        Every other file of the run: size and SHA-256.
    undigested : frozenset of str
        Files listed by a ``run.json`` written before runs recorded digests (no ``digests``
        key at all): such a record still witnesses the marker of its own run, whose records
        carry the SHA-256 (:func:`levgap.outputs.marker.witnessed`), so that a folder written
        by that levgap can be replaced by a new run. Readers refuse such a folder.
    """

    run_id: str
    sha256: str
    files: Mapping[str, tuple[int, str]] = field(default_factory=dict)
    undigested: frozenset[str] = frozenset()


def parse_digests(raw: Any, listed: list[str]) -> dict[str, tuple[int, str]] | None:
    """The ``digests`` of a run record, or None unless it gives every listed file exactly.

    Parameters
    ----------
    raw : object
        The ``digests`` value: ``{name: {"size": int, "sha256": hex}}``.
    listed : list of str
        The run's file names (``files``); ``digests`` must hold these and no other.
    """
    if not isinstance(raw, Mapping) or set(raw) != set(listed):
        return None
    out: dict[str, tuple[int, str]] = {}
    for name, d in raw.items():
        if not isinstance(d, Mapping):
            return None
        size, sha = d.get("size"), d.get("sha256")
        if (not isinstance(size, int) or isinstance(size, bool) or size < 0
                or not isinstance(sha, str) or not _SHA.match(sha)):
            return None
        out[name] = (size, sha)
    return out


def read_run_record(path: Path) -> RunRecord | None:
    """The run record in a ``run.json``, or None when it is absent, damaged or from 0.1.

    Used by writers, which never fail on a damaged record: without one, nothing of that run
    counts as levgap's (it is kept, never removed or replaced).
    """
    try:
        st = path.lstat()
        if not stat.S_ISREG(st.st_mode) or st.st_size > MAX_RUN_JSON:
            return None
        data = path.read_bytes()
        raw = load_json(data)
    except (OSError, ValueError):
        return None
    if not isinstance(raw, Mapping):
        return None
    run_id, listed = raw.get("run_id"), raw.get("files")
    if not isinstance(run_id, str) or not RUN_ID.match(run_id) or not isinstance(listed, list) \
            or not all(isinstance(n, str) and is_own_name(n) and n != RUN_FILE for n in listed):
        return None
    sha = hashlib.sha256(data).hexdigest()
    if "digests" not in raw:  # written before runs recorded their files' digests
        return RunRecord(run_id, sha, {}, frozenset(listed))
    files = parse_digests(raw.get("digests"), listed)
    if files is None:
        return None
    return RunRecord(run_id, sha, files)
