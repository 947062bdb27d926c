"""The saved model (``model.json``): score firm-years that are not in the panel.

``analyze`` records, per measure, everything a new firm-year needs: the full-sample fit and
each cross-fit fold's fit (constant, slopes, every industry and year effect, the pooled small
industries with their parents and weights), the band (quantiles and industry scales), and the
peers' median driver profile and leverage by industry and year; and, for the run, the driver
transforms (winsorising limits by year, imputation medians by industry and year), the industry
levels, the specification, versions and the run id. :func:`load_model` reads it back;
:meth:`SavedModel.score` reproduces ``targets.csv``'s ``target_full`` for any firm-year of the
panel (the same code computes both) and, with ``fold``, its cross-fitted ``target``.
"""

from __future__ import annotations

from dataclasses import dataclass, fields
from pathlib import Path
from typing import TYPE_CHECKING, Any

import numpy as np
import pandas as pd

from levgap.band import STATUS, Band, gap_z, status_codes
from levgap.config import ModelSpec
from levgap.definitions import MEASURE_SPECIFIC
from levgap.errors import ModelError
from levgap.groups import WHOLE_SAMPLE
from levgap.models.record import FORMAT, FORMAT_VERSION, MODEL_FILE, read_model_record
from levgap.models.result import Fit
from levgap.transforms import DriverTransforms

if TYPE_CHECKING:
    from levgap.pipeline import Context, Estimate



# -- writing (called by the pipeline) ------------------------------------------------------


def measure_record(
    est: Estimate, band: Band, ctx: Context, rows: np.ndarray, y: np.ndarray, method: str
) -> dict[str, Any]:
    """Everything one measure's targets need, as JSON-able data."""
    frame = ctx.feats.frame
    fold_of_firm = dict(zip(frame["firm_id"].to_numpy()[rows].tolist(),
                            est.cf.fold.tolist(), strict=True))
    levels = ctx.feats.levels
    pooled = []
    if est.full.pooled is not None:
        w = est.full.pooled.weight
        for i in np.flatnonzero(levels.small):
            pooled.append({
                "industry": str(levels.labels[i]), "firms": int(levels.firms[i]),
                "rows": int(np.count_nonzero(ctx.level[rows] == i)),
                "parent": levels.parent_labels[levels.parent[i]],
                "weight": None if i >= len(w) or np.isnan(w[i]) else float(w[i]),
            })
    extra: dict[str, Any] = {}
    if "industry_median_leverage" in ctx.feats.drivers:
        from levgap.derived import saved_medians

        extra["industry_median"] = saved_medians(ctx.feats.frame, rows, y)
    return {
        **extra,
        "full": est.full.to_dict(),
        "folds": [{"fold": f, "fit": fit.to_dict()}
                  for f, fit in zip(est.cf.fold_ids, est.cf.fits, strict=True)],
        "fold_of_firm": fold_of_firm,
        "band": band.to_dict(),
        "components": None if est.components is None else est.components.as_dict(),
        "contributions": method,
        "pooled": pooled,
        "peers": _peer_table(ctx, rows, y),
    }


def _peer_table(ctx: Context, rows: np.ndarray, y: np.ndarray) -> dict[str, Any]:
    """Median driver profile and leverage (all firms) by industry and year, and by year."""
    frame = pd.DataFrame(ctx.X[rows], columns=list(ctx.feats.drivers))
    frame["leverage"] = y
    frame["industry"] = ctx.feats.frame["peer_group"].to_numpy(dtype=object)[rows]
    frame["fiscal_year"] = ctx.years[ctx.year[rows]].astype(np.int64)
    cols = [*ctx.feats.drivers, "leverage"]
    by = frame.groupby(["industry", "fiscal_year"], sort=True)
    med, cnt = by[cols].median(), by.size().to_numpy()
    keys = [f"{i}|{int(t)}" for i, t in med.index]
    values = med.to_numpy().tolist()
    by_year = frame.groupby("fiscal_year", sort=True)
    ymed, ycnt = by_year[cols].median(), by_year.size().to_numpy()
    return {
        "columns": cols,
        "industry_year": {k: [int(n), *v] for k, n, v in zip(keys, cnt, values, strict=True)},
        "year": {str(int(t)): [int(n), *v]
                 for t, n, v in zip(ymed.index, ycnt, ymed.to_numpy().tolist(), strict=True)},
    }


