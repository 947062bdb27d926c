"""``analyze``: panel in, targets, gaps and driver contributions out (in memory, no file I/O)."""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import replace
from typing import Any

import numpy as np
import pandas as pd

from levgap.analysis import (
    COEF_COLUMNS,
    FIT_COLUMNS,
    TARGET_COLUMNS,
    Analysis,
    ProgressFn,
)
from levgap.attribution import attribute_gap, peer_profile
from levgap.config import ModelSpec, RunConfig
from levgap.errors import ConfigError, ModelError
from levgap.features import Features, build_features
from levgap.manifest import build_manifest
from levgap.models import MODELS
from levgap.models.crossfit import assign_folds, crossfit_targets
from levgap.models.linear import Borrow
from levgap.panel import EXCLUSION_COLUMNS, Panel

MAD_TO_SD = 1.4826  # scale of the median absolute deviation under normality (common practice)


def analyze(
    panel: Panel | pd.DataFrame,
    *,
    config: RunConfig | None = None,
    spec: ModelSpec | None = None,
    progress: ProgressFn | None = None,
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

    Returns
    -------
    Analysis
    """
    config = config or RunConfig()
    if spec is not None:
        config = replace(config, model=spec)
    spec = config.model
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
    feats = build_features(panel.data, spec)
    fit_fn = MODELS[spec.model]
    frame = feats.frame
    X_all = frame[list(feats.drivers)].to_numpy(dtype=float)
    ledger = [panel.exclusions]
    if spec.lag_drivers:
        no_prior = np.isnan(X_all).any(axis=1)
        ledger.append(_row_ledger(frame, no_prior, "", "no_prior_year",
                                  "lagged drivers need the firm's previous fiscal year"))
        frame, X_all = frame.loc[~no_prior].reset_index(drop=True), X_all[~no_prior]
        feats = replace(feats, frame=frame)
        if len(frame) == 0:
            raise ModelError(f"{panel.source}: lagged drivers need firms observed in two "
                             "consecutive fiscal years; got none.")

    year_codes, years = pd.factorize(frame["fiscal_year"], sort=True)
    peer_codes, _ = pd.factorize(frame["peer_group"], sort=True)
    eff_codes, eff_parent, members, n_large = _effect_codes(frame, feats)
    firm_codes, _ = pd.factorize(frame["firm_id"], sort=True)
    ind_codes, _ = pd.factorize(frame["industry"], sort=True)

    pg_year = peer_codes.astype(np.int64) * len(years) + year_codes
    _check_finite(X_all, feats.drivers, panel.source)
    if spec.year is not None and spec.year not in set(years):
        raise ConfigError(
            f"--year must be a fiscal year of the panel; got {spec.year}. The panel has "
            f"{int(years.min())}-{int(years.max())}."
        )

    targets, drivers, coefs, fits = [], [], [], []
    warnings = [*panel.warnings, *feats.notes]
    for measure in spec.measures:
        y_all = frame[measure].to_numpy(dtype=float)
        use = np.isfinite(y_all)
        if measure == "market" and (~use).any():
            ledger.append(_measure_ledger(frame, ~use, measure))
        if use.sum() == 0:
            warnings.append(f"{measure}: no row has the data this measure needs; skipped.")
            continue
        rows = np.flatnonzero(use)
        y, X = y_all[rows], X_all[rows]
        effects = [eff_codes[rows], year_codes[rows]]
        borrow = [Borrow(parent=eff_parent[rows], members=members), None]
        n_levels = [n_large, len(years)]
        clusters = _clusters(spec.cluster, firm_codes[rows], year_codes[rows], ind_codes[rows])
        full = fit_fn(y, X, effects=effects, borrow=borrow, n_levels=n_levels,
                      clusters=clusters, names=feats.drivers)
        folds = assign_folds(firm_codes[rows], np.where(eff_codes[rows] >= 0, eff_codes[rows],
                                                        n_large + eff_parent[rows]),
                             spec.folds, spec.seed)
        step = (lambda d, t, m=measure: progress(f"cross-fit {m}", d, t)) if progress else None
        cf = crossfit_targets(fit_fn, y, X, effects=effects, borrow=borrow, n_levels=n_levels,
                              folds=folds, names=feats.drivers, progress=step)
        # Peers: the firm's industry in that year, without the firm; else the industries its
        # industry borrows its effect from; else the whole year. Only rows with this measure.
        levels = _peer_levels(eff_codes[rows], eff_parent[rows], members, pg_year[rows],
                              year_codes[rows])
        base, peer_n, _ = peer_profile(np.column_stack([X, y]), levels)
        X_peer, peer_med = base[:, :-1], base[:, -1]
        attr = attribute_gap(X, X_peer, cf.beta, cf.offset, cf.target)

        resid = y - cf.target
        a = (1.0 - spec.coverage) / 2.0
        q_lo, q_hi = np.quantile(resid, [a, 1.0 - a])
        scale = MAD_TO_SD * np.median(np.abs(resid - np.median(resid)))
        gap = y - cf.target
        band_low, band_high = cf.target + q_lo, cf.target + q_hi
        # Status as codes into STATUS. The output frames are assembled once, after the loop,
        # gathering text columns from the frame's own arrays (no Python string objects, no
        # concatenation of ten-million-row frames).
        status = np.where(y > band_high, 2, np.where(y < band_low, 0, 1))
        money = frame[["total_debt", "total_assets", "market_equity", "book"]].iloc[rows]
        keep: Any = (slice(None) if spec.year is None
                     else frame["fiscal_year"].to_numpy()[rows] == spec.year)
        gap_z = gap / scale if scale > 0 else np.full(len(y), np.nan)
        targets.append(
            {
                "rows": rows[keep],
                "measure": measure,
                "actual": y[keep],
                "target": cf.target[keep],
                "gap": gap[keep],
                "gap_z": gap_z[keep],
                "band_low": band_low[keep],
                "band_high": band_high[keep],
                "status": status[keep],
                "peer_median": peer_med[keep],
                "peer_count": peer_n[keep],
                "peer_target": attr.peer_target[keep],
                "debt_to_target": _debt_to_target(measure, money, cf.target)[keep],
            }
        )
        drivers.append(
            {
                "rows": rows[keep],
                "measure": measure,
                "firm_value": X[keep],
                "peer_value": X_peer[keep],
                "contribution": attr.contributions[keep],
            }
        )
        coefs.append(_coef_frame(full, measure, spec.model))
        tss = float(((y - y.mean()) ** 2).sum())
        fits.append(
            {
                "measure": measure,
                "model": spec.model,
                "n_obs": int(len(y)),
                "n_firms": int(np.count_nonzero(np.bincount(firm_codes[rows]))),
                "n_industries": int(np.count_nonzero(np.bincount(ind_codes[rows]))),
                "r2": full.r2,
                "r2_oos": 1.0 - float(resid @ resid) / tss if tss > 0 else float("nan"),
                "rmse_oos": float(np.sqrt(np.mean(resid**2))),
            }
        )

    if not targets:
        raise ModelError(
            f"{panel.source}: at least one measure must be estimable; got none "
            f"({' '.join(warnings)})."
        )
    targets_df = _targets_frame(frame, targets)
    drivers_df = _drivers_frame(frame, drivers, feats.drivers)
    exclusions = _concat_ledger(ledger)
    manifest = build_manifest(panel, config, feats, frame, exclusions, warnings)
    return Analysis(
        targets=targets_df,
        drivers=drivers_df,
        coefficients=pd.concat(coefs, ignore_index=True),
        model_fit=pd.DataFrame(fits, columns=list(FIT_COLUMNS)),
        exclusions=exclusions,
        manifest=manifest,
    )


def _effect_codes(
    frame: pd.DataFrame, feats: Features
) -> tuple[np.ndarray, np.ndarray, np.ndarray, int]:
    """Codes of large groups, parent ids of borrowing rows, and parents' member matrix."""
    borrowed = feats.borrowed
    small = set(borrowed["industry"].astype(str))
    peer = frame["peer_group"].astype(str).to_numpy()
    # Factorise once (hashing) rather than sort and search a million strings.
    peer_codes, labels = pd.factorize(peer, sort=True)
    labels = np.asarray(labels, dtype=object)
    small_label = np.isin(labels, list(small)) if small else np.zeros(len(labels), dtype=bool)
    large_labels = labels[~small_label]
    remap = np.full(len(labels), -1, dtype=np.int64)
    remap[~small_label] = np.arange(len(large_labels))
    codes = remap[peer_codes]
    parents = sorted(set(borrowed["borrowed_from"])) if len(borrowed) else []
    members = np.zeros((max(len(parents), 1), len(large_labels)), dtype=bool)
    parent_of = np.full(len(peer), -1, dtype=np.int64)
    for _, row in borrowed.iterrows():  # one row per small industry, a handful
        pid = parents.index(row["borrowed_from"])
        names = [m for m in str(row["members"]).split(";") if m]
        members[pid, np.searchsorted(large_labels, names)] = True
        parent_of[peer == row["industry"]] = pid
    if len(large_labels) == 0:
        raise ModelError("the panel needs at least one industry with its own effect.")
    return codes, parent_of, members, len(large_labels)


def _peer_levels(
    eff_codes: np.ndarray,
    eff_parent: np.ndarray,
    members: np.ndarray,
    pg_year: np.ndarray,
    year: np.ndarray,
) -> list[list[tuple[np.ndarray | None, np.ndarray]]]:
    own = eff_codes >= 0
    parents = []
    for pid in np.unique(eff_parent[eff_parent >= 0]):
        in_members = own & members[pid, np.where(own, eff_codes, 0)]
        parents.append((in_members | (eff_parent == pid), year))
    return [[(None, pg_year)], parents, [(None, year)]]


def _check_finite(X: np.ndarray, names: tuple[str, ...], source: str) -> None:
    bad = ~np.isfinite(X)
    if bad.any():
        cols = [names[j] for j in np.flatnonzero(bad.any(axis=0))]
        raise ModelError(
            f"{source}: every driver must have a finite value on every row; got missing or "
            f"infinite values in {', '.join(cols)} on {int(bad.any(axis=1).sum())} rows. "
            "Remove those drivers from [model] drivers in the run configuration."
        )


def _clusters(kind: str, firm: np.ndarray, year: np.ndarray, industry: np.ndarray) -> tuple:
    return {
        "firm": (firm,),
        "firm-year": (firm, year),
        "industry": (industry,),
    }[kind]


def _measure_ledger(frame: pd.DataFrame, mask: np.ndarray, measure: str) -> pd.DataFrame:
    return _row_ledger(frame, mask, measure, "no_market_equity",
                       "market leverage needs market_equity (or shares_outstanding and "
                       "share_price); the row is used for book leverage only")


def _row_ledger(
    frame: pd.DataFrame, mask: np.ndarray, measure: str, reason: str, detail: str
) -> pd.DataFrame:
    sub = frame.loc[mask]
    return pd.DataFrame(
        {
            "source_row": sub["source_row"].to_numpy(dtype=np.int64),
            "firm_id": sub["firm_id"].to_numpy(),
            "fiscal_year": sub["fiscal_year"].to_numpy(),
            "measure": measure,
            "reason": reason,
            "detail": detail,
        }
    )


def _concat_ledger(parts: list[pd.DataFrame]) -> pd.DataFrame:
    parts = [p for p in parts if len(p)]
    if not parts:
        from levgap.panel import empty_exclusions

        return empty_exclusions()
    out = pd.concat([p.reindex(columns=list(EXCLUSION_COLUMNS)) for p in parts],
                    ignore_index=True)
    out["measure"] = out["measure"].fillna("").astype(str)
    return out.sort_values(["source_row", "measure"], kind="stable", ignore_index=True)


def _debt_to_target(measure: str, sub: pd.DataFrame, target: np.ndarray) -> np.ndarray:
    debt = sub["total_debt"].to_numpy(dtype=float)
    if measure == "book":
        # a target below zero asks for no debt at all, not for negative debt
        wanted = np.maximum(target, 0.0) * sub["total_assets"].to_numpy(dtype=float)
        return wanted - debt
    equity = sub["market_equity"].to_numpy(dtype=float)
    with np.errstate(divide="ignore", invalid="ignore"):
        wanted = np.where(target < 1.0, target * equity / (1.0 - target), np.nan)
    return np.where(target < 0.0, -debt, wanted - debt)


STATUS = ("under", "within", "over")


def _labels(values: Sequence[str]) -> Any:
    """Text labels as the array type pandas gives a text column, to ``take`` from."""
    return pd.Series(np.array(list(values), dtype=object)).array


def _targets_frame(frame: pd.DataFrame, parts: list[dict[str, Any]]) -> pd.DataFrame:
    # Each part's arrays are released as soon as they are gathered (pop), and the frame takes
    # the gathered arrays without another copy: the peak stays near the size of the output.
    rows = np.concatenate([p.pop("rows") for p in parts]).astype(np.intp)
    which = np.repeat(np.arange(len(parts), dtype=np.int32),
                      [len(p["actual"]) for p in parts])
    cols: dict[str, Any] = {}
    for c in TARGET_COLUMNS:
        if c in ("firm_id", "firm_name", "industry", "flags"):
            cols[c] = frame[c].array.take(rows)
        elif c == "fiscal_year":
            cols[c] = frame[c].to_numpy()[rows]
        elif c == "measure":
            cols[c] = _labels([p["measure"] for p in parts]).take(which)
        elif c == "status":
            cols[c] = _labels(STATUS).take(np.concatenate([p.pop("status") for p in parts]))
        else:
            cols[c] = np.concatenate([p.pop(c) for p in parts])
    return pd.DataFrame(cols, copy=False)


def _drivers_frame(
    frame: pd.DataFrame, parts: list[dict[str, Any]], names: tuple[str, ...]
) -> pd.DataFrame:
    k = len(names)
    sizes = [len(p["rows"]) for p in parts]
    # 32-bit gather indices: ten million of them are 40 MB instead of 80.
    index = np.int32 if len(frame) < 2**31 else np.intp
    long_rows = np.repeat(np.concatenate([p.pop("rows") for p in parts]).astype(index), k)
    cols: dict[str, Any] = {
        "firm_id": frame["firm_id"].array.take(long_rows),
        "fiscal_year": frame["fiscal_year"].to_numpy()[long_rows],
    }
    del long_rows
    which = np.repeat(np.arange(len(parts), dtype=np.int32), [s * k for s in sizes])
    cols["measure"] = _labels([p["measure"] for p in parts]).take(which)
    del which
    cols["driver"] = _labels(names).take(np.tile(np.arange(k, dtype=np.int32), sum(sizes)))
    for c in ("firm_value", "peer_value", "contribution"):
        cols[c] = np.concatenate([p.pop(c).reshape(-1) for p in parts])
    return pd.DataFrame(cols, copy=False)


def _coef_frame(fit: Any, measure: str, model: str) -> pd.DataFrame:
    tidy = fit.tidy()
    df = pd.DataFrame(tidy)
    df = df[df["term"] != "const"]
    df.insert(0, "model", model)
    df.insert(0, "measure", measure)
    return df.reset_index(drop=True)[list(COEF_COLUMNS)]


