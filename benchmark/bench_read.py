"""Benchmark of reading and validating a large schema-v1 CSV with ``levgap.read_panel``.

Writes (once; cached under ``benchmark/data/``, which git ignores) a deterministic CSV of
``n_rows`` invented firm-years with every schema-v1 column, about 0.1% of rows carrying the
problems the validator must catch (text in a number, zero assets, a blank required value,
an exact duplicate). Then reads it in a fresh subprocess, so that nothing built here counts,
and records the wall time of ``read_panel`` and the peak resident memory of that process.

Run::

    python benchmark/bench_read.py [--rows 1000000] [--rebuild]

``run(n_rows) -> dict`` serves the benchmark suite. The goal (issue 3): peak RSS under 2 GB
for the read and validation of a 1,000,000-row file.
"""

from __future__ import annotations

import argparse
import json
import subprocess
import sys
import time
from pathlib import Path
from typing import Any

import numpy as np
import pyarrow as pa
import pyarrow.csv as pacsv

sys.path.insert(0, str(Path(__file__).resolve().parent))
from peak_memory import child_prelude  # noqa: E402

HERE = Path(__file__).resolve().parent
DATA = HERE / "data"
GOAL_RSS_MB = 2048.0
SEED = 20261202

CHILD = """
import json, resource, sys, time, warnings
import levgap.ingest
from levgap.errors import DataWarning

base = peak_kb()
t0 = time.perf_counter()
with warnings.catch_warnings():
    warnings.simplefilter("ignore", DataWarning)
    panel = levgap.ingest.read_panel(sys.argv[1])
seconds = time.perf_counter() - t0
peak = peak_kb()
print(json.dumps({
    "seconds": seconds,
    "peak_rss_mb": peak / 1024,
    "rss_after_import_mb": base / 1024,
    "rows_in": panel.n_input_rows,
    "rows_kept": len(panel.data),
    "rows_excluded": len(panel.exclusions),
    "reasons": panel.exclusions["reason"].value_counts().to_dict(),
}))
"""


