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


def write_template(out_dir: str | Path, *, force: bool = False) -> tuple[list[Path], list[Path]]:
    """Write the input template: ``panel_template.csv``, ``README.md``, ``run.toml``, ``deal.toml``.

    The files are generated from ``levgap.schema`` (see ``levgap.ingest.template``), so they
    need no repository checkout. A file of the same name is replaced only when levgap wrote
    it there (a template written earlier); any other is left alone and the call refused.

    Parameters
    ----------
    out_dir : str or pathlib.Path
        Folder to write into; created if absent.
    force : bool, default=False
        Write the files that can be written and keep the others as they are (they are
        returned as kept), instead of refusing.

    Returns
    -------
    (list of pathlib.Path, list of pathlib.Path)
        The files written, and the files kept because levgap may not replace them.

    Raises
    ------
    OutputError
        Without ``force``: a file of the same name that levgap did not write (or that was
        changed since) exists. Always: the folder is not writable, or a name is an input.
    """
    from levgap.ingest.template import template_files
    from levgap.outputs import check_replaceable

    out = Path(out_dir)
    files = template_files()
    if out.exists() and not out.is_dir():
        raise OutputError(f"{out}: the template folder must be a folder; got a file.")
    kept: list[Path] = []
    for name in files:  # refuse before writing any
        try:
            check_replaceable(out / name)
        except OutputError as exc:
            if not force or not (out / name).is_file():
                raise OutputError(f"{exc} Or pass --force to write the other template files "
                                  "and keep this one.") from None
            kept.append(out / name)
    written = [atomic_write_bytes(out / name, text.encode("utf-8"))
               for name, text in files.items() if out / name not in kept]
    return written, kept
