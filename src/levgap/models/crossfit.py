"""Cross-fitted targets: no firm's own rows ever fit its own target.

Firms are split into ``k`` folds (grouped by firm, stratified by effect group so that every
industry with ``k`` or more firms has firms in every training set), with a fixed seed. Each
fold's rows get their target from a fit on the other folds.
"""

from __future__ import annotations

from collections.abc import Callable, Sequence
from dataclasses import dataclass

import numpy as np

from levgap.models.design import Pooling
from levgap.models.result import Fit


@dataclass(frozen=True, slots=True)
class CrossFit:
    """Out-of-fold predictions.

    Parameters
    ----------
    target : numpy.ndarray, shape (n,)
        Each row's prediction from the fit that left its firm out.
    offset : numpy.ndarray, shape (n,)
        Constant plus effects of that prediction, on the link scale
        (``target = inverse_link(offset + X @ beta)``).
    beta : numpy.ndarray, shape (n, k)
        Slopes of that fit, per row.
    fold : numpy.ndarray of int, shape (n,)
        Fold of each row.
    fits : tuple of Fit
        The fit of each fold, in the order of ``fold_ids``.
    fold_ids : tuple of int
        The folds that hold rows (``fits[i]`` predicted the rows of fold ``fold_ids[i]``).
    from_parent : numpy.ndarray of bool, shape (n,)
        Rows whose industry had no rows of its own in the fold's fit (a single-firm industry):
        their target uses the parent group's effect.
    """

    target: np.ndarray
    offset: np.ndarray
    beta: np.ndarray
    fold: np.ndarray
    fits: tuple[Fit, ...]
    fold_ids: tuple[int, ...]
    from_parent: np.ndarray


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
    fit: Callable[..., Fit],
    y: np.ndarray,
    X: np.ndarray,
    *,
    effects: Sequence[np.ndarray],
    n_levels: Sequence[int],
    folds: np.ndarray,
    names: Sequence[str],
    pooling_for: Callable[[np.ndarray], Pooling | None] | None = None,
    start: np.ndarray | None = None,
    progress: Callable[[int, int], None] | None = None,
) -> CrossFit:
    """Fit on all folds but one and predict the one left out, for every fold.

    Parameters
    ----------
    fit : callable
        A fit function of ``levgap.models.MODELS``.
    y, X, effects, n_levels, names
        As for the fit function, for all rows.
    folds : numpy.ndarray of int
        Fold of each row (:func:`assign_folds`).
    pooling_for : callable, optional
        ``pooling_for(train_mask)`` gives the pooling of the fold's fit (its weights follow the
        training rows' counts).
    start : numpy.ndarray, optional
        A linear predictor for every row (the full-sample fit's) to start iterative fits from.
    progress : callable, optional
        Called as ``progress(done, total)`` after each fold.
    """
    n, k = X.shape
    target = np.empty(n)
    offset = np.empty(n)
    beta = np.empty((n, k))
    from_parent = np.zeros(n, dtype=bool)
    labels = np.unique(folds)
    fits = []
    for i, f in enumerate(labels):
        test = folds == f
        train = ~test
        res = fit(
            y[train],
            X[train],
            effects=[e[train] for e in effects],
            n_levels=n_levels,
            names=names,
            pooling=pooling_for(train) if pooling_for is not None else None,
            cov=False,
            start=None if start is None else start[train],
        )
        held = [e[test] for e in effects]
        off = res.offset(held) if held else np.full(int(test.sum()), res.coef[0])
        offset[test] = off
        beta[test] = res.coef[1:]
        target[test] = res.inverse_link(off + X[test] @ res.coef[1:])
        if held:
            from_parent[test] = res.unseen(0, held[0])
        fits.append(res)
        if progress is not None:
            progress(i + 1, len(labels))
    return CrossFit(target=target, offset=offset, beta=beta, fold=folds, fits=tuple(fits),
                    fold_ids=tuple(int(f) for f in labels), from_parent=from_parent)