def make_csv(n_rows: int, path: Path, *, seed: int = SEED) -> Path:
    """Write a deterministic schema-v1 CSV of invented firm-years.

    Parameters
    ----------
    n_rows : int
        Data rows (firm-years).
    path : pathlib.Path
        File to write.
    seed : int, default=SEED
        Seed of the generator.

    Returns
    -------
    pathlib.Path
    """
    rng = np.random.default_rng(seed)
    years = 20
    n_firms = max(1, -(-n_rows // years))
    firm = np.arange(n_rows) // years
    year = 2005 + np.arange(n_rows) % years
    industry = (1000 + 37 * (firm % 70)).astype(str)
    assets = np.round(np.exp(rng.normal(6.0, 1.3, n_firms))[firm]
                      * np.exp(rng.normal(0, 0.1, n_rows)), 3)
    debt = np.round(assets * np.clip(rng.normal(0.25, 0.12, n_rows), 0, 0.9), 3)
    ppe = np.round(assets * np.clip(rng.normal(0.35, 0.15, n_rows), 0.01, 0.95), 3)
    ebitda = np.round(assets * rng.normal(0.1, 0.06, n_rows), 3)
    equity = np.round(assets * rng.normal(0.4, 0.15, n_rows), 3)
    shares = np.round(rng.uniform(5, 500, n_firms)[firm], 2)
    price = np.round(np.exp(rng.normal(3, 0.8, n_rows)), 2)
    market = np.round(shares * price, 3).astype(str)
    market[rng.random(n_rows) < 0.04] = ""
    cols: dict[str, Any] = {
        "firm_id": np.char.add("BN", np.char.zfill(firm.astype(str), 7)),
        "fiscal_year": year.astype(str),
        "industry": industry,
        "total_assets": assets.astype(str),
        "total_debt": debt.astype(str),
        "ppe_net": ppe.astype(str),
        "ebitda": ebitda.astype(str),
        "book_equity": equity.astype(str),
        "firm_name": np.char.add("Benchmark Firm ", firm.astype(str)),
        "market_equity": market,
        "shares_outstanding": shares.astype(str),
        "share_price": price.astype(str),
        "revenue": np.round(assets * rng.uniform(0.3, 1.5, n_rows), 3).astype(str),
        "cash": np.round(assets * rng.uniform(0.0, 0.2, n_rows), 3).astype(str),
        "interest_expense": np.round(debt * 0.05, 3).astype(str),
        "rd_expense": np.round(assets * rng.uniform(0.0, 0.05, n_rows), 3).astype(str),
        "lease_liabilities": np.round(assets * rng.uniform(0.0, 0.08, n_rows), 3).astype(str),
        "currency": np.full(n_rows, "EUR"),
        "fx_rate": np.full(n_rows, "1.0"),
    }
    # the problems the validator must catch, at known rows
    bad = rng.choice(n_rows, size=max(4, n_rows // 1000), replace=False) if n_rows >= 8 else []
    for k, i in enumerate(bad):
        kind = k % 4
        if kind == 0:
            cols["total_debt"][i] = "n.a. (see note)"
        elif kind == 1:
            cols["total_assets"][i] = "0"
        elif kind == 2:
            cols["industry"][i] = ""
        elif i + 1 < n_rows and firm[i + 1] == firm[i]:
            for c in cols:
                if c != "fiscal_year":
                    cols[c][i + 1] = cols[c][i]
            cols["fiscal_year"][i + 1] = cols["fiscal_year"][i]
    table = pa.table({k: pa.array(v, type=pa.string()) for k, v in cols.items()})
    path.parent.mkdir(parents=True, exist_ok=True)
    tmp = path.with_suffix(".tmp")
    pacsv.write_csv(table, tmp, write_options=pacsv.WriteOptions(quoting_style="none"))
    tmp.replace(path)
    return path


def run(n_rows: int = 1_000_000, *, rebuild: bool = False, data_dir: Path = DATA
        ) -> dict[str, Any]:
    """Build (or reuse) the panel and time ``read_panel`` on it in a fresh process.

    Parameters
    ----------
    n_rows : int, default=1_000_000
        Rows of the benchmark panel.
    rebuild : bool, default=False
        Write the panel again even if it exists.
    data_dir : pathlib.Path, default=benchmark/data
        Where the panel is written (and found again).

    Returns
    -------
    dict
        ``rows``, ``file_mb``, ``seconds`` (read and validation), ``peak_rss_mb`` of the
        reading process, ``rss_after_import_mb``, row counts, exclusion reasons,
        ``goal_rss_mb`` and ``meets_goal``.
    """
    path = data_dir / f"read_{n_rows}.csv"
    if rebuild or not path.exists():
        # built in its own process, so that the caller's memory stays small
        t0 = time.perf_counter()
        subprocess.run(
            [sys.executable, str(Path(__file__).resolve()), "--rows", str(n_rows), "--build-only",
             "--data-dir", str(data_dir)],
            check=True,
        )
        build = time.perf_counter() - t0
    else:
        build = 0.0
    proc = subprocess.run(
        [sys.executable, "-c", child_prelude() + CHILD, str(path)],
        capture_output=True, text=True, check=False,
    )
    if proc.returncode != 0:
        raise RuntimeError(f"read_panel failed on {path}: {proc.stderr.strip()[-2000:]}")
    out = json.loads(proc.stdout.strip().splitlines()[-1])
    out.update(
        rows=n_rows,
        file_mb=path.stat().st_size / 2**20,
        build_seconds=build,
        goal_rss_mb=GOAL_RSS_MB,
        meets_goal=out["peak_rss_mb"] < GOAL_RSS_MB,
    )
    return out


def main() -> None:
    """Command-line entry: print the figures as JSON."""
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--rows", type=int, default=1_000_000)
    ap.add_argument("--rebuild", action="store_true")
    ap.add_argument("--build-only", action="store_true", help=argparse.SUPPRESS)
    ap.add_argument("--data-dir", type=Path, default=DATA, help="where the panel is written")
    args = ap.parse_args()
    if args.build_only:
        make_csv(args.rows, args.data_dir / f"read_{args.rows}.csv")
        return
    print(json.dumps(run(args.rows, rebuild=args.rebuild, data_dir=args.data_dir), indent=2))


if __name__ == "__main__":
    main()
