"""Folders written by levgap 0.1, whose marker lists names without digests.

A 0.1 marker cannot prove that a file is levgap's: it listed names, including the user's own
panel when it was kept inside ``--out``. Such a folder stays readable; a new run replaces or
removes a file it lists only when the file's content shows that 0.1 wrote it: a table whose
header is exactly one of the 0.1 output headers, a ``run.json`` object with ``levgap_version``
and ``schema_version`` and no run id, a ``report.html`` whose head names levgap as its
generator, or a ``workbook.xlsx`` with levgap's five sheets. Anything else it lists is left
alone and kept as a known name (not foreign).
"""

from __future__ import annotations

import json
import stat
import zipfile
from pathlib import Path

V01_HEADERS: tuple[tuple[str, ...], ...] = (
    ("firm_id", "firm_name", "fiscal_year", "industry", "measure", "actual", "target", "gap",
     "gap_z", "band_low", "band_high", "status", "peer_median", "peer_count", "peer_target",
     "debt_to_target", "flags"),
    ("firm_id", "fiscal_year", "measure", "driver", "firm_value", "peer_value",
     "contribution"),
    ("measure", "model", "term", "estimate", "std_error", "t_stat", "p_value", "ci_low",
     "ci_high"),
    ("measure", "model", "n_obs", "n_firms", "n_industries", "r2", "r2_oos", "rmse_oos"),
    ("source_row", "firm_id", "fiscal_year", "measure", "reason", "detail"),
)
"""The headers of the five tables levgap 0.1 wrote (output contract v1 as of 0.1)."""

V01_COLUMNS: dict[str, tuple[str, ...]] = dict(
    zip(("targets", "drivers", "coefficients", "model_fit", "exclusions"), V01_HEADERS,
        strict=True))
"""The 0.1 tables by name: what a reader asks of a folder 0.1 wrote."""

V01_SHEETS = ("Summary", "Targets", "Drivers", "Coefficients", "Exclusions")


def legacy_output(path: Path) -> bool:
    """Whether a file listed by a 0.1 marker shows, by its content, that levgap wrote it."""
    try:
        st = path.lstat()
    except OSError:
        return False
    if not stat.S_ISREG(st.st_mode):
        return False
    check = {".csv": _csv, ".parquet": _parquet, ".json": _run_json, ".html": _report,
             ".xlsx": _workbook}.get(path.suffix.lower())
    try:
        return bool(check and check(path))
    except (OSError, ValueError, zipfile.BadZipFile, KeyError):
        return False


def _csv(path: Path) -> bool:
    with open(path, "rb") as fh:
        head = fh.read(4096)
    line = head.split(b"\n", 1)[0].rstrip(b"\r").decode("utf-8")
    return tuple(line.split(",")) in V01_HEADERS


def _parquet(path: Path) -> bool:
    import pyarrow.parquet as pq

    return tuple(pq.read_schema(path).names) in V01_HEADERS


def _run_json(path: Path) -> bool:
    if path.name != "run.json" or path.stat().st_size > 64 << 20:
        return False
    raw = json.loads(path.read_text(encoding="utf-8"))
    return (isinstance(raw, dict) and "levgap_version" in raw and "schema_version" in raw
            and "run_id" not in raw)


def _report(path: Path) -> bool:
    with open(path, "rb") as fh:
        head = fh.read(2048)
    return b'<meta name="generator" content="levgap ' in head


def _workbook(path: Path) -> bool:
    with zipfile.ZipFile(path) as z:
        info = z.getinfo("xl/workbook.xml")
        if info.file_size > 1 << 20:
            return False
        text = z.read(info).decode("utf-8")
    return all(f'name="{s}"' in text for s in V01_SHEETS)
