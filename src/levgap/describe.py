"""Descriptive statistics of an estimation sample (``levgap describe``), pure functions.

For every measure and driver: N, mean, standard deviation (ddof 1), minimum, the 1st, 5th,
25th, 50th, 75th, 95th and 99th percentiles (linear interpolation) and maximum, twice for a
driver: ``raw`` (as computed from the statements, before imputation and winsorising; blank
where a rule imputes) and ``winsorised`` (as the model uses it: imputed where a rule imputes,
clipped at its year's limits, lagged when the run lags). A measure is described over the rows
of its own fit; drivers over every row of the sample. The correlation matrix (Pearson,
pairwise complete) is of the measures and the drivers as the model uses them.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
import pandas as pd

from levgap.definitions import label
from levgap.schema import MEASURES

PERCENTILES = (1, 5, 25, 50, 75, 95, 99)
SUMMARY_COLUMNS = ("variable", "version", "n", "mean", "sd", "min",
                   *(f"p{p}" for p in PERCENTILES), "max")


@dataclass(frozen=True, slots=True)
class Description:
    """The descriptive tables of one sample.

    Parameters
    ----------
    summary : pandas.DataFrame
        One row per variable and version (``SUMMARY_COLUMNS``).
    correlations : pandas.DataFrame
        Pearson correlations, variables as rows and columns (index: the variable names).
    """

    summary: pd.DataFrame
    correlations: pd.DataFrame

    def tidy(self) -> pd.DataFrame:
        """The summary table."""
        return self.summary


def _stats(v: np.ndarray) -> dict[str, float]:
    v = v[np.isfinite(v)]
    out: dict[str, float] = {"n": float(len(v))}
    if len(v) == 0:
        return {**out, **{c: np.nan for c in SUMMARY_COLUMNS[3:]}}
    q = np.percentile(v, PERCENTILES)
    out.update({"mean": float(v.mean()), "sd": float(v.std(ddof=1)) if len(v) > 1 else np.nan,
                "min": float(v.min()), "max": float(v.max())})
    out.update({f"p{p}": float(x) for p, x in zip(PERCENTILES, q, strict=True)})
    return out


def variables(sample: pd.DataFrame) -> tuple[list[str], list[str]]:
    """The measures and the model's driver columns a sample holds, in order."""
    measures = [m for m in MEASURES if f"in_{m}" in sample]
    skip = {"firm_id", "firm_name", "fiscal_year", "industry", "effect_group", "peer_group",
            "source_row", "flags", *measures, *(f"in_{m}" for m in measures)}
    drivers = [c for c in sample.columns if c not in skip and not c.endswith("_raw")]
    return measures, drivers


def describe_sample(sample: pd.DataFrame) -> Description:
    """Summary statistics and correlations of an estimation sample (``levgap.sample``).

    Parameters
    ----------
    sample : pandas.DataFrame
        The wide sample: ``in_<measure>``, each measure, each driver and ``<driver>_raw``.

    Returns
    -------
    Description
    """
    measures, drivers = variables(sample)
    rows = []
    for m in measures:
        used = sample[f"in_{m}"].to_numpy() == 1
        rows.append({"variable": m, "version": "as used",
                     **_stats(sample[m].to_numpy(dtype=float)[used])})
    for d in drivers:
        if d + "_raw" in sample:
            rows.append({"variable": d, "version": "raw",
                         **_stats(sample[d + "_raw"].to_numpy(dtype=float))})
        rows.append({"variable": d, "version": "winsorised",
                     **_stats(sample[d].to_numpy(dtype=float))})
    summary = pd.DataFrame(rows).reindex(columns=list(SUMMARY_COLUMNS))
    summary["n"] = summary["n"].astype(np.int64)
    cols = [*measures, *drivers]
    corr = sample[cols].astype(float).corr(method="pearson", min_periods=3)
    return Description(summary=summary, correlations=corr)


def format_description(desc: Description, *, fmt: str = "markdown", digits: int = 3) -> str:
    """The two tables as Markdown, LaTeX (booktabs) or CSV text (``levgap describe``).

    CSV gives the summary, a blank line, then the correlation matrix.
    """
    from levgap.report.texttables import grid

    def num(v: float) -> float | None:
        return None if v is None or not np.isfinite(v) else float(v)

    head = ["Variable", "Version", "N", "Mean", "SD", "Min",
            *(f"P{p}" for p in PERCENTILES), "Max"]
    body: list[Sequence[str | float | None]] = []
    for r in desc.summary.to_dict("records"):
        body.append([label(str(r["variable"])), str(r["version"]), f"{int(r['n']):,}",
                     *(num(r[c]) for c in SUMMARY_COLUMNS[3:])])
    note = ("Raw: as computed from the statements (blank where a rule imputes); winsorised: "
            "as the model uses it (imputed, clipped at the year's 1st and 99th percentiles by "
            "default, lagged when the run lags). Measures over the rows of their fit.")
    first = grid(head, body, fmt=fmt, digits=digits, note=note,
                 title="Descriptive statistics")
    names = [label(str(c)) for c in desc.correlations.columns]
    corr_rows: list[Sequence[str | float | None]] = [
        [names[i], *(num(v) for v in row)]
        for i, row in enumerate(desc.correlations.to_numpy())]
    second = grid(["", *names], corr_rows, fmt=fmt, digits=2,
                  note="Pearson correlations of the measures and the drivers as the model "
                  "uses them (pairwise complete).", title="Correlations")
    return first + "\n" + second
