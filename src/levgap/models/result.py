"""``Fit``: the one result type every model returns (frozen, plain data, serialisable)."""

from __future__ import annotations

from collections.abc import Callable, Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np

from levgap.errors import ModelError
from levgap.models.shapley import shapley


def _identity(eta: np.ndarray) -> np.ndarray:
    return eta


def expit(eta: np.ndarray) -> np.ndarray:
    """The logistic function ``1 / (1 + exp(-eta))``, elementwise (0 and 1 at the extremes,
    where ``exp`` overflows)."""
    eta = np.asarray(eta, dtype=float)
    with np.errstate(over="ignore"):
        if eta.ndim == 0:
            return 1.0 / (1.0 + np.exp(-eta))
        out = np.exp(-eta)
    out += 1.0
    return np.reciprocal(out, out=out)


INVERSE_LINKS: dict[str, Callable[[np.ndarray], np.ndarray]] = {
    "identity": _identity,
    "logit": expit,
}


@dataclass(frozen=True, slots=True)
class PooledLevels:
    """How the small levels of the first factor took their effects.

    Parameters
    ----------
    small : numpy.ndarray of bool, shape (n_levels,)
    parent : numpy.ndarray of int, shape (n_levels,)
        Parent id of each small level (-1 for the others).
    members : numpy.ndarray of bool, shape (n_parents, n_levels)
    deviation : numpy.ndarray, shape (n_levels,)
        Each small level's estimated own deviation from its parent (NaN: none estimated,
        the level takes its parent's effect).
    weight : numpy.ndarray, shape (n_levels,)
        Empirical-Bayes weight of the level's own information (NaN for other levels).
    """

    small: np.ndarray
    parent: np.ndarray
    members: np.ndarray
    deviation: np.ndarray
    weight: np.ndarray


