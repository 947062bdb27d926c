"""``analyze``: panel in, targets, gaps and driver contributions out (in memory, no file I/O).

The stages, each a function below: features (``levgap.features``) -> fit and cross-fit
(:func:`estimate`) -> band (:func:`band_stage`) -> attribution (:func:`attribute`) -> tables
(``levgap.frames``) and the saved model (``levgap.models.saved``). ``analyze`` picks the fit
function from ``levgap.models.MODELS`` and never branches on the model's name.
"""

from __future__ import annotations

from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass, replace
from typing import Any

import numpy as np
import pandas as pd

from levgap import band as bands
from levgap.analysis import FIT_COLUMNS, Analysis, ProgressFn
from levgap.attribution import attribute_gap, peer_profile
from levgap.codes import MEASURE_REASONS
from levgap.config import ModelSpec, RunConfig
from levgap.errors import ConfigError, ModelError
from levgap.features import Features, build_features
from levgap.frames import (
    coef_frame,
    concat_ledger,
    drivers_frame,
    fold_coef_frame,
    row_ledger,
    targets_frame,
)
from levgap.history import history_arrays
from levgap.industries import run_industry_names
from levgap.manifest import build_manifest
from levgap.models import MODELS
from levgap.models.crossfit import CrossFit, assign_folds, crossfit_targets
from levgap.models.design import Pooling
from levgap.models.pooling import Components, estimate_components, hard, penalised
from levgap.models.result import Fit
from levgap.models.saved import measure_record, saved_record
from levgap.panel import Panel
from levgap.peers import LISTED, basis_flags, listed_profile, peer_list_notes
from levgap.peers import partitions as peer_partitions
from levgap.recap import RECAP_FLAGS, debt_to_target
from levgap.specification import (
    measure_context,
    missing_drivers,
    require_targets,
    specification_record,
    year_codes,
)

COVERAGE_MIN_ROWS = 100  # industries with at least this many firm-years in the coverage range



@dataclass(frozen=True, slots=True)
class Context:
    """Codes shared by every measure's fit."""

    feats: Features
    X: np.ndarray
    level: np.ndarray  # industry level code of each row (the effect's)
    peer: np.ndarray  # peer-group code of each row (the attribution's)
    year: np.ndarray  # fiscal-year code of each row
    years: np.ndarray  # fiscal-year labels
    firm: np.ndarray  # firm code of each row
    industry: np.ndarray  # code of the industry as given (for counts)


@dataclass(frozen=True, slots=True)
class Estimate:
    """Fit and cross-fit of one measure."""

    full: Fit
    cf: CrossFit
    components: Components | None
    target_full: np.ndarray


