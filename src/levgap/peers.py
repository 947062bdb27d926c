"""Who a firm-year's peers are: the peer definitions of the attribution, shared by ``analyze``
(which takes medians over them) and ``explain --peers`` (which lists them).

A firm-year's peers are the other firm-years of the same fiscal year and measure, taken from
the first of these that holds any:

0. its peer group (the industry code, or its first ``[model] peer_digits`` characters);
1. the industries its industry level is pooled toward (its parent group: a code prefix, a
   parent named in ``[industries]``, else the whole sample), first parent in order;
2. the whole fiscal year (flag ``peers_whole_year``);
3. every other firm-year of the panel (flag ``peers_other_years``).

A firm named in a peer list (``peers.csv``: ``firm_id, peer_id``) takes the listed firms
present in that year instead (flag ``peers_listed``); when none of them is, the steps above
apply (flag ``peer_list_unmatched``).
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from typing import TYPE_CHECKING, Any

import numpy as np

if TYPE_CHECKING:
    import pandas as pd

BASIS_FLAGS: dict[int, str] = {1: "peers_from_parent", 2: "peers_whole_year",
                               3: "peers_other_years"}
"""Flag of each fallback step (index of the definition used)."""
LISTED = 4
"""Index standing for a firm's listed peers."""

Partition = tuple[np.ndarray | None, np.ndarray]


def partitions(level: np.ndarray, year: np.ndarray, peer: np.ndarray, n_years: int,
               members: np.ndarray, parent: np.ndarray) -> list[list[Partition]]:
    """The peer definitions of the module docstring, for ``attribution.peer_profile``.

    Parameters
    ----------
    level : numpy.ndarray of int
        Industry level (of the effect) of each row.
    year : numpy.ndarray of int
        Fiscal-year code of each row (0 .. n_years - 1).
    peer : numpy.ndarray of int
        Peer-group code of each row.
    n_years : int
    members : numpy.ndarray of bool, shape (n_parents, L)
        Levels that make up each parent group.
    parent : numpy.ndarray of int, shape (L,)
        Parent of each small level (-1 for the others).
    """
    parents = []
    for pid in range(members.shape[0]):
        mask = members[pid][level] | (parent[level] == pid)
        parents.append((mask, year))
    return [[(None, peer * n_years + year)], parents, [(None, year)],
            [(None, np.zeros(len(level), dtype=np.int64))]]


def members_of(i: int, parts: list[list[Partition]]) -> tuple[int, np.ndarray]:
    """The definition row ``i`` takes its peers from, and the peers' row positions.

    The same choice ``attribution.peer_profile`` makes: the first definition, and within it
    the first partition holding the row, with any other row in the row's group.

    Returns
    -------
    (int, numpy.ndarray)
        Index of the definition (-1 and no rows when there is none).
    """
    for li, group in enumerate(parts):
        for mask, codes in group:
            if mask is not None and not mask[i]:
                continue
            hit = codes == codes[i]
            if mask is not None:
                hit &= mask
            hit[i] = False
            rows = np.flatnonzero(hit)
            if len(rows):
                return li, rows
    return -1, np.zeros(0, dtype=np.int64)


def listed_profile(
    firm: np.ndarray, year: np.ndarray, values: np.ndarray,
    lists: Mapping[str, Sequence[str]],
) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """Median profile over each listed firm's named peers in the same fiscal year.

    Parameters
    ----------
    firm : numpy.ndarray of str
        Firm id of each row.
    year : numpy.ndarray of int
        Fiscal year (or its code) of each row.
    values : numpy.ndarray, shape (n, k)
        Values whose medians are wanted (drivers and the measure).
    lists : mapping of str to sequence of str
        Firm id -> its peers' firm ids.

    Returns
    -------
    profile : numpy.ndarray, shape (n, k)
        NaN where a row has no listed peer present.
    count : numpy.ndarray of int
    found : numpy.ndarray of bool
        Rows whose firm has a list and at least one listed peer in that year.
    listed : numpy.ndarray of bool
        Rows whose firm has a list.
    """
    import pandas as pd

    n, k = values.shape
    profile = np.full((n, k), np.nan)
    count = np.zeros(n, dtype=np.int64)
    firm = np.asarray(firm).astype(str)
    listed = np.isin(firm, list(lists)) if lists else np.zeros(n, dtype=bool)
    if not listed.any():
        return profile, count, np.zeros(n, dtype=bool), listed
    pairs = pd.DataFrame([(f, p) for f, ps in lists.items() for p in ps if p != f],
                         columns=["firm", "peer"]).drop_duplicates()
    rows = pd.DataFrame({"firm": firm, "year": np.asarray(year), "row": np.arange(n)})
    own = rows[listed].merge(pairs, on="firm")
    hits = own.merge(rows.rename(columns={"firm": "peer", "row": "peer_row"}),
                     on=["peer", "year"])
    if len(hits) == 0:
        return profile, count, np.zeros(n, dtype=bool), listed
    frame = pd.DataFrame(values[hits["peer_row"].to_numpy()])
    frame["row"] = hits["row"].to_numpy()
    by = frame.groupby("row", sort=True)
    med = by.median()
    at = med.index.to_numpy()
    profile[at] = med.to_numpy()
    count[at] = by.size().to_numpy()
    found = np.zeros(n, dtype=bool)
    found[at] = True
    return profile, count, found, listed


