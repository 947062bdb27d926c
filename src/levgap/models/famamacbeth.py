r"""Fama and MacBeth (1973): one cross-section a fiscal year, the slopes averaged.

For each fiscal year :math:`t` a least-squares cross-section

.. math:: y_{it} = c_t + x_{it}'\beta_t + \alpha_{g(i), t} + e_{it}

(with industry effects :math:`\alpha` when the specification absorbs them, fitted within the
year; a year effect is the cross-section's own constant). The estimate is the mean of the
yearly slopes, :math:`\bar\beta = \frac{1}{T}\sum_t \beta_t`.

A driver with no cross-sectional variation in a year (after that year's industry effects)
is left out of that year's cross-section for that driver only (DESIGN.md, "Replication
estimators": earnings volatility in the first years of a panel, when every firm's value is
imputed): its mean runs over the years it entered, and ``n_years`` says how many. A year
whose rows cannot identify the remaining slopes (fewer rows than parameters, collinear
drivers) is left out for every driver, with a note.

Standard errors, from the time series of each slope (:math:`T_j` years):

- ``std_error_plain``: :math:`s(\beta_t) / \sqrt{T_j}`, the sample standard deviation
  (ddof 1): Fama and MacBeth's own;
- ``std_error_nw``: Newey and West (1987) on the slope series with Bartlett weights
  :math:`1 - l/(L+1)` and no small-sample adjustment,
  :math:`\frac{1}{T_j}\left(\hat\gamma_0 + 2\sum_{l=1}^{L} (1 - \tfrac{l}{L+1})
  \hat\gamma_l\right)` with :math:`\hat\gamma_l = \frac{1}{T_j}\sum_{t>l} e_t e_{t-l}`
  (what R's ``sandwich::NeweyWest(lag = L, prewhite = FALSE, adjust = FALSE)`` gives).
  Lag rule, unless ``nw_lags`` is given: :math:`L = \lfloor 4 (T_j/100)^{2/9} \rfloor`
  (Newey and West 1994's rule of thumb, common practice), at most :math:`T_j - 1`.

Inference uses Student's t with :math:`T_j - 1` degrees of freedom. Years are taken in
order; a year in which a driver was left out is skipped in its series (no gap is filled).
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np

from levgap.errors import ModelError
from levgap.models.design import FLAT_TOL, compress
from levgap.models.estimates import Estimates
from levgap.models.identify import IDENTIFIED_TOL
from levgap.models.linear import fit_linear

LAG_RULE = "floor(4 (T/100)^(2/9)), at most T - 1 (Newey and West 1994, common practice)"


def lag_rule(n_years: int) -> int:
    """Newey-West lags for a series of ``n_years``: :math:`\\lfloor 4 (T/100)^{2/9}\\rfloor`,
    at most ``n_years - 1`` (0 for fewer than two years)."""
    if n_years < 2:
        return 0
    return int(min(np.floor(4.0 * (n_years / 100.0) ** (2.0 / 9.0)), n_years - 1))


def newey_west_se(series: np.ndarray, lags: int) -> float:
    """Newey-West standard error of the mean of ``series`` (Bartlett weights, no
    small-sample adjustment); NaN for fewer than two values."""
    s = np.asarray(series, dtype=float)
    T = len(s)
    if T < 2:
        return float("nan")
    e = s - s.mean()
    v = float(e @ e) / T
    for lag in range(1, min(lags, T - 1) + 1):
        v += 2.0 * (1.0 - lag / (lags + 1.0)) * float(e[lag:] @ e[:-lag]) / T
    return float(np.sqrt(max(v, 0.0) / T))


def _varies(X: np.ndarray, groups: np.ndarray | None) -> np.ndarray:
    """Drivers with cross-sectional variation left after the groups' means (or the mean)."""
    n = max(len(X), 1)
    spread = ((X - X.mean(axis=0)) ** 2).sum(axis=0)
    flat = np.sqrt(spread / n) <= FLAT_TOL * np.abs(X).max(axis=0, initial=0.0)
    if groups is None:
        left = spread
    else:
        g = compress(groups)[1]
        cnt = np.bincount(g).astype(float)
        means = np.stack([np.bincount(g, weights=X[:, j]) / cnt for j in range(X.shape[1])],
                         axis=1)
        left = ((X - means[g]) ** 2).sum(axis=0)
    return ~flat & (left > IDENTIFIED_TOL * spread)