def saved_record(ctx: Context, spec: ModelSpec, records: dict[str, Any],
                 manifest: dict[str, Any]) -> dict[str, Any]:
    """The whole ``model.json`` (its ``run_id`` is stamped by the writer)."""
    return {
        "format": FORMAT,
        "format_version": FORMAT_VERSION,
        "levgap_version": manifest.get("levgap_version"),
        "schema_version": manifest.get("schema_version"),
        "run_id": manifest.get("run_id"),
        "model": spec.model,
        "spec": {f.name: (list(v) if isinstance(v := getattr(spec, f.name), tuple) else v)
                 for f in fields(spec)},
        "drivers": list(ctx.feats.drivers),
        "industries": ctx.feats.levels.to_dict(),
        "years": [int(t) for t in ctx.years],
        "transforms": ctx.feats.transforms.to_dict(),
        "measures": records,
    }


# -- reading and scoring -----------------------------------------------------------------


@dataclass(frozen=True, slots=True)
class SavedModel:
    """A fitted model read from ``model.json``; see :meth:`score`."""

    record: dict[str, Any]

    @property
    def model(self) -> str:
        return str(self.record["model"])

    @property
    def measures(self) -> tuple[str, ...]:
        return tuple(self.record["measures"])

    @property
    def drivers(self) -> tuple[str, ...]:
        return tuple(self.record["drivers"])

    @property
    def run_id(self) -> str | None:
        return self.record.get("run_id")

    @property
    def spec(self) -> ModelSpec:
        known = {f.name for f in fields(ModelSpec)}
        raw = {k: tuple(v) if isinstance(v, list) else v
               for k, v in self.record["spec"].items() if k in known}
        return ModelSpec(**raw)

    def fit(self, measure: str, fold: int | None = None) -> Fit:
        """The full-sample fit of a measure, or a cross-fit fold's."""
        m = self._measure(measure)
        if fold is None:
            return Fit.from_dict(m["full"])
        for f in m["folds"]:
            if int(f["fold"]) == int(fold):
                return Fit.from_dict(f["fit"])
        raise ModelError(f"fold must be one of the run's folds; got {fold}.")

    def band(self, measure: str) -> Band:
        """The calibrated band of a measure."""
        return Band.from_dict(self._measure(measure)["band"])

    def fold_of(self, measure: str, firm_id: str) -> int | None:
        """The cross-fit fold of a panel firm (None for a firm not in the panel)."""
        v = self._measure(measure)["fold_of_firm"].get(str(firm_id))
        return None if v is None else int(v)

    def _measure(self, measure: str) -> dict[str, Any]:
        try:
            return self.record["measures"][measure]
        except KeyError:
            raise ModelError(f"measure must be one of {list(self.measures)}; got "
                             f"{measure!r}.") from None

    def codes(self, industry: np.ndarray, year: np.ndarray) -> tuple[np.ndarray, np.ndarray,
                                                                      np.ndarray, np.ndarray]:
        """Level codes of industries (-1 for one the model never saw) and of years (the nearest
        earlier fitted year for a year it never saw), with masks of the unseen ones."""
        labels = self.record["industries"]["labels"]
        index = {lab: i for i, lab in enumerate(labels)}
        level = np.array([index.get(str(v), -1) for v in industry], dtype=np.int64)
        years = np.array(self.record["years"], dtype=np.int64)
        year = np.asarray(year, dtype=np.int64)
        pos = np.searchsorted(years, year, side="right") - 1
        new_year = (pos < 0) | (years[np.maximum(pos, 0)] != year)
        return level, np.maximum(pos, 0), level < 0, new_year

    def industry_effect(self, fit: Fit, industry: np.ndarray, level: np.ndarray) -> np.ndarray:
        """Industry effect of each row: the fit's, or for an industry the model never saw,
        the row-weighted mean effect of the saved industries sharing the longest leading part
        of its code (else of all of them)."""
        out = fit.effect_of(0, np.where(level >= 0, level, 0))
        unseen = np.flatnonzero(level < 0)
        if len(unseen) == 0:
            return out
        ind = self.record["industries"]
        labels, small = ind["labels"], np.array(ind["small"], dtype=bool)
        alpha, weight = fit.effects[0], fit.effect_weights[0]
        own = np.flatnonzero(~small[: len(alpha)] & ~np.isnan(alpha[: len(small)]))
        for i in unseen:
            code = str(industry[i])
            members = own
            if code.isdigit():
                for cut in range(len(code) - 1, 0, -1):
                    hit = [j for j in own if str(labels[j]).startswith(code[:cut])]
                    if hit:
                        members = np.array(hit)
                        break
            w = weight[members]
            out[i] = float(alpha[members] @ w / w.sum())
        return out

    def score(
        self,
        rows: pd.DataFrame,
        *,
        fold: int | str | None = None,
        peer_profile: pd.DataFrame | None = None,
    ) -> pd.DataFrame:
        """Targets, bands, status, gaps and contributions for firm-years in schema v1.

        Parameters
        ----------
        rows : pandas.DataFrame
            Firm-years under schema-v1 column names (money in the output's unit). A column
            named after a driver (``earnings_volatility``, say) overrides the computed raw
            value where it is not blank.
        fold : int, "firm" or None, default=None
            None: the full-sample fit. An int: that cross-fit fold's fit. ``"firm"``: each
            panel firm's own fold (full-sample fit for a firm not in the panel).
        peer_profile : pandas.DataFrame, optional
            One row per input row, a column per driver: the profile contributions are taken
            against. Default: the saved median profile of the row's industry and year.

        Returns
        -------
        pandas.DataFrame
            One row per input row and measure: ``firm_id, fiscal_year, industry, measure,
            actual, target, band_low, band_high, status, gap, gap_z, peer_target,
            peer_median, peer_count, fold, flags`` and, per driver, ``<driver>`` (the value
            used), ``<driver>_raw``, ``<driver>_peer`` and ``<driver>_contribution`` (the
            contributions sum to ``target - peer_target``). ``fold`` is -1 for the
            full-sample fit. A row whose values schema v1 refuses (total assets not a finite
            number > 0, a fiscal year that is blank, text or not whole, say), whose
            ``firm_id`` or ``industry`` is blank (as ``analyze`` reads it: ``""``, ``NA``,
            ``nan``, ``null``, ... or missing), whose input driver is blank or text (without
            ``lag_drivers``), or whose firm-year is given more than once (every copy) is
            returned blank with status ``""``, the flag ``not_scorable``, the rule it breaks
            in ``note`` and its identity (``firm_id``, ``fiscal_year``, ``industry``,
            ``fold``) as given; it takes no part in the other rows' features, so they are
            scored exactly as if it had not been given. A scored row without a target (a
            driver with no value, such as ``log_revenue`` without revenue above zero) has
            status ``""`` and its ``note`` names the driver. ``fiscal_year`` is int64 unless
            a refused row's year is blank or not whole (float64; a text year reads as blank), and
            ``peer_count`` is float64 when a row is refused. No rows: an empty frame with
            these columns.

        Raises
        ------
        ModelError
            ``rows`` is not a DataFrame or lacks a schema-v1 column or a column a driver
            needs (an input driver's column, say), or ``peer_profile`` has not one row per
            input row and a column per driver; as with the other columns a missing column
            refuses the call, while a refused value refuses only its row.
        """
        data = _schema_frame(rows)
        self._check_columns(data, peer_profile)
        inputs = () if self.spec.lag_drivers else tuple(
            d for d in self.spec.input_drivers if d in self.drivers)
        bad, notes = _unscorable(data, inputs)
        keep = np.flatnonzero(~bad)
        profile = None if peer_profile is None else peer_profile.iloc[keep]
        # the refused rows are left out before the features: nothing of theirs reaches a
        # valid row (the firm's earnings-volatility window, the frame's industry medians)
        valid = data.iloc[keep].set_axis(pd.RangeIndex(len(keep)))
        scored = self._score_valid(valid, fold, profile) if len(keep) else {}
        out = []
        for measure in self.measures:
            part = scored[measure] if len(keep) else self._no_scores()
            folds = self._folds(measure, data["firm_id"].to_numpy(), fold)
            note = notes.copy()
            note[keep] = _no_target(part, self.drivers)
            out.append(_with_refused(part, data, bad, note, measure, folds))
        return pd.concat(out, ignore_index=True)

    def _check_columns(self, data: pd.DataFrame, peer_profile: pd.DataFrame | None) -> None:
        """A missing column a driver takes as given is an error, like a missing schema one."""
        for name in self.spec.input_drivers:
            if name in self.drivers and name not in data:
                raise ModelError(f"rows must give what the drivers need; got no {name}.")
        if peer_profile is None:
            return
        if not isinstance(peer_profile, pd.DataFrame) or len(peer_profile) != len(data):
            raise ModelError(f"peer_profile must be a DataFrame with one row per input row "
                             f"({len(data)}); got {_size(peer_profile)}.")
        missing = [d for d in self.drivers if d not in peer_profile.columns]
        if missing:
            raise ModelError(f"peer_profile must have a column per driver; got no "
                             f"{missing[0]}.")

    def _score_valid(self, data: pd.DataFrame, fold: int | str | None,
                     peer_profile: pd.DataFrame | None) -> dict[str, pd.DataFrame]:
        """Each measure's scores of rows schema v1 accepts (all of ``data``)."""
        from levgap.features import build_features

        transforms = DriverTransforms.from_dict(self.record["transforms"])
        with np.errstate(all="ignore"):
            feats = build_features(data, self.spec, transforms=transforms)
        f = feats.frame
        given = (pd.to_numeric(data["industry_median_leverage"], errors="coerce").to_numpy(
            dtype=float) if "industry_median_leverage" in data else None)
        drivers = list(self.drivers)
        missing = [d for d in drivers if d not in f]
        if missing:
            raise ModelError(f"rows must give what the drivers need; got no {missing[0]}.")
        X = f[drivers].to_numpy(dtype=float)
        industry = f["effect_group"].to_numpy(dtype=object)
        level, year, new_ind, new_year = self.codes(industry, f["fiscal_year"].to_numpy())
        out = {}
        with np.errstate(all="ignore"):
            for measure in self.measures:
                Xm = self._measure_drivers(measure, f, X, given)
                out[measure] = self._score_measure(measure, f, Xm, industry, level, year,
                                                   new_ind, new_year, fold, peer_profile)
        return out

    def _no_scores(self) -> pd.DataFrame:
        """The scores' columns and kinds, no rows (when no row can be scored)."""
        cols = [*SCORE_COLUMNS, *(d + s for d in self.drivers
                                  for s in ("", "_raw", "_peer", "_contribution"))]
        return pd.DataFrame({c: pd.Series(dtype=_KIND.get(c, "float64")) for c in cols})

    def _score_measure(self, measure: str, f: pd.DataFrame, X: np.ndarray,
                       industry: np.ndarray, level: np.ndarray, year: np.ndarray,
                       new_ind: np.ndarray, new_year: np.ndarray, fold: int | str | None,
                       peer_profile: pd.DataFrame | None) -> pd.DataFrame:
        n = len(f)
        target, offset, beta = np.empty(n), np.empty(n), np.empty((n, X.shape[1]))
        folds = self._folds(measure, f["firm_id"].to_numpy(), fold)
        for key in np.unique(folds):
            sel = folds == key
            fit = self.fit(measure, None if key < 0 else int(key))
            off = (fit.coef[0] + self.industry_effect(fit, industry[sel], level[sel])
                   + fit.effect_of(1, year[sel]))
            offset[sel], beta[sel] = off, fit.coef[1:]
            target[sel] = fit.inverse_link(off + X[sel] @ fit.coef[1:])
        band = self.band(measure)
        low, high = band.limits(target, np.where(level >= 0, level, len(band.scale)))
        actual = f[measure].to_numpy(dtype=float)
        X_peer, peer_med, peer_n = self._peers(measure, f["peer_group"].to_numpy(dtype=object),
                                               f, peer_profile)
        fit = self.fit(measure)
        from levgap.models.shapley import shapley

        contrib, peer_target, _ = shapley(offset, X * beta, X_peer * beta, fit.inverse_link,
                                          linear=fit.link == "identity")
        flags = f["flags"].astype(str).to_numpy(dtype=object)
        extra = {"industry_not_in_model": new_ind, "year_not_in_model": new_year}
        for code, mask in extra.items():
            flags = np.where(mask, np.where(flags == "", code, flags + ";" + code), flags)
        status = np.array(STATUS, dtype=object)[status_codes(actual, low, high)]
        cols: dict[str, Any] = {
            "firm_id": f["firm_id"].to_numpy(), "fiscal_year": f["fiscal_year"].to_numpy(),
            "industry": f["industry"].to_numpy(), "measure": np.full(n, measure, dtype=object),
            "actual": actual, "target": target, "band_low": low, "band_high": high,
            # no status without an actual, a target and a band (NaN would compare as within)
            "status": np.where(np.isnan(actual) | np.isnan(target) | np.isnan(low)
                               | np.isnan(high), "", status).astype(object),
            "gap": actual - target,
            "gap_z": gap_z(actual - target, band.scale_of(np.where(level >= 0, level,
                                                                   len(band.scale)))),
            "peer_target": peer_target, "peer_median": peer_med, "peer_count": peer_n,
            "fold": folds, "flags": flags,
        }
        for j, d in enumerate(self.drivers):  # every column at once: one frame, no inserts
            cols[d] = X[:, j]
            # a driver that differs by measure is used as built: its raw value is this one's
            cols[d + "_raw"] = (f[d + "_raw"].to_numpy() if d + "_raw" in f
                                and d not in MEASURE_SPECIFIC else X[:, j])
            cols[d + "_peer"] = X_peer[:, j]
            cols[d + "_contribution"] = contrib[:, j]
        return pd.DataFrame(cols)

    def _measure_drivers(self, measure: str, f: pd.DataFrame, X: np.ndarray,
                         given: np.ndarray | None) -> np.ndarray:
        """The industry median leverage of a scored row: the rows' own column
        ``industry_median_leverage`` where given, else the saved median of its industry
        and year (a new firm is not part of it, as with the leave-one-out median)."""
        from levgap.derived import PREFIX, lookup_medians
        from levgap.features import peer_group

        saved = self._measure(measure).get("industry_median")
        if PREFIX not in self.drivers or saved is None:
            return X
        industry = peer_group(f["industry"], self.spec.industry_digits).to_numpy(dtype=object)
        value = lookup_medians(saved, industry, f["fiscal_year"].to_numpy())
        if given is not None:
            value = np.where(np.isnan(given), value, given)
        X = X.copy()
        X[:, self.drivers.index(PREFIX)] = value
        return X

    def _folds(self, measure: str, firm: np.ndarray, fold: int | str | None) -> np.ndarray:
        if fold is None:
            return np.full(len(firm), -1, dtype=np.int64)
        if fold == "firm":
            got = [self.fold_of(measure, str(x)) for x in firm]
            return np.array([-1 if v is None else v for v in got], dtype=np.int64)
        return np.full(len(firm), int(fold), dtype=np.int64)

    def _peers(self, measure: str, industry: np.ndarray, f: pd.DataFrame,
               given: pd.DataFrame | None) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        table = self._measure(measure)["peers"]
        cols = table["columns"]
        k = len(self.drivers)
        n = len(f)
        prof = np.full((n, len(cols)), np.nan)
        count = np.zeros(n, dtype=np.int64)
        years = f["fiscal_year"].to_numpy()
        for i in range(n):
            hit = table["industry_year"].get(f"{industry[i]}|{int(years[i])}") or \
                table["year"].get(str(int(years[i])))
            if hit is None and table["year"]:
                hit = table["year"][max(table["year"], key=int)]
            if hit is not None:
                count[i], prof[i] = hit[0], hit[1:]
        X_peer = prof[:, :k]
        if given is not None:
            X_peer = given[list(self.drivers)].to_numpy(dtype=float)
        return X_peer, prof[:, k], count


