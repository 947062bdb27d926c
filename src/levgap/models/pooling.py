r"""Empirical-Bayes pooling of small industries toward their parent group.

An industry with fewer than ``min_industry_firms`` firms is *small*. Its effect is its parent
group's effect (the row-weighted mean of the parent's member industries: those sharing the
longest leading part of its code, else every industry) plus an own deviation :math:`u_s`
estimated from its rows and shrunk toward zero. The weight of the industry's own information
is the empirical-Bayes (best linear unbiased predictor) weight

.. math:: w_s = \frac{\tau^2}{\tau^2 + \sigma_f^2 / m_s + \sigma_e^2 / n_s},

with :math:`m_s` firms and :math:`n_s` firm-years in the industry, :math:`\sigma_e^2` the
within-firm residual variance, :math:`\sigma_f^2` the variance of firm means within an
industry (firms' own persistent deviations, estimated by the method of moments), and
:math:`\tau^2` the variance of industries' effects around their parent group, by the method of
moments over every industry: an industry with an effect of its own against the other members
of its parent group, a small industry by its rows' mean residual when it takes its parent's
effect, each less its sampling variance; all from a first fit in which small industries take
their parent's effect outright, on the response scale. :math:`\tau^2` is floored at 1% of
:math:`\sigma_f^2 + \sigma_e^2`, so an industry with rows of its own always keeps some of its
own level. The fit applies the weight as a ridge penalty
:math:`\lambda_s = n_s \bar h (1 - w_s) / w_s` on :math:`u_s`, where :math:`\bar h` is the mean
information per row on the link scale (1 for least squares, the mean of
:math:`\mu(1-\mu)` for the fractional logit), so that the fit keeps the share :math:`w_s` of
the industry's own deviation. In a cross-fit fold the weights follow the fold's own counts; an
industry without rows in the fold takes its parent's effect (flagged).
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

from levgap.models.design import Pooling
from levgap.models.result import Fit

TAU_FLOOR = 0.01


@dataclass(frozen=True, slots=True)
class Components:
    """Variance components behind the pooling weights (response scale).

    Parameters
    ----------
    tau2 : float
        Variance of industry effects around their parent group.
    firm2 : float
        Variance of firm means within an industry.
    resid2 : float
        Within-firm residual variance.
    info : float
        Mean information per row on the link scale.
    """

    tau2: float
    firm2: float
    resid2: float
    info: float

    def weight(self, n_rows: np.ndarray, n_firms: np.ndarray) -> np.ndarray:
        """Empirical-Bayes weight of a level's own information."""
        with np.errstate(divide="ignore", invalid="ignore"):
            v = self.firm2 / n_firms + self.resid2 / n_rows
            return np.where(n_rows > 0, self.tau2 / (self.tau2 + v), 0.0)

    def as_dict(self) -> dict[str, float]:
        return {"tau2": self.tau2, "firm2": self.firm2, "resid2": self.resid2,
                "info": self.info}


def hard(structure: Pooling) -> Pooling:
    """Small levels without own deviations: they take their parent's effect outright."""
    L = len(structure.small)
    return Pooling(structure.small, structure.parent, structure.members,
                   np.full(L, np.inf), np.full(L, np.nan))


