"""The run record (``run.json``): inputs and their digests, options, versions, counts."""

from __future__ import annotations

import hashlib
import json
import platform
from importlib.metadata import PackageNotFoundError, version
from pathlib import Path
from typing import Any

import pandas as pd

from levgap.config import RunConfig
from levgap.features import POOLED, Features
from levgap.panel import Panel
from levgap.schema import SCHEMA_VERSION


def build_manifest(
    panel: Panel,
    config: RunConfig,
    feats: Features,
    frame: pd.DataFrame,
    exclusions: pd.DataFrame,
    warnings: list[str],
) -> dict[str, Any]:
    whole = exclusions[exclusions["measure"] == ""]
    by_reason = whole["reason"].value_counts().sort_index()
    by_measure = exclusions[exclusions["measure"] != ""].groupby(
        ["measure", "reason"]).size()
    versions = {}
    for pkg in ("levgap", "numpy", "pandas", "scipy", "statsmodels", "pyarrow"):
        try:
            versions[pkg] = version(pkg)
        except PackageNotFoundError:
            versions[pkg] = None
    versions["python"] = platform.python_version()
    borrowed = [
        {
            "industry": r["industry"],
            "firms": int(r["firms"]),
            "borrowed_from": "whole sample" if r["borrowed_from"] == POOLED
            else f"industries with code prefix {r['borrowed_from'][:-1]}",
            "members": r["members"].split(";"),
        }
        for _, r in feats.borrowed.iterrows()
    ]
    return {
        "levgap_version": versions["levgap"],
        "schema_version": SCHEMA_VERSION,
        "inputs": [{"path": panel.source, "sha256": panel.sha256, "rows": panel.n_input_rows}]
        + ([{"path": config.source, "sha256": digest(config.source), "role": "run configuration"}]
           if config.source and Path(config.source).is_file() else []),
        "options": config.to_dict(),
        "drivers": list(feats.drivers),
        "versions": versions,
        "counts": {
            "rows_in": int(panel.n_input_rows or (len(frame) + len(whole))),
            "rows_used": int(len(frame)),
            "rows_excluded": int(len(whole)),
            "firms": int(frame["firm_id"].nunique()),
            "industries": int(frame["industry"].nunique()),
            "years": sorted(int(y) for y in frame["fiscal_year"].unique()),
            "by_reason": {str(k): int(v) for k, v in by_reason.items()},
            "measure_omissions": {f"{m}:{r}": int(v) for (m, r), v in by_measure.items()},
        },
        "borrowed_industries": borrowed,
        "standard_errors": {
            "cluster": config.model.cluster,
            "convention": "Stata-style small-sample factor G/(G-1)*(N-1)/(N-P) for each "
            "clustering dimension; two-way = V_firm + V_year - V_firm-year, each with its own "
            "factor (the convention of Petersen's published figures)",
        },
        "band": {"coverage": config.model.coverage,
                 "method": "empirical quantiles of the cross-fitted residuals"},
        "warnings": list(warnings),
    }


def digest(path: str | Path) -> str:
    """SHA-256 of a file, for the run record."""
    h = hashlib.sha256()
    with open(path, "rb") as fh:
        for chunk in iter(lambda: fh.read(1 << 20), b""):
            h.update(chunk)
    return h.hexdigest()


def dumps_manifest(manifest: dict[str, Any]) -> str:
    """The run record as JSON text."""
    return json.dumps(manifest, indent=2, default=str)
