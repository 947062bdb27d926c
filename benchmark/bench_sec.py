"""Benchmark of the SEC importer on a synthetic quarter of modern size, in the real layout.

Builds (once; cached under ``benchmark/data/``, which git ignores) a zip holding ``sub.txt``
and ``num.txt`` in the current layout of the SEC Financial Statement Data Sets: 6,000
submissions (a quarter of 10-K reports, the rest 10-Q) and about 3 million facts, over 100 MB
uncompressed, with what makes real quarters costly: standard and custom tags, segments,
co-registrants, prior-period and quarterly facts, empty values and quoted footnotes with
doubled quotes. Then imports it in a fresh subprocess (so that nothing built here counts) and
records the wall time and the peak resident memory of that process.

Run::

    python benchmark/bench_sec.py [--facts 3000000] [--rebuild]

``run() -> dict`` serves the benchmark suite. The goal (issue 5): peak RSS under 1.5 GB.
"""

from __future__ import annotations

import argparse
import json
import subprocess
import sys
import time
import zipfile
from pathlib import Path
from typing import Any

import numpy as np
import pyarrow as pa
import pyarrow.csv as pacsv

sys.path.insert(0, str(Path(__file__).resolve().parent))
from peak_memory import child_prelude  # noqa: E402

HERE = Path(__file__).resolve().parent
DATA = HERE / "data"
GOAL_RSS_MB = 1536.0
FACTS = 3_000_000
SUBMISSIONS = 6_000
ANNUAL_SHARE = 0.25
CHUNK = 500_000

SUB_HEADER = (
    "adsh cik name sic countryba stprba cityba zipba bas1 bas2 baph countryma stprma cityma "
    "zipma mas1 mas2 countryinc stprinc ein former changed afs wksi fye form period fy fp "
    "filed accepted prevrpt detail instance nciks aciks"
).split()
NUM_HEADER = "adsh tag version ddate qtrs uom segments coreg value footnote".split()

# Tags the importer looks for, with their period type (0 instant, 4 flow) and uom.
LOOKED_FOR = [
    ("Assets", 0), ("LiabilitiesAndStockholdersEquity", 0), ("DebtCurrent", 0),
    ("LongTermDebtCurrent", 0), ("ShortTermBorrowings", 0), ("LongTermDebtNoncurrent", 0),
    ("LongTermDebt", 0), ("PropertyPlantAndEquipmentNet", 0), ("StockholdersEquity", 0),
    ("CashAndCashEquivalentsAtCarryingValue", 0), ("OperatingLeaseLiability", 0),
    ("OperatingIncomeLoss", 4), ("DepreciationDepletionAndAmortization", 4),
    ("Revenues", 4), ("RevenueFromContractWithCustomerExcludingAssessedTax", 4),
    ("InterestExpense", 4), ("ResearchAndDevelopmentExpense", 4),
]


def _filler_tags(n: int) -> list[str]:
    stems = ("IncreaseDecreaseIn", "PaymentsFor", "ProceedsFrom", "OtherLiabilities",
             "DeferredTaxAssets", "AccruedLiabilities", "ShareBasedCompensation")
    return [f"{stems[i % len(stems)]}SyntheticLineItem{i:04d}" for i in range(n)]


def _submissions(rng: np.random.Generator) -> dict[str, np.ndarray]:
    n = SUBMISSIONS
    ciks = rng.choice(np.arange(1_000_000, 9_000_000), size=n, replace=False)
    adsh = np.array([f"{9_000_000_000 + c:010d}-21-{i:06d}" for i, c in enumerate(ciks)])
    annual = rng.random(n) < ANNUAL_SHARE
    period = np.where(annual, "20201231", "20210331")
    return {"adsh": adsh, "cik": ciks.astype(str), "annual": annual, "period": period}


