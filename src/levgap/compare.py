"""``compare``: the interpretable models beside a flexible benchmark, on the same folds.

For each measure, the linear and the fractional model (``levgap.models.MODELS``) are fitted
and cross-fitted exactly as ``analyze`` does, and a gradient-boosting benchmark
(scikit-learn's ``HistGradientBoostingRegressor`` on the drivers, the industry as a category
up to 250 industries and as an ordinal code above, and the fiscal year) is cross-fitted on the
same firm-grouped folds. Every model's band is calibrated the same way (``levgap.band``). The
table says how much fit the interpretable models leave on the table, how honest their bands
are, and how often a model's target leaves [0, 1].
"""

from __future__ import annotations

import time
from collections.abc import Callable
from dataclasses import replace
from typing import Any

import numpy as np
import pandas as pd

from levgap import band as bands
from levgap.config import ModelSpec, RunConfig
from levgap.features import build_features
from levgap.models import MODELS
from levgap.models.crossfit import assign_folds
from levgap.panel import Panel
from levgap.pipeline import context, estimate, measure_rows

COMPARE_COLUMNS = (
    "measure", "model", "n_obs", "r2_oos", "rmse_oos", "coverage", "coverage_industry_min",
    "coverage_industry_max", "outside_unit_interval", "fit_seconds",
)
BENCHMARK = "gradient_boosting"
MAX_CATEGORIES = 250  # HistGradientBoosting takes at most 255 categories per feature
COVERAGE_MIN_ROWS = 100
SMALL = 100_000


def compare_models(
    panel: Panel,
    *,
    config: RunConfig | None = None,
    progress: Callable[[str], None] | None = None,
) -> pd.DataFrame:
    """One row per measure and model (``COMPARE_COLUMNS``).

    Parameters
    ----------
    panel : Panel
        A validated panel (:func:`levgap.read_panel`).
    config : RunConfig, optional
        Measures, drivers, folds and seed as for ``analyze`` (its ``model`` is ignored: every
        model is run).
    progress : callable, optional
        Called with the name of each model as it starts.
    """
    config = config or RunConfig()
    spec = config.model
    ledger: list[Any] = []
    notes: list[str] = []
    ctx = context(build_features(panel.data, spec), spec, panel.source, ledger)
    out = []
    for measure in spec.measures:
        rows = measure_rows(ctx, measure, ledger, notes)
        if rows is None:
            continue
        y = ctx.feats.frame[measure].to_numpy(dtype=float)[rows]
        level = ctx.level[rows]
        for name in sorted(MODELS):
            if progress:
                progress(f"{measure}: {name}")
            start = time.perf_counter()
            est = estimate(MODELS[name], ctx, rows, measure, replace(spec, model=name), None)
            seconds = time.perf_counter() - start
            out.append(_row(measure, name, y, est.cf.target, level, ctx, spec, seconds))
        if progress:
            progress(f"{measure}: {BENCHMARK}")
        start = time.perf_counter()
        target = _boosted(ctx, rows, y, spec)
        out.append(_row(measure, BENCHMARK, y, target, level, ctx, spec,
                        time.perf_counter() - start))
    return pd.DataFrame(out, columns=list(COMPARE_COLUMNS))


def _row(measure: str, model: str, y: np.ndarray, target: np.ndarray, level: np.ndarray,
         ctx: Any, spec: ModelSpec, seconds: float) -> dict[str, Any]:
    resid = y - target
    band = bands.calibrate(resid, level, len(ctx.feats.levels.labels), spec.coverage,
                           spec.band_prior_rows)
    low, high = band.limits(target, level)
    cov, cmin, cmax, _ = bands.coverage_by_level(y, low, high, level, COVERAGE_MIN_ROWS)
    tss = float(((y - y.mean()) ** 2).sum())
    return {
        "measure": measure, "model": model, "n_obs": int(len(y)),
        "r2_oos": 1.0 - float(resid @ resid) / tss if tss > 0 else float("nan"),
        "rmse_oos": float(np.sqrt(np.mean(resid**2))),
        "coverage": cov, "coverage_industry_min": cmin, "coverage_industry_max": cmax,
        "outside_unit_interval": float(np.mean((target < 0.0) | (target > 1.0))),
        "fit_seconds": seconds,
    }


def _boosted(ctx: Any, rows: np.ndarray, y: np.ndarray, spec: ModelSpec) -> np.ndarray:
    """Cross-fitted predictions of the gradient-boosting benchmark (same folds)."""
    from sklearn.ensemble import HistGradientBoostingRegressor
    from threadpoolctl import threadpool_limits

    level = ctx.level[rows]
    categorical = len(ctx.feats.levels.labels) <= MAX_CATEGORIES
    features = np.column_stack([ctx.X[rows], level, ctx.years[ctx.year[rows]]])
    mask = [False] * ctx.X.shape[1] + [categorical, False]
    folds = assign_folds(ctx.firm[rows], level, spec.folds, spec.seed)
    target = np.empty(len(y))
    # Below SMALL rows OpenMP threads cost more than they save (and spin when the cores are
    # busy): one thread.
    with threadpool_limits(1 if len(y) < SMALL else None):
        for f in np.unique(folds):
            test = folds == f
            model = HistGradientBoostingRegressor(categorical_features=mask,
                                                  random_state=spec.seed)
            model.fit(features[~test], y[~test])
            target[test] = model.predict(features[test])
    return target