@dataclass(frozen=True, slots=True)
class Fit:
    """Result of a fit function of ``levgap.models.MODELS``.

    Parameters
    ----------
    model : str
        Key of the model in ``MODELS``.
    link : {"identity", "logit"}
        The target is ``inverse_link(constant + effects + X @ slopes)``.
    names : tuple of str
        ``const`` then the drivers.
    coef : numpy.ndarray
        Constant and slopes.
    vcov : numpy.ndarray or None
        Their covariance (``None`` when not requested, as in cross-fit folds).
    effects : tuple of numpy.ndarray
        Per factor, the effect of every level code with rows of its own (reference level 0;
        NaN for codes without own rows: small levels and levels absent from the fit).
    effect_weights : tuple of numpy.ndarray
        Rows of each level in the fit; they weight parent and overall averages.
    pooled : PooledLevels or None
        Small levels of the first factor.
    n_obs, n_params : int
    n_clusters : tuple of int
    df_inference : int
        Degrees of freedom of the t distribution of p-values and intervals.
    r2 : float
        Centred R² of fitted values (effects included) on the response scale.
    deviance : float
        Residual sum of squares (identity link) or twice the negative log quasi-likelihood.
    cov_type : str
    iterations : int
        Newton iterations (1 for least squares).
    notes : tuple of str
        Things the user should know about this fit (a repaired covariance, ...).
    """

    model: str
    link: str
    names: tuple[str, ...]
    coef: np.ndarray
    vcov: np.ndarray | None
    effects: tuple[np.ndarray, ...]
    effect_weights: tuple[np.ndarray, ...]
    pooled: PooledLevels | None
    n_obs: int
    n_params: int
    n_clusters: tuple[int, ...]
    df_inference: int
    r2: float
    deviance: float
    cov_type: str
    iterations: int = 1
    notes: tuple[str, ...] = ()

    # -- prediction -------------------------------------------------------------------------

    @property
    def inverse_link(self) -> Callable[[np.ndarray], np.ndarray]:
        """The function from the linear predictor to the target."""
        return INVERSE_LINKS[self.link]

    @property
    def std_error(self) -> np.ndarray:
        """Standard errors of the reported terms."""
        if self.vcov is None:
            raise ModelError("standard errors were not computed for this fit; pass cov=True.")
        return np.sqrt(np.diag(self.vcov))

    def _mean_effect(self, j: int) -> float:
        alpha, weight = self.effects[j], self.effect_weights[j]
        known = ~np.isnan(alpha)
        w = np.where(known, weight, 0.0)
        return float(np.where(known, alpha, 0.0) @ w / w.sum())

    def parent_effects(self) -> np.ndarray:
        """Each parent group's effect: the row-weighted mean of its member levels' effects."""
        p = self.pooled
        if p is None:
            return np.empty(0)
        alpha, weight = self.effects[0], self.effect_weights[0]
        known = ~np.isnan(alpha)
        filled = np.where(known, alpha, 0.0)
        w = np.where(known, weight, 0.0)
        L = min(p.members.shape[1], len(filled))
        mw = p.members[:, :L] * w[None, :L]
        total = mw.sum(axis=1)
        with np.errstate(invalid="ignore", divide="ignore"):
            means = (mw @ filled[:L]) / total
        return np.where(total > 0, means, self._mean_effect(0))

    def effect_of(self, j: int, codes: np.ndarray) -> np.ndarray:
        """Effect of factor ``j`` for each row's level code.

        A small level of the first factor takes its parent's effect plus its own estimated
        deviation (none when the fit had no rows of it). A level the fit never saw takes the
        row-weighted mean effect (industry), or the nearest earlier fitted level, else the
        nearest later one (year: a later year carries the latest year's effect forward).
        """
        alpha = self.effects[j]
        codes = np.asarray(codes, dtype=np.int64)
        inside = (codes >= 0) & (codes < len(alpha))
        safe = np.where(inside, codes, 0)
        known = inside & ~np.isnan(alpha[safe])
        out = np.where(known, alpha[safe], 0.0)
        unknown = ~known
        if j == 0 and self.pooled is not None and unknown.any():
            p = self.pooled
            in_p = (codes >= 0) & (codes < len(p.small))
            sp = np.where(in_p, codes, 0)
            small = unknown & in_p & p.small[sp]
            if small.any():
                dev = np.nan_to_num(p.deviation[sp[small]], nan=0.0)
                out[small] = self.parent_effects()[p.parent[sp[small]]] + dev
                unknown &= ~small
        if unknown.any():
            out[unknown] = self._fallback(j, codes[unknown])
        return out

    def _fallback(self, j: int, codes: np.ndarray) -> np.ndarray:
        if j == 0:
            return np.full(len(codes), self._mean_effect(0))
        alpha = self.effects[j]
        known = np.flatnonzero(~np.isnan(alpha))
        pos = np.searchsorted(known, codes, side="right") - 1
        pos = np.where(pos >= 0, pos, 0)
        return alpha[known[pos]]

    def unseen(self, j: int, codes: np.ndarray) -> np.ndarray:
        """Rows whose level of factor ``j`` has no effect of its own in this fit (a pooled
        level without own rows, or a level the fit never saw)."""
        alpha = self.effects[j]
        codes = np.asarray(codes, dtype=np.int64)
        inside = (codes >= 0) & (codes < len(alpha))
        own = inside & ~np.isnan(alpha[np.where(inside, codes, 0)])
        if j == 0 and self.pooled is not None:
            p = self.pooled
            in_p = (codes >= 0) & (codes < len(p.deviation))
            dev = in_p & ~np.isnan(p.deviation[np.where(in_p, codes, 0)])
            own |= dev
        return ~own

    def offset(self, effects: Sequence[np.ndarray]) -> np.ndarray:
        """Constant plus effects of each row (the linear predictor without the drivers)."""
        n = len(effects[0]) if effects else 0
        out = np.full(n, self.coef[0])
        for j, codes in enumerate(effects):
            out = out + self.effect_of(j, codes)
        return out

    def predict(self, X: np.ndarray, effects: Sequence[np.ndarray] = ()) -> np.ndarray:
        """Targets for drivers ``X`` and factor level codes ``effects``."""
        X = np.asarray(X, dtype=float)
        eta = (self.offset(effects) if effects else self.coef[0]) + X @ self.coef[1:]
        return self.inverse_link(eta)

    def contributions(
        self, X: np.ndarray, X_peer: np.ndarray, offset: np.ndarray
    ) -> tuple[np.ndarray, np.ndarray, str]:
        """Exact additive contributions of each driver to ``target - peer_target``.

        Returns the contributions (n x k), the target at the peer profile, and the method
        (``levgap.models.shapley``)."""
        beta = self.coef[1:]
        return shapley(offset, X * beta, X_peer * beta, self.inverse_link,
                       linear=self.link == "identity")

    # -- tables -----------------------------------------------------------------------------

    def tidy(self, coverage: float = 0.95) -> dict[str, np.ndarray]:
        """Estimates, standard errors, t statistics, p-values and intervals as arrays."""
        return inference_table(self.names, self.coef, self.std_error, self.df_inference,
                               coverage)

    # -- serialisation --------------------------------------------------------------------

    def to_dict(self) -> dict[str, Any]:
        """Everything :meth:`predict` needs, as JSON-able data (floats round-trip exactly)."""
        def arr(a: np.ndarray) -> list[Any]:
            return [None if isinstance(v, float) and np.isnan(v) else v for v in a.tolist()]

        out: dict[str, Any] = {
            "model": self.model, "link": self.link, "names": list(self.names),
            "coef": arr(self.coef),
            "effects": [arr(e) for e in self.effects],
            "effect_weights": [arr(w) for w in self.effect_weights],
            "n_obs": self.n_obs,
        }
        if self.pooled is not None:
            p = self.pooled
            out["pooled"] = {
                "small": p.small.tolist(), "parent": p.parent.tolist(),
                "members": p.members.astype(int).tolist(),
                "deviation": arr(p.deviation), "weight": arr(p.weight),
            }
        return out

    @classmethod
    def from_dict(cls, d: dict[str, Any]) -> Fit:
        """The fit :meth:`to_dict` wrote (for prediction; no covariance)."""
        def arr(a: list[Any]) -> np.ndarray:
            return np.array([np.nan if v is None else v for v in a], dtype=float)

        pooled = None
        if d.get("pooled"):
            p = d["pooled"]
            pooled = PooledLevels(
                small=np.array(p["small"], dtype=bool),
                parent=np.array(p["parent"], dtype=np.int64),
                members=np.array(p["members"], dtype=bool).reshape(-1, len(p["small"])),
                deviation=arr(p["deviation"]), weight=arr(p["weight"]),
            )
        return cls(
            model=d["model"], link=d["link"], names=tuple(d["names"]), coef=arr(d["coef"]),
            vcov=None, effects=tuple(arr(e) for e in d["effects"]),
            effect_weights=tuple(arr(w) for w in d["effect_weights"]), pooled=pooled,
            n_obs=int(d["n_obs"]), n_params=0, n_clusters=(), df_inference=0,
            r2=float("nan"), deviance=float("nan"), cov_type="none",
        )


def inference_table(names: Sequence[str], coef: np.ndarray, se: np.ndarray, df: Any,
                    coverage: float = 0.95) -> dict[str, np.ndarray]:
    """Terms, estimates, standard errors, t statistics, two-sided p-values and intervals from
    Student's t with ``df`` degrees of freedom (a number, or one per term); blank where
    ``df`` is below 1. Shared by ``Fit.tidy`` and ``Estimates.tidy``.

    Student's t comes through scipy.special (what scipy.stats.t calls: the same numbers),
    sparing every run the import of scipy.stats.
    """
    from scipy import special

    with np.errstate(invalid="ignore", divide="ignore"):
        t = coef / se
    df = np.asarray(df, dtype=float)
    ok = df >= 1
    p = np.where(ok, 2.0 * special.stdtr(np.where(ok, df, 1), -np.abs(t)), np.nan)
    q = np.where(ok, special.stdtrit(np.where(ok, df, 1), 0.5 + coverage / 2.0), np.nan)
    return {
        "term": np.array(names, dtype=object),
        "estimate": coef,
        "std_error": se,
        "t_stat": t,
        "p_value": p,
        "ci_low": coef - q * se,
        "ci_high": coef + q * se,
    }
