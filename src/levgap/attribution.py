"""Peer baselines and driver contributions (pure functions).

For each firm-year and measure the baseline is the median driver profile of the firm's
industry peers in the same fiscal year, the firm itself excluded. Each driver's contribution
is its exact Shapley value in ``target - peer_target`` (``levgap.models.shapley``), with
``peer_target`` the model's target at the peer profile and the firm's own effects; for the
linear model it is ``beta_j * (x_j - x_peer_j)``. With the peers' median
actual ratio this splits ``actual - peer_median`` into the peers' own offset
(``peer_target - peer_median``), each driver's contribution, and the unexplained ``gap``.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from levgap.errors import ModelError
from levgap.models.shapley import shapley

IDENTITY_TOL = 1e-12


def loo_median(values: np.ndarray, groups: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Median of each row's group with the row itself left out, from order statistics.

    Parameters
    ----------
    values : numpy.ndarray of float, shape (n,)
        Values; NaN values take no part (a NaN row gets the median of its whole group).
    groups : numpy.ndarray of int, shape (n,)
        Group code of each row.

    Returns
    -------
    median : numpy.ndarray
        Leave-one-out median (NaN when the group holds no other value).
    count : numpy.ndarray of int
        Number of values the median was taken over.
    """
    n = len(values)
    med = np.full(n, np.nan)
    cnt = np.zeros(n, dtype=np.int64)
    ok = ~np.isnan(values)
    idx = np.flatnonzero(ok)
    if idx.size == 0:
        return med, cnt
    order = idx[_group_value_order(values[idx], groups[idx])]
    gs, vs = groups[order], values[order]
    first = np.flatnonzero(np.r_[True, gs[1:] != gs[:-1]])
    sizes = np.diff(np.r_[first, len(gs)])
    start = np.repeat(first, sizes)
    size = np.repeat(sizes, sizes)
    rank = np.arange(len(gs)) - start
    m = size - 1

    def kth(j: np.ndarray) -> np.ndarray:
        # j-th smallest of the group without the row itself
        pos = start + j + (j >= rank)
        return vs[np.clip(pos, 0, len(vs) - 1)]

    half = m // 2
    odd = kth(half)
    even = 0.5 * (kth(np.maximum(half - 1, 0)) + kth(half))
    loo = np.where(m % 2 == 1, odd, even)
    loo[m == 0] = np.nan
    med[order] = loo
    cnt[order] = m
    # Rows without a value: median of the whole group.
    nan_rows = np.flatnonzero(~ok)
    if nan_rows.size:
        mid_lo = vs[first + (sizes - 1) // 2]
        mid_hi = vs[first + sizes // 2]
        full = 0.5 * (mid_lo + mid_hi)
        pos = np.searchsorted(gs[first], groups[nan_rows])
        pos_c = np.clip(pos, 0, len(first) - 1)
        hit = gs[first][pos_c] == groups[nan_rows]
        med[nan_rows] = np.where(hit, full[pos_c], np.nan)
        cnt[nan_rows] = np.where(hit, sizes[pos_c], 0)
    return med, cnt


Partition = tuple[np.ndarray | None, np.ndarray]
"""Rows taking part (a boolean mask, ``None`` for all) and their group codes."""


def _narrow(groups: np.ndarray) -> np.ndarray:
    # the narrowest integer type holding the codes: numpy sorts 16-bit integers by radix
    if groups.size and groups.dtype.kind in "iu" and groups.min() >= 0:
        top = int(groups.max())
        return groups.astype(np.int16 if top < 2**15 else np.int32 if top < 2**31 else np.int64)
    return groups


def _group_value_order(values: np.ndarray, groups: np.ndarray) -> np.ndarray:
    """Rows sorted by group, then by value: what ``np.lexsort((values, groups))`` gives, up to
    the order of equal values (which no median depends on), in two faster passes."""
    order = np.argsort(values)
    return order[np.argsort(_narrow(groups)[order], kind="stable")]


def _loo_medians(X: np.ndarray, groups: np.ndarray) -> list[tuple[np.ndarray, np.ndarray]]:
    """:func:`loo_median` of every column of ``X`` over the same groups.

    Without NaN every column has the same group layout (sizes, starts, the sorted positions
    of the two middle values once a row is left out); only which row sits at each sorted
    position differs. So the layout is computed once and each column costs one sort and
    two gathers. With NaN, column by column.
    """
    n, k = X.shape
    if n == 0 or np.isnan(X).any():
        return [loo_median(X[:, j], groups) for j in range(k)]
    gs = groups[np.argsort(_narrow(groups), kind="stable")]
    first = np.flatnonzero(np.r_[True, gs[1:] != gs[:-1]])
    sizes = np.diff(np.r_[first, n])
    start = np.repeat(first, sizes)
    rank = np.arange(n) - start
    m = np.repeat(sizes, sizes) - 1
    half = m // 2
    # as loo_median's kth(): j-th smallest of the group without the row itself
    p_hi = np.clip(start + half + (half >= rank), 0, n - 1)
    lo = np.maximum(half - 1, 0)
    p_lo = np.clip(start + lo + (lo >= rank), 0, n - 1)
    odd = m % 2 == 1
    alone = m == 0
    out = []
    cnt = None
    for j in range(k):
        v = X[:, j]
        order = _group_value_order(v, groups)
        vs = v[order]
        hi = vs[p_hi]
        loo = np.where(odd, hi, 0.5 * (vs[p_lo] + hi))
        loo[alone] = np.nan
        med = np.empty(n)
        med[order] = loo
        if cnt is None:
            cnt = np.empty(n, dtype=np.int64)
            cnt[order] = m
        out.append((med, cnt))
    return out


def peer_profile(
    X: np.ndarray, levels: list[list[Partition]]
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Leave-one-out median profile of each row's peers, falling back through ``levels``.

    Parameters
    ----------
    X : numpy.ndarray, shape (n, k)
        Values whose peer medians are wanted (drivers, and the measure itself).
    levels : list of lists of (mask, groups)
        Peer definitions from the narrowest to the widest. A level is one or more partitions:
        the rows in a partition's mask take their medians among the rows of their own group
        within that mask (so a small industry can look across its parent's member industries
        without changing anyone else's peers). A row with no peer at one level takes the next.

    Returns
    -------
    profile : numpy.ndarray, shape (n, k)
    count : numpy.ndarray of int
        Peers the profile was taken over (from the first column).
    level : numpy.ndarray of int
        Index into ``levels`` of the definition used (-1: no peer at all).
    """
    n, k = X.shape
    profile = np.full((n, k), np.nan)
    count = np.zeros(n, dtype=np.int64)
    used = np.full(n, -1, dtype=np.int64)
    todo = np.ones(n, dtype=bool)
    for li, partitions in enumerate(levels):
        for mask, groups in partitions:
            rows = np.arange(n) if mask is None else np.flatnonzero(mask)
            if not todo[rows].any():
                continue
            if not todo[rows].all():
                # Only the groups holding rows still without peers (whole groups, so their
                # medians are the same): a wider level is needed by few rows.
                g = groups[rows]
                rows = rows[np.isin(g, np.unique(g[todo[rows]]))]
            cols = _loo_medians(X[rows], groups[rows])
            c = cols[0][1]
            take = todo[rows] & (c > 0)
            at = rows[take]
            for j in range(k):
                profile[at, j] = cols[j][0][take]
            count[at] = c[take]
            used[at] = li
            todo[at] = False
        if not todo.any():
            break
    return profile, count, used


@dataclass(frozen=True, slots=True)
class Attribution:
    """Driver contributions of each row.

    Parameters
    ----------
    peer_target : numpy.ndarray, shape (n,)
        Model target at the peer profile.
    contributions : numpy.ndarray, shape (n, k)
        Exact additive contributions; each row sums to ``target - peer_target``.
    method : str
        ``"shapley"`` or ``"aumann-shapley"`` (``levgap.models.shapley``).
    """

    peer_target: np.ndarray
    contributions: np.ndarray
    method: str = "shapley"


def attribute_gap(
    X: np.ndarray,
    X_peer: np.ndarray,
    beta: np.ndarray,
    offset: np.ndarray,
    target: np.ndarray,
    link: str = "identity",
) -> Attribution:
    """Exact contributions, checked against the accounting identity.

    Parameters
    ----------
    X, X_peer : numpy.ndarray, shape (n, k)
        Firm and peer driver values.
    beta : numpy.ndarray, shape (n, k)
        Slopes of the fit that produced each row's target (the row's cross-fit fold).
    offset : numpy.ndarray, shape (n,)
        Constant plus fixed effects of each row in that fit (link scale).
    target : numpy.ndarray, shape (n,)
        The row's target, ``inverse_link(offset + X @ beta)``.
    link : {"identity", "logit"}, default="identity"
        The model's link (``levgap.models.result.INVERSE_LINKS``); with the identity the
        contributions are ``beta_j * (x_j - x_peer_j)``.

    Raises
    ------
    ModelError
        If the contributions do not sum to ``target - peer_target`` within ``IDENTITY_TOL``
        (relative to the size of the target).
    """
    from levgap.models.result import INVERSE_LINKS

    contributions, peer_target, method = shapley(offset, X * beta, X_peer * beta,
                                                 INVERSE_LINKS[link], linear=link == "identity")
    resid = target - peer_target - contributions.sum(axis=1)
    bad = np.abs(resid) > IDENTITY_TOL * np.maximum(1.0, np.abs(target))
    if bad.any():
        raise ModelError(
            f"driver contributions must sum to target - peer_target; got a difference of "
            f"{np.abs(resid).max():.3g} on {int(bad.sum())} rows. Please report this."
        )
    return Attribution(peer_target=peer_target, contributions=contributions, method=method)
