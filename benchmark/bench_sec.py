"""Benchmark of the SEC importer on synthetic quarters of modern size, in the real layout.

Builds (once; cached under ``benchmark/data/``, which git ignores) quarters of the SEC
Financial Statement Data Sets in the current layout, each holding ``sub.txt`` (6,500
submissions, 5,000 of them 10-K reports, the rest 10-Q), ``num.txt`` (about 3 million facts,
400 MB), ``pre.txt`` (about 2.5 million presentation lines) and ``tag.txt`` (about 125,000
tags), with what makes real quarters costly: standard and filer-defined tags, balance sheets
presented line by line with debt lines and subtotals, segments, co-registrants, prior-period
and quarterly facts, empty values and quoted text with doubled quotes. Then:

* imports one quarter in a fresh subprocess (so that nothing built here counts) and records
  its wall time and peak resident memory (goal: under 1.5 GB);
* imports several quarters at once with the quarters read in parallel processes, and records
  the wall time, the parent's peak memory and the largest worker's.

Run::

    python benchmark/bench_sec.py [--facts 3000000] [--quarters 4] [--workers 2] [--rebuild]

``run() -> dict`` serves the benchmark suite. Goals (issues 5 and 15): peak RSS of a modern
quarter, pre.txt and tag.txt included, under 1.5 GB; parallel quarters within bounded memory.
"""

from __future__ import annotations

import argparse
import json
import os
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
SUBMISSIONS = 6_500
ANNUAL = 5_000
PRE_PER_SUBMISSION = 385  # 6,500 x 385 = about 2.5 million presentation lines
CUSTOM_TAGS_PER_SUBMISSION = 18  # with the standard tags, about 125,000 rows of tag.txt
CHUNK = 500_000

SUB_HEADER = (
    "adsh cik name sic countryba stprba cityba zipba bas1 bas2 baph countryma stprma cityma "
    "zipma mas1 mas2 countryinc stprinc ein former changed afs wksi fye form period fy fp "
    "filed accepted prevrpt detail instance nciks aciks"
).split()
NUM_HEADER = "adsh tag version ddate qtrs uom segments coreg value footnote".split()
PRE_HEADER = "adsh report line stmt inpth rfile tag version plabel negating".split()
TAG_HEADER = "tag version custom abstract datatype iord crdr tlabel doc".split()

# Tags the importer looks for, with their period type (0 instant, 4 flow).
LOOKED_FOR = [
    ("Assets", 0), ("LiabilitiesAndStockholdersEquity", 0), ("LongTermDebtCurrent", 0),
    ("ShortTermBorrowings", 0), ("LongTermDebtNoncurrent", 0), ("LongTermDebt", 0),
    ("PropertyPlantAndEquipmentNet", 0), ("StockholdersEquity", 0), ("AssetsCurrent", 0),
    ("LiabilitiesCurrent", 0), ("Liabilities", 0), ("RetainedEarningsAccumulatedDeficit", 0),
    ("CashAndCashEquivalentsAtCarryingValue", 0), ("OperatingLeaseLiability", 0),
    ("OperatingIncomeLoss", 4), ("DepreciationDepletionAndAmortization", 4),
    ("Revenues", 4), ("RevenueFromContractWithCustomerExcludingAssessedTax", 4),
    ("InterestExpense", 4), ("ResearchAndDevelopmentExpense", 4), ("PaymentsOfDividends", 4),
]
# The balance sheet of every synthetic filing, in presentation order (tag, label, negating);
# "*" marks a filer-defined tag. The debt lines include a total that must not be added.
BALANCE_SHEET = [
    ("CashAndCashEquivalentsAtCarryingValue", "Cash and cash equivalents", 0),
    *[(f"IncreaseDecreaseInSyntheticLineItem{i:04d}", f"Current asset line {i}", 0)
      for i in range(8)],
    ("AssetsCurrent", "Total current assets", 0),
    ("PropertyPlantAndEquipmentNet", "Property, plant and equipment, net", 0),
    *[(f"DeferredTaxAssetsSyntheticLineItem{i:04d}", f"Other asset line {i}", 0)
      for i in range(6)],
    ("Assets", "Total assets", 0),
    *[(f"AccruedLiabilitiesSyntheticLineItem{i:04d}", f"Current liability line {i}", 0)
      for i in range(6)],
    ("ShortTermBorrowings", "Short-term borrowings", 0),
    ("LongTermDebtCurrent", "Current portion of long-term debt", 0),
    ("LiabilitiesCurrent", "Total current liabilities", 0),
    ("*SeniorNotesDue2031", "Senior notes due 2031", 0),
    ("LongTermDebtNoncurrent", "Long-term debt, less current portion", 0),
    ("OperatingLeaseLiability", "Operating lease liabilities", 0),
    *[(f"OtherLiabilitiesSyntheticLineItem{i:04d}", f"Other liability line {i}", 0)
      for i in range(5)],
    ("Liabilities", "Total liabilities", 0),
    *[(f"ShareBasedCompensationSyntheticLineItem{i:04d}", f"Equity line {i}", 0)
      for i in range(5)],
    ("RetainedEarningsAccumulatedDeficit", "Retained earnings", 0),
    ("StockholdersEquity", "Total stockholders' equity", 0),
    ("LiabilitiesAndStockholdersEquity", "Total liabilities and stockholders' equity", 0),
]