def analyze(
    panel: Panel | pd.DataFrame,
    *,
    config: RunConfig | None = None,
    spec: ModelSpec | None = None,
    progress: ProgressFn | None = None,
    sample: bool = False,
) -> Analysis:
    """Estimate targets, gaps, bands and driver contributions for every firm-year.

    Parameters
    ----------
    panel : Panel or pandas.DataFrame
        A panel from :func:`levgap.read_panel`, or a data frame in schema v1 (validated here).
    config : RunConfig, optional
        Run configuration; default settings when absent.
    spec : ModelSpec, optional
        Overrides ``config.model``.
    progress : callable, optional
        ``progress(stage, done, total)``, called as the cross-fit proceeds.
    sample : bool, default=False
        Also return the estimation sample (``Analysis.sample``, ``levgap.sample``).

    Returns
    -------
    Analysis
    """
    config, panel = _inputs(panel, config, spec)
    spec = config.model
    require_targets(spec)
    ledger = [panel.exclusions]
    parents = {k: v.parent for k, v in config.industries.items() if v.parent}
    ctx = context(build_features(panel.data, spec, parents=parents), spec, panel.source, ledger)
    fit_fn = MODELS[spec.model]
    targets, drivers, coefs, folds, fits, records, used = [], [], [], [], [], {}, {}
    notes = [*panel.warnings, *ctx.feats.notes]
    base = ctx
    for measure in spec.measures:
        ctx = measure_context(base, measure)
        rows = measure_rows(ctx, measure, ledger, notes)
        if rows is None:
            continue
        used[measure] = rows
        step = (lambda d, t, m=measure: progress(f"cross-fit {m}", d, t)) if progress else None
        est = estimate(fit_fn, ctx, rows, measure, spec, step)
        y = ctx.feats.frame[measure].to_numpy(dtype=float)[rows]
        band, low, high = band_stage(y, est, ctx.level[rows], ctx, spec)
        attr = attribute(ctx, rows, y, est, config.peers, spec.min_peers)
        notes += [f"{measure}: {n}" for n in est.full.notes]
        part = _target_part(ctx, rows, measure, y, est, band, low, high, attr, spec)
        targets.append(part)
        drivers.append({"rows": part["rows"], "measure": measure,
                        "firm_value": ctx.X[rows][part["keep"]],
                        "raw_value": raw_values(ctx, rows[part["keep"]]),
                        "peer_value": attr["X_peer"][part["keep"]],
                        "contribution": attr["contributions"][part["keep"]]})
        del part["keep"]
        coefs.append(coef_frame(est.full, measure, spec.model))
        folds.append(fold_coef_frame(est.cf.fits, est.cf.fold_ids, measure, spec.model))
        fits.append(_fit_row(fit_fn, ctx, rows, measure, y, est, band, low, high, spec))
        records[measure] = measure_record(est, band, ctx, rows, y, attr["method"])
    if not targets:
        raise ModelError(f"{panel.source}: at least one measure must be estimable; got none "
                         f"({' '.join(notes)}).")
    exclusions = concat_ledger(ledger)
    notes += peer_list_notes(config.peers, ctx.feats.frame["firm_id"])
    manifest = build_manifest(panel, config, ctx.feats, ctx.feats.frame, exclusions, notes,
                              records)
    manifest["specification"] = specification_record(base, spec, "pooled", used=used)
    manifest["industry_names"] = run_industry_names(ctx.feats, config)
    saved = saved_record(ctx, spec, records, manifest)
    saved["peer_lists"] = {k: list(v) for k, v in config.peers.items()}
    extra = {}
    if sample:
        from levgap.sample import sample_frame

        extra["sample"] = sample_frame(base.feats, used)
    return Analysis(**extra,
        targets=targets_frame(ctx.feats.frame, targets),
        drivers=drivers_frame(ctx.feats.frame, drivers, ctx.feats.drivers),
        coefficients=pd.concat(coefs, ignore_index=True),
        model_fit=pd.DataFrame(fits, columns=list(FIT_COLUMNS)),
        exclusions=exclusions,
        fold_coefficients=pd.concat(folds, ignore_index=True),
        manifest=manifest,
        saved_model=saved,
    )


def _inputs(
    panel: Panel | pd.DataFrame, config: RunConfig | None, spec: ModelSpec | None
) -> tuple[RunConfig, Panel]:
    from levgap.ingest.lists import load_references

    config = load_references(config or RunConfig())
    if spec is not None:
        config = replace(config, model=spec)
    if not isinstance(panel, Panel):
        from levgap.ingest import validate_panel

        panel = validate_panel(panel, config=config)
    if len(panel.data) == 0:
        reasons = panel.exclusions["reason"].value_counts()
        top = ", ".join(f"{r} ({n})" for r, n in reasons.head(3).items())
        raise ModelError(
            f"{panel.source}: the panel must keep at least one usable row; got none "
            f"({top or 'no data rows'}). Run `levgap check PANEL --ledger ledger.csv` to see "
            "each row's reason."
        )
    if config.model.model not in MODELS:
        raise ConfigError(f"model must be one of {sorted(MODELS)}; got {config.model.model!r}.")
    return config, panel


# -- stage: features and codes -----------------------------------------------------------