def basis_flags(used: np.ndarray, listed: np.ndarray, found: np.ndarray, count: np.ndarray,
                min_peers: int) -> dict[str, np.ndarray]:
    """Flags naming where each row's peers came from, and ``few_peers``."""
    flags = {code: used == li for li, code in BASIS_FLAGS.items()}
    flags["no_peers"] = used < 0
    flags["peers_listed"] = found
    flags["peer_list_unmatched"] = listed & ~found
    flags["few_peers"] = (count > 0) & (count < min_peers)
    return flags


def peer_rows(targets: pd.DataFrame, index: int, *, model: Mapping[str, Any],
              lists: Mapping[str, Sequence[str]] | None = None) -> tuple[str, np.ndarray]:
    """The peers behind one row of a targets table, found as ``analyze`` found them.

    Parameters
    ----------
    targets : pandas.DataFrame
        The rows of one measure that the run attributed together (every fiscal year the
        run wrote), with ``firm_id``, ``fiscal_year``, ``industry`` and ``flags``.
    index : int
        Position (not label) of the row in ``targets``.
    model : mapping
        The run's ``model.json``: its ``spec`` (``peer_digits``, ``industry_digits``) and
        ``industries`` (levels, parents, members).
    lists : mapping of str to sequence of str, optional
        The run's peer lists (default: ``model["peer_lists"]``).

    Returns
    -------
    (str, numpy.ndarray)
        The basis (``peer group``, ``parent group``, ``whole year``, ``whole panel``,
        ``listed`` or ``none``) and the peers' positions in ``targets``.
    """
    import pandas as pd

    from levgap.features import peer_group

    lists = model.get("peer_lists", {}) if lists is None else lists
    flags = str(targets["flags"].iloc[index]).split(";")
    firm = targets["firm_id"].astype(str).to_numpy()
    year = targets["fiscal_year"].to_numpy(dtype=np.int64)
    if "peers_listed" in flags:
        wanted = set(lists.get(firm[index], ())) - {firm[index]}
        rows = np.flatnonzero(np.isin(firm, list(wanted)) & (year == year[index]))
        return "listed", rows
    spec = model.get("spec", {})
    industry = targets["industry"].astype(str).str.lstrip("'")
    peer = pd.factorize(peer_group(industry, int(spec.get("peer_digits", 0))), sort=True)[0]
    ind = model.get("industries", {})
    labels = {str(lab): i for i, lab in enumerate(ind.get("labels", []))}
    effect = peer_group(industry, int(spec.get("industry_digits", 0)))
    level = np.array([labels.get(v, -1) for v in effect], dtype=np.int64)
    n_levels = len(labels)
    parent = np.array(ind.get("parent", [-1] * n_levels), dtype=np.int64)
    members = np.zeros((len(ind.get("members", [])), n_levels + 1), dtype=bool)
    for pid, mem in enumerate(ind.get("members", [])):
        members[pid, mem] = True
    parent = np.r_[parent, -1]  # an unknown level (-1) is in no parent group
    year_code, years = pd.factorize(year, sort=True)
    parts = partitions(np.where(level >= 0, level, n_levels), year_code.astype(np.int64),
                       peer.astype(np.int64), len(years), members, parent)
    li, rows = members_of(index, parts)
    names = {0: "peer group", 1: "parent group", 2: "whole year", 3: "whole panel"}
    return names.get(li, "none"), rows


def peer_list_notes(lists: Mapping[str, Sequence[str]], firms: Any) -> list[str]:
    """Notes on a peer list's firms and peers that the panel does not hold."""
    if not lists:
        return []
    present = set(map(str, firms))
    absent = sorted(f for f in lists if f not in present)
    peers = sorted({p for ps in lists.values() for p in ps} - present)
    notes = []
    for what, ids in (("listed firms", absent), ("listed peers", peers)):
        if ids:
            shown = ", ".join(ids[:5]) + (f" and {len(ids) - 5} more" if len(ids) > 5 else "")
            notes.append(f"peer list: {len(ids)} {what} are not firms of the panel ({shown}).")
    return notes
