"""What a specification absorbs and holds, as the pipeline and the tables need it (pure).

- :func:`year_codes`: the year factor of a fit (one level when the year is not absorbed);
- :func:`measure_context`: the run's codes with the measure's own industry median leverage;
- :func:`require_targets`: ``analyze`` refuses what cannot give an honest target;
- :func:`specification_record`: what was absorbed, counted (``run.json`` ``specification``),
  which ``levgap table`` prints as "Industry effects: 5 own, 90 pooled".
"""

from __future__ import annotations

from dataclasses import replace
from typing import TYPE_CHECKING, Any

import numpy as np

from levgap.config import ModelSpec
from levgap.definitions import DRIVERS, INPUT_DRIVER_BUILT
from levgap.errors import ConfigError

if TYPE_CHECKING:
    from levgap.pipeline import Context

MAY_BE_MISSING: frozenset[str] = frozenset({"log_revenue"})
"""Built drivers without an imputation rule: a row without them is left out
(``driver_missing``), as is a row without an input driver."""

MISSING_WHY: dict[str, str] = {
    "log_revenue": "log_revenue needs revenue above zero",
}


def year_codes(spec: ModelSpec, year: np.ndarray) -> np.ndarray:
    """The year factor's codes: the fiscal-year codes, or one level when years are not
    absorbed (the fit then holds no year parameter)."""
    return year if "year" in spec.absorbs else np.zeros_like(year)


def require_targets(spec: ModelSpec) -> None:
    """Refuse a specification that cannot give a cross-fitted target (``analyze``).

    Raises
    ------
    ConfigError
        Firm effects (a firm's target would be its own average level, and a firm held out of
        the cross-fit has none) or the Fama-MacBeth estimator (no pooled fit to predict from).
    """
    if "firm" in spec.absorbs:
        raise ConfigError(
            f"[model] effects must not include firm effects for targets; got "
            f"{spec.effects!r}. With firm effects a firm's target is its own average level, "
            "and a firm held out of the cross-fit has no effect of its own. Use `levgap "
            "estimate PANEL --effects firm,year` for the estimation table.")
    if spec.estimator != "pooled":
        raise ConfigError(
            f"[model] estimator must be pooled for targets; got {spec.estimator!r}. Use "
            "`levgap estimate PANEL --estimator fama-macbeth` for the estimation table.")


def missing_drivers(frame: Any, drivers: tuple[str, ...], spec: ModelSpec
                    ) -> list[tuple[str, np.ndarray, str]]:
    """Rows left out because a driver without an imputation rule has no value.

    Returns one ``(driver, mask, detail)`` per such driver with rows, each row counted once
    (under the first driver it lacks)."""
    out = []
    seen = np.zeros(len(frame), dtype=bool)
    for name in drivers:
        if name not in MAY_BE_MISSING and name not in spec.input_drivers:
            continue
        mask = ~np.isfinite(frame[name].to_numpy(dtype=float)) & ~seen
        if mask.any():
            why = MISSING_WHY.get(name, f"the input driver {name} is blank or not a number")
            if spec.lag_drivers:
                why += " (in the previous fiscal year: lag_drivers)"
            out.append((name, mask, why))
            seen |= mask
    return out


def measure_context(ctx: Context, measure: str) -> Context:
    """The run's codes with the industry median leverage of ``measure`` in its driver column
    (the same context when the specification has no measure-specific driver)."""
    from levgap.derived import PREFIX, column

    drivers = ctx.feats.drivers
    if PREFIX not in drivers or measure == "book":
        return ctx
    X = ctx.X.copy()
    X[:, drivers.index(PREFIX)] = ctx.feats.frame[column(measure)].to_numpy(dtype=float)
    return replace(ctx, X=X)


def absorbed(ctx: Context, spec: ModelSpec, rows: np.ndarray | None = None
             ) -> dict[str, Any]:
    """The effects absorbed and their levels among ``rows`` (default all): industries with an
    effect of their own and pooled ones, years, firms."""
    sel = slice(None) if rows is None else rows
    levels = ctx.feats.levels
    small = np.asarray(levels.small, dtype=bool)
    present = np.zeros(len(small), dtype=bool)
    present[np.unique(ctx.level[sel])] = True
    out: dict[str, Any] = {}
    if "industry" in spec.absorbs:
        out["industry"] = {
            "levels": int(present.sum()), "own": int((present & ~small).sum()),
            "pooled": int((present & small).sum()),
            "digits": int(spec.industry_digits), "pooling": spec.pooling,
        }
    if "year" in spec.absorbs:
        out["year"] = {"levels": int(len(np.unique(ctx.year[sel])))}
    if "firm" in spec.absorbs:
        out["firm"] = {"levels": int(len(np.unique(ctx.firm[sel])))}
    return out


def specification_record(ctx: Context, spec: ModelSpec, estimator: str,
                         model: str | None = None,
                         used: dict[str, np.ndarray] | None = None) -> dict[str, Any]:
    """What the run absorbed and held, for ``run.json`` (``specification``) and tables.

    Parameters
    ----------
    ctx : Context
        The run's codes (levels of the industry effect, years, firms).
    spec : ModelSpec
    estimator : str
        ``pooled``, ``within`` or ``fama-macbeth``.
    model : str, optional
        The fit's model key (default ``spec.model``).
    used : dict of str to numpy.ndarray, optional
        Each measure's rows: ``absorbed_by_measure`` then counts each measure's own levels
        (a measure observed in one year absorbs no year effect, whatever the panel spans).
    """
    effects = absorbed(ctx, spec)
    by_measure = {m: absorbed(ctx, spec, rows) for m, rows in (used or {}).items()}
    built = {d: (DRIVERS[d].built if d in DRIVERS else INPUT_DRIVER_BUILT.format(name=d))
             for d in ctx.feats.drivers}
    return {
        "effects": spec.effects,
        "absorbed": effects,
        "absorbed_by_measure": by_measure,
        "estimator": estimator,
        "model": model or spec.model,
        "lag_drivers": bool(spec.lag_drivers),
        "cluster": spec.cluster,
        "drivers": list(ctx.feats.drivers),
        "built": built,
        "winsorize": list(spec.winsorize),
    }