def load_model(results_dir: str | Path) -> SavedModel:
    """Read the saved model of a results folder written by ``levgap analyze``.

    Raises
    ------
    OutputError
        The folder has no readable ``model.json`` of a format this levgap knows.
    """
    return SavedModel(read_model_record(results_dir))


def _unscorable(data: pd.DataFrame, inputs: tuple[str, ...] = ()
                ) -> tuple[np.ndarray, np.ndarray]:
    """Rows the model cannot score, and why: schema v1's rules and analyze's identity rules
    (a blank ``firm_id`` or ``industry`` -- blank as the input's blank tokens; a firm-year
    given more than once: every copy), and a blank or text ``inputs`` (input driver) cell."""
    from levgap.ingest.cells import text_cells
    from levgap.ingest.columns import is_empty_text
    from levgap.schema import BY_NAME

    n = len(data)
    bad = np.zeros(n, dtype=bool)
    notes = np.full(n, "", dtype=object)
    year = pd.to_numeric(data["fiscal_year"], errors="coerce").to_numpy(dtype=float)
    firm = np.asarray(text_cells(data["firm_id"], code=True).to_pylist(), dtype=object)
    blank_industry = is_empty_text(text_cells(data["industry"], code=True))
    checks = [("firm_id", firm == "", "firm_id must not be blank"),
              ("industry", blank_industry, "industry must not be blank"),
              ("fiscal_year", ~np.isfinite(year) | (year != np.round(year)),
               "fiscal_year must be a whole number")]
    for name in ("total_assets", "total_debt", "ppe_net", "ebitda", "book_equity"):
        col = BY_NAME[name]
        v = data[name].to_numpy(dtype=float)
        wrong = ~np.isfinite(v)
        if col.minimum is not None:
            wrong |= (v <= col.minimum) if col.strict else (v < col.minimum)
        rule = "a finite number" + (
            "" if col.minimum is None else f" {'>' if col.strict else '>='} {col.minimum:g}")
        checks.append((name, wrong, f"{name} must be {rule}"))
    for name in inputs:
        checks.append((name, ~np.isfinite(data[name].to_numpy(dtype=float)),
                       f"{name} must be a finite number (an input driver)"))
    checks.append(("firm_id", _copies(firm, year),
                   "duplicate firm-year: firm_id and fiscal_year must be unique"))
    for _, wrong, text in checks:
        new = wrong & ~bad
        notes[new] = text
        bad |= wrong
    return bad, notes


