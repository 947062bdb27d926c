"""Writing and reading the tabular outputs (CSV or Parquet) and the run manifest, safely.

Safety rules, each tested:

- text cells that a spreadsheet would run as a formula (starting with ``=``, ``+``, ``-``,
  ``@``, a tab or a carriage return) get a leading apostrophe (the usual guidance against
  spreadsheet formula injection); numeric columns are untouched;
- CSV lines end in CRLF (RFC 4180), so that the csv writer quotes any cell holding a
  carriage return or a line feed;
- every file is written to a temporary name in the target folder and renamed over the
  target (``os.replace``), so a reader never sees half a file;
- a folder that holds files levgap did not write is refused unless ``force=True``; levgap
  lists what it wrote in a marker file ``.levgap-output`` so that a re-run into its own
  folder is allowed;
- an input file is never overwritten, even with ``force=True``.
"""

from __future__ import annotations

import json
import math
import os
import re
from collections.abc import Iterable, Mapping
from pathlib import Path
from typing import Any

import pandas as pd

from levgap.errors import OutputError
from levgap.report.files import (  # one writer for every file levgap writes
    MARKER,
    _atomic_text,
    atomic_file,
)

MANIFEST = "run.json"
FORMATS: dict[str, str] = {"csv": ".csv", "parquet": ".parquet"}
FORMULA_PREFIXES: tuple[str, ...] = ("=", "+", "-", "@", "\t", "\r")

TEXT_COLUMNS: tuple[str, ...] = (
    "firm_id", "firm_name", "industry", "measure", "driver", "status", "reason", "detail",
    "flags", "model", "term", "currency", "peer_group",
)
"""Output columns read back as text (so that codes such as ``0100`` keep their zeros)."""

_NAME = re.compile(r"^[A-Za-z0-9_][A-Za-z0-9_.-]*$")


def neutralise(frame: pd.DataFrame) -> pd.DataFrame:
    """Prefix an apostrophe to text cells that a spreadsheet would run as a formula.

    Parameters
    ----------
    frame : pandas.DataFrame

    Returns
    -------
    pandas.DataFrame
        A copy in which every text cell starting with ``=``, ``+``, ``-``, ``@``, a tab or a
        carriage return starts with ``'`` instead; numbers and other cells are unchanged.

    Examples
    --------
    >>> neutralise(pd.DataFrame({"name": ["=1+1", "ok"]}))["name"].tolist()
    ["'=1+1", 'ok']
    """
    out = frame.copy(deep=False)  # columns are replaced, never changed in place
    for col in out.columns:
        s = out[col]
        if isinstance(s.dtype, pd.StringDtype):
            risky = s.str.startswith(FORMULA_PREFIXES).fillna(False).to_numpy(dtype=bool)
            if risky.any():
                out[col] = s.mask(risky, "'" + s)
        elif s.dtype == object:
            vals = s.to_numpy(dtype=object, copy=True)
            changed = False
            for i, v in enumerate(vals):
                if isinstance(v, str) and v.startswith(FORMULA_PREFIXES):
                    vals[i] = "'" + v
                    changed = True
            if changed:
                out[col] = pd.Series(vals, index=s.index, dtype=object)
    return out


