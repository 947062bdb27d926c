"""Writing files safely, without pandas: the atomic writer, the output marker, the template.

Every file levgap writes goes through :func:`atomic_file`: a temporary name in the target
folder, renamed over the target on success, so a reader never sees half a file and an
interrupted write leaves only a ``.levgap-tmp-*`` file that a later run knows as its own.
"""

from __future__ import annotations

import contextlib
import os
import secrets
from collections.abc import Iterable, Iterator
from pathlib import Path

from levgap.errors import OutputError

MARKER = ".levgap-output"
"""Name of the file, in an output folder, that lists the files levgap wrote there."""


@contextlib.contextmanager
def atomic_file(path: str | Path) -> Iterator[Path]:
    """Yield a temporary path beside ``path``; on success it is renamed over ``path``.

    The one way levgap writes a file: a reader never sees half a file, an interrupted write
    leaves only a ``.levgap-tmp-*`` file that a later run recognises as its own.

    Raises
    ------
    OutputError
        If the folder cannot be created or the file cannot be written.
    """
    target = Path(path)
    # a fresh random name rather than mkstemp, so the file gets the user's usual permissions
    tmp = target.parent / f".levgap-tmp-{secrets.token_hex(8)}{target.suffix}"
    try:
        target.parent.mkdir(parents=True, exist_ok=True)
        yield tmp
        os.replace(tmp, target)
    except OSError as exc:
        raise OutputError(
            f"{target} must be writable; got {exc.strerror or exc}. Choose another output "
            "folder."
        ) from None
    finally:
        with contextlib.suppress(OSError):  # already renamed, or never created
            tmp.unlink()


def atomic_write_bytes(path: str | Path, data: bytes) -> None:
    """Write ``data`` to ``path`` through :func:`atomic_file`.

    Raises
    ------
    OutputError
        If the folder cannot be created or the file cannot be written.
    """
    with atomic_file(path) as tmp:
        tmp.write_bytes(data)


def register_outputs(out_dir: str | Path, names: Iterable[str]) -> None:
    """Add ``names`` to the folder's output marker, so a later run accepts them as levgap's."""
    out = Path(out_dir)
    marker = out / MARKER
    if not marker.is_file():
        return
    listed = marker.read_text(encoding="utf-8").split()
    new = sorted({*listed, *names})
    if new != sorted(listed):
        _atomic_text(marker, "\n".join(new) + "\n")


def _atomic_text(target: Path, text: str) -> None:
    with atomic_file(target) as tmp:
        tmp.write_text(text, encoding="utf-8")



def write_template(out_dir: str | Path, *, force: bool = False) -> list[Path]:
    """Write the input template: ``panel_template.csv``, ``README.md``, ``run.toml``, ``deal.toml``.

    The files are generated from ``levgap.schema`` (see ``levgap.ingest.template``), so they
    need no repository checkout.

    Parameters
    ----------
    out_dir : str or pathlib.Path
        Folder to write into; created if absent.
    force : bool, default=False
        Replace files of the same names.

    Returns
    -------
    list of pathlib.Path
        The files written.

    Raises
    ------
    OutputError
        A file of the same name exists (without ``force``), or the folder is not writable.
    """
    from levgap.ingest.template import template_files

    out = Path(out_dir)
    files = template_files()
    if out.exists() and not out.is_dir():
        raise OutputError(f"{out}: the template folder must be a folder; got a file.")
    clash = [n for n in files if (out / n).exists()]
    if clash and not force:
        raise OutputError(
            f"{out}: template files must not replace existing files; got {', '.join(clash)}. "
            "Choose another --out or pass --force."
        )
    written = []
    try:
        out.mkdir(parents=True, exist_ok=True)
        for name, text in files.items():
            _atomic_text(out / name, text)
            written.append(out / name)
    except OSError as exc:
        raise OutputError(
            f"{out}: the template must be writable; got {exc.strerror or exc}. Choose another "
            "--out."
        ) from None
    return written
