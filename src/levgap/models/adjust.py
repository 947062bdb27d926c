r"""Speed of adjustment toward the target (``levgap adjust``): the partial-adjustment model.

.. math:: L_{it} - L_{i,t-1} = \lambda\,(L^*_{it} - L_{i,t-1}) + c_i + e_{it},

with :math:`L^*` the target of the fitted model (levgap's cross-fitted ``target``), :math:`c_i`
a firm's own persistent offset from it (firm effects dominate leverage: Lemmon, Roberts and
Zender 2008) and :math:`\lambda` the share of the gap closed in a year. Write
:math:`G_{it} = L^*_{it} - L_{i,t-1}` for the gap at the start of the year. Three estimators,
each with errors clustered by firm (Stata's factor :math:`\frac{G}{G-1}\frac{N-1}{N-P}`,
Student's t with :math:`G - 1` degrees of freedom):

- ``pooled``: least squares of :math:`\Delta L` on a constant and :math:`G`. It leaves
  :math:`c_i` in the error, where it is correlated with :math:`G` (a firm that sits above its
  fitted target stays there), so :math:`\lambda` is biased toward *slow* adjustment
  (Flannery and Rangan 2006; Flannery and Hankins 2013).
- ``firm-effects``: the within estimator (``levgap.models.within``). It removes :math:`c_i`,
  but in a short panel the firm-demeaned lagged leverage is correlated with the demeaned
  error (Nickell 1981), which biases :math:`\lambda` toward *fast* adjustment (Flannery and
  Hankins 2013; Iliev and Welch 2010 warn that mean reversion can be mechanical).
- ``long-difference`` (the corrected estimator, in the spirit of Huang and Ritter's 2009 use
  of the long-difference estimator of Hahn, Hausman and Kuersteiner 2007): the equation
  differenced over :math:`k` years, which removes :math:`c_i`,

  .. math:: \Delta L_{it} - \Delta L_{i,t-k} = a + \lambda (G_{it} - G_{i,t-k})
            + e_{it} - e_{i,t-k},

  estimated by instrumental variables with :math:`G_{i,t-k} = L^*_{i,t-k} - L_{i,t-k-1}` as
  the instrument: it is dated before :math:`e_{i,t-k}` and :math:`e_{it}` (valid when the
  errors are not serially correlated and the target is exogenous) and strongly correlated with
  the regressor. Default :math:`k = 4`, fewer when the panel is short (at most the number of
  years minus 3). Needs each firm's leverage at :math:`t, t-1, t-k, t-k-1` and its target at
  :math:`t` and :math:`t-k`.

The half-life of a gap is :math:`\ln 0.5 / \ln(1 - \lambda)` years (its interval maps the
interval of :math:`\lambda`; infinite when :math:`\lambda \le 0`). A firm's expected path
holds its latest target fixed: :math:`E[L_{t+h}] = L^* + (1 - \lambda)^h (L_t - L^*)`.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd
from scipy import special

from levgap.errors import ModelError
from levgap.models.covariance import cluster_codes, influence_meat

DEFAULT_DIFFERENCE = 4

BIAS: dict[str, str] = {
    "pooled": "biased toward slow adjustment: firm effects stay in the error (Flannery and "
    "Rangan 2006; Flannery and Hankins 2013)",
    "firm-effects": "biased toward fast adjustment in short panels (Nickell bias; Flannery "
    "and Hankins 2013; Iliev and Welch 2010)",
    "long-difference": "corrected: differencing removes firm effects, the instrument removes "
    "the correlation with the error (Huang and Ritter 2009; Hahn, Hausman and Kuersteiner "
    "2007)",
}
"""The documented direction of each estimator's bias (REFERENCES.md, "Dynamics")."""

PUBLISHED: tuple[tuple[str, str, str], ...] = (
    ("Flannery and Rangan (2006) JFE 79(3), abstract (0.344 from memory)", "about 0.34",
     "about 1.6 years"),
    ("Huang and Ritter (2009) JFQA 44(2), abstract; book leverage", "about 0.17 (implied)",
     "3.7 years"),
    ("Yin and Ritter (2020) JFQA", "about 0.16 book, 0.10 market", "about 4 years book, 6.6 "
     "market (implied)"),
)
"""Published speeds of adjustment to show beside an estimate (REFERENCES.md)."""