def context(feats: Features, spec: ModelSpec, source: str, ledger: list) -> Context:
    """Drop rows without lagged drivers (ledgered), check drivers, factorise the codes."""
    frame = feats.frame
    X = frame[list(feats.drivers)].to_numpy(dtype=float)
    drop = np.zeros(len(frame), dtype=bool)
    if spec.lag_drivers:
        drop = ~frame["has_prior_year"].to_numpy(dtype=bool)
        ledger.append(row_ledger(frame, drop, "", "no_prior_year",
                                 "lagged drivers need the firm's previous fiscal year"))
    for _, mask, why in missing_drivers(frame, feats.drivers, spec):
        mask &= ~drop
        ledger.append(row_ledger(frame, mask, "", "driver_missing", why))
        drop |= mask
    if drop.any():
        frame, X = frame.loc[~drop].reset_index(drop=True), X[~drop]
        if len(frame) == 0:
            raise ModelError(f"{source}: every row lacks a driver it needs (lagged drivers "
                             "need the firm's previous fiscal year; see the exclusions).")
        levels = replace(feats.levels, codes=feats.levels.codes[~drop])
        feats = replace(feats, frame=frame, levels=levels)
    bad = ~np.isfinite(X)
    if bad.any():
        cols = [feats.drivers[j] for j in np.flatnonzero(bad.any(axis=0))]
        raise ModelError(
            f"{source}: every driver must have a finite value on every row; got missing or "
            f"infinite values in {', '.join(cols)} on {int(bad.any(axis=1).sum())} rows. "
            "Remove those drivers from [model] drivers in the run configuration.")
    year, years = pd.factorize(frame["fiscal_year"], sort=True)
    if spec.year is not None and spec.year not in set(years):
        raise ConfigError(f"--year must be a fiscal year of the panel; got {spec.year}. The "
                          f"panel has {int(years.min())}-{int(years.max())}.")
    return Context(feats=feats, X=X, level=feats.levels.codes,
                   peer=pd.factorize(frame["peer_group"], sort=True)[0].astype(np.int64),
                   year=year.astype(np.int64),
                   years=np.asarray(years),
                   firm=pd.factorize(frame["firm_id"], sort=True)[0].astype(np.int64),
                   industry=pd.factorize(frame["industry"], sort=True)[0].astype(np.int64))


def measure_rows(ctx: Context, measure: str, ledger: list, notes: list) -> np.ndarray | None:
    """Rows with this measure; the others ledgered with their reason. None: skip it."""
    frame = ctx.feats.frame
    y = frame[measure].to_numpy(dtype=float)
    use = np.isfinite(y)
    reasons = {"no_market_equity": ~use}
    if measure == "market":
        zero = (frame["total_debt"].to_numpy() == 0) & (frame["market_equity"].to_numpy() == 0)
        reasons = {"no_market_equity": ~use & ~zero, "no_market_value": zero}
    if measure == "book":
        reasons = {"debt_above_assets_with_leases": y > 1.0}
        use &= y <= 1.0
    for reason, mask in reasons.items():
        if mask.any():
            ledger.append(row_ledger(frame, mask, measure, reason, MEASURE_REASONS[reason]))
    if not use.any():
        notes.append(f"{measure}: no row has the data this measure needs; skipped.")
        return None
    rows = np.flatnonzero(use)
    if np.ptp(y[rows]) == 0.0:
        notes.append(f"{measure}: every firm-year has the same {measure} leverage "
                     f"({y[rows][0]:.4g}); there is no variation to model, so it is skipped.")
        return None
    return rows


# -- stage: fit and cross-fit ------------------------------------------------------------


def estimate(
    fit_fn: Callable[..., Fit],
    ctx: Context,
    rows: np.ndarray,
    measure: str,
    spec: ModelSpec,
    progress: Callable[[int, int], None] | None,
) -> Estimate:
    """Full-sample fit (with pooled small industries) and the grouped cross-fit."""
    y = ctx.feats.frame[measure].to_numpy(dtype=float)[rows]
    X, level, firm = ctx.X[rows], ctx.level[rows], ctx.firm[rows]
    effects = [level, year_codes(spec, ctx.year[rows])]
    n_levels = [len(ctx.feats.levels.labels), len(ctx.years)]
    names = ctx.feats.drivers
    clusters = {"firm": (firm,), "firm-year": (firm, ctx.year[rows]),
                "industry": (ctx.industry[rows],)}[spec.cluster]
    structure = ctx.feats.levels.structure()
    components, pool_for = None, None
    if structure.small[level].any() and spec.pooling == "parent":
        def pool_for(train: np.ndarray | None) -> Pooling:
            return hard(structure)

    elif structure.small[level].any():
        first = fit_fn(y, X, effects=effects, n_levels=n_levels, names=names,
                       pooling=hard(structure), cov=False, check=True)
        fitted = first.predict(X, effects)
        components = estimate_components(first, y, fitted, level, firm,
                                         ctx.feats.levels.labels)

        def pool_for(train: np.ndarray | None) -> Pooling:
            sel = slice(None) if train is None else train
            return penalised(structure, components, level[sel], firm[sel])

    full = fit_fn(y, X, effects=effects, n_levels=n_levels, names=names, clusters=clusters,
                  pooling=pool_for(None) if pool_for else None)
    eta = full.offset(effects) + X @ full.coef[1:]
    folds = assign_folds(firm, level, spec.folds, spec.seed)
    cf = crossfit_targets(fit_fn, y, X, effects=effects, n_levels=n_levels, folds=folds,
                          names=names, pooling_for=pool_for, start=eta, progress=progress)
    return Estimate(full=full, cf=cf, components=components,
                    target_full=full.inverse_link(eta))