def _write_sub(path: Path, subs: dict[str, np.ndarray], rng: np.random.Generator) -> None:
    n = len(subs["adsh"])
    cols: dict[str, Any] = dict.fromkeys(SUB_HEADER, pa.array([""] * n))
    cols["adsh"] = pa.array(subs["adsh"])
    cols["cik"] = pa.array(subs["cik"])
    cols["name"] = pa.array([f"SYNTHETIC FILER {i:05d} INC" for i in range(n)])
    cols["sic"] = pa.array(rng.integers(100, 9_999, n).astype(str))
    cols["countryba"] = pa.array(["US"] * n)
    cols["form"] = pa.array(np.where(subs["annual"], "10-K", "10-Q"))
    cols["period"] = pa.array(subs["period"])
    cols["fy"] = pa.array(["2020"] * n)
    cols["fp"] = pa.array(np.where(subs["annual"], "FY", "Q1"))
    cols["filed"] = pa.array(np.where(subs["annual"], "20210301", "20210505"))
    cols["fye"] = pa.array(["1231"] * n)
    table = pa.table([cols[c] for c in SUB_HEADER], names=SUB_HEADER)
    opts = pacsv.WriteOptions(delimiter="\t", quoting_style="needed")
    pacsv.write_csv(table, path, write_options=opts)


def _fact_chunk(rng: np.random.Generator, subs: dict[str, np.ndarray], n: int,
                filler: np.ndarray) -> pa.Table:
    """n facts: about one in eight a looked-for tag, the rest filler, with realistic noise."""
    s = rng.integers(0, len(subs["adsh"]), n)
    looked = rng.random(n) < 0.12
    li = rng.integers(0, len(LOOKED_FOR), n)
    names = np.array([t for t, _ in LOOKED_FOR])
    kinds = np.array([q for _, q in LOOKED_FOR])
    tag = np.where(looked, names[li], filler[rng.integers(0, len(filler), n)])
    custom = ~looked & (rng.random(n) < 0.12)
    version = np.where(custom, subs["adsh"][s], "us-gaap/2021")
    period = subs["period"][s]
    prior = rng.random(n) < 0.4
    ddate = np.where(prior, np.where(period == "20201231", "20191231", "20200331"), period)
    qtrs_choice = np.array(["0", "1", "4"])[rng.integers(0, 3, n)]
    qtrs = np.where(looked, np.where(kinds[li] == 0, "0", np.where(rng.random(n) < 0.7, "4",
                                                                   "1")), qtrs_choice)
    uom = np.where(rng.random(n) < 0.05, "shares", "USD")
    seg_n = rng.integers(0, 40, n)
    has_seg = rng.random(n) < 0.35
    segments = np.where(has_seg, np.char.add(np.char.add("BusinessSegments=Segment",
                                                         seg_n.astype(str)), ";"), "")
    coreg = np.where(rng.random(n) < 0.02, "SubsidiaryIssuerLlc", "")
    value = np.char.add(rng.integers(-10**9, 10**11, n).astype(str), ".0000")
    value = np.where(rng.random(n) < 0.01, "", value)
    foot = np.where(rng.random(n) < 0.005, 'As adjusted; see "Note 2" for the change.', "")
    cols = [subs["adsh"][s], tag, version, ddate, qtrs, uom, segments, coreg, value, foot]
    return pa.table([pa.array(c) for c in cols], names=NUM_HEADER)


def _core_facts(subs: dict[str, np.ndarray]) -> pa.Table:
    """Every annual report gets each looked-for tag at its period end (consolidated)."""
    idx = np.flatnonzero(subs["annual"])
    rows = len(idx) * len(LOOKED_FOR)
    s = np.repeat(idx, len(LOOKED_FOR))
    names = np.tile([t for t, _ in LOOKED_FOR], len(idx))
    qtrs = np.tile([str(q) for _, q in LOOKED_FOR], len(idx))
    rng = np.random.default_rng(1)
    value = np.char.add(rng.integers(10**6, 10**10, rows).astype(str), ".0000")
    cols = [subs["adsh"][s], names, np.full(rows, "us-gaap/2021"), subs["period"][s], qtrs,
            np.full(rows, "USD"), np.full(rows, ""), np.full(rows, ""), value, np.full(rows, "")]
    return pa.table([pa.array(c) for c in cols], names=NUM_HEADER)