def fit_famamacbeth(
    y: np.ndarray,
    X: np.ndarray,
    *,
    year: np.ndarray,
    industry: np.ndarray | None = None,
    firm: np.ndarray | None = None,
    names: Sequence[str] | None = None,
    nw_lags: int | None = None,
    errors: str = "newey-west",
) -> Estimates:
    """Fama-MacBeth slopes and their standard errors (see the module docstring).

    Parameters
    ----------
    y : numpy.ndarray of shape (n,)
    X : numpy.ndarray of shape (n, k)
        Drivers (each cross-section adds its constant).
    year : numpy.ndarray of shape (n,)
        Fiscal year of each row (sortable labels).
    industry : numpy.ndarray of shape (n,), optional
        Industry code of each row: industry effects within every cross-section.
    firm : numpy.ndarray of shape (n,), optional
        Firm of each row, for the count of firms.
    names : sequence of str, optional
    nw_lags : int, optional
        Newey-West lags; default :func:`lag_rule` of each slope's number of years.
    errors : {"newey-west", "plain"}, default="newey-west"
        Which standard error fills ``std_error`` (both are in ``columns``).

    Returns
    -------
    Estimates
        ``columns``: ``n_years``, ``std_error_plain``, ``std_error_nw``, ``nw_lags``;
        ``info``: the years used and left out, the lag rule, the mean yearly R².

    Raises
    ------
    ModelError
        Non-finite values, or no driver estimable in at least two years.
    """
    y = np.asarray(y, dtype=float)
    X = np.asarray(X, dtype=float)
    if X.ndim == 1:
        X = X[:, None]
    n, k = X.shape
    names = tuple(names) if names is not None else tuple(f"x{j}" for j in range(k))
    if not (np.isfinite(y).all() and np.isfinite(X).all()):
        raise ModelError("the model's inputs must be finite; got NaN or infinite values.")
    year = np.asarray(year)
    years = np.unique(year)
    slopes = np.full((len(years), k), np.nan)
    r2 = np.full(len(years), np.nan)
    skipped: list[str] = []
    for i, t in enumerate(years):
        rows = np.flatnonzero(year == t)
        ind = None if industry is None else np.asarray(industry)[rows]
        codes = None if ind is None else compress(np.unique(ind, return_inverse=True)[1])[1]
        keep = _varies(X[rows], codes)
        if not keep.any():
            skipped.append(f"{t} (no driver varies)")
            continue
        try:
            fit = fit_linear(y[rows], X[rows][:, keep],
                             effects=() if codes is None else [codes], cov=False, check=True)
        except ModelError as exc:
            skipped.append(f"{t} ({str(exc).split(';')[0]})")
            continue
        slopes[i, keep] = fit.coef[1:]
        r2[i] = fit.r2
    n_years = np.sum(~np.isnan(slopes), axis=0)
    if not (n_years >= 2).any():
        raise ModelError(
            f"Fama-MacBeth needs at least two fiscal years in which a driver can be estimated; "
            f"got {int(n_years.max()) if k else 0}. It runs one cross-section a year: give a "
            "panel of several years.")
    coef = np.full(k, np.nan)
    plain = np.full(k, np.nan)
    nw = np.full(k, np.nan)
    lags = np.zeros(k, dtype=np.int64)
    for j in range(k):
        s = slopes[:, j][~np.isnan(slopes[:, j])]
        if len(s) == 0:
            continue
        coef[j] = s.mean()
        if len(s) >= 2:
            plain[j] = s.std(ddof=1) / np.sqrt(len(s))
            lags[j] = lag_rule(len(s)) if nw_lags is None else min(int(nw_lags), len(s) - 1)
            nw[j] = newey_west_se(s, int(lags[j]))
    notes = []
    short = [names[j] for j in range(k) if n_years[j] < len(years) - len(skipped)]
    if short:
        notes.append("left out of the years without cross-sectional variation: " + ", ".join(
            f"{names[j]} ({int(n_years[j])} of {len(years)} years)" for j in range(k)
            if names[j] in short))
    if skipped:
        notes.append("years without a cross-section: " + "; ".join(skipped))
    n_firms = int(len(np.unique(firm))) if firm is not None else n
    info = {"years": [int(t) if np.issubdtype(type(t), np.integer) else str(t) for t in years],
            "years_used": int(np.sum(~np.isnan(r2))), "lag_rule": LAG_RULE if nw_lags is None
            else f"{int(nw_lags)} (given), at most T - 1",
            "errors": errors, "industry_effects": industry is not None,
            "mean_r2": float(np.nanmean(r2)) if np.isfinite(r2).any() else float("nan"),
            "slopes": {names[j]: [None if np.isnan(v) else float(v) for v in slopes[:, j]]
                       for j in range(k)}}
    return Estimates(
        estimator="fama-macbeth", names=names, coef=coef,
        std_error=nw if errors == "newey-west" else plain,
        df=(n_years - 1).astype(float), n_obs=n, n_firms=n_firms, r2=info["mean_r2"],
        columns={"n_years": n_years.astype(np.int64), "std_error_plain": plain,
                 "std_error_nw": nw, "nw_lags": lags},
        info=info, notes=tuple(notes))
