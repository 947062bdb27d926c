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

:class:`Design` gives the three products every fit needs, each in :math:`O(nK)` per factor:
``gram(w)`` (:math:`Z'WZ + \Lambda`), ``rmatvec(v)`` (:math:`Z'v`) and ``matvec(theta)``
(:math:`Z\theta`). Drivers are centred inside the design (reported coefficients are not), which
keeps the equilibrated normal equations well conditioned. :func:`solve_refined` solves them by
Cholesky and corrects the solution with residuals computed from the data (iterative
refinement), so that accuracy follows the condition number of :math:`Z`, not its square: the
fit matches a singular-value least-squares solve for condition numbers up to about 1e7.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
import scipy.linalg

from levgap.errors import ModelError

IDENTIFIED_TOL = 1e-10
"""A driver whose variance left after the effects is below this share of its own is absorbed."""
COLLINEAR_TOL = 1e-9
"""Smallest singular value (columns scaled to unit length) below which drivers are collinear."""


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
    own = codes >= 0
    if not own.any():
        return np.empty(0, dtype=np.int64), np.full(len(codes), -1, dtype=np.intp)
    top = int(codes.max()) + 1
    if top > 4 * len(codes) + 1024:  # sparse, huge codes: sorting is cheaper than a table
        levels, inverse = np.unique(codes[own], return_inverse=True)
        inv = np.full(len(codes), -1, dtype=np.intp)
        inv[own] = inverse
        return levels, inv
    counts = np.bincount(codes[own], minlength=top)
    levels = np.flatnonzero(counts)
    lookup = np.full(top, -1, dtype=np.intp)
    lookup[levels] = np.arange(len(levels))
    inv = np.where(own, lookup[np.where(own, codes, 0)], -1)
    return levels, inv


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
        self.center = X.mean(axis=0) if n else np.zeros(k)
        self.magnitude = np.abs(X).max(axis=0) if n else np.zeros(k)
        W = np.empty((n, k + 1))
        W[:, 0] = 1.0
        W[:, 1:] = X - self.center
        self.W = W
        codes = [np.asarray(c) for c in effects]
        for c in codes:
            if c.shape != (n,) or (c.size and c.min() < 0):
                raise ModelError("effect codes must be non-negative integers, one per row.")
        self.pooling = pooling
        dense = np.zeros(n, dtype=bool)
        dev_codes = np.empty(0, dtype=np.int64)
        dev_local = np.full(n, -1, dtype=np.intp)
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
        self.sparse = ~dense
        self._sl = [inv[self.sparse] if self.any_dense else inv for inv in self.local]
        self._pairs = self._pair_codes()
        self.counts = [np.bincount(inv[inv >= 0], minlength=s).astype(float)
                       for inv, s in zip(self.local, sizes, strict=True)]
        self.Zd = self._dense_rows() if self.any_dense else None
        penalty = np.zeros(self.layout.n_params)
        if len(dev_codes):
            penalty[offset:] = pooling.penalty[dev_codes]  # type: ignore[union-attr]
        self.penalty = penalty

    def flat(self) -> np.ndarray:
        """Drivers constant across rows up to rounding (spread below 1e-10 of their size)."""
        spread = np.sqrt(np.einsum("ij,ij->j", self.W[:, 1:], self.W[:, 1:]) / max(self.n, 1))
        return np.flatnonzero(spread <= FLAT_TOL * np.maximum(self.magnitude, 1e-300))

    # -- structure ------------------------------------------------------------------------

    def _pair_codes(self) -> list[tuple[int, int, np.ndarray]]:
        pairs = []
        sizes = self.layout.sizes
        for a in range(len(self._sl)):
            for c in range(a + 1, len(self._sl)):
                pairs.append((a, c, self._sl[a] * sizes[c] + self._sl[c]))
        return pairs

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
        blocks = [self.W[rows]]
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

    # -- products -------------------------------------------------------------------------

    def gram(self, w: np.ndarray | None = None) -> np.ndarray:
        """``Z' diag(w) Z + diag(penalty)`` (``w`` of ones when absent)."""
        lay = self.layout
        P, kw = lay.n_params, self.k + 1
        A = np.zeros((P, P))
        ws = None if w is None else (w[self.sparse] if self.any_dense else w)
        Ws = self.W[self.sparse] if self.any_dense else self.W
        WsW = Ws if ws is None else Ws * ws[:, None]
        A[:kw, :kw] = WsW.T @ Ws
        for inv, size, start in zip(self._sl, lay.sizes, lay.starts, strict=True):
            sl = slice(start, start + size - 1)
            cnt = np.bincount(inv, weights=ws, minlength=size)
            A[sl, sl] = np.diag(cnt[1:])
            sums = np.stack([np.bincount(inv, weights=WsW[:, c], minlength=size)
                             for c in range(kw)])
            A[:kw, sl] = sums[:, 1:]
            A[sl, :kw] = sums[:, 1:].T
        for a, c, code in self._pairs:
            sa, sc = lay.sizes[a], lay.sizes[c]
            cross = np.bincount(code, weights=ws, minlength=sa * sc).reshape(sa, sc)[1:, 1:]
            ra = slice(lay.starts[a], lay.starts[a] + sa - 1)
            rc = slice(lay.starts[c], lay.starts[c] + sc - 1)
            A[ra, rc] = cross
            A[rc, ra] = cross.T
        if self.Zd is not None:
            wd = None if w is None else w[self.dense]
            A += (self.Zd if wd is None else self.Zd * wd[:, None]).T @ self.Zd
        A[np.diag_indices(P)] += self.penalty
        return A

    def rmatvec(self, v: np.ndarray) -> np.ndarray:
        """``Z' v``."""
        lay = self.layout
        out = np.zeros(lay.n_params)
        vs = v[self.sparse] if self.any_dense else v
        Ws = self.W[self.sparse] if self.any_dense else self.W
        out[: self.k + 1] = Ws.T @ vs
        for inv, size, start in zip(self._sl, lay.sizes, lay.starts, strict=True):
            out[start : start + size - 1] = np.bincount(inv, weights=vs, minlength=size)[1:]
        if self.Zd is not None:
            out += self.Zd.T @ v[self.dense]
        return out

    def matvec(self, theta: np.ndarray) -> np.ndarray:
        """``Z theta`` (the linear predictor of every row)."""
        lay = self.layout
        eta = self.W @ theta[: self.k + 1]
        for inv, size, start in zip(self.local, lay.sizes, lay.starts, strict=True):
            alpha = np.concatenate([[0.0], theta[start : start + size - 1]])
            if self.any_dense:
                eta[self.sparse] += alpha[inv[self.sparse]]
            else:
                eta += alpha[inv]
        if self.Zd is not None:
            eta[self.dense] = self.Zd @ theta
        return eta

    def influence_rows(self, R: np.ndarray) -> np.ndarray:
        """``Z R'`` for a few rows ``R`` of the inverse (shape (m, P)): each row's ``R z_i``."""
        lay = self.layout
        U = self.W @ R[:, : self.k + 1].T
        for inv, size, start in zip(self.local, lay.sizes, lay.starts, strict=True):
            block = np.zeros((size, R.shape[0]))
            block[1:] = R[:, start : start + size - 1].T
            if self.any_dense:
                U[self.sparse] += block[inv[self.sparse]]
            else:
                U += block[inv]
        if self.Zd is not None:
            U[self.dense] = self.Zd @ R.T
        return U

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


