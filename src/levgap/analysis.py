"""``Analysis``: the frames one run produces, and how they are written as the output contract."""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import pandas as pd

ProgressFn = Callable[[str, int, int], None]

TARGET_COLUMNS = (
    "firm_id", "firm_name", "fiscal_year", "industry", "measure", "actual", "target", "gap",
    "gap_z", "band_low", "band_high", "status", "peer_median", "peer_count", "peer_target",
    "debt_to_target", "target_full", "fold", "flags",
)
DRIVER_COLUMNS = (
    "firm_id", "fiscal_year", "measure", "driver", "firm_value", "peer_value", "contribution"
)
COEF_COLUMNS = (
    "measure", "model", "term", "estimate", "std_error", "t_stat", "p_value", "ci_low", "ci_high"
)
FIT_COLUMNS = (
    "measure", "model", "n_obs", "n_firms", "n_industries", "r2", "r2_oos", "rmse_oos",
    "coverage", "coverage_industry_min", "coverage_industry_max", "coverage_industries",
    "coverage_out_of_time", "out_of_time_year",
)
FOLD_COEF_COLUMNS = ("measure", "model", "fold", "term", "estimate")


@dataclass(frozen=True, slots=True)
class Analysis:
    """Everything one run of levgap produces; every output table is built from these frames.

    Parameters
    ----------
    targets : pandas.DataFrame
        One row per firm-year and measure (columns ``TARGET_COLUMNS``).
    drivers : pandas.DataFrame
        One row per firm-year, measure and driver (``DRIVER_COLUMNS``).
    coefficients : pandas.DataFrame
        One row per measure, model and driver (``COEF_COLUMNS``), from the full-sample fit.
    model_fit : pandas.DataFrame
        One row per measure and model (``FIT_COLUMNS``).
    fold_coefficients : pandas.DataFrame
        Constant and slopes of each cross-fit fold's fit (``FOLD_COEF_COLUMNS``): a row's
        target and contributions come from the fit of its ``fold``.
    exclusions : pandas.DataFrame
        The ledger of rows left out of every measure (``measure`` empty) or of one measure.
    manifest : dict
        The run record written as ``run.json``.
    saved_model : dict
        The fitted model as data (``model.json``): everything needed to score a firm-year that
        is not in the panel (see ``levgap.models.saved``); empty until a model records it.
    """

    targets: pd.DataFrame
    drivers: pd.DataFrame
    coefficients: pd.DataFrame
    model_fit: pd.DataFrame
    exclusions: pd.DataFrame
    fold_coefficients: pd.DataFrame = field(default_factory=pd.DataFrame)
    manifest: dict[str, Any] = field(default_factory=dict)
    saved_model: dict[str, Any] = field(default_factory=dict)

    def tables(self) -> dict[str, pd.DataFrame]:
        """The contract's tables by file stem."""
        return {
            "targets": self.targets,
            "drivers": self.drivers,
            "coefficients": self.coefficients,
            "model_fit": self.model_fit,
            "fold_coefficients": self.fold_coefficients,
            "exclusions": self.exclusions,
        }

    def tidy(self) -> pd.DataFrame:
        """The targets table, from which screens and charts are built."""
        return self.targets

    def write(
        self,
        out_dir: str | Path,
        *,
        fmt: str = "csv",
        force: bool = False,
        report: bool = True,
        xlsx: bool = False,
        inputs: tuple[str, ...] = (),
        progress: ProgressFn | None = None,
    ) -> list[Path]:
        """Write the output contract (and the HTML report, and a workbook on request).

        Parameters
        ----------
        out_dir : str or Path
            Output folder; created if absent. A folder holding files levgap did not write is
            refused unless ``force``.
        fmt : {"csv", "parquet"}, default="csv"
        force : bool, default=False
        report : bool, default=True
            Also write ``report.html``.
        xlsx : bool, default=False
            Also write ``workbook.xlsx``.
        inputs : tuple of str, default=()
            Input files that must never be overwritten.
        progress : callable, optional
            ``progress(stage, done, total)`` while the report renders.
        """
        from levgap.report.tables import write_tables

        out = Path(out_dir)
        sources = list(inputs or [i["path"] for i in self.manifest.get("inputs", [])])
        also = [Path(s).name for s in sources if Path(s).parent.resolve() == out.resolve()]
        also += ["report.html"] if report else []
        also += ["workbook.xlsx"] if xlsx else []
        also += ["model.json"] if self.saved_model else []
        written = write_tables(self.tables(), self.manifest, out, fmt=fmt, force=force,
                               inputs=sources, also=also)
        if self.saved_model:
            import json

            from levgap.report.files import atomic_write_bytes

            body = json.dumps(self.saved_model, allow_nan=False, separators=(",", ":"))
            atomic_write_bytes(out / "model.json", body.encode("utf-8"))
            written.append(out / "model.json")
        if report:
            from levgap.report.html import write_report

            written.append(write_report(self.tables(), self.manifest, out_dir,
                                        progress=progress))
        if xlsx:
            from levgap.report.workbook import write_workbook

            path = Path(out_dir) / "workbook.xlsx"
            write_workbook(self.tables(), self.manifest, path)
            written.append(path)
        return written

    def _repr_html_(self) -> str:
        head = self.model_fit.to_html(index=False, float_format=lambda v: f"{v:.4f}")
        return f"<p>levgap analysis: {len(self.targets)} target rows</p>{head}"