def _copies(firm: np.ndarray, year: np.ndarray) -> np.ndarray:
    """Every row of a firm-year (non-blank firm, finite year) given more than once."""
    key = pd.Series(list(zip(firm.tolist(), year.tolist(), strict=True)), dtype=object)
    has_key = (firm != "") & np.isfinite(year)
    return has_key & key.where(has_key).duplicated(keep=False).to_numpy()


def _no_target(part: pd.DataFrame, drivers: tuple[str, ...]) -> np.ndarray:
    """The note of a scored row without a target: the first driver without a value."""
    none = part["target"].isna().to_numpy()
    note = np.where(none, "no target, no status", "").astype(object)
    for d in reversed(drivers):  # the first driver's note is written last
        note[none & part[d].isna().to_numpy()] = f"no value for the driver {d}: no target, " \
            "no status"
    return note


SCORE_COLUMNS = ("firm_id", "fiscal_year", "industry", "measure", "actual", "target",
                 "band_low", "band_high", "status", "gap", "gap_z", "peer_target",
                 "peer_median", "peer_count", "fold", "flags")
"""The columns of :meth:`SavedModel.score` before the drivers' (and ``note`` after them)."""
_KIND = {"firm_id": "str", "industry": "str", "measure": "str", "status": "str",
         "flags": "str", "fiscal_year": "int64", "peer_count": "int64", "fold": "int64"}


