"""The template writer; the atomic writer and the marker, re-exported from ``levgap.outputs``.

Every file levgap writes goes through ``levgap.outputs`` (a temporary name beside the target,
renamed on success; a file levgap did not write is never replaced); this module keeps the
names the report package used before that layer existed.
"""

from __future__ import annotations

from pathlib import Path

from levgap.errors import OutputError
from levgap.outputs import MARKER, atomic_file, atomic_write_bytes

__all__ = ["MARKER", "atomic_file", "atomic_write_bytes", "write_template"]


def write_template(out_dir: str | Path) -> list[Path]:
    """Write the input template: ``panel_template.csv``, ``README.md``, ``run.toml``, ``deal.toml``.

    The files are generated from ``levgap.schema`` (see ``levgap.ingest.template``), so they
    need no repository checkout. A file of the same name is replaced only when levgap wrote
    it there (a template written earlier); any other is left alone and the call refused.

    Parameters
    ----------
    out_dir : str or pathlib.Path
        Folder to write into; created if absent.

    Returns
    -------
    list of pathlib.Path
        The files written.

    Raises
    ------
    OutputError
        A file of the same name that levgap did not write exists, or the folder is not
        writable.
    """
    from levgap.ingest.template import template_files
    from levgap.outputs import check_replaceable

    out = Path(out_dir)
    files = template_files()
    if out.exists() and not out.is_dir():
        raise OutputError(f"{out}: the template folder must be a folder; got a file.")
    for name in files:  # refuse before writing any
        check_replaceable(out / name)
    return [atomic_write_bytes(out / name, text.encode("utf-8")) for name, text in files.items()]