def build_quarter(facts: int = FACTS, *, rebuild: bool = False, seed: int = 0,
                  data_dir: Path = DATA) -> Path:
    """Write the synthetic quarter zip (cached in ``data_dir``) and return its path."""
    data_dir.mkdir(parents=True, exist_ok=True)
    out = data_dir / f"sec-synthetic-{facts}.zip"
    if out.exists() and not rebuild:
        return out
    rng = np.random.default_rng(seed)
    subs = _submissions(rng)
    filler = np.array(_filler_tags(2_000))
    work = data_dir / f"sec-synthetic-{facts}"
    work.mkdir(exist_ok=True)
    _write_sub(work / "sub.txt", subs, rng)
    opts = pacsv.WriteOptions(delimiter="\t", quoting_style="needed")
    core = _core_facts(subs)
    schema = core.schema
    with pacsv.CSVWriter(work / "num.txt", schema, write_options=opts) as writer:
        writer.write_table(core)
        left = facts - core.num_rows
        while left > 0:
            n = min(CHUNK, left)
            writer.write_table(_fact_chunk(rng, subs, n, filler))
            left -= n
    tmp = out.with_suffix(".zip.tmp")
    with zipfile.ZipFile(tmp, "w", zipfile.ZIP_DEFLATED, compresslevel=1) as zf:
        zf.write(work / "sub.txt", "sub.txt")
        zf.write(work / "num.txt", "num.txt")
    tmp.replace(out)
    for f in work.iterdir():
        f.unlink()
    work.rmdir()
    return out


_CHILD = r"""
import json, resource, sys, time
t0 = time.perf_counter()
from levgap.ingest.sec import import_sec
result = import_sec([sys.argv[1]])
seconds = time.perf_counter() - t0
p = result.panel
print(json.dumps({
    "seconds": seconds,
    "peak_rss_mb": peak_kb() / 1024.0,
    "panel_rows": int(len(p)),
    "assets_share": float(p["total_assets"].notna().mean()) if len(p) else 0.0,
    "source_rows": int(len(result.sources)),
}))
"""


def run(facts: int = FACTS, *, rebuild: bool = False, data_dir: Path = DATA) -> dict[str, Any]:
    """Build (or reuse) the synthetic quarter, import it in a subprocess, return the figures.

    Parameters
    ----------
    facts : int, default=3_000_000
        Rows of num.txt.
    rebuild : bool, default=False
        Rebuild the quarter even when a cached one exists.
    data_dir : pathlib.Path, default=benchmark/data
        Where the quarter is cached.

    Returns
    -------
    dict
        ``name``, ``facts``, ``num_txt_mb`` (uncompressed), ``zip_mb``, ``seconds`` (import,
        including the import of levgap), ``peak_rss_mb`` (of the importing process),
        ``goal_rss_mb``, ``rss_ok``, ``panel_rows``, ``assets_share``, ``build_seconds``.
    """
    t0 = time.perf_counter()
    path = build_quarter(facts, rebuild=rebuild, data_dir=data_dir)
    build_seconds = time.perf_counter() - t0
    with zipfile.ZipFile(path) as zf:
        num_mb = zf.getinfo("num.txt").file_size / 2**20
    proc = subprocess.run([sys.executable, "-c", child_prelude() + _CHILD, str(path)],
                          capture_output=True, text=True, check=False)
    if proc.returncode != 0:
        raise RuntimeError(f"the import subprocess failed:\n{proc.stderr[-2000:]}")
    child = json.loads(proc.stdout.strip().splitlines()[-1])
    return {
        "name": "sec_import",
        "facts": facts,
        "num_txt_mb": round(num_mb, 1),
        "zip_mb": round(path.stat().st_size / 2**20, 1),
        "seconds": round(child["seconds"], 2),
        "peak_rss_mb": round(child["peak_rss_mb"], 1),
        "goal_rss_mb": GOAL_RSS_MB,
        "rss_ok": child["peak_rss_mb"] < GOAL_RSS_MB,
        "panel_rows": child["panel_rows"],
        "assets_share": round(child["assets_share"], 3),
        "build_seconds": round(build_seconds, 1),
    }


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--facts", type=int, default=FACTS)
    parser.add_argument("--rebuild", action="store_true")
    args = parser.parse_args(argv)
    figures = run(args.facts, rebuild=args.rebuild)
    print(json.dumps(figures, indent=2))
    return 0 if figures["rss_ok"] else 1


if __name__ == "__main__":
    raise SystemExit(main())
