"""Readable industry names: the SEC's titles of Standard Industrial Classification codes.

``levgap/data/sic_titles.csv`` holds, as ``code,level,title``:

* ``industry``: the 444 four-digit codes of the SIC code list the U.S. SEC publishes for
  EDGAR filers (the codes in ``sub.txt``), with the SEC's titles (public-domain U.S.
  government text, copied as published, abbreviations included);
* ``major_group``: the 83 two-digit major groups of the 1987 SIC manual (titles recalled
  from memory, not re-read against the manual).

The loader is pandas-free, so quick commands can name industries cheaply.
"""

from __future__ import annotations

import csv
import io
from collections.abc import Iterable, Mapping
from functools import lru_cache
from importlib.resources import files
from typing import Any

__all__ = ["industry_names", "major_group_title", "sic_title", "sic_titles"]


@lru_cache(maxsize=1)  # the shipped file never changes while a process runs
def sic_titles() -> dict[str, tuple[str, str]]:
    """Every code in the shipped table: code -> (level, title).

    Returns
    -------
    dict of str to (str, str)
        Four-digit codes (``"2834"``) have level ``"industry"``; two-digit codes
        (``"28"``) level ``"major_group"``.
    """
    text = files("levgap").joinpath("data", "sic_titles.csv").read_text(encoding="utf-8")
    return {row["code"]: (row["level"], row["title"])
            for row in csv.DictReader(io.StringIO(text))}


def _code(code: object) -> str | None:
    text = str(code).strip()
    if text.endswith(".0"):
        text = text[:-2]
    if not text.isdigit() or len(text) > 4 or int(text) == 0:
        return None
    return text.zfill(4)


def major_group_title(code: object) -> str | None:
    """Title of the SIC major group (first two digits) of ``code``; ``None`` if unknown.

    Examples
    --------
    >>> major_group_title("2834")
    'Chemicals and Allied Products'
    """
    c = _code(code)
    if c is None:
        return None
    hit = sic_titles().get(c[:2])
    return hit[1] if hit else None


def sic_title(code: object) -> str | None:
    """The SEC's title of a SIC code, else its major group's title; ``None`` if neither.

    Parameters
    ----------
    code : str or int
        A SIC code (``"2834"``, ``2834``, ``"0100"``, ``100``).

    Returns
    -------
    str or None

    Examples
    --------
    >>> sic_title("2834")
    'PHARMACEUTICAL PREPARATIONS'
    >>> sic_title(2899)  # not in the SEC's list: its major group
    'Chemicals and Allied Products'
    """
    c = _code(code)
    if c is None:
        return None
    hit = sic_titles().get(c)
    if hit is not None:
        return hit[1]
    return major_group_title(c)


def industry_names(labels: Iterable[object], configured: Mapping[str, str] | None = None, *,
                   sic: bool = True) -> dict[str, str]:
    """Readable names of industry labels: configured names first, then the SEC's SIC titles.

    Parameters
    ----------
    labels : iterable
        Industry codes or labels (and peer groups, parent groups).
    configured : mapping of str to str, optional
        Names from ``[industries]`` or the ``industry_names`` file.
    sic : bool, default=True
        Name four-digit numeric codes by the SEC's titles (else their major group's) and
        two-digit codes by the major group's title.

    Returns
    -------
    dict of str to str
        Label -> name, for the labels that have one.

    Examples
    --------
    >>> industry_names(["2834", "28", "Motor homes"], {"Motor homes": "Motor homes and campers"})
    {'2834': 'PHARMACEUTICAL PREPARATIONS', '28': 'Chemicals and Allied Products', \
'Motor homes': 'Motor homes and campers'}
    """
    configured = configured or {}
    out: dict[str, str] = {}
    for label in dict.fromkeys(str(v) for v in labels):
        name = configured.get(label)
        if name is None and sic and label.isdigit():
            name = (sic_title(label) if len(label) == 4 else
                    major_group_title(label) if len(label) == 2 else None)
        if name:
            out[label] = name
    return out


def run_industry_names(feats: Any, config: Any) -> dict[str, str]:
    """Names of every industry, industry level, peer group and parent group of a run."""
    frame = feats.frame
    labels = [*frame["industry"].unique(), *frame["effect_group"].unique(),
              *frame["peer_group"].unique(), *feats.levels.parent_labels]
    configured = {k: v.name for k, v in config.industries.items() if v.name}
    return industry_names(labels, configured, sic=config.input.sic_titles)