def write_tables(
    tables: Mapping[str, pd.DataFrame],
    manifest: Mapping[str, Any],
    out_dir: str | Path,
    *,
    fmt: str = "csv",
    force: bool = False,
    inputs: Iterable[str | Path] = (),
    also: Iterable[str] = (),
) -> list[Path]:
    """Write each table and ``run.json`` into a folder, atomically and without harm.

    Parameters
    ----------
    tables : mapping of str to pandas.DataFrame
        Table name (``targets``, ``exclusions``, ...) -> frame; written as ``<name>.csv`` or
        ``<name>.parquet``, text cells neutralised (see :func:`neutralise`).
    manifest : mapping
        Written as ``run.json`` (indent 2; values JSON cannot hold are written as text, NaN
        as null).
    out_dir : str or pathlib.Path
        Output folder; created if absent.
    fmt : {"csv", "parquet"}, default="csv"
        File format of the tables.
    force : bool, default=False
        Write even into a folder that holds files levgap did not write (those files are
        left alone unless a levgap output has the same name).
    inputs : iterable of path, default=()
        Input files, never overwritten.
    also : iterable of str, default=()
        Names of other files levgap writes (or wrote) into the folder in the same run
        (``report.html``, ``workbook.xlsx``, the demo's panel): recorded in the marker so that
        a later run does not count them as foreign or remove them as stale.

    Returns
    -------
    list of pathlib.Path
        The files written, tables first, then ``run.json``.

    Raises
    ------
    OutputError
        Unknown format or table name, a folder with foreign files (without ``force``), an
        output path that is an input file, or a file system error.
    """
    if fmt not in FORMATS:
        raise OutputError(f"format must be one of {sorted(FORMATS)}; got {fmt!r}.")
    for name in tables:
        if not _NAME.match(name) or name == Path(MANIFEST).stem:
            raise OutputError(
                f"table name must be letters, digits and _ (not 'run'); got {name!r}."
            )
    out = Path(out_dir)
    if out.exists() and not out.is_dir():
        raise OutputError(
            f"{out}: the output path must be a folder; got a file. Choose another --out."
        )
    targets = [out / f"{name}{FORMATS[fmt]}" for name in tables] + [out / MANIFEST]
    _refuse_inputs(targets, inputs)
    try:
        out.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise OutputError(
            f"{out}: the output folder must be creatable; got {exc.strerror or exc}. "
            "Choose another --out."
        ) from None
    previous = _marker_names(out)
    foreign = sorted(
        p.name for p in out.iterdir()
        if p.name != MARKER and p.name not in previous and not _is_our_temp(p.name)
    )
    if foreign and not force:
        shown = ", ".join(foreign[:5]) + (f" and {len(foreign) - 5} more" if len(foreign) > 5
                                         else "")
        raise OutputError(
            f"{out}: the output folder must be empty or hold only levgap outputs; got files "
            f"levgap did not write ({shown}). Choose another --out or pass --force."
        )
    names = [t.name for t in targets] + [n for n in also if n not in {t.name for t in targets}]
    try:
        _atomic_text(out / MARKER, "\n".join(sorted(set(previous) | set(names))) + "\n")
        written = []
        for (_, frame), target in zip(tables.items(), targets, strict=False):
            _atomic_table(neutralise(frame), target, fmt)
            written.append(target)
        body = json.dumps(_jsonable(manifest), default=str, indent=2, allow_nan=False)
        _atomic_text(out / MANIFEST, body + "\n")
        written.append(out / MANIFEST)
        for stale in sorted(set(previous) - set(names)):
            # a previous run's table in another format: remove so readers see one version
            p = out / stale
            if p.is_file() and not _is_input(p, inputs):
                p.unlink()
        _atomic_text(out / MARKER, "\n".join(sorted(names)) + "\n")
    except OSError as exc:
        raise OutputError(
            f"{out}: outputs must be writable; got {exc.strerror or exc}. Check the folder's "
            "permissions and free space."
        ) from None
    return written


def read_outputs(
    out_dir: str | Path, names: Iterable[str] | None = None
) -> tuple[dict[str, pd.DataFrame], dict[str, Any]]:
    """Read the tables and manifest a run wrote (for ``screen``, ``explain`` and reports).

    Parameters
    ----------
    out_dir : str or pathlib.Path
        A folder written by :func:`write_tables`.
    names : iterable of str, optional
        Only these tables (e.g. ``["targets"]``); default every table in the folder.

    Returns
    -------
    tables : dict of str to pandas.DataFrame
        Table name -> frame, from ``<name>.csv`` or ``<name>.parquet``. Text columns
        (``TEXT_COLUMNS``) are text with blanks as ``""``; neutralising apostrophes are kept.
    manifest : dict
        The parsed ``run.json``.

    Raises
    ------
    OutputError
        The folder holds no ``run.json`` or a table cannot be read.
    """
    out = Path(out_dir)
    manifest_path = out / MANIFEST
    if not manifest_path.is_file():
        raise OutputError(
            f"{out}: the folder must hold levgap outputs (run.json); got none. Run "
            f"`levgap analyze PANEL --out {out}` first."
        )
    try:
        manifest = json.loads(manifest_path.read_text(encoding="utf-8"))
    except (OSError, UnicodeDecodeError, json.JSONDecodeError) as exc:
        raise OutputError(f"{manifest_path}: run.json must be valid JSON; got {exc}.") from None
    listed = _marker_names(out)
    files: dict[str, Path] = {}
    candidates = sorted(
        (p for p in out.iterdir() if p.suffix in FORMATS.values() and p.is_file()),
        key=lambda p: (p.name not in listed, p.stat().st_mtime),
        reverse=True,
    )
    for p in candidates:
        if listed and p.name not in listed:
            continue
        files.setdefault(p.stem, p)
    wanted = None if names is None else set(names)
    tables = {}
    for name, p in sorted(files.items()):
        if wanted is not None and name not in wanted:
            continue
        try:
            if p.suffix == ".parquet":
                frame = pd.read_parquet(p)
            else:
                frame = pd.read_csv(
                    p, dtype={c: "str" for c in TEXT_COLUMNS}, keep_default_na=False,
                    na_values=[""], encoding="utf-8", engine="pyarrow",
                )
        except (OSError, ValueError, pd.errors.ParserError) as exc:
            raise OutputError(
                f"{p}: a levgap table must be readable; got {str(exc)[:200]}. Re-run "
                "`levgap analyze`."
            ) from None
        for c in TEXT_COLUMNS:
            if c in frame.columns:
                frame[c] = frame[c].astype("str").fillna("") if frame[c].dtype != object else (
                    frame[c].fillna("").astype("str"))
        tables[name] = frame
    return tables, manifest


