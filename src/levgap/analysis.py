"""``Analysis``: the frames one run produces, and how they are written as the output contract."""

from __future__ import annotations

from collections.abc import Callable, Mapping
from dataclasses import dataclass, field
from pathlib import Path
from typing import TYPE_CHECKING, Any

from levgap.panel import EXCLUSION_COLUMNS

if TYPE_CHECKING:  # the readers of quick commands use the column constants without pandas
    import pandas as pd

    from levgap.outputs import Committed

ProgressFn = Callable[[str, int, int], None]

TARGET_COLUMNS = (
    "firm_id", "firm_name", "fiscal_year", "industry", "measure", "actual", "target", "gap",
    "gap_z", "band_low", "band_high", "status", "peer_median", "peer_count", "peer_target",
    "debt_to_target", "target_full", "fold", "gap_prev", "gap_change", "gap_mean_prior",
    "years_outside", "flags",
)
DRIVER_COLUMNS = (
    "firm_id", "fiscal_year", "measure", "driver", "firm_value", "raw_value", "peer_value",
    "contribution"
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

ADDED_COLUMNS: dict[str, tuple[str, ...]] = {
    "targets": ("gap_prev", "gap_change", "gap_mean_prior", "years_outside"),
    "drivers": ("raw_value",),
}
"""Columns a run writes since the analyst's screen (issue 13). A folder written before lacks
them and stays readable: the readers compute the history from the targets' own rows and leave
``raw_value`` blank (``levgap.report.reading``)."""

TABLE_COLUMNS: dict[str, tuple[str, ...]] = {
    "targets": TARGET_COLUMNS,
    "drivers": DRIVER_COLUMNS,
    "coefficients": COEF_COLUMNS,
    "model_fit": FIT_COLUMNS,
    "fold_coefficients": FOLD_COEF_COLUMNS,
    "exclusions": EXCLUSION_COLUMNS,
}
"""Columns each output table has at least; readers refuse a table that lacks one."""

COLUMN_KINDS: dict[str, str] = {
    **dict.fromkeys(("fiscal_year", "peer_count", "n_obs", "n_firms", "n_industries",
                     "source_row", "fold", "coverage_industries", "out_of_time_year",
                     "years_outside"), "integer"),
    **dict.fromkeys(("actual", "target", "gap", "gap_z", "band_low", "band_high", "peer_median",
                     "peer_target", "debt_to_target", "target_full", "firm_value", "peer_value",
                     "raw_value", "gap_prev", "gap_change", "gap_mean_prior",
                     "contribution", "estimate", "std_error", "t_stat", "p_value", "ci_low",
                     "ci_high", "r2", "r2_oos", "rmse_oos", "coverage", "coverage_industry_min",
                     "coverage_industry_max", "coverage_out_of_time"), "number"),
}
"""What output columns hold when they are not text: ``integer`` (whole numbers, blanks allowed)
or ``number``. Columns not named here are read as text."""

FILLED_COLUMNS: dict[str, tuple[str, ...]] = {
    "targets": ("firm_id", "fiscal_year", "measure", "actual", "target", "gap"),
    "drivers": ("firm_id", "fiscal_year", "measure", "driver"),
    "coefficients": ("measure", "model", "term"),
    "model_fit": ("measure", "model"),
    "fold_coefficients": ("measure", "model", "term"),
    "exclusions": ("reason",),
}
"""Columns levgap fills in every row of a table it writes; a reader refuses a blank there."""


def check_table_columns(path: str | Path, name: str, found: Mapping[str, str],
                        example: Callable[[str], str] = lambda c: "", *,
                        legacy: bool = False,
                        blanks: Callable[[str], int] | None = None) -> None:
    """Refuse a table read back from an output folder that lacks a column or holds a wrong type.

    Parameters
    ----------
    path : str or pathlib.Path
        The file, for the message.
    name : str
        The table (``targets``, ...); tables levgap does not know are not checked.
    found : mapping of str to str
        Column -> what the reader found in it: ``integer`` (whole numbers or blanks),
        ``number``, ``text`` or ``other``.
    example : callable, optional
        A short example of a column's offending value, for the message.
    legacy : bool, default=False
        The folder was written by levgap 0.1: its tables are checked against the 0.1 columns.
    blanks : callable, optional
        How many rows of a column are blank; given, the ``FILLED_COLUMNS`` of the table (not
        of a 0.1 table) must have none.

    Raises
    ------
    OutputError
        Naming the file and the column.
    """
    from levgap.errors import OutputError

    if legacy:
        from levgap.outputs.legacy import V01_COLUMNS

        wanted = V01_COLUMNS.get(name, ())
    else:
        added = ADDED_COLUMNS.get(name, ())
        wanted = tuple(c for c in TABLE_COLUMNS.get(name, ())
                       if c in found or c not in added)
    missing = [c for c in wanted if c not in found]
    if missing:
        raise OutputError(
            f"{path}: the {name} table must have the column {missing[0]}"
            f"{f' (and {len(missing) - 1} more)' if len(missing) > 1 else ''}; got none. The "
            "file was edited or comes from another program; re-run `levgap analyze`."
        )
    for col in wanted:
        kind = COLUMN_KINDS.get(col)
        ok = {"integer": ("integer",), "number": ("integer", "number")}.get(kind or "")
        if ok is not None and found[col] not in ok:
            shown = example(col)
            what = "whole numbers" if kind == "integer" else "numbers"
            raise OutputError(
                f"{path}: column {col} must hold {what}; got {found[col]}"
                f"{f' such as {shown}' if shown else ''}. The file was edited or damaged; "
                "re-run `levgap analyze`."
            )
    if blanks is None or legacy:
        return
    for col in FILLED_COLUMNS.get(name, ()):
        n = blanks(col)
        if n:
            raise OutputError(
                f"{path}: column {col} must have a value in every row; got {n:,} blank. The "
                "file was edited or damaged; re-run `levgap analyze`."
            )


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
    sample : pandas.DataFrame
        The estimation sample (``analyze(..., sample=True)``, ``levgap.sample``): one row per
        firm-year used, each measure and driver raw and as used; empty unless asked for.
    """

    targets: pd.DataFrame
    drivers: pd.DataFrame
    coefficients: pd.DataFrame
    model_fit: pd.DataFrame
    exclusions: pd.DataFrame
    fold_coefficients: pd.DataFrame = field(default_factory=lambda: _empty_frame())
    manifest: dict[str, Any] = field(default_factory=dict)
    saved_model: dict[str, Any] = field(default_factory=dict)
    sample: pd.DataFrame = field(default_factory=lambda: _empty_frame())

    def tables(self) -> dict[str, pd.DataFrame]:
        """The contract's tables by file stem (and ``sample`` when it was asked for)."""
        out = {
            "targets": self.targets,
            "drivers": self.drivers,
            "coefficients": self.coefficients,
            "model_fit": self.model_fit,
            "fold_coefficients": self.fold_coefficients,
            "exclusions": self.exclusions,
        }
        if self.sample.shape[1]:
            out["sample"] = self.sample
        return out

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

        The files are one unit with one run id (see :func:`write_analysis`).

        Parameters
        ----------
        out_dir : str or Path
            Output folder; created if absent. A folder holding files levgap did not write is
            refused unless ``force`` (they are left alone, and never replaced).
        fmt : {"csv", "parquet"}, default="csv"
        force : bool, default=False
        report : bool, default=True
            Also write ``report.html``.
        xlsx : bool, default=False
            Also write ``workbook.xlsx``.
        inputs : tuple of str, default=()
            Input files, never replaced or removed; default the manifest's inputs.
        progress : callable, optional
            ``progress(stage, done, total)`` while the report renders.

        Returns
        -------
        list of pathlib.Path
            The files written, ``run.json`` last.
        """
        return list(write_analysis(self, out_dir, fmt=fmt, force=force, report=report,
                                   xlsx=xlsx, inputs=inputs, progress=progress).written)

    def _repr_html_(self) -> str:
        head = self.model_fit.to_html(index=False, float_format=lambda v: f"{v:.4f}")
        return f"<p>levgap analysis: {len(self.targets)} target rows</p>{head}"


def write_analysis(
    analysis: Analysis,
    out_dir: str | Path,
    *,
    fmt: str = "csv",
    force: bool = False,
    report: bool = True,
    xlsx: bool = False,
    inputs: tuple[str, ...] = (),
    progress: ProgressFn | None = None,
) -> Committed:
    """Write an analysis as one run: tables, ``model.json``, report, workbook, ``run.json``.

    Every file is staged and swapped in together under one new run id (``levgap.outputs``),
    which ``run.json`` and ``model.json`` carry; files of a previous run in the folder that
    this run does not replace (``report.html`` under ``report=False``, tables in the other
    format) are removed when they are verifiably levgap's. Parameters as :meth:`Analysis.write`.

    Returns
    -------
    levgap.outputs.Committed
        The files written and the previous run's files removed.
    """
    import json

    from levgap.errors import OutputError
    from levgap.outputs import RunWriter, new_run_id
    from levgap.report.tables import FORMATS, stage_tables

    if fmt not in FORMATS:
        raise OutputError(f"format must be one of {sorted(FORMATS)}; got {fmt!r}.")
    run_id = new_run_id()
    manifest = {**analysis.manifest, "run_id": run_id}
    sources = list(inputs or [i["path"] for i in analysis.manifest.get("inputs", [])
                              if isinstance(i, Mapping) and i.get("path")])
    tables = analysis.tables()
    with RunWriter(out_dir, run_id=run_id, inputs=sources, force=force) as run:
        run.expect([*(f"{name}{FORMATS[fmt]}" for name in tables),
                    *(["model.json"] if analysis.saved_model else []),
                    *(["report.html"] if report else []), *(["workbook.xlsx"] if xlsx else [])])
        stage_tables(run, tables, fmt=fmt)
        if analysis.saved_model:
            body = json.dumps({**analysis.saved_model, "run_id": run_id}, allow_nan=False,
                              separators=(",", ":"))
            run.add("model.json", body.encode("utf-8"))
        if report:
            from levgap.report.html import render_report

            html = render_report(tables, manifest, progress=progress)
            run.add("report.html", html.encode("utf-8"))
        if xlsx:
            from levgap.report.workbook import build_workbook

            run.add_path("workbook.xlsx", lambda p: build_workbook(tables, manifest, p))
        return run.commit(manifest)


def _empty_frame() -> pd.DataFrame:
    import pandas as pd

    return pd.DataFrame()