def solve(A: np.ndarray) -> tuple[tuple[np.ndarray, bool], np.ndarray]:
    """Cholesky factor of the equilibrated ``A`` and the scaling; raises on a singular ``A``."""
    d = np.sqrt(np.diag(A))
    if np.any(~np.isfinite(d)) or np.any(d == 0):
        raise np.linalg.LinAlgError("zero or non-finite diagonal")
    factor = scipy.linalg.cho_factor(A / np.outer(d, d), lower=False, check_finite=False)
    return factor, d


def cho_apply(factor: tuple[np.ndarray, bool], d: np.ndarray, b: np.ndarray) -> np.ndarray:
    """``A^{-1} b`` from :func:`solve`'s factor and scaling (``b`` a vector or columns)."""
    if b.ndim == 1:
        return scipy.linalg.cho_solve(factor, b / d, check_finite=False) / d
    return scipy.linalg.cho_solve(factor, b / d[:, None], check_finite=False) / d[:, None]


def inverse_rows(factor: tuple[np.ndarray, bool], d: np.ndarray, m: int) -> np.ndarray:
    """The first ``m`` rows of ``A^{-1}``."""
    eye = np.zeros((len(d), m))
    eye[np.arange(m), np.arange(m)] = 1.0
    return cho_apply(factor, d, eye).T


FLAT_TOL = 1e-10
"""A driver whose standard deviation is below this share of its largest absolute value is
constant (up to rounding)."""
SUSPECT_TOL = 1e-8
"""A driver's variance share after the effects (or a correlation eigenvalue) below this, in the
normal equations, sends the fit to the exact data-space test."""