@dataclass(frozen=True, slots=True)
class Adjustment:
    """One estimate of the speed of adjustment.

    Parameters
    ----------
    estimator : str
        ``pooled``, ``firm-effects`` or ``long-difference``.
    speed : float
        :math:`\\lambda`, the share of the gap closed in a year.
    std_error : float
        Clustered by firm.
    df : int
        Degrees of freedom of the t distribution (firms - 1).
    ci_low, ci_high : float
        95% interval of :math:`\\lambda`.
    half_life, half_life_low, half_life_high : float
        Years for half a gap to close, and the interval mapped from :math:`\\lambda`'s.
    n_obs, n_firms : int
    difference : int
        Years of the long difference (0 for the others).
    bias : str
        The documented direction of the estimator's bias.
    """

    estimator: str
    speed: float
    std_error: float
    df: int
    ci_low: float
    ci_high: float
    half_life: float
    half_life_low: float
    half_life_high: float
    n_obs: int
    n_firms: int
    difference: int
    bias: str


def half_life(speed: float | np.ndarray) -> np.ndarray:
    """:math:`\\ln 0.5 / \\ln(1 - \\lambda)`: infinite for :math:`\\lambda \\le 0`, zero for
    :math:`\\lambda \\ge 1`."""
    lam = np.asarray(speed, dtype=float)
    with np.errstate(divide="ignore", invalid="ignore"):
        out = np.log(0.5) / np.log1p(-np.clip(lam, -np.inf, 1.0))
    return np.where(lam <= 0, np.inf, np.where(lam >= 1, 0.0, out))


@dataclass(frozen=True, slots=True)
class Lags:
    """Leverage and target with the lags the estimators need (NaN where a year is absent)."""

    firm: np.ndarray
    year: np.ndarray
    leverage: np.ndarray
    target: np.ndarray

    def shifted(self, values: np.ndarray, k: int) -> np.ndarray:
        """``values`` of the same firm ``k`` years earlier (NaN where that year is absent)."""
        here = pd.MultiIndex.from_arrays([self.firm, self.year])
        pos = here.get_indexer(pd.MultiIndex.from_arrays([self.firm, self.year - k]))
        return np.where(pos >= 0, values[np.maximum(pos, 0)], np.nan)


def prepare(firm: np.ndarray, year: np.ndarray, leverage: np.ndarray, target: np.ndarray
            ) -> Lags:
    """Check and hold one measure's firm-years (one row per firm and year)."""
    firm = np.asarray(firm).astype(str)
    year = np.asarray(year, dtype=np.int64)
    leverage = np.asarray(leverage, dtype=float)
    target = np.asarray(target, dtype=float)
    if not (len(firm) == len(year) == len(leverage) == len(target)):
        raise ModelError("firm, year, leverage and target must have one value per row.")
    if pd.MultiIndex.from_arrays([firm, year]).has_duplicates:
        raise ModelError("the adjustment panel must hold one row per firm and year; got "
                         "repeated firm-years.")
    return Lags(firm, year, leverage, target)


def _cluster_ols(y: np.ndarray, W: np.ndarray, Z: np.ndarray, firm: np.ndarray
                 ) -> tuple[np.ndarray, np.ndarray, int]:
    """IV (``Z`` instruments for ``W``; ``Z = W`` is least squares) with firm-clustered
    covariance (Stata's factor). Returns the estimates, their covariance and the clusters."""
    ZW = Z.T @ W
    try:
        theta = np.linalg.solve(ZW, Z.T @ y)
        inv = np.linalg.inv(ZW)
    except np.linalg.LinAlgError:
        raise ModelError("the adjustment regression must be identified; got a singular "
                         "system (too few firm-years with the years it needs).") from None
    u = y - W @ theta
    codes = cluster_codes(firm)
    V, g = influence_meat((Z * u[:, None]) @ inv.T, codes, len(y), W.shape[1])
    return theta, V, g


def _result(estimator: str, lam: float, se: float, g: int, n: int, k: int) -> Adjustment:
    df = g - 1
    if df < 1:
        raise ModelError(f"the adjustment estimate needs at least two firms; got {g}.")
    q = float(special.stdtrit(df, 0.975))
    lo, hi = lam - q * se, lam + q * se
    hl = half_life(np.array([lam, hi, lo]))
    return Adjustment(estimator=estimator, speed=float(lam), std_error=float(se), df=df,
                      ci_low=float(lo), ci_high=float(hi), half_life=float(hl[0]),
                      half_life_low=float(hl[1]), half_life_high=float(hl[2]), n_obs=int(n),
                      n_firms=int(g), difference=k, bias=BIAS[estimator])


def _base(lags: Lags) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    prev = lags.shifted(lags.leverage, 1)
    dL = lags.leverage - prev
    gap = lags.target - prev
    ok = np.isfinite(dL) & np.isfinite(gap)
    if ok.sum() < 3:
        raise ModelError("the speed of adjustment needs firms observed in consecutive fiscal "
                         f"years; got {int(ok.sum())} firm-years with the previous year.")
    return dL, gap, ok


