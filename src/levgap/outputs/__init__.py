"""Writing files safely: the one low-level layer under every writer levgap has.

- :func:`atomic_file` writes a single file (``table -o``, ``check --ledger``, ``explain
  --plot``, the template, the SEC importer's panel): a temporary name beside it, renamed on
  success; an existing file is replaced only when levgap wrote it (see ``outputs.marker``),
  never when it is an input (:func:`same_file`: resolved path and inode, in one place).
- :class:`RunWriter` writes one run's files as one unit with one run id, staged and swapped in
  under a journal; :func:`verify_run` is the check every reader makes first (``outputs.runs``).
- :func:`neutralise` keeps spreadsheets from running text cells as formulas.

Nothing here imports pandas at module level (the quick commands use it), and nothing here
imports the report package: ingest code writes through this layer too.
"""

from __future__ import annotations

from levgap.outputs.cells import FORMULA_PATTERN, FORMULA_PREFIXES, is_formula_like, neutralise
from levgap.outputs.files import (
    TEMP_PREFIX,
    file_digest,
    is_own_name,
    is_temp_name,
    json_bytes,
    refuse_inputs,
    same_file,
)
from levgap.outputs.marker import (
    MARKER,
    Marker,
    Record,
    atomic_file,
    atomic_write_bytes,
    check_replaceable,
    read_marker,
)
from levgap.outputs.runs import (
    RUN_FILE,
    STAGE_PREFIX,
    Committed,
    RunWriter,
    new_run_id,
    refuse_foreign,
)
from levgap.outputs.verify import RunFolder, saved_model_file, verify_run

__all__ = [
    "FORMULA_PATTERN",
    "FORMULA_PREFIXES",
    "MARKER",
    "RUN_FILE",
    "STAGE_PREFIX",
    "TEMP_PREFIX",
    "Committed",
    "Marker",
    "Record",
    "RunFolder",
    "RunWriter",
    "atomic_file",
    "atomic_write_bytes",
    "check_replaceable",
    "file_digest",
    "is_formula_like",
    "is_own_name",
    "is_temp_name",
    "json_bytes",
    "neutralise",
    "new_run_id",
    "read_marker",
    "refuse_foreign",
    "refuse_inputs",
    "same_file",
    "saved_model_file",
    "verify_run",
]