def suspicious(A: np.ndarray, k: int) -> bool:
    """A cheap screen in the normal equations: could a driver be absorbed or collinear?

    The Schur complement of the drivers after the constant and the effects
    (:math:`A_{xx} - A_{xe} A_{ee}^{-1} A_{ex}`) loses precision with the condition of the
    effects block, so it only screens; :func:`check_identified` decides in data space."""
    kw = k + 1
    if k == 0:
        return False
    D = A[1:kw, 1:kw]
    E = np.delete(np.delete(A, np.s_[1:kw], axis=0), np.s_[1:kw], axis=1)
    C = np.delete(A[1:kw], np.s_[1:kw], axis=1)
    try:
        factor, d = solve(E)
    except (np.linalg.LinAlgError, scipy.linalg.LinAlgError):
        return True
    S = D - C @ cho_apply(factor, d, C.T)
    diag = np.diag(S)
    if np.any(diag <= SUSPECT_TOL * np.diag(D)):
        return True
    corr = S / np.sqrt(np.outer(diag, diag))
    return bool(np.linalg.eigvalsh(corr)[0] < SUSPECT_TOL)


ADDED_FOR = {"rd_missing": "rd_intensity"}
"""Drivers levgap adds for one the user set, named in messages by what the user set."""


def _shown(names: Sequence[str]) -> str:
    out = []
    for n in names:
        parent = ADDED_FOR.get(n)
        if parent is None:
            out.append(n)
        elif parent not in names:
            out.append(f"{parent} (its indicator {n} of a blank rd_expense)")
    return ", ".join(out)


def check_identified(design: Design, names: Sequence[str]) -> None:
    """Refuse drivers that the effects absorb or that are collinear with each other.

    Each driver is residualised on the effects (the constant, every factor's levels and the
    small levels' penalised deviations) in data space, so the test does not lose precision
    with the number of parameters: a driver left with less than ``IDENTIFIED_TOL`` of its
    variance is absorbed (constant, or constant within every industry and year); the
    residualised drivers, scaled to unit length, with a singular value below
    ``COLLINEAR_TOL`` are collinear.

    Raises
    ------
    ModelError
        Naming the driver(s).
    """
    k = design.k
    if k == 0:
        return
    X = design.W[:, 1:]
    spread = np.einsum("ij,ij->j", X, X)
    flat = [names[j] for j in design.flat()]
    if flat:
        raise ModelError(
            f"every driver must vary across rows; got {_shown(flat)} constant. Drop it "
            "from [model] drivers in the run configuration."
        )
    # Effects-only design: the same structure without the drivers.
    eff = Design(np.empty((design.n, 0)), design.codes, design.pooling)
    A = eff.gram()
    try:
        factor, d = solve(A)
    except (np.linalg.LinAlgError, scipy.linalg.LinAlgError):
        raise ModelError(
            "the industry and year effects must be identifiable; got levels that are confounded "
            "with each other (for example an industry observed in one year only, alone in "
            "that year). Widen the panel or merge small industries."
        ) from None
    G = np.column_stack([eff.rmatvec(X[:, j]) for j in range(k)])
    gamma = cho_apply(factor, d, G)
    resid = X - np.column_stack([eff.matvec(gamma[:, j]) for j in range(k)])
    for _ in range(2):  # refine in data space
        G = np.column_stack([eff.rmatvec(resid[:, j]) for j in range(k)])
        G -= eff.penalty[:, None] * gamma
        step = cho_apply(factor, d, G)
        gamma += step
        resid -= np.column_stack([eff.matvec(step[:, j]) for j in range(k)])
    left = np.einsum("ij,ij->j", resid, resid) / spread
    absorbed = [names[j] for j in range(k) if left[j] < IDENTIFIED_TOL]
    if absorbed:
        raise ModelError(
            f"every driver must vary within industries and years; got {_shown(absorbed)} "
            "explained entirely by the industry and year effects (constant within every "
            "industry, for example). Drop it from [model] drivers, or group industries more "
            "coarsely ([model] industry_digits)."
        )
    scaled = resid / np.sqrt(np.einsum("ij,ij->j", resid, resid))
    _, s, vt = np.linalg.svd(scaled, full_matrices=False)
    if s[-1] < COLLINEAR_TOL * s[0]:
        involved = [names[j] for j in np.flatnonzero(np.abs(vt[-1]) > 0.1)]
        raise ModelError(
            f"the drivers must not be collinear once the effects are absorbed; got "
            f"{_shown(involved)} linearly dependent. Drop one of them from [model] drivers."
        )
