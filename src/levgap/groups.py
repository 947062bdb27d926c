"""Industry levels of the effect, small industries and their parent groups (pure functions).

An industry (peer group) with at least ``min_industry_firms`` distinct firms has an effect of
its own; a smaller one is pooled toward its parent group (``levgap.models.pooling``): the
industries with effects of their own that name the same parent in ``[industries]`` of the run
configuration (how text labels get a parent), else those that share the longest leading part
of its numeric code, else every such industry ("the whole sample").
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass
from typing import Any

import numpy as np
import pandas as pd

from levgap.models.design import Pooling

WHOLE_SAMPLE = "(all industries)"


@dataclass(frozen=True, slots=True)
class IndustryLevels:
    """Levels of the industry effect.

    Parameters
    ----------
    labels : numpy.ndarray of str, shape (L,)
        Industry (peer-group) labels, sorted; a row's level code indexes them.
    codes : numpy.ndarray of int, shape (n,)
        Level code of each row.
    firms : numpy.ndarray of int, shape (L,)
        Distinct firms of each level.
    small : numpy.ndarray of bool, shape (L,)
        Levels with fewer than ``min_industry_firms`` firms.
    parent : numpy.ndarray of int, shape (L,)
        Parent id of each small level (-1 for the others).
    parent_labels : tuple of str
        Each parent's description: a code prefix or ``WHOLE_SAMPLE``.
    members : numpy.ndarray of bool, shape (n_parents, L)
        Levels with effects of their own that make up each parent.
    """

    labels: np.ndarray
    codes: np.ndarray
    firms: np.ndarray
    small: np.ndarray
    parent: np.ndarray
    parent_labels: tuple[str, ...]
    members: np.ndarray

    def structure(self) -> Pooling:
        """The pooling structure with no penalty set (small levels borrow outright)."""
        L = len(self.labels)
        return Pooling(self.small, self.parent, self.members, np.full(L, np.inf),
                       np.full(L, np.nan))

    def to_dict(self) -> dict[str, Any]:
        """JSON-able form for the saved model."""
        return {
            "labels": [str(x) for x in self.labels],
            "firms": [int(x) for x in self.firms],
            "small": [bool(x) for x in self.small],
            "parent": [int(x) for x in self.parent],
            "parent_labels": list(self.parent_labels),
            "members": [[int(j) for j in np.flatnonzero(m)] for m in self.members],
        }


def industry_levels(peer: pd.Series, firm: pd.Series, min_firms: int,
                    parents: Mapping[str, str] | None = None) -> IndustryLevels:
    """Levels, small industries and their parents (see the module docstring).

    Parameters
    ----------
    peer : pandas.Series
        Industry level of each row.
    firm : pandas.Series
        Firm of each row.
    min_firms : int
        Levels with fewer distinct firms are small.
    parents : mapping of str to str, optional
        Level label -> parent group named in the run configuration.
    """
    parents = parents or {}
    codes, labels = pd.factorize(peer.astype(str).to_numpy(), sort=True)
    labels = np.asarray(labels, dtype=object).astype(str)
    L = len(labels)
    fcodes = pd.factorize(firm.to_numpy())[0]
    pairs = np.unique(codes.astype(np.int64) * (int(fcodes.max()) + 1) + fcodes)
    firms = np.bincount(pairs // (int(fcodes.max()) + 1), minlength=L)
    small = firms < min_firms
    large = np.flatnonzero(~small)
    if len(large) == 0:  # nothing to pool toward: every industry keeps its own effect
        small = np.zeros(L, dtype=bool)
        large = np.arange(L)
    parent = np.full(L, -1, dtype=np.int64)
    parent_labels: list[str] = []
    member_rows: list[np.ndarray] = []
    by_prefix = _prefix_index([str(labels[i]) for i in large])
    for i in np.flatnonzero(small):
        code = str(labels[i])
        label, mem = WHOLE_SAMPLE, large
        named = [j for j in large if parents.get(str(labels[j])) == parents[code]] \
            if code in parents else []
        if named:
            label, mem = parents[code], np.array(named, dtype=large.dtype)
        elif code.isdigit():
            for cut in range(len(code) - 1, 0, -1):
                hit = by_prefix.get(code[:cut])
                if hit:
                    label, mem = code[:cut], large[hit]
                    break
        if label not in parent_labels:
            parent_labels.append(label)
            row = np.zeros(L, dtype=bool)
            row[mem] = True
            member_rows.append(row)
        parent[i] = parent_labels.index(label)
    members = np.array(member_rows, dtype=bool).reshape(len(member_rows), L)
    return IndustryLevels(labels=labels, codes=codes.astype(np.int64), firms=firms,
                          small=small, parent=parent, parent_labels=tuple(parent_labels),
                          members=members)


def _prefix_index(names: list[str]) -> dict[str, list[int]]:
    """Positions of the names sharing each leading part (of numeric codes)."""
    out: dict[str, list[int]] = {}
    for j, name in enumerate(names):
        if name.isdigit():
            for cut in range(1, len(name)):
                out.setdefault(name[:cut], []).append(j)
    return out
