"""The run record (``run.json``): inputs and their digests, options, versions, counts."""

from __future__ import annotations

import hashlib
import json
import platform
from importlib.metadata import PackageNotFoundError, version
from pathlib import Path
from typing import Any

import numpy as np
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
    records: dict[str, Any] | None = None,
) -> dict[str, Any]:
    """The run record: inputs and digests, options, versions, counts, pooling, conventions.

    ``records`` are the saved model's per-measure records (pooled industries' weights and
    the contribution method are reported from them).
    """
    whole = exclusions[exclusions["measure"] == ""]
    by_reason = whole["reason"].value_counts().sort_index()
    by_measure = exclusions[exclusions["measure"] != ""].groupby(
        ["measure", "reason"]).size()
    from levgap import __version__

    versions: dict[str, str | None] = {"levgap": __version__}
    for pkg in ("numpy", "pandas", "scipy", "statsmodels", "pyarrow"):
        try:
            versions[pkg] = version(pkg)
        except PackageNotFoundError:
            versions[pkg] = None
    versions["python"] = platform.python_version()
    records = records or {}
    named = {v.parent for v in config.industries.values() if v.parent}
    pooled: dict[str, dict[str, Any]] = {}
    for measure, rec in records.items():
        for item in rec.get("pooled", []):
            entry = pooled.setdefault(item["industry"], {
                "industry": item["industry"], "firms": item["firms"],
                "parent": "whole sample" if item["parent"] == POOLED
                else f"industries of parent group {item['parent']}" if item["parent"] in named
                else f"industries with code prefix {item['parent']}",
                "members": _members(feats, item["industry"]), "weight": {},
            })
            entry["weight"][measure] = item["weight"]
    methods = sorted({rec.get("contributions", "") for rec in records.values()})
    return {
        "levgap_version": versions["levgap"],
        "schema_version": SCHEMA_VERSION,
        "inputs": [{"path": panel.source, "sha256": panel.sha256, "rows": panel.n_input_rows}]
        + ([{"path": config.source, "sha256": digest(config.source), "role": "run configuration"}]
           if config.source and Path(config.source).is_file() else [])
        + [{"path": path, "sha256": digest(path), "role": role}
           for role, path in (("industry names", config.input.industry_names),
                              ("peer list", config.input.peers))
           if path and Path(path).is_file()],
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
        "pooled_industries": list(pooled.values()),
        "model": {
            "name": config.model.model,
            "pooling": "industries with fewer than min_industry_firms firms take their parent "
            "group's effect plus their own deviation, shrunk by its empirical-Bayes weight "
            "(weight: the share of the industry's own level kept)",
            "contributions": methods,
        },
        "standard_errors": {
            "cluster": config.model.cluster,
            "convention": "Stata-style small-sample factor G/(G-1)*(N-1)/(N-P) for each "
            "clustering dimension; two-way = V_firm + V_year - V_firm-year, each with its own "
            "factor (the convention of Petersen's published figures)",
        },
        "band": {"coverage": config.model.coverage,
                 "method": "location-scale: cross-fitted residuals scaled by their industry's "
                 "interdecile range (shrunk toward the pooled scale with weight n/(n + "
                 f"{config.model.band_prior_rows:g})), quantiles of the scaled residuals, "
                 "clipped to [0, 1]"},
        "warnings": list(warnings),
    }


def _members(feats: Features, industry: str) -> list[str]:
    lv = feats.levels
    i = int(np.flatnonzero(lv.labels == industry)[0])
    return [str(x) for x in lv.labels[lv.members[lv.parent[i]]]]


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