def _with_refused(part: pd.DataFrame, data: pd.DataFrame, bad: np.ndarray, notes: np.ndarray,
                  measure: str, folds: np.ndarray) -> pd.DataFrame:
    """One measure's scores of the valid rows, in input order with the refused rows blank
    among them (identity as given, status ``""``, flag ``not_scorable``, ``note`` why)."""
    if bad.any():
        part = part.set_axis(np.flatnonzero(~bad)).reindex(pd.RangeIndex(len(data)))
        for col in ("firm_id", "industry"):
            part.loc[bad, col] = data[col].to_numpy()[bad]
        part.loc[bad, ["measure", "status", "flags"]] = [measure, "", "not_scorable"]
        year = data["fiscal_year"].to_numpy(dtype=float)
        whole = bool(np.all(np.isfinite(year) & (year == np.round(year))))
        part["fiscal_year"] = year.astype(np.int64) if whole else year
    part["fold"] = folds
    part["note"] = pd.array(notes, dtype="str")  # str even when there are no rows
    return part


def _size(frame: Any) -> str:
    return f"{len(frame)} rows" if isinstance(frame, pd.DataFrame) else type(frame).__name__


def _schema_frame(rows: pd.DataFrame) -> pd.DataFrame:
    from levgap.schema import REQUIRED

    if not isinstance(rows, pd.DataFrame):
        raise ModelError("rows must be a pandas DataFrame in schema v1.")
    missing = [c for c in REQUIRED if c not in rows.columns]
    if missing:
        raise ModelError(f"rows must have the schema-v1 columns; got no {missing[0]}.")
    text = ("firm_id", "industry", "firm_name", "currency", "flags")
    cols = {c: (rows[c] if c in text else pd.to_numeric(rows[c], errors="coerce"))
            for c in rows.columns}
    cols["firm_id"] = rows["firm_id"].astype(str)
    cols["industry"] = rows["industry"].astype(str)
    if "flags" not in cols:
        cols["flags"] = pd.Series("", index=rows.index, dtype=object)
    return pd.DataFrame(cols).reset_index(drop=True)  # one frame built once, not column inserts


__all__ = ["MODEL_FILE", "SavedModel", "WHOLE_SAMPLE", "load_model"]
