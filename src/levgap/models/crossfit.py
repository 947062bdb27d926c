"""Cross-fitted targets: no firm's own rows ever fit its own target.

Firms are split into ``k`` folds (grouped by firm, stratified by effect group so that every
industry with ``k`` or more firms has firms in every training set), with a fixed seed. Each
fold's rows get their target from a fit on the other folds.
"""

from __future__ import annotations

from collections.abc import Callable, Sequence
from dataclasses import dataclass

import numpy as np

from levgap.models.linear import Borrow


@dataclass(frozen=True, slots=True)
class CrossFit:
    """Out-of-fold predictions.

    Parameters
    ----------
    target : numpy.ndarray, shape (n,)
        Each row's prediction from the fit that left its firm out.
    offset : numpy.ndarray, shape (n,)
        Constant plus fixed effects of that prediction (``target = offset + X @ beta``).
    beta : numpy.ndarray, shape (n, k)
        Slopes of that fit, per row.
    fold : numpy.ndarray of int, shape (n,)
        Fold of each row.
    """

    target: np.ndarray
    offset: np.ndarray
    beta: np.ndarray
    fold: np.ndarray


def assign_folds(firm: np.ndarray, strata: np.ndarray, k: int, seed: int) -> np.ndarray:
    """Fold of each row: firms shuffled with ``seed``, dealt round-robin within each stratum.

    Parameters
    ----------
    firm : numpy.ndarray of int, shape (n,)
        Firm code of each row.
    strata : numpy.ndarray of int, shape (n,)
        Stratum code of each row (a firm's first row decides its stratum).
    k : int
        Number of folds.
    seed : int
        Seed of the shuffle.
    """
    firms, first = np.unique(firm, return_index=True)
    rng = np.random.default_rng(seed)
    perm = rng.permutation(len(firms))
    stratum = strata[first][perm]
    order = np.argsort(stratum, kind="stable")
    s_sorted = stratum[order]
    start = np.flatnonzero(np.r_[True, s_sorted[1:] != s_sorted[:-1]])
    rank = np.arange(len(order)) - np.repeat(start, np.diff(np.r_[start, len(order)]))
    shift = rng.integers(0, k, size=len(start))
    fold_sorted = (rank + np.repeat(shift, np.diff(np.r_[start, len(order)]))) % k
    fold_of_firm = np.empty(len(firms), dtype=np.int64)
    fold_of_firm[perm[order]] = fold_sorted
    return fold_of_firm[np.searchsorted(firms, firm)]


def crossfit_targets(
    fit: Callable[..., object],
    y: np.ndarray,
    X: np.ndarray,
    *,
    effects: Sequence[np.ndarray],
    borrow: Sequence[Borrow | None],
    n_levels: Sequence[int],
    folds: np.ndarray,
    names: Sequence[str],
    progress: Callable[[int, int], None] | None = None,
) -> CrossFit:
    """Fit on all folds but one and predict the one left out, for every fold.

    Parameters
    ----------
    fit : callable
        A fit function of ``levgap.models.MODELS``.
    y, X, effects, borrow, n_levels, names
        As for :func:`levgap.models.linear.fit_linear`, for all rows.
    folds : numpy.ndarray of int
        Fold of each row (:func:`assign_folds`).
    progress : callable, optional
        Called as ``progress(done, total)`` after each fold.
    """
    n, k = X.shape
    target = np.empty(n)
    offset = np.empty(n)
    beta = np.empty((n, k))
    labels = np.unique(folds)
    for i, f in enumerate(labels):
        test = folds == f
        train = ~test
        res = fit(
            y[train],
            X[train],
            effects=[e[train] for e in effects],
            borrow=[_subset(b, train) for b in borrow],
            n_levels=n_levels,
            names=names,
            cov=False,
        )
        off = np.full(int(test.sum()), res.coef[0])
        for j, e in enumerate(effects):
            off += res.effect_of(j, e[test], _subset(borrow[j], test))
        offset[test] = off
        beta[test] = res.coef[1:]
        target[test] = off + X[test] @ res.coef[1:]
        if progress is not None:
            progress(i + 1, len(labels))
    return CrossFit(target=target, offset=offset, beta=beta, fold=folds)


def _subset(b: Borrow | None, mask: np.ndarray) -> Borrow | None:
    return None if b is None else Borrow(parent=b.parent[mask], members=b.members)