# -- stage: band -------------------------------------------------------------------------


def band_stage(
    y: np.ndarray, est: Estimate, level: np.ndarray, ctx: Context, spec: ModelSpec
) -> tuple[bands.Band, np.ndarray, np.ndarray]:
    """Band calibrated by industry on the cross-fitted residuals, and each row's limits."""
    band = bands.calibrate(y - est.cf.target, level, len(ctx.feats.levels.labels),
                           spec.coverage, spec.band_prior_rows)
    low, high = band.limits(est.cf.target, level)
    return band, low, high


# -- stage: attribution ------------------------------------------------------------------


def attribute(ctx: Context, rows: np.ndarray, y: np.ndarray, est: Estimate,
              lists: Mapping[str, Sequence[str]] | None = None,
              min_peers: int = 1) -> dict[str, Any]:
    """Peer profile and median (leave-one-out), peer target and exact contributions.

    Peers (``levgap.peers``): the firm's listed peers when it has a peer list; else its peer
    group in that year, without the firm; else the industries its industry is pooled toward,
    in that year; else the whole year; else every other firm-year of the panel; else none.
    Each fallback, a list without a match and fewer than ``min_peers`` peers are flagged.
    """
    lv = ctx.feats.levels
    parts = peer_partitions(ctx.level[rows], ctx.year[rows], ctx.peer[rows], len(ctx.years),
                            lv.members, lv.parent)
    X = ctx.X[rows]
    values = np.column_stack([X, y])
    base, count, used = peer_profile(values, parts)
    own, own_count, found, listed = listed_profile(
        ctx.feats.frame["firm_id"].to_numpy()[rows], ctx.year[rows], values, lists or {})
    base[found], count[found], used[found] = own[found], own_count[found], LISTED
    X_peer, peer_med = base[:, :-1], base[:, -1]
    has = used >= 0
    contributions = np.full(X.shape, np.nan)
    peer_target = np.full(len(rows), np.nan)
    attr = attribute_gap(X[has], X_peer[has], est.cf.beta[has], est.cf.offset[has],
                         est.cf.target[has], est.full.link)
    contributions[has], peer_target[has] = attr.contributions, attr.peer_target
    return {"X_peer": X_peer, "peer_median": peer_med, "peer_count": count,
            "peer_target": peer_target, "contributions": contributions,
            "method": attr.method,
            "flags": basis_flags(used, listed, found, count, min_peers)}


# -- stage: tables -----------------------------------------------------------------------


def _target_part(ctx: Context, rows: np.ndarray, measure: str, y: np.ndarray, est: Estimate,
                 band: bands.Band, low: np.ndarray, high: np.ndarray,
                 attr: dict[str, Any], spec: ModelSpec) -> dict[str, Any]:
    keep: Any = (slice(None) if spec.year is None
                 else ctx.feats.frame["fiscal_year"].to_numpy()[rows] == spec.year)
    target = est.cf.target
    gap = y - target
    status = bands.status_codes(y, low, high)
    hist = history_arrays(ctx.firm[rows], frame_years(ctx, rows), gap, status.astype(np.int64) - 1)
    frame = ctx.feats.frame
    debt, flag = debt_to_target(measure, frame["total_debt"].to_numpy()[rows],
                                frame["total_assets"].to_numpy()[rows],
                                frame["market_equity"].to_numpy()[rows], target)
    flags = {"industry_effect_from_parent": est.cf.from_parent, **attr["flags"],
             **{code: flag == code for code in RECAP_FLAGS}, **hist.pop("flags")}
    return {
        "rows": rows[keep], "keep": keep, "measure": measure, "actual": y[keep],
        "target": target[keep], "gap": gap[keep],
        "gap_z": bands.gap_z(gap, band.scale_of(ctx.level[rows]))[keep],
        "band_low": low[keep], "band_high": high[keep],
        "status": status[keep],
        "peer_median": attr["peer_median"][keep], "peer_count": attr["peer_count"][keep],
        "peer_target": attr["peer_target"][keep],
        "debt_to_target": debt[keep],
        "target_full": est.target_full[keep], "fold": est.cf.fold[keep],
        **{name: values[keep] for name, values in hist.items()},
        "extra_flags": {k: v[keep] for k, v in flags.items()},
    }


