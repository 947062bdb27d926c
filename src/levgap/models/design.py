r"""The design of a model with absorbed fixed effects, as group sums (no dummy matrices).

Every model of ``levgap.models`` is linear in its parameters on the link scale:

.. math:: \eta_i = c + x_i'\beta + \sum_j \alpha_{j, g_j(i)} + u_{s(i)},

where the first level of each factor is its reference (:math:`\alpha_{j,0} = 0`, so the
coefficients equal a fit on explicit dummies) and :math:`u_{s(i)}` is the own deviation of a
*small* level of the first factor (industry) from its parent group's effect. A small level's
rows carry, instead of a dummy, the observation-weighted mix of the parent's member levels
(so their effect is the parent's average effect) plus a column for :math:`u_s`, which the fit
shrinks toward zero with a ridge penalty :math:`\lambda_s u_s^2 / 2` (empirical Bayes, see
``levgap.models.pooling``).

:class:`Design` gives the products every fit needs: ``gram(w)`` (:math:`Z'WZ + \Lambda`),
``rmatvec(v)`` (:math:`Z'v`), both at once in one pass over the rows
(``normal_equations``), ``matvec(theta)`` (:math:`Z\theta`) and the clustered sums of the
rows' influences (``cluster_sums``, for sandwich covariances). Drivers are centred inside the
design (reported coefficients are not), which keeps the equilibrated normal equations well
conditioned (solved in ``levgap.models.linalg``).

How the sums are taken (the speed of every fit rests on it): the drivers are held column by
column (a ``(k, n)`` array, so each driver is one contiguous run of memory), and every row's
levels of all factors are combined into one *cell* code (the combinations present, e.g.
industry x year). Weighted sums per cell, one ``np.bincount`` per driver over a table that
stays in cache, give every factor's sums and the factors' cross-tabulation by summing over
cells. The rows are visited in blocks that stay in cache while the weights, the drivers' cross
products and the cell sums are taken from them, so each pass reads the drivers from memory
once, whatever the number of rows.
"""

from __future__ import annotations

from collections.abc import Iterator, Sequence
from dataclasses import dataclass

import numpy as np

from levgap.errors import ModelError

BLOCK = 1 << 15
"""Rows per block of a pass (about 1 MB of five drivers: stays in the processor's cache)."""
FLAT_TOL = 1e-10
"""A driver whose standard deviation is below this share of its largest absolute value is
constant (up to rounding)."""


@dataclass(frozen=True, slots=True)
class Pooling:
    """Small levels of the first factor, pooled toward a parent group.

    Parameters
    ----------
    small : numpy.ndarray of bool, shape (n_levels,)
        Levels (codes of the first factor) whose effect is pooled.
    parent : numpy.ndarray of int, shape (n_levels,)
        Parent id of each small level (-1 for the others).
    members : numpy.ndarray of bool, shape (n_parents, n_levels)
        ``members[p, l]``: level ``l`` (not small) belongs to parent group ``p``.
    penalty : numpy.ndarray of float, shape (n_levels,)
        Ridge penalty on each small level's own deviation; ``inf`` gives it none (the level
        takes its parent's effect outright). Set per fit by ``levgap.models.pooling``.
    weight : numpy.ndarray of float, shape (n_levels,)
        The empirical-Bayes weight of each small level's own information that the penalty
        implies (NaN for other levels), reported with the fit.
    """

    small: np.ndarray
    parent: np.ndarray
    members: np.ndarray
    penalty: np.ndarray
    weight: np.ndarray


@dataclass(frozen=True, slots=True)
class Layout:
    """Where each block of parameters sits in the parameter vector."""

    k: int  # drivers
    sizes: tuple[int, ...]  # present own levels per factor (reference included)
    starts: tuple[int, ...]  # first parameter of each factor block
    dev_start: int  # first own-deviation parameter of a small level
    n_dev: int

    @property
    def n_params(self) -> int:
        return self.dev_start + self.n_dev


