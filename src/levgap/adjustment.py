"""``speed_of_adjustment``: how fast firms close the gap to their target (``levgap adjust``).

Takes the targets of a run (``targets.csv`` or ``Analysis.targets``: each firm-year's
actual leverage and its cross-fitted target) and estimates the partial-adjustment model of
``levgap.models.adjust`` with its three estimators, per measure; each firm's expected path
toward its target uses the corrected (long-difference) estimate. Published speeds from
REFERENCES.md are set beside the estimates.
"""

from __future__ import annotations

from dataclasses import asdict, dataclass

import numpy as np
import pandas as pd

from levgap.errors import ModelError
from levgap.models.adjust import ESTIMATORS, PUBLISHED, expected_paths, prepare

CORRECTED = "long-difference"

ADJUSTMENT_COLUMNS = (
    "measure", "estimator", "speed", "std_error", "ci_low", "ci_high", "half_life",
    "half_life_low", "half_life_high", "n_obs", "n_firms", "difference", "corrected", "bias",
    "published",
)
PUBLISHED_BY_MEASURE = {
    "book": "Flannery and Rangan (2006) about 0.34; Huang and Ritter (2009) half-life 3.7 "
    "years (about 0.17); Yin and Ritter (2020) about 0.16",
    "market": "Flannery and Rangan (2006) about 0.34; Yin and Ritter (2020) about 0.10",
}
"""REFERENCES.md's published speeds, by measure (Flannery and Rangan's figure is not split by
measure there; 0.344 is from memory)."""


@dataclass(frozen=True, slots=True)
class SpeedOfAdjustment:
    """Estimates of the speed of adjustment and each firm's expected path.

    Parameters
    ----------
    table : pandas.DataFrame
        One row per measure and estimator (``ADJUSTMENT_COLUMNS``).
    paths : pandas.DataFrame
        Per measure and firm, the expected leverage for each of the next years at the
        corrected estimate (``levgap.models.adjust.expected_paths``).
    notes : tuple of str
        Estimators that could not run, and why.
    """

    table: pd.DataFrame
    paths: pd.DataFrame
    notes: tuple[str, ...] = ()

    def tables(self) -> dict[str, pd.DataFrame]:
        """The tables by file stem (``adjustment``, ``paths``)."""
        return {"adjustment": self.table, "paths": self.paths}

    def tidy(self) -> pd.DataFrame:
        """The estimates table."""
        return self.table


def speed_of_adjustment(
    targets: pd.DataFrame,
    *,
    measures: tuple[str, ...] | None = None,
    difference: int | None = None,
    horizon: int = 5,
) -> SpeedOfAdjustment:
    """Estimate the speed of adjustment of each measure (see the module docstring).

    Parameters
    ----------
    targets : pandas.DataFrame
        ``firm_id, fiscal_year, measure, actual, target``: one row per firm-year and measure.
    measures : tuple of str, optional
        Measures to estimate; default every measure in ``targets``.
    difference : int, optional
        Years of the long difference (default 4, fewer in a short panel).
    horizon : int, default=5
        Years of each firm's expected path.

    Returns
    -------
    SpeedOfAdjustment

    Raises
    ------
    ModelError
        No measure could be estimated (the message says why).
    """
    if horizon < 1:
        raise ModelError(f"horizon must be at least 1 year; got {horizon}.")
    missing = [c for c in ("firm_id", "fiscal_year", "measure", "actual", "target")
               if c not in targets]
    if missing:
        raise ModelError(f"targets must have the column {missing[0]}; got none.")
    present = list(dict.fromkeys(targets["measure"].astype(str)))
    measures = tuple(measures or present)
    rows, paths, notes = [], [], []
    for measure in measures:
        t = targets[targets["measure"].astype(str) == measure]
        if t.empty:
            notes.append(f"{measure}: no rows.")
            continue
        lags = prepare(t["firm_id"].to_numpy(), t["fiscal_year"].to_numpy(),
                       t["actual"].to_numpy(dtype=float), t["target"].to_numpy(dtype=float))
        speeds = {}
        for name, fit in ESTIMATORS.items():
            try:
                est = fit(lags, difference)
            except ModelError as exc:
                notes.append(f"{measure}, {name}: {exc}")
                continue
            speeds[name] = est.speed
            row = asdict(est)
            row["measure"] = measure
            row["corrected"] = "yes" if name == CORRECTED else "no"
            row["published"] = PUBLISHED_BY_MEASURE.get(measure, "")
            row["speed"] = row.pop("speed")
            rows.append(row)
        if CORRECTED in speeds:
            p = expected_paths(lags, speeds[CORRECTED], horizon)
            p.insert(0, "measure", measure)
            paths.append(p)
    if not rows:
        raise ModelError("the speed of adjustment must be estimable for at least one measure; "
                         f"got none ({' '.join(notes)}).")
    table = pd.DataFrame(rows).reindex(columns=list(ADJUSTMENT_COLUMNS))
    table = table.replace({np.inf: np.nan})
    return SpeedOfAdjustment(
        table=table, paths=pd.concat(paths, ignore_index=True) if paths else pd.DataFrame(),
        notes=tuple(notes))


def published_lines() -> list[str]:
    """REFERENCES.md's published speeds, one line each, for the terminal."""
    return [f"{src}: speed {speed}, half-life {hl}" for src, speed, hl in PUBLISHED]