def _filler_tags(n: int) -> list[str]:
    stems = ("IncreaseDecreaseIn", "PaymentsFor", "ProceedsFrom", "OtherLiabilities",
             "DeferredTaxAssets", "AccruedLiabilities", "ShareBasedCompensation")
    return [f"{stems[i % len(stems)]}SyntheticLineItem{i:04d}" for i in range(n)]


def _sizes(facts: int) -> tuple[int, int]:
    """Submissions and annual reports of a quarter: the modern counts, scaled down with the
    facts for small (test) quarters."""
    n = max(200, round(SUBMISSIONS * min(1.0, facts / FACTS)))
    return n, round(n * ANNUAL / SUBMISSIONS)


def _submissions(rng: np.random.Generator, seed: int, facts: int) -> dict[str, np.ndarray]:
    n, n_annual = _sizes(facts)
    ciks = rng.choice(np.arange(1_000_000, 9_000_000), size=n, replace=False)
    adsh = np.array([f"{9_000_000_000 + c:010d}-{21 + seed:02d}-{i:06d}"
                     for i, c in enumerate(ciks)])
    annual = np.zeros(n, dtype=bool)
    annual[rng.choice(n, size=n_annual, replace=False)] = True
    year = 2020 + seed // 4
    period = np.where(annual, f"{year}1231", f"{year + 1}0331")
    return {"adsh": adsh, "cik": ciks.astype(str), "annual": annual, "period": period,
            "year": np.full(n, year)}


def _write(path: Path, header: list[str], columns: dict[str, Any]) -> None:
    table = pa.table([columns[c] for c in header], names=header)
    opts = pacsv.WriteOptions(delimiter="\t", quoting_style="needed")
    pacsv.write_csv(table, path, write_options=opts)


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
    cols["fy"] = pa.array(subs["year"].astype(str))
    cols["fp"] = pa.array(np.where(subs["annual"], "FY", "Q1"))
    cols["filed"] = pa.array(np.where(subs["annual"], "20210301", "20210505"))
    cols["fye"] = pa.array(["1231"] * n)
    _write(path, SUB_HEADER, cols)