def compress(codes: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Levels present among non-negative codes, and each row's position among them (-1 else).

    Linear in the number of rows (a count per code) rather than a sort, which matters when
    the same factor is compressed for every cross-fit fold.
    """
    codes = np.asarray(codes)
    if not len(codes):
        return np.empty(0, dtype=np.int64), np.empty(0, dtype=np.intp)
    low = int(codes.min())
    if low < 0:
        own = codes >= 0
        if not own.any():
            return np.empty(0, dtype=np.int64), np.full(len(codes), -1, dtype=np.intp)
        levels, inv = compress(codes[own])
        out = np.full(len(codes), -1, dtype=np.intp)
        out[own] = inv
        return levels, out
    top = int(codes.max()) + 1
    if top > 4 * len(codes) + 1024:  # sparse, huge codes: sorting is cheaper than a table
        levels, inverse = np.unique(codes, return_inverse=True)
        return levels, inverse.astype(np.intp, copy=False)
    counts = np.bincount(codes, minlength=top)
    levels = np.flatnonzero(counts)
    if len(levels) == top:  # already dense: 0 .. top - 1
        return levels, codes.astype(np.intp, copy=False)
    lookup = np.full(top, -1, dtype=np.intp)
    lookup[levels] = np.arange(len(levels))
    return levels, lookup[codes]


def _cells(n: int, local: Sequence[np.ndarray], sizes: Sequence[int]
           ) -> tuple[np.ndarray, list[np.ndarray], np.ndarray]:
    """One code per row for its combination of levels (combinations present only), the level
    of each factor in each cell, and the rows in each cell."""
    cell = np.zeros(n, dtype=np.intp)
    n_cells, renumbered = 1, False
    for inv, size in zip(local, sizes, strict=True):
        cell *= size
        cell += inv
        n_cells *= size
        if n_cells > 4 * n + 1024:  # keep the codes small: renumber the combinations present
            levels, cell = compress(cell)
            n_cells, renumbered = len(levels), True
    counts = np.bincount(cell, minlength=n_cells)
    present = np.flatnonzero(counts)
    lookup = np.full(n_cells, -1, dtype=np.intp)
    lookup[present] = np.arange(len(present))
    cell = lookup[cell]
    if renumbered:  # read each cell's levels back from any of its rows
        row = np.zeros(len(present), dtype=np.intp)
        row[cell] = np.arange(n)
        return cell, [inv[row].astype(np.intp) for inv in local], counts[present]
    out, rest = [], present
    for size in reversed(sizes):  # the code is a mixed-radix number of the levels
        rest, level = np.divmod(rest, size)
        out.append(level.astype(np.intp))
    return cell, out[::-1], counts[present]


def _row_blocks(length: int, size: int) -> Iterator[slice]:
    for start in range(0, length, size):
        yield slice(start, min(length, start + size))


def _centred_columns(X: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """The drivers centred, one contiguous row per driver (a copy), their means and their
    largest absolute values.

    Two passes over the rows in blocks: the first transposes a block and takes its sums and
    extremes while it is in cache, the second centres it.
    """
    n, k = X.shape
    XT = np.empty((k, n))
    total, high, low = np.zeros(k), np.zeros(k), np.zeros(k)
    if n:
        high[:], low[:] = -np.inf, np.inf
    for b in _row_blocks(n, BLOCK):
        xb = XT[:, b]
        xb[...] = X[b].T
        total += xb.sum(axis=1)
        np.maximum(high, xb.max(axis=1), out=high)  # NaN carries through both
        np.minimum(low, xb.min(axis=1), out=low)
    if not (np.isfinite(high).all() and np.isfinite(low).all()):
        raise ModelError("the model's inputs must be finite; got NaN or infinite values.")
    center = total / n if n else total
    for b in _row_blocks(n, BLOCK):
        XT[:, b] -= center[:, None]
    return XT, center, np.maximum(high, -low)


def _count(out: np.ndarray, U: np.ndarray, codes: np.ndarray, ordered: bool) -> None:
    """Add each row of ``U`` (m x rows) into ``out`` (m x G) at the rows' cluster codes."""
    lo, g = 0, out.shape[1]
    if ordered:  # sorted codes: only the clusters between the block's first and last row
        lo = int(codes[0])
        g = int(codes[-1]) - lo + 1
        codes = codes - lo
    for j in range(U.shape[0]):
        out[j, lo : lo + g] += np.bincount(codes, weights=U[j], minlength=g)


class Design:
    """Group-sum products of the design matrix ``Z`` of one fit (see the module docstring).

    Parameters
    ----------
    X : numpy.ndarray, shape (n, k)
        Drivers (a constant is added).
    effects : sequence of integer arrays, shape (n,)
        Level codes of each factor (``>= 0``).
    pooling : Pooling, optional
        Small levels of the first factor.
    """

    def __init__(
        self, X: np.ndarray, effects: Sequence[np.ndarray], pooling: Pooling | None = None
    ) -> None:
        X = np.asarray(X, dtype=float)
        n, k = X.shape
        self.n, self.k = n, k
        XT, self.center, self.magnitude = _centred_columns(X)
        self.XT = XT
        codes = [np.asarray(c) for c in effects]
        for c in codes:
            if c.shape != (n,) or (c.size and c.min() < 0):
                raise ModelError("effect codes must be non-negative integers, one per row.")
        self.pooling = pooling
        dense = np.zeros(n, dtype=bool)
        dev_codes = np.empty(0, dtype=np.int64)
        dev_local = np.broadcast_to(np.intp(-1), (n,))  # no row has a deviation (no memory)
        own_codes = list(codes)
        if pooling is not None and codes:
            level_small = np.zeros(max(len(pooling.small), int(codes[0].max()) + 1 if n else 0),
                                   dtype=bool)
            level_small[: len(pooling.small)] = pooling.small
            dense = level_small[codes[0]] if n else dense
            own_codes[0] = np.where(dense, -1, codes[0])
            finite = np.isfinite(pooling.penalty[np.where(dense, codes[0], 0)]) & dense
            dev_codes, dev_local = compress(np.where(finite, codes[0], -1))
        self.dense = dense
        self.any_dense = bool(dense.any())
        self.present: list[np.ndarray] = []
        self.local: list[np.ndarray] = []
        for c in own_codes:
            levels, inv = compress(c)
            self.present.append(levels)
            self.local.append(inv)
        sizes = tuple(len(lv) for lv in self.present)
        if any(s == 0 for s in sizes):
            raise ModelError("every fixed-effect factor needs at least one level of its own.")
        starts, offset = [], k + 1
        for s in sizes:
            starts.append(offset)
            offset += s - 1
        self.layout = Layout(k=k, sizes=sizes, starts=tuple(starts), dev_start=offset,
                             n_dev=len(dev_codes))
        self.dev_codes = dev_codes
        self.dev_local = dev_local
        self.codes = codes
        # rows with levels of their own (all rows without pooled levels) and their cells
        self._rows = np.flatnonzero(~dense) if self.any_dense else None
        sub = (lambda a: a[..., self._rows]) if self.any_dense else (lambda a: a)
        self._XT = sub(XT)
        self._cell, self._cell_levels, cell_rows = _cells(
            self._XT.shape[1], [sub(inv) for inv in self.local], sizes)
        self.n_cells = len(cell_rows)
        self.counts = [np.bincount(lv, weights=cell_rows, minlength=s).astype(float)
                       for lv, s in zip(self._cell_levels, sizes, strict=True)]
        if self.any_dense:  # the pooled rows' own levels of the other factors
            for j in range(1, len(sizes)):
                inv = self.local[j][dense]
                self.counts[j] += np.bincount(inv, minlength=sizes[j])
        self._block = max(BLOCK, 8 * self.n_cells)
        self._unweighted: tuple[np.ndarray, ...] | None = None
        self.Zd = self._dense_rows() if self.any_dense else None
        penalty = np.zeros(self.layout.n_params)
        if len(dev_codes):
            penalty[offset:] = pooling.penalty[dev_codes]  # type: ignore[union-attr]
        self.penalty = penalty

    @property
    def W(self) -> np.ndarray:
        """The constant and the centred drivers as an ``(n, k + 1)`` array (a copy)."""
        W = np.empty((self.n, self.k + 1))
        W[:, 0] = 1.0
        W[:, 1:] = self.XT.T
        return W

    def flat(self, gram: np.ndarray | None = None) -> np.ndarray:
        """Drivers constant across rows up to rounding (spread below 1e-10 of their size).

        ``gram``: the unweighted :meth:`gram`, whose diagonal holds the drivers' sums of
        squares (saves a pass over the rows)."""
        if gram is None:
            squares = np.einsum("ij,ij->i", self.XT, self.XT)
        else:
            squares = np.diag(gram)[1 : self.k + 1]
        spread = np.sqrt(squares / max(self.n, 1))
        return np.flatnonzero(spread <= FLAT_TOL * np.maximum(self.magnitude, 1e-300))

    # -- structure ------------------------------------------------------------------------

    def parent_mix(self, counts: np.ndarray | None = None) -> np.ndarray:
        """Weights over the present own levels of factor 0 that make up each parent's effect.

        Observation-weighted over the parent's member levels present in the fit (all levels
        when none is), shape (n_parents, size of factor 0)."""
        p = self.pooling
        assert p is not None
        levels = self.present[0]
        cnt = self.counts[0] if counts is None else counts
        inside = levels < p.members.shape[1]
        mw = np.zeros((p.members.shape[0], len(levels)))
        mw[:, inside] = p.members[:, levels[inside]] * cnt[None, inside]
        total = mw.sum(axis=1, keepdims=True)
        return np.where(total > 0, mw / np.where(total > 0, total, 1.0), cnt / cnt.sum())

    def _dense_rows(self) -> np.ndarray:
        """Full design rows of the small levels' rows: drivers, mixes, dummies, deviations."""
        p = self.pooling
        assert p is not None
        rows = np.flatnonzero(self.dense)
        lead = np.empty((len(rows), self.k + 1))
        lead[:, 0] = 1.0
        lead[:, 1:] = self.XT[:, rows].T
        blocks = [lead]
        for j, (inv, size) in enumerate(zip(self.local, self.layout.sizes, strict=True)):
            block = np.zeros((len(rows), size))
            own = inv[rows] >= 0
            block[np.flatnonzero(own), inv[rows][own]] = 1.0
            if j == 0:
                mix = self.parent_mix()
                block[~own] = mix[p.parent[self.codes[0][rows][~own]]]
            blocks.append(block[:, 1:])
        dev = np.zeros((len(rows), self.layout.n_dev))
        has = self.dev_local[rows] >= 0
        dev[np.flatnonzero(has), self.dev_local[rows][has]] = 1.0
        blocks.append(dev)
        return np.hstack(blocks)

    def _blocks(self, length: int, size: int | None = None) -> Iterator[slice]:
        return _row_blocks(length, size or self._block)

    def _own(self, v: np.ndarray) -> np.ndarray:
        return v[self._rows] if self._rows is not None else v

    # -- products -------------------------------------------------------------------------

    def _sums(self, w: np.ndarray | None, v: np.ndarray | None) -> tuple[np.ndarray, ...]:
        """Cell sums of the weights and weighted drivers, the drivers' weighted cross
        products, and (with ``v``) the drivers' and cells' sums of ``v``: one pass in blocks."""
        XT, cell, C, k = self._XT, self._cell, self.n_cells, self.k
        sw, sx = np.zeros(C), np.zeros((k, C))
        xx = np.zeros((k, k))
        sv, xv = np.zeros(C), np.zeros(k)
        for b in self._blocks(XT.shape[1]):
            xb, cb = XT[:, b], cell[b]
            if w is None:
                V = xb
                sw += np.bincount(cb, minlength=C)
            else:
                wb = w[b]
                V = xb * wb
                sw += np.bincount(cb, weights=wb, minlength=C)
            xx += V @ xb.T
            for j in range(k):
                sx[j] += np.bincount(cb, weights=V[j], minlength=C)
            if v is not None:
                self._add_sums(b, v[b], sv, xv)
        return sw, sx, xx, sv, xv

    def _assemble(self, sw: np.ndarray, sx: np.ndarray, xx: np.ndarray) -> np.ndarray:
        lay = self.layout
        P, kw = lay.n_params, self.k + 1
        A = np.zeros((P, P))
        A[0, 0] = sw.sum()
        A[0, 1:kw] = A[1:kw, 0] = sx.sum(axis=1)
        A[1:kw, 1:kw] = xx
        stacked = np.vstack([sw[None, :], sx])
        for lv, size, start in zip(self._cell_levels, lay.sizes, lay.starts, strict=True):
            sl = slice(start, start + size - 1)
            sums = np.stack([np.bincount(lv, weights=row, minlength=size) for row in stacked])
            A[sl, sl] = np.diag(sums[0, 1:])
            A[:kw, sl] = sums[:, 1:]
            A[sl, :kw] = sums[:, 1:].T
        for a in range(len(lay.sizes)):
            for c in range(a + 1, len(lay.sizes)):
                sa, sc = lay.sizes[a], lay.sizes[c]
                code = self._cell_levels[a] * sc + self._cell_levels[c]
                cross = np.bincount(code, weights=sw, minlength=sa * sc).reshape(sa, sc)[1:, 1:]
                ra = slice(lay.starts[a], lay.starts[a] + sa - 1)
                rc = slice(lay.starts[c], lay.starts[c] + sc - 1)
                A[ra, rc] = cross
                A[rc, ra] = cross.T
        return A

    def _gradient(self, sv: np.ndarray, xv: np.ndarray) -> np.ndarray:
        lay = self.layout
        out = np.zeros(lay.n_params)
        out[0] = sv.sum()
        out[1 : self.k + 1] = xv
        for lv, size, start in zip(self._cell_levels, lay.sizes, lay.starts, strict=True):
            out[start : start + size - 1] = np.bincount(lv, weights=sv, minlength=size)[1:]
        return out

    def normal_equations(
        self, w: np.ndarray | None, v: np.ndarray
    ) -> tuple[np.ndarray, np.ndarray]:
        """``(Z' diag(w) Z + diag(penalty), Z' v)`` in one pass over the rows."""
        sw, sx, xx, sv, xv = self._sums(None if w is None else self._own(w), self._own(v))
        A = self._assemble(sw, sx, xx)
        g = self._gradient(sv, xv)
        if self.Zd is not None:
            d = self.dense
            A += (self.Zd if w is None else self.Zd * w[d][:, None]).T @ self.Zd
            g += self.Zd.T @ v[d]
        A[np.diag_indices(len(A))] += self.penalty
        return A, g

    def gram(self, w: np.ndarray | None = None) -> np.ndarray:
        """``Z' diag(w) Z + diag(penalty)`` (``w`` of ones when absent)."""
        if w is None:
            if self._unweighted is None:  # the drivers do not change: keep the sums
                self._unweighted = self._sums(None, None)[:3]
            A = self._assemble(*self._unweighted)
        else:
            A = self._assemble(*self._sums(self._own(w), None)[:3])
        if self.Zd is not None:
            wd = None if w is None else w[self.dense]
            A += (self.Zd if wd is None else self.Zd * wd[:, None]).T @ self.Zd
        A[np.diag_indices(len(A))] += self.penalty
        return A

    def rmatvec(self, v: np.ndarray) -> np.ndarray:
        """``Z' v``."""
        vs = self._own(v)
        sv, xv = np.zeros(self.n_cells), np.zeros(self.k)
        for b in self._blocks(len(vs)):
            self._add_sums(b, vs[b], sv, xv)
        out = self._gradient(sv, xv)
        if self.Zd is not None:
            out += self.Zd.T @ v[self.dense]
        return out

    def residual_gradient(self, theta: np.ndarray, y: np.ndarray) -> np.ndarray:
        """``Z'(y - Z theta)`` in one pass over the rows: each block's residuals are formed
        and summed while in cache, never kept (equal to ``rmatvec(y - matvec(theta))``)."""
        if self._rows is not None:
            return self.rmatvec(y - self.matvec(theta))
        table = self._cell_table(theta)
        sv, xv = np.zeros(self.n_cells), np.zeros(self.k)
        buffer = np.empty(min(self._block, self.n))
        for b in self._blocks(self.n):
            r = buffer[: b.stop - b.start]
            self._predict(theta, table, b, r)
            np.subtract(y[b], r, out=r)
            self._add_sums(b, r, sv, xv)
        return self._gradient(sv, xv)

    def _predict(self, theta: np.ndarray, table: np.ndarray, b: slice, out: np.ndarray
                 ) -> None:
        """The linear predictor of the own rows of block ``b``, into ``out`` (``table``: the
        effects of each cell, from ``_cell_table``)."""
        np.dot(theta[1 : self.k + 1], self._XT[:, b], out=out)
        out += theta[0]
        out += table[self._cell[b]]

    def _add_sums(self, b: slice, v: np.ndarray, sv: np.ndarray, xv: np.ndarray) -> None:
        """Add the cell sums and the drivers' products of ``v`` (the own rows of block
        ``b``) into ``sv`` and ``xv``."""
        xv += self._XT[:, b] @ v
        sv += np.bincount(self._cell[b], weights=v, minlength=len(sv))

    def _cell_table(self, theta: np.ndarray) -> np.ndarray:
        """Sum of the factors' effects in each cell (``theta`` rows: parameters)."""
        lay = self.layout
        shape = (self.n_cells, *theta.shape[1:])
        out = np.zeros(shape)
        for lv, size, start in zip(self._cell_levels, lay.sizes, lay.starts, strict=True):
            alpha = np.zeros((size, *theta.shape[1:]))
            alpha[1:] = theta[start : start + size - 1]
            out += alpha[lv]
        return out

    def matvec(self, theta: np.ndarray) -> np.ndarray:
        """``Z theta`` (the linear predictor of every row)."""
        table = self._cell_table(theta)
        own = np.empty(self._XT.shape[1])
        for b in self._blocks(len(own)):
            self._predict(theta, table, b, own[b])
        if self._rows is None:
            return own
        eta = np.empty(self.n)
        eta[self._rows] = own
        eta[self.dense] = self.Zd @ theta  # type: ignore[operator]
        return eta

    def cluster_sums(
        self, R: np.ndarray, scores: np.ndarray, codes: Sequence[np.ndarray]
    ) -> list[np.ndarray]:
        """Sums of the rows' influences ``R z_i e_i`` over each cluster code array.

        Parameters
        ----------
        R : numpy.ndarray, shape (m, P)
            Rows of the inverse Hessian (or a linear map of them).
        scores : numpy.ndarray, shape (n,)
            Each row's multiplier ``e_i`` (residual on the response scale).
        codes : sequence of integer arrays, shape (n,)
            Dense cluster codes ``0 .. G-1``; an empty sequence gives the sum of outer
            products ``sum_i u_i u_i'`` (each row its own cluster) instead.

        Returns
        -------
        list of numpy.ndarray
            One ``(G, m)`` array per code array; or ``[U'U]`` (``(m, m)``) without codes.
        """
        m = R.shape[0]
        kw = self.k + 1
        Rx, R0 = np.ascontiguousarray(R[:, 1:kw]), R[:, 0]
        table = np.ascontiguousarray(self._cell_table(R.T).T)  # (m, cells)
        codes = [np.asarray(c, dtype=np.intp) for c in codes]
        sizes = [int(c.max()) + 1 if len(c) else 0 for c in codes]
        acc = [np.zeros((m, g)) for g in sizes] if codes else [np.zeros((m, m))]
        own_scores = self._own(scores)
        own_codes = [self._own(c) for c in codes]
        n_own = self._XT.shape[1]
        # Counting into G clusters costs O(G) per block: a block takes the range of cluster
        # codes its rows hold when the codes are sorted (rows in firm order), else it is at
        # least twice the largest cluster count. One buffer serves every block.
        ordered = [g > self._block and bool(np.all(c[1:] >= c[:-1]))
                   for c, g in zip(own_codes, sizes, strict=True)]
        wide = max((g for g, o in zip(sizes, ordered, strict=True) if not o), default=0)
        step = min(max(n_own, 1), max(self._block, 2 * wide))
        buffer, gathered = np.empty((m, step)), np.empty(step)
        for b in self._blocks(n_own, step):
            length = b.stop - b.start
            U = buffer[:, :length]
            # a thin product: einsum's own loop (a threaded BLAS call is slower at this shape)
            np.einsum("ij,jn->in", Rx, self._XT[:, b], out=U)
            U += R0[:, None]
            cb, g = self._cell[b], gathered[:length]
            for j in range(m):
                np.take(table[j], cb, out=g, mode="clip")
                U[j] += g
            U *= own_scores[b]
            if not codes:
                acc[0] += U @ U.T
            for out, c, o in zip(acc, own_codes, ordered, strict=False):
                _count(out, U, c[b], o)
        if self.Zd is not None:
            d = self.dense
            U = (self.Zd @ R.T).T * scores[d]
            if not codes:
                acc[0] += U @ U.T
            for out, c in zip(acc, codes, strict=False):
                _count(out, U, c[d], False)
        return [a if not codes else a.T for a in acc]

    # -- parameters -----------------------------------------------------------------------

    def reported(self, theta: np.ndarray) -> np.ndarray:
        """Constant and driver coefficients in the original (uncentred) units."""
        out = theta[: self.k + 1].copy()
        out[0] -= self.center @ out[1:]
        return out

    def uncentre(self) -> np.ndarray:
        """``J`` with ``reported = J @ theta[:k+1]`` (for covariances and influences)."""
        J = np.eye(self.k + 1)
        J[0, 1:] = -self.center
        return J

    def effects(self, theta: np.ndarray, n_levels: Sequence[int]) -> list[np.ndarray]:
        """Each factor's effect per level code (NaN for codes without own rows)."""
        out = []
        lay = self.layout
        for j, (levels, size, start) in enumerate(
            zip(self.present, lay.sizes, lay.starts, strict=True)
        ):
            e = np.full(int(n_levels[j]), np.nan)
            e[levels] = np.concatenate([[0.0], theta[start : start + size - 1]])
            out.append(e)
        return out

    def deviations(self, theta: np.ndarray, n_level0: int) -> np.ndarray:
        """Own deviation of each small level from its parent (NaN where not estimated)."""
        dev = np.full(n_level0, np.nan)
        dev[self.dev_codes] = theta[self.layout.dev_start :]
        return dev
