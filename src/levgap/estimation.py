"""``estimate``: the estimation table of one specification, without targets (``levgap estimate``).

A researcher replicating the determinants-of-leverage literature sets several
specifications side by side. ``analyze`` gives the pooled target model with its cross-fitted
targets; ``estimate`` gives any specification's coefficients and fit, including those that
cannot give an honest target:

- ``estimator = "pooled"`` with ``effects = "firm,year"``: the within estimator
  (``levgap.models.within``), least squares with absorbed firm and year effects;
- ``estimator = "fama-macbeth"``: yearly least-squares cross-sections, slopes averaged
  (``levgap.models.famamacbeth``);
- ``estimator = "pooled"`` with other effects: the run's model (``fractional`` or ``linear``)
  as ``analyze`` fits it, with the out-of-sample R² of the same grouped cross-fit.

The result writes ``coefficients``, ``model_fit`` (and ``sample`` on request) with
``run.json`` as one run (``levgap.outputs``), which ``levgap table`` reads like an
``analyze`` folder.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from levgap.analysis import COEF_COLUMNS, FIT_COLUMNS
from levgap.config import ModelSpec, RunConfig
from levgap.errors import ModelError
from levgap.features import build_features
from levgap.frames import concat_ledger, with_signs
from levgap.manifest import build_manifest
from levgap.models.estimates import Estimates
from levgap.panel import Panel
from levgap.specification import measure_context, specification_record, year_codes


@dataclass(frozen=True, slots=True)
class Estimation:
    """The tables of one specification's estimation (see the module docstring).

    Parameters
    ----------
    coefficients : pandas.DataFrame
        ``COEF_COLUMNS`` and ``expected_sign``, ``agrees``, ``sign_source``; Fama-MacBeth adds
        ``n_years``, ``std_error_plain``, ``std_error_nw`` and ``nw_lags``.
    model_fit : pandas.DataFrame
        ``FIT_COLUMNS`` (the coverage columns are blank: no band without targets).
    exclusions : pandas.DataFrame
    manifest : dict
        ``run.json``, with ``specification`` and ``estimation`` (conventions, per measure).
    sample : pandas.DataFrame
        The estimation sample when asked for (``levgap.sample``), else empty.
    """

    coefficients: pd.DataFrame
    model_fit: pd.DataFrame
    exclusions: pd.DataFrame
    manifest: dict[str, Any]
    sample: pd.DataFrame = field(default_factory=pd.DataFrame)

    def tables(self) -> dict[str, pd.DataFrame]:
        """The tables by file stem."""
        out = {"coefficients": self.coefficients, "model_fit": self.model_fit,
               "exclusions": self.exclusions}
        if self.sample.shape[1]:
            out["sample"] = self.sample
        return out

    def write(self, out_dir: str | Path, *, fmt: str = "csv", force: bool = False,
              inputs: tuple[str, ...] = ()) -> list[Path]:
        """Write the tables and ``run.json`` as one run (``levgap.report.tables``)."""
        from levgap.report.tables import write_tables

        sources = inputs or tuple(i["path"] for i in self.manifest.get("inputs", [])
                                  if isinstance(i, dict) and i.get("path"))
        return write_tables(self.tables(), self.manifest, out_dir, fmt=fmt, force=force,
                            inputs=sources)

    def _repr_html_(self) -> str:
        return self.coefficients.to_html(index=False, float_format=lambda v: f"{v:.4f}")


def estimate(
    panel: Panel | pd.DataFrame,
    *,
    config: RunConfig | None = None,
    spec: ModelSpec | None = None,
    sample: bool = False,
    progress: Callable[[str, int, int], None] | None = None,
) -> Estimation:
    """Estimate one specification for the estimation table (see the module docstring).

    Parameters
    ----------
    panel : Panel or pandas.DataFrame
        A panel from :func:`levgap.read_panel`, or a data frame in schema v1.
    config : RunConfig, optional
    spec : ModelSpec, optional
        Overrides ``config.model``.
    sample : bool, default=False
        Also return the estimation sample.
    progress : callable, optional
        ``progress(stage, done, total)`` during a pooled model's cross-fit.

    Returns
    -------
    Estimation
    """
    from levgap.pipeline import _inputs, context, measure_rows

    config, panel = _inputs(panel, config, spec)
    spec = config.model
    ledger = [panel.exclusions]
    base = context(build_features(panel.data, spec), spec, panel.source, ledger)
    notes = [*panel.warnings, *base.feats.notes]
    kind = estimator_kind(spec)
    coefs, fits, info, used = [], [], {}, {}
    for measure in spec.measures:
        ctx = measure_context(base, measure)
        rows = measure_rows(ctx, measure, ledger, notes)
        if rows is None:
            continue
        used[measure] = rows
        y = ctx.feats.frame[measure].to_numpy(dtype=float)[rows]
        step = (lambda d, t, m=measure: progress(f"cross-fit {m}", d, t)) if progress else None
        label, tidy, fit_row, extra = _ESTIMATORS[kind](ctx, rows, y, measure, spec, step)
        notes += [f"{measure}: {n}" for n in extra.pop("notes", ())]
        coefs.append(_coef_frame(tidy, measure, label))
        fits.append({"measure": measure, "model": label, "n_obs": int(len(rows)),
                     "n_firms": int(np.count_nonzero(np.bincount(ctx.firm[rows]))),
                     "n_industries": int(np.count_nonzero(np.bincount(ctx.industry[rows]))),
                     **fit_row})
        info[measure] = extra
    if not coefs:
        raise ModelError(f"{panel.source}: at least one measure must be estimable; got none "
                         f"({' '.join(notes)}).")
    exclusions = concat_ledger(ledger)
    manifest = build_manifest(panel, config, base.feats, base.feats.frame, exclusions, notes)
    manifest["specification"] = specification_record(base, spec, kind, coefs[0]["model"][0],
                                                     used=used)
    manifest["estimation"] = info
    out_sample = pd.DataFrame()
    if sample:
        from levgap.sample import sample_frame

        out_sample = sample_frame(base.feats, used)
    return Estimation(
        coefficients=pd.concat(coefs, ignore_index=True),
        model_fit=pd.DataFrame(fits).reindex(columns=list(FIT_COLUMNS)),
        exclusions=exclusions, manifest=manifest, sample=out_sample)


def estimator_kind(spec: ModelSpec) -> str:
    """``within`` (pooled with firm effects), ``fama-macbeth`` or ``pooled``."""
    if spec.estimator == "fama-macbeth":
        return "fama-macbeth"
    return "within" if "firm" in spec.absorbs else "pooled"


def _coef_frame(tidy: dict[str, np.ndarray], measure: str, label: str) -> pd.DataFrame:
    df = pd.DataFrame(tidy)
    df = df[df["term"] != "const"].reset_index(drop=True)
    df.insert(0, "model", label)
    df.insert(0, "measure", measure)
    extra = [c for c in df.columns if c not in COEF_COLUMNS]
    return with_signs(df[[*COEF_COLUMNS, *extra]])


def _clusters(ctx: Any, rows: np.ndarray, spec: ModelSpec) -> tuple[np.ndarray, ...]:
    return {"firm": (ctx.firm[rows],), "firm-year": (ctx.firm[rows], ctx.year[rows]),
            "industry": (ctx.industry[rows],)}[spec.cluster]


def _within(ctx: Any, rows: np.ndarray, y: np.ndarray, measure: str, spec: ModelSpec,
            step: Any) -> tuple[str, dict[str, np.ndarray], dict[str, Any], dict[str, Any]]:
    from levgap.models.within import fit_within

    year = ctx.year[rows] if "year" in spec.absorbs else None
    est: Estimates = fit_within(y, ctx.X[rows], firm=ctx.firm[rows], year=year,
                                clusters=_clusters(ctx, rows, spec), names=ctx.feats.drivers)
    return "within", est.tidy(), {"r2": est.r2}, {
        **est.info, "notes": est.notes,
        "convention": "least squares with absorbed firm (and year) effects; clustered "
        "errors with the factor G/(G-1)(N-1)/(N-P), P not counting firm effects nested in "
        "the clusters (Stata's xtreg, fe convention)"}


def _famamacbeth(ctx: Any, rows: np.ndarray, y: np.ndarray, measure: str, spec: ModelSpec,
                 step: Any) -> tuple[str, dict[str, np.ndarray], dict[str, Any],
                                     dict[str, Any]]:
    from levgap.models.famamacbeth import fit_famamacbeth

    industry = ctx.level[rows] if "industry" in spec.absorbs else None
    est = fit_famamacbeth(y, ctx.X[rows], year=ctx.years[ctx.year[rows]], industry=industry,
                          firm=ctx.firm[rows], names=ctx.feats.drivers, nw_lags=spec.nw_lags,
                          errors=spec.fm_errors)
    info = {k: v for k, v in est.info.items() if k != "slopes"}
    return "fama-macbeth", est.tidy(), {"r2": est.r2}, {
        **info, "slopes": est.info["slopes"], "notes": est.notes,
        "convention": f"std_error is the {spec.fm_errors} standard error of the mean slope; "
        f"Newey-West lags {info['lag_rule']}"}


def _pooled(ctx: Any, rows: np.ndarray, y: np.ndarray, measure: str, spec: ModelSpec,
            step: Any) -> tuple[str, dict[str, np.ndarray], dict[str, Any], dict[str, Any]]:
    from levgap.models import MODELS
    from levgap.pipeline import estimate as fit_and_crossfit

    est = fit_and_crossfit(MODELS[spec.model], ctx, rows, measure, spec, step)
    resid = y - est.cf.target
    tss = float(((y - y.mean()) ** 2).sum())
    return spec.model, est.full.tidy(), {
        "r2": est.full.r2,
        "r2_oos": 1.0 - float(resid @ resid) / tss if tss > 0 else float("nan"),
        "rmse_oos": float(np.sqrt(np.mean(resid**2)))}, {
        "notes": est.full.notes, "n_clusters": list(est.full.n_clusters),
        "year_effects": bool(np.any(year_codes(spec, ctx.year[rows])))}


_ESTIMATORS: dict[str, Callable[..., tuple[str, dict[str, np.ndarray], dict[str, Any],
                                           dict[str, Any]]]] = {
    "within": _within, "fama-macbeth": _famamacbeth, "pooled": _pooled,
}


def sample_of(panel: Panel | pd.DataFrame, config: RunConfig | None = None) -> pd.DataFrame:
    """The estimation sample a configuration would fit on, without fitting
    (``levgap describe``): the rows of each measure after the exclusions, as
    :func:`levgap.sample.sample_frame` lays them out."""
    from levgap.pipeline import _inputs, context, measure_rows
    from levgap.sample import sample_frame

    config, panel = _inputs(panel, config, None)
    spec = config.model
    base = context(build_features(panel.data, spec), spec, panel.source, [panel.exclusions])
    used, notes = {}, []
    for measure in spec.measures:
        rows = measure_rows(measure_context(base, measure), measure, [], notes)
        if rows is not None:
            used[measure] = rows
    if not used:
        raise ModelError(f"{panel.source}: at least one measure must have rows; got none "
                         f"({' '.join(notes)}).")
    return sample_frame(base.feats, used)