def fit_pooled(lags: Lags, difference: int = 0) -> Adjustment:
    """Least squares of the change in leverage on a constant and the gap (module docstring)."""
    dL, gap, ok = _base(lags)
    W = np.column_stack([np.ones(ok.sum()), gap[ok]])
    theta, V, g = _cluster_ols(dL[ok], W, W, lags.firm[ok])
    return _result("pooled", theta[1], float(np.sqrt(V[1, 1])), g, int(ok.sum()), 0)


def fit_firm_effects(lags: Lags, difference: int = 0) -> Adjustment:
    """The within estimator with firm effects (module docstring)."""
    from levgap.models.within import fit_within

    dL, gap, ok = _base(lags)
    est = fit_within(dL[ok], gap[ok][:, None], firm=lags.firm[ok], clusters=(lags.firm[ok],),
                     names=("speed",))
    return _result("firm-effects", est.coef[0], est.std_error[0], int(est.df[0]) + 1,
                   int(ok.sum()), 0)


def difference_for(years: np.ndarray, wanted: int | None = None) -> int:
    """Years of the long difference: ``wanted`` (default 4), at most the years spanned - 3."""
    span = int(np.max(years) - np.min(years) + 1) if len(years) else 0
    k = DEFAULT_DIFFERENCE if wanted is None else int(wanted)
    k = min(k, span - 3)
    if k < 1:
        raise ModelError(f"the long-difference estimator needs at least four consecutive "
                         f"fiscal years; got a panel spanning {span}.")
    return k


def fit_long_difference(lags: Lags, difference: int | None = None) -> Adjustment:
    """The k-year long difference, instrumented by the gap k years earlier (module
    docstring)."""
    k = difference_for(lags.year, difference)
    dL, gap, _ = _base(lags)
    dL_k, gap_k = lags.shifted(dL, k), lags.shifted(gap, k)
    y = dL - dL_k
    r = gap - gap_k
    ok = np.isfinite(y) & np.isfinite(r) & np.isfinite(gap_k)
    if ok.sum() < 3:
        raise ModelError(f"the {k}-year long difference needs firms observed at t, t-1, t-{k} "
                         f"and t-{k + 1}; got {int(ok.sum())} such firm-years.")
    W = np.column_stack([np.ones(ok.sum()), r[ok]])
    Z = np.column_stack([np.ones(ok.sum()), gap_k[ok]])
    theta, V, g = _cluster_ols(y[ok], W, Z, lags.firm[ok])
    return _result("long-difference", theta[1], float(np.sqrt(V[1, 1])), g, int(ok.sum()), k)


ESTIMATORS = {"pooled": fit_pooled, "firm-effects": fit_firm_effects,
              "long-difference": fit_long_difference}
"""Speed-of-adjustment estimators by name; ``long-difference`` is the corrected one."""


def expected_paths(lags: Lags, speed: float, horizon: int = 5) -> pd.DataFrame:
    """Each firm's expected leverage over the next ``horizon`` years from its latest year,
    closing the share ``speed`` of its gap to its latest target each year.

    Returns
    -------
    pandas.DataFrame
        ``firm_id, from_year, fiscal_year, years_ahead, leverage, target, expected_leverage,
        gap`` (``years_ahead`` 0 is the latest actual).
    """
    frame = pd.DataFrame({"firm_id": lags.firm, "fiscal_year": lags.year,
                          "leverage": lags.leverage, "target": lags.target})
    frame = frame[np.isfinite(frame["leverage"]) & np.isfinite(frame["target"])]
    last = frame.sort_values(["firm_id", "fiscal_year"]).groupby("firm_id").tail(1)
    h = np.arange(horizon + 1)
    n = len(last)
    lev = np.repeat(last["leverage"].to_numpy(), horizon + 1)
    tgt = np.repeat(last["target"].to_numpy(), horizon + 1)
    hh = np.tile(h, n)
    expected = tgt + (1.0 - speed) ** hh * (lev - tgt)
    return pd.DataFrame({
        "firm_id": np.repeat(last["firm_id"].to_numpy(), horizon + 1),
        "from_year": np.repeat(last["fiscal_year"].to_numpy(), horizon + 1),
        "fiscal_year": np.repeat(last["fiscal_year"].to_numpy(), horizon + 1) + hh,
        "years_ahead": hh, "leverage": lev, "target": tgt,
        "expected_leverage": expected, "gap": expected - tgt,
    })
