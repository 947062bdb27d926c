"""Reading ``model.json`` back as data, without the scoring machinery (pandas-free).

``levgap explain`` checks and reads a run's saved model with this alone;
:func:`levgap.models.saved.load_model` wraps the record in a ``SavedModel`` that scores.
"""

from __future__ import annotations

from pathlib import Path
from typing import Any

from levgap.errors import OutputError

FORMAT = "levgap-model"
FORMAT_VERSION = 1
MODEL_FILE = "model.json"


def read_model_record(results_dir: str | Path) -> dict[str, Any]:
    """The saved model of a results folder written by ``levgap analyze``, as data.

    Raises
    ------
    OutputError
        The folder fails ``levgap.outputs.verify_run``, or has no readable ``model.json`` of
        its run and of a format this levgap knows.
    """
    from levgap.outputs import saved_model_file
    from levgap.outputs.files import load_json

    path = saved_model_file(results_dir, MODEL_FILE)  # the run verified first (levgap.outputs)
    try:
        record = load_json(path.read_text(encoding="utf-8"))
    except FileNotFoundError:
        raise OutputError(f"{path}: the results folder must hold model.json; got none. "
                          "Re-run `levgap analyze` with this version.") from None
    except (OSError, UnicodeDecodeError, ValueError) as exc:
        raise OutputError(f"{path}: model.json must be valid JSON; got {exc}.") from None
    if not isinstance(record, dict) or record.get("format") != FORMAT:
        raise OutputError(f"{path}: must be a levgap saved model; got another file.")
    version = record.get("format_version", 0)
    if isinstance(version, bool) or not isinstance(version, int):
        raise OutputError(f"{path}: format_version must be a whole number; got {version!r}.")
    if version > FORMAT_VERSION:
        raise OutputError(f"{path}: saved-model format {record.get('format_version')} is "
                          f"newer than this levgap reads ({FORMAT_VERSION}); upgrade levgap.")
    return record