def frame_years(ctx: Context, rows: np.ndarray) -> np.ndarray:
    """Fiscal year of each of the rows."""
    return ctx.feats.frame["fiscal_year"].to_numpy()[rows]


def raw_values(ctx: Context, rows: np.ndarray) -> np.ndarray:
    """Each driver's value before winsorising, where winsorising changed it (else NaN); none
    for drivers left as built (``NOT_WINSORISED``: the industry median leverage, whose column
    differs by measure, and indicators)."""
    from levgap.definitions import NOT_WINSORISED

    frame = ctx.feats.frame
    out = np.full((len(rows), len(ctx.feats.drivers)), np.nan)
    for j, name in enumerate(ctx.feats.drivers):
        if name + "_raw" in frame and name not in NOT_WINSORISED:
            raw = frame[name + "_raw"].to_numpy(dtype=float)[rows]
            used = ctx.X[rows, j]
            clipped = np.isfinite(raw) & (raw != used)
            out[clipped, j] = raw[clipped]
    return out


def _fit_row(fit_fn: Callable[..., Fit], ctx: Context, rows: np.ndarray, measure: str,
             y: np.ndarray, est: Estimate, band: bands.Band, low: np.ndarray,
             high: np.ndarray, spec: ModelSpec) -> dict[str, Any]:
    resid = y - est.cf.target
    tss = float(((y - y.mean()) ** 2).sum())
    cov, cmin, cmax, n_big = bands.coverage_by_level(y, low, high, ctx.level[rows],
                                                     COVERAGE_MIN_ROWS)
    oot, oot_year = out_of_time(fit_fn, ctx, rows, measure, y, est, spec)
    return {
        "measure": measure, "model": spec.model, "n_obs": int(len(y)),
        "n_firms": int(np.count_nonzero(np.bincount(ctx.firm[rows]))),
        "n_industries": int(np.count_nonzero(np.bincount(ctx.industry[rows]))),
        "r2": est.full.r2,
        "r2_oos": 1.0 - float(resid @ resid) / tss if tss > 0 else float("nan"),
        "rmse_oos": float(np.sqrt(np.mean(resid**2))),
        "coverage": cov, "coverage_industry_min": cmin, "coverage_industry_max": cmax,
        "coverage_industries": n_big, "coverage_out_of_time": oot,
        "out_of_time_year": oot_year,
    }


def out_of_time(fit_fn: Callable[..., Fit], ctx: Context, rows: np.ndarray, measure: str,
                y: np.ndarray, est: Estimate, spec: ModelSpec) -> tuple[float, int | None]:
    """Coverage of the last fiscal year's rows by a model fitted without that year.

    The model is refitted on the earlier years (small industries pooled with the run's
    variance components), the last year's year effect carried forward from the latest earlier
    year; the band is calibrated on the earlier years' cross-fitted residuals. NaN when the
    panel has a single year."""
    year = ctx.year[rows]
    last = int(year.max())
    train = year < last
    if not train.any() or len(np.unique(ctx.firm[rows][train])) < 2:
        return float("nan"), None
    sub = rows[train]
    effects = [ctx.level[sub], year_codes(spec, ctx.year[sub])]
    pooling = None
    if est.components is not None:
        structure = ctx.feats.levels.structure()
        pooling = (hard(structure) if spec.pooling == "parent" else
                   penalised(structure, est.components, ctx.level[sub], ctx.firm[sub]))
    try:
        past = fit_fn(y[train], ctx.X[sub], effects=effects,
                      n_levels=[len(ctx.feats.levels.labels), len(ctx.years)],
                      names=ctx.feats.drivers, pooling=pooling, cov=False, check=False,
                      start=est.full.offset(effects) + ctx.X[sub] @ est.full.coef[1:])
    except ModelError:
        return float("nan"), None
    band = bands.calibrate(y[train] - est.cf.target[train], ctx.level[sub],
                           len(ctx.feats.levels.labels), spec.coverage, spec.band_prior_rows)
    test = rows[~train]
    target = past.predict(ctx.X[test], [ctx.level[test], year_codes(spec, ctx.year[test])])
    low, high = band.limits(target, ctx.level[test])
    inside = (y[~train] >= low) & (y[~train] <= high)
    return float(inside.mean()), int(ctx.years[last])