def penalised(
    structure: Pooling, components: Components, level: np.ndarray, firm: np.ndarray
) -> Pooling:
    """Pooling with the penalties and weights that the rows given imply."""
    L = len(structure.small)
    rows = np.bincount(level, minlength=L)[:L].astype(float)
    pairs = np.unique(level.astype(np.int64) * (int(firm.max()) + 1 if len(firm) else 1) + firm)
    firms = np.bincount(pairs // (int(firm.max()) + 1 if len(firm) else 1), minlength=L)[:L]
    w = components.weight(rows, firms.astype(float))
    w = np.where(structure.small, w, np.nan)
    with np.errstate(divide="ignore", invalid="ignore"):
        penalty = np.where(structure.small & (rows > 0),
                           rows * components.info * (1.0 - w) / w, np.inf)
    return Pooling(structure.small, structure.parent, structure.members, penalty,
                   np.where(structure.small & (rows > 0), w, np.nan))


def estimate_components(
    fit: Fit,
    y: np.ndarray,
    fitted: np.ndarray,
    level: np.ndarray,
    firm: np.ndarray,
    labels: Sequence[str],
) -> Components:
    """Variance components from a fit in which small levels borrowed outright.

    Parameters
    ----------
    fit : Fit
        The first-stage fit (effects of the levels with own rows).
    y, fitted : numpy.ndarray
        Outcome and the fit's fitted values (response scale).
    level, firm : numpy.ndarray of int
        Level code (first factor) and firm code of each row.
    labels : sequence of str
        Label of each level code (industry codes: parents are shared leading parts).
    """
    r = y - fitted
    n_f = int(firm.max()) + 1
    t_f = np.bincount(firm, minlength=n_f).astype(float)
    has = t_f > 0
    mean_f = np.bincount(firm, weights=r, minlength=n_f)[has] / t_f[has]
    within = r - (np.bincount(firm, weights=r, minlength=n_f) / np.maximum(t_f, 1))[firm]
    dof = max(len(r) - int(has.sum()), 1)
    resid2 = float(within @ within) / dof
    # firm means around their level's mean: between-firm variance within levels
    lvl_of_firm = np.zeros(n_f, dtype=np.int64)
    lvl_of_firm[firm] = level
    lf = lvl_of_firm[has]
    n_l = int(level.max()) + 1
    m_l = np.bincount(lf, minlength=n_l).astype(float)
    lvl_mean = np.bincount(lf, weights=mean_f, minlength=n_l) / np.maximum(m_l, 1)
    dev = mean_f - lvl_mean[lf]
    firm_dof = max(int(has.sum()) - int((m_l > 0).sum()), 1)
    firm2 = max(float(dev @ dev) / firm_dof - float(np.mean(resid2 / t_f[has])), 0.0)
    info = float(np.mean(_slope(fit, fitted)))
    dev2, noise = _between(fit, level, firm, labels, firm2, resid2, info)
    # the small levels' own mean residuals (their deviation from the parent they borrowed)
    small = fit.pooled.small if fit.pooled is not None else np.zeros(0, dtype=bool)
    n_l2 = max(int(level.max()) + 1, len(small))
    rows_l = np.bincount(level, minlength=n_l2).astype(float)
    sum_l = np.bincount(level, weights=r, minlength=n_l2)
    for s_code in np.flatnonzero(small[:n_l2] & (rows_l[: len(small)] > 0)):
        dev2.append((sum_l[s_code] / rows_l[s_code]) ** 2)
        noise.append(firm2 / max(m_l[s_code] if s_code < len(m_l) else 1.0, 1.0)
                     + resid2 / rows_l[s_code])
    tau2 = float(np.mean(dev2) - np.mean(noise)) if dev2 else 0.0
    tau2 = max(tau2, TAU_FLOOR * (firm2 + resid2))
    return Components(tau2=tau2, firm2=firm2, resid2=resid2, info=info)


def _slope(fit: Fit, fitted: np.ndarray) -> np.ndarray:
    # d(response)/d(link): 1 for the identity, mu(1 - mu) for the logit
    return np.ones_like(fitted) if fit.link == "identity" else fitted * (1.0 - fitted)


def _between(
    fit: Fit,
    level: np.ndarray,
    firm: np.ndarray,
    labels: Sequence[str],
    firm2: float,
    resid2: float,
    info: float,
) -> tuple[list[float], list[float]]:
    """Squared deviations of own-level effects from the other members of their parent group
    (response scale), and the sampling variance of each."""
    alpha = fit.effects[0]
    own = np.flatnonzero(~np.isnan(alpha))
    if len(own) < 3:
        return [], []
    rows = np.bincount(level, minlength=len(alpha)).astype(float)
    pairs = np.unique(level.astype(np.int64) * (int(firm.max()) + 1) + firm)
    firms = np.bincount(pairs // (int(firm.max()) + 1), minlength=len(alpha)).astype(float)
    scale = 1.0 if fit.link == "identity" else info  # link-scale effects to response scale
    names = [str(labels[i]) for i in own]
    dev2, noise = [], []
    for i, g in enumerate(own):
        others = _parent_members(names[i], names, exclude=i)
        w = rows[own[others]]
        if w.sum() == 0:
            continue
        parent = float(alpha[own[others]] @ w / w.sum())
        dev2.append((scale * (alpha[g] - parent)) ** 2)
        noise.append(firm2 / max(firms[g], 1.0) + resid2 / max(rows[g], 1.0))
    return dev2, noise


def _parent_members(code: str, names: Sequence[str], exclude: int) -> np.ndarray:
    """The other levels sharing the longest leading part of a numeric code (else all)."""
    idx = np.array([j for j in range(len(names)) if j != exclude])
    if code.isdigit():
        for cut in range(len(code) - 1, 0, -1):
            hit = np.array([j for j in idx if names[j].startswith(code[:cut])], dtype=int)
            if len(hit):
                return hit
    return idx
