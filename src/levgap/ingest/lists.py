"""Small reference files beside a panel (pandas-free): industry names, peer lists, firm lists.

- ``industry_names`` (``[input] industry_names``): CSV with a header ``code,name`` (or
  ``industry,name``): a readable name for each industry code or label;
- ``peers`` (``[input] peers``): CSV with a header ``firm_id,peer_id``, one row per pair: a
  firm's own peers for the attribution;
- a coverage list (``levgap screen --firms``): one firm id a line (blank lines and lines
  starting with ``#`` are skipped; a first line ``firm_id`` is a header).

Every row is used or refused: a bad row stops with one line naming the file, the row and the
column (exit 2). Files are UTF-8 (a byte-order mark is allowed), at most 64 MB.
"""

from __future__ import annotations

import csv
import io
from dataclasses import replace
from pathlib import Path
from typing import TYPE_CHECKING

from levgap.errors import ConfigError

if TYPE_CHECKING:
    from levgap.config import RunConfig

MAX_BYTES = 64 << 20


def _text(path: str | Path, what: str) -> str:
    p = Path(path)
    try:
        if not p.is_file():
            raise ConfigError(f"{p}: the {what} must be an existing file; got "
                              f"{'a folder' if p.is_dir() else 'no file'} there.")
        with open(p, "rb") as fh:
            data = fh.read(MAX_BYTES + 1)
    except OSError as exc:
        raise ConfigError(f"{p}: the {what} must be readable; got {exc.strerror or exc}.") \
            from None
    if len(data) > MAX_BYTES:
        raise ConfigError(f"{p}: the {what} must be at most 64 MB; got a larger file.")
    try:
        return data.decode("utf-8-sig")
    except UnicodeDecodeError as exc:
        raise ConfigError(f"{p}: the {what} must be UTF-8 text; got a byte that is not "
                          f"(offset {exc.start}). Save it as UTF-8.") from None


def _rows(path: str | Path, what: str, wanted: tuple[tuple[str, ...], ...]
          ) -> list[tuple[int, list[str]]]:
    """Data rows (1-based row number, cells) of a CSV with the wanted columns, in that order.

    ``wanted`` gives, per column, the header names accepted for it (case and spaces ignored).
    """
    text = _text(path, what)
    first = next((ln for ln in text.splitlines() if ln.strip()), "")
    delimiter = next((d for d in ",;\t|" if d in first), ",")  # from the header line
    reader = csv.reader(io.StringIO(text), delimiter=delimiter)
    try:
        rows = list(reader)
    except csv.Error as exc:
        raise ConfigError(f"{path}: the {what} must be a CSV file; got {exc}.") from None
    rows = [r for r in rows if any(c.strip() for c in r)]
    if not rows:
        raise ConfigError(f"{path}: the {what} must have a header line "
                          f"({','.join(w[0] for w in wanted)}) and rows; got an empty file.")
    header = [h.strip().lower().replace(" ", "_") for h in rows[0]]
    pos = []
    for names in wanted:
        hit = [i for i, h in enumerate(header) if h in names]
        if not hit:
            raise ConfigError(
                f"{path}: the {what} must have a column {names[0]} in its header line; got "
                f"{', '.join(rows[0]) or 'an empty line'}.")
        pos.append(hit[0])
    out = []
    for n, row in enumerate(rows[1:], 1):
        cells = []
        for names, i in zip(wanted, pos, strict=True):
            cell = row[i].strip() if i < len(row) else ""
            if not cell:
                raise ConfigError(f"{path}: row {n}, column {names[0]} must not be blank; got "
                                  "an empty cell.")
            cells.append(cell)
        out.append((n, cells))
    return out


def read_industry_names(path: str | Path) -> dict[str, str]:
    """Industry code -> readable name, from a ``code,name`` CSV file.

    Raises
    ------
    ConfigError
        A missing column, a blank cell, or a code given two different names (naming the
        file, row and column).
    """
    names: dict[str, str] = {}
    for n, (code, name) in _rows(path, "industry names file",
                                 (("code", "industry"), ("name", "industry_name"))):
        if code in names and names[code] != name:
            raise ConfigError(f"{path}: row {n}, column name must agree with the earlier row "
                              f"of code {code!r}; got {name!r} and {names[code]!r}.")
        names[code] = name
    return names


def read_peer_lists(path: str | Path) -> dict[str, tuple[str, ...]]:
    """Firm id -> its listed peers, from a ``firm_id,peer_id`` CSV file.

    Raises
    ------
    ConfigError
        A missing column, a blank cell, or a firm listed as its own peer.
    """
    lists: dict[str, list[str]] = {}
    for n, (firm, peer) in _rows(path, "peer list", (("firm_id",), ("peer_id",))):
        if firm == peer:
            raise ConfigError(f"{path}: row {n}, column peer_id must name another firm; got "
                              f"the firm itself ({firm!r}).")
        got = lists.setdefault(firm, [])
        if peer not in got:
            got.append(peer)
    return {k: tuple(v) for k, v in lists.items()}


def read_firm_list(path: str | Path) -> list[str]:
    """Firm ids of a coverage list: one a line, in the file's order, without repeats.

    Blank lines and lines starting with ``#`` are skipped; a first line ``firm_id`` is a
    header. Surrounding spaces are removed.
    """
    ids: list[str] = []
    lines = _text(path, "firm list").splitlines()
    for i, line in enumerate(lines):
        cell = line.strip()
        if not cell or cell.startswith("#") or (i == 0 and cell.lower() == "firm_id"):
            continue
        if cell not in ids:
            ids.append(cell)
    if not ids:
        raise ConfigError(f"{path}: the firm list must name at least one firm id (one a "
                          "line); got none.")
    return ids


def load_references(config: RunConfig) -> RunConfig:
    """The configuration with the files ``[input]`` names read in: industry names merged into
    ``industries`` (a name given in ``[industries]`` wins) and the peer lists into ``peers``
    (lists given directly are kept and extended)."""
    from levgap.config import Industry

    out = config
    if config.input.industry_names:
        names = read_industry_names(config.input.industry_names)
        merged = dict(config.industries)
        for code, name in names.items():
            entry = merged.get(code, Industry())
            if entry.name is None:
                merged[code] = replace(entry, name=name)
        out = replace(out, industries=merged)
    if config.input.peers:
        lists = dict(config.peers)
        for firm, peers in read_peer_lists(config.input.peers).items():
            lists[firm] = tuple(dict.fromkeys([*lists.get(firm, ()), *peers]))
        out = replace(out, peers=lists)
    return out