# ---------------------------------------------------------------------------------------------


def write_table(
    frame: pd.DataFrame, path: str | Path, *, inputs: Iterable[str | Path] = ()
) -> Path:
    """Write one neutralised table (CSV or Parquet, by suffix) atomically, never over an input.

    Parameters
    ----------
    frame : pandas.DataFrame
    path : str or pathlib.Path
        Destination ending in ``.csv`` or ``.parquet``.
    inputs : iterable of path, default=()
        Input files, never overwritten.

    Raises
    ------
    OutputError
        Unknown suffix, the path of an input file, or a file system error.
    """
    target = Path(path)
    fmt = {v: k for k, v in FORMATS.items()}.get(target.suffix.lower())
    if fmt is None:
        raise OutputError(f"{target}: a table file must end in .csv or .parquet; got "
                          f"{target.suffix or 'no suffix'}.")
    _refuse_inputs([target], inputs)
    try:
        _atomic_table(neutralise(frame), target, fmt)
    except OSError as exc:
        raise OutputError(f"{target}: the file must be writable; got {exc.strerror or exc}.") \
            from None
    return target


def _marker_names(out: Path) -> set[str]:
    try:
        text = (out / MARKER).read_text(encoding="utf-8")
    except (OSError, UnicodeDecodeError):
        return set()
    return {line.strip() for line in text.splitlines() if line.strip()}


def _is_our_temp(name: str) -> bool:
    return name.startswith(".levgap-tmp-")


def _same_file(a: Path, b: Path) -> bool:
    try:
        if a.exists() and b.exists():
            return os.path.samefile(a, b)
    except OSError:
        pass
    return a.resolve() == b.resolve()


def _is_input(p: Path, inputs: Iterable[str | Path]) -> bool:
    return any(_same_file(p, Path(i)) for i in inputs)


def _refuse_inputs(targets: list[Path], inputs: Iterable[str | Path]) -> None:
    inputs = list(inputs)
    for t in targets:
        if _is_input(t, inputs):
            raise OutputError(
                f"{t}: an output must never replace an input file; got the input's own path. "
                "Choose another --out."
            )


def _atomic_table(frame: pd.DataFrame, target: Path, fmt: str) -> None:
    if fmt == "parquet":
        _atomic(target, lambda tmp: frame.to_parquet(tmp, index=False))
    else:
        _atomic(
            target,
            lambda tmp: frame.to_csv(tmp, index=False, encoding="utf-8", lineterminator="\r\n"),
        )


def _atomic(target: Path, write: Any) -> None:
    with atomic_file(target) as tmp:
        write(tmp)


def _jsonable(obj: Any) -> Any:
    if isinstance(obj, Mapping):
        return {str(k): _jsonable(v) for k, v in obj.items()}
    if isinstance(obj, list | tuple | set | frozenset):
        return [_jsonable(v) for v in obj]
    if isinstance(obj, float) and not math.isfinite(obj):
        return None
    if hasattr(obj, "item") and not isinstance(obj, str | bytes):
        try:
            return _jsonable(obj.item())
        except (ValueError, TypeError):
            return str(obj)
    if isinstance(obj, Path):
        return str(obj)
    return obj