def _write_pre(path: Path, subs: dict[str, np.ndarray], filler: np.ndarray) -> None:
    """About 385 lines a submission: the balance sheet above, then the other statements."""
    n = len(subs["adsh"])
    bs = len(BALANCE_SHEET)
    other = PRE_PER_SUBMISSION - bs
    stmts = np.array(["IS"] * 40 + ["CF"] * 70 + ["EQ"] * 180 + ["CI"] * 30
                     + ["UN"] * max(0, other - 320))[:other]
    o_tags = np.concatenate([[t for t, q in LOOKED_FOR if q == 4],
                             filler[: other - sum(q == 4 for _, q in LOOKED_FOR)]])
    writer = None
    for start in range(0, n, 500):
        idx = np.arange(start, min(n, start + 500))
        k = len(idx)
        adsh = np.repeat(subs["adsh"][idx], PRE_PER_SUBMISSION)
        bs_tags = np.array([t.lstrip("*") for t, _, _ in BALANCE_SHEET])
        bs_custom = np.array([t.startswith("*") for t, _, _ in BALANCE_SHEET])
        tags = np.tile(np.concatenate([bs_tags, o_tags]), k)
        custom = np.tile(np.concatenate([bs_custom, np.zeros(other, dtype=bool)]), k)
        version = np.where(custom, adsh, "us-gaap/2021")
        stmt = np.tile(np.concatenate([np.full(bs, "BS"), stmts]), k)
        line = np.tile(np.concatenate([np.arange(1, bs + 1), np.arange(1, other + 1)]), k)
        report = np.tile(np.concatenate([np.full(bs, 2), 3 + (np.arange(other) // 60)]), k)
        labels = np.tile(np.concatenate([[lab for _, lab, _ in BALANCE_SHEET],
                                         [f'Line "{i}" of the statement' for i in
                                          range(other)]]), k)
        cols = {"adsh": pa.array(adsh), "report": pa.array(report.astype(str)),
                "line": pa.array(line.astype(str)), "stmt": pa.array(stmt),
                "inpth": pa.array(["0"] * len(adsh)), "rfile": pa.array(["H"] * len(adsh)),
                "tag": pa.array(tags), "version": pa.array(version),
                "plabel": pa.array(labels), "negating": pa.array(["0"] * len(adsh))}
        table = pa.table([cols[c] for c in PRE_HEADER], names=PRE_HEADER)
        if writer is None:
            writer = pacsv.CSVWriter(path, table.schema, write_options=pacsv.WriteOptions(
                delimiter="\t", quoting_style="needed"))
        writer.write_table(table)
    assert writer is not None
    writer.close()


def _write_tag(path: Path, subs: dict[str, np.ndarray], filler: np.ndarray) -> None:
    standard = np.concatenate([[t for t, _ in LOOKED_FOR], filler])
    custom_names = np.array([f"SyntheticCustomItem{j:02d}" for j in
                             range(CUSTOM_TAGS_PER_SUBMISSION)] + ["SeniorNotesDue2031"])
    c_tag = np.tile(custom_names, len(subs["adsh"]))
    c_version = np.repeat(subs["adsh"], len(custom_names))
    tag = np.concatenate([standard, c_tag])
    version = np.concatenate([np.full(len(standard), "us-gaap/2021"), c_version])
    is_custom = np.concatenate([np.zeros(len(standard), dtype=int), np.ones(len(c_tag), int)])
    n = len(tag)
    _write(path, TAG_HEADER, {
        "tag": pa.array(tag), "version": pa.array(version),
        "custom": pa.array(is_custom.astype(str)), "abstract": pa.array(["0"] * n),
        "datatype": pa.array(["monetary"] * n), "iord": pa.array(["I"] * n),
        "crdr": pa.array(["credit"] * n), "tlabel": pa.array([f"Label of {t}" for t in tag]),
        "doc": pa.array(['Amount of the "item", as of the balance sheet date.'] * n),
    })


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
    year = subs["year"][s]
    ddate = np.where(prior, np.where(subs["annual"][s], (year - 1).astype(str) + "1231",
                                     year.astype(str) + "0331"), period)
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
    """Every annual report: each looked-for tag and balance-sheet line, this year and last."""
    idx = np.flatnonzero(subs["annual"])
    core = [(t, q) for t, q in LOOKED_FOR] + [
        (t.lstrip("*"), 0) for t, _, _ in BALANCE_SHEET
        if t.lstrip("*") not in {x for x, _ in LOOKED_FOR}]
    per = len(core)
    rows = len(idx) * per * 2
    s = np.tile(np.repeat(idx, per), 2)
    names = np.tile([t for t, _ in core], len(idx) * 2)
    qtrs = np.tile([str(q) for _, q in core], len(idx) * 2)
    custom = np.tile([t == "SeniorNotesDue2031" for t, _ in core], len(idx) * 2)
    year = subs["year"][s]
    back = np.repeat([0, 1], len(idx) * per)
    ddate = (year - back).astype(str).astype(object) + "1231"
    rng = np.random.default_rng(1)
    value = np.char.add(rng.integers(10**6, 10**10, rows).astype(str), ".0000")
    version = np.where(custom, subs["adsh"][s], "us-gaap/2021")
    cols = [subs["adsh"][s], names, version, ddate.astype(str), qtrs, np.full(rows, "USD"),
            np.full(rows, ""), np.full(rows, ""), value, np.full(rows, "")]
    return pa.table([pa.array(c) for c in cols], names=NUM_HEADER)


def build_quarter(facts: int = FACTS, *, rebuild: bool = False, seed: int = 0,
                  data_dir: Path = DATA) -> Path:
    """Write one synthetic quarter zip (cached in ``data_dir``) and return its path."""
    data_dir.mkdir(parents=True, exist_ok=True)
    out = data_dir / f"sec-synthetic-v2-{facts}-q{seed}.zip"
    if out.exists() and not rebuild:
        return out
    rng = np.random.default_rng(seed)
    subs = _submissions(rng, seed, facts)
    filler = np.array(_filler_tags(2_000))
    work = data_dir / f"sec-synthetic-v2-{facts}-q{seed}"
    work.mkdir(exist_ok=True)
    _write_sub(work / "sub.txt", subs, rng)
    _write_pre(work / "pre.txt", subs, filler)
    _write_tag(work / "tag.txt", subs, filler)
    opts = pacsv.WriteOptions(delimiter="\t", quoting_style="needed")
    core = _core_facts(subs)
    with pacsv.CSVWriter(work / "num.txt", core.schema, write_options=opts) as writer:
        writer.write_table(core)
        left = facts - core.num_rows
        while left > 0:
            n = min(CHUNK, left)
            writer.write_table(_fact_chunk(rng, subs, n, filler))
            left -= n
    tmp = out.with_suffix(".zip.tmp")
    with zipfile.ZipFile(tmp, "w", zipfile.ZIP_DEFLATED, compresslevel=1) as zf:
        for name in ("sub.txt", "num.txt", "pre.txt", "tag.txt"):
            zf.write(work / name, name)
    tmp.replace(out)
    for f in work.iterdir():
        f.unlink()
    work.rmdir()
    return out


_CHILD = r"""
import json, resource, sys, time
t0 = time.perf_counter()
from levgap.ingest.sec import import_sec
paths = sys.argv[2:]
result = import_sec(paths, exclude_sic=None, workers=int(sys.argv[1]))
seconds = time.perf_counter() - t0
p = result.panel
own = result.sources.loc[result.sources["role"] == "own year"]
print(json.dumps({
    "seconds": seconds,
    "peak_rss_mb": peak_kb() / 1024.0,
    "workers_peak_rss_mb": resource.getrusage(resource.RUSAGE_CHILDREN).ru_maxrss / 1024.0,
    "panel_rows": int(len(p)),
    "own_rows": int(own.drop_duplicates(["firm_id", "fiscal_year"]).shape[0]),
    "assets_share": float(p["total_assets"].notna().mean()) if len(p) else 0.0,
    "debt_share": float(p["total_debt"].notna().mean()) if len(p) else 0.0,
    "source_rows": int(len(result.sources)),
}))
"""


def _import(paths: list[Path], workers: int) -> dict[str, Any]:
    proc = subprocess.run([sys.executable, "-c", child_prelude() + _CHILD, str(workers),
                           *map(str, paths)], capture_output=True, text=True, check=False)
    if proc.returncode != 0:
        raise RuntimeError(f"the import subprocess failed:\n{proc.stderr[-2000:]}")
    return json.loads(proc.stdout.strip().splitlines()[-1])


def _rows(path: Path, member: str) -> int:
    with zipfile.ZipFile(path) as zf, zf.open(member) as fh:
        return sum(chunk.count(b"\n") for chunk in iter(lambda: fh.read(1 << 24), b"")) - 1


def run(facts: int = FACTS, *, quarters: int = 4, workers: int = 2, rebuild: bool = False,
        data_dir: Path = DATA) -> dict[str, Any]:
    """Build (or reuse) the synthetic quarters, import them in subprocesses, return figures.

    Parameters
    ----------
    facts : int, default=3_000_000
        Rows of num.txt in each quarter.
    quarters : int, default=4
        Quarters imported together with parallel processes (the first alone as well).
    workers : int, default=2
        Processes reading the quarters.
    rebuild : bool, default=False
        Rebuild the quarters even when cached ones exist.
    data_dir : pathlib.Path, default=benchmark/data
        Where the quarters are cached.

    Returns
    -------
    dict
        One quarter: ``facts``, ``pre_rows``, ``tag_rows``, ``annual_reports``,
        ``num_txt_mb`` (uncompressed), ``zip_mb``, ``seconds`` (import, including the import
        of levgap), ``peak_rss_mb`` (of the importing process), ``goal_rss_mb``, ``rss_ok``,
        ``panel_rows``, ``assets_share``, ``build_seconds``. Several quarters (``parallel_``
        keys): ``quarters``, ``workers``, ``seconds``, ``parent_peak_rss_mb``,
        ``worker_peak_rss_mb``, ``peak_bound_mb`` (parent + workers x largest worker),
        ``panel_rows``; and ``seconds_per_quarter`` of the parallel run.
    """
    t0 = time.perf_counter()
    paths = [build_quarter(facts, rebuild=rebuild, seed=k, data_dir=data_dir)
             for k in range(max(1, quarters))]
    build_seconds = time.perf_counter() - t0
    first = paths[0]
    with zipfile.ZipFile(first) as zf:
        num_mb = zf.getinfo("num.txt").file_size / 2**20
    one = _import([first], 1)
    out: dict[str, Any] = {
        "name": "sec_import",
        "facts": facts,
        "pre_rows": _rows(first, "pre.txt"),
        "tag_rows": _rows(first, "tag.txt"),
        "annual_reports": _sizes(facts)[1],
        "num_txt_mb": round(num_mb, 1),
        "zip_mb": round(first.stat().st_size / 2**20, 1),
        "seconds": round(one["seconds"], 2),
        "peak_rss_mb": round(one["peak_rss_mb"], 1),
        "goal_rss_mb": GOAL_RSS_MB,
        "rss_ok": one["peak_rss_mb"] < GOAL_RSS_MB,
        "panel_rows": one["panel_rows"],
        "own_rows": one["own_rows"],
        "assets_share": round(one["assets_share"], 3),
        "debt_share": round(one["debt_share"], 3),
        "build_seconds": round(build_seconds, 1),
    }
    if len(paths) > 1:
        many = _import(paths, workers)
        out.update({
            "parallel_quarters": len(paths),
            "parallel_workers": workers,
            "parallel_seconds": round(many["seconds"], 2),
            "parallel_seconds_per_quarter": round(many["seconds"] / len(paths), 2),
            "parallel_parent_peak_rss_mb": round(many["peak_rss_mb"], 1),
            "parallel_worker_peak_rss_mb": round(many["workers_peak_rss_mb"], 1),
            "parallel_peak_bound_mb": round(many["peak_rss_mb"]
                                            + workers * many["workers_peak_rss_mb"], 1),
            "parallel_panel_rows": many["panel_rows"],
            "cpus": os.cpu_count(),
        })
    return out


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--facts", type=int, default=FACTS)
    parser.add_argument("--quarters", type=int, default=4)
    parser.add_argument("--workers", type=int, default=2)
    parser.add_argument("--rebuild", action="store_true")
    args = parser.parse_args(argv)
    figures = run(args.facts, quarters=args.quarters, workers=args.workers,
                  rebuild=args.rebuild)
    print(json.dumps(figures, indent=2))
    return 0 if figures["rss_ok"] else 1


if __name__ == "__main__":
    raise SystemExit(main())
