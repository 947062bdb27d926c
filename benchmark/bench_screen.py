"""Benchmark of the analyst's screen (issue 13): the report's firm table at 50,000 firms, and
the cost of ``raw_value`` in ``drivers.csv`` at a million firm-years.

1. **Report at about 50,000 firms.** A synthetic panel (``synth.py``) of ``10.5 x --firms``
   firm-years over ten years (firms enter and leave: 45,913 in the last year with the
   defaults; the slow test in ``tests/test_report_html.py`` checks exactly 50,000) goes
   through ``levgap analyze --measure both`` (CSV, with the report) in a child process; the
   page's size, the share of it that is the firm table's embedded data, and the time headless
   Chromium takes to load the page, unpack the data and show a searched firm
   (``report.html#q=ID``, ``--dump-dom``) are reported. Goal: page under 10 MB.
2. **raw_value at 1M firm-years.** ``drivers`` of a million firm-years and both measures is
   ten million rows. The same frame, with its 2% of clipped values in ``raw_value`` (the share
   on the demo), is written as CSV and as Parquet with and without the column, through
   levgap's own table writer; seconds (one run each, interleaved, stated) and bytes.

Run::

    python benchmark/bench_screen.py [--firms 50000] [--driver-rows 10000000]

Writes ``benchmark/RESULTS-screen.md``. Panels and runs go under ``benchmark/data/``
(git-ignored).
"""

from __future__ import annotations

import argparse
import io
import os
import platform
import re
import shutil
import subprocess
import sys
import time
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent
DATA = HERE / "data"
GOAL_BYTES = 10_000_000
CHROMIUM_FLAGS = ("--headless", "--no-sandbox", "--disable-gpu", "--disable-quic",
                  "--no-first-run", "--disable-background-networking",
                  "--disable-component-update", "--disable-sync", "--disable-dev-shm-usage")


def report_at(firms: int) -> dict:
    sys.path.insert(0, str(HERE))
    import pyarrow.parquet as pq
    from synth import SynthSpec, ensure_panel

    years = 10
    spec = SynthSpec(rows=int(firms * 10.5), industries=70, years=years, seed=1313,
                     id_prefix="SCR")
    paths = ensure_panel(spec)
    table = pq.read_table(paths["parquet"], columns=["firm_id", "fiscal_year"])
    last = int(max(table["fiscal_year"].to_pylist()))
    fy = np.asarray(table["fiscal_year"].to_numpy())
    n_last = int((fy == last).sum())
    out = DATA / f"screen-run-{spec.stem}"
    if out.exists():
        shutil.rmtree(out)
    t0 = time.perf_counter()
    proc = subprocess.run([sys.executable, "-m", "levgap", "analyze", str(paths["csv"]),
                           "--out", str(out), "--quiet"], capture_output=True, text=True)
    seconds = time.perf_counter() - t0
    if proc.returncode != 0:
        raise SystemExit(proc.stderr)
    page = out / "report.html"
    text = page.read_text(encoding="utf-8")
    data = len(re.search(r'id="u-data">([^<]*)</script>', text).group(1))
    result = {"rows": spec.rows, "firms_last_year": n_last, "years": years,
              "analyze_s": seconds, "page_bytes": page.stat().st_size, "data_bytes": data}
    chromium = shutil.which("chromium") or "/usr/bin/chromium"
    if Path(chromium).exists():
        firm = str(table["firm_id"][int(np.flatnonzero(fy == last)[n_last // 2])])
        profile = DATA / "chromium-profile"
        shutil.rmtree(profile, ignore_errors=True)
        t0 = time.perf_counter()
        run = subprocess.run([chromium, *CHROMIUM_FLAGS, f"--user-data-dir={profile}",
                              "--virtual-time-budget=20000", "--dump-dom",
                              page.resolve().as_uri() + f"#q={firm}"],
                             capture_output=True, text=True, timeout=300)
        result["chromium_s"] = time.perf_counter() - t0
        result["chromium_found"] = f'data-firm="{firm}"' in run.stdout
    return result


def raw_value_cost(rows: int) -> dict:
    import pandas as pd

    from levgap.report.tables import _table_writer

    rng = np.random.default_rng(0)
    k = 5
    firm_years = rows // (2 * k)
    ids = np.array([f"SYN{i:07d}" for i in range(firm_years // 10 + 1)], dtype=object)
    frame = pd.DataFrame({
        "firm_id": pd.array(np.repeat(ids, 10 * 2 * k)[:rows], dtype="str"),
        "fiscal_year": np.tile(np.repeat(np.arange(2015, 2025), 2 * k), rows)[:rows],
        "measure": pd.array(np.tile(np.repeat(["book", "market"], k), rows // (2 * k) + 1)
                            [:rows], dtype="str"),
        "driver": pd.array(np.tile(["tangibility", "profitability", "earnings_volatility",
                                    "size", "market_to_book"], rows // k + 1)[:rows],
                           dtype="str"),
        "firm_value": rng.normal(0.3, 0.2, rows),
        "raw_value": np.where(rng.random(rows) < 0.02, rng.normal(0.3, 0.6, rows), np.nan),
        "peer_value": rng.normal(0.3, 0.1, rows),
        "contribution": rng.normal(0, 0.02, rows),
    })
    out: dict = {"rows": rows, "clipped_share": float(frame["raw_value"].notna().mean())}
    for fmt in ("csv", "parquet"):
        for label, f in (("with", frame), ("without", frame.drop(columns=["raw_value"]))):
            write = _table_writer(f, fmt, None)
            buf = io.BytesIO()
            t0 = time.perf_counter()
            write(buf)
            out[f"{fmt}_{label}_s"] = time.perf_counter() - t0
            out[f"{fmt}_{label}_bytes"] = buf.getbuffer().nbytes
    return out


def write_results(report: dict, raw: dict) -> Path:
    from levgap import glossary as g

    load = os.getloadavg()[0]
    goal = "met" if report["page_bytes"] < GOAL_BYTES else "NOT MET"
    lines = [
        "# The analyst's screen (`benchmark/bench_screen.py`)",
        "",
        f"## The report's firm table at {report['firms_last_year']:,} firms",
        "",
        f"A synthetic panel of {report['rows']:,} firm-years over {report['years']} fiscal "
        f"years, {report['firms_last_year']:,} firms in the last one, through `levgap analyze "
        "--measure both` (CSV outputs and the report) in a child process.",
        "",
        "| measure | value | goal |",
        "|---|---|---|",
        f"| report.html | {report['page_bytes'] / 1e6:.2f} MB | < 10 MB: {goal} |",
        f"| of which the firm table's embedded data | {report['data_bytes'] / 1e6:.2f} MB | |",
        f"| bytes per firm of the last year | "
        f"{report['page_bytes'] / report['firms_last_year']:.0f} | |",
        f"| `levgap analyze`, whole run, wall | {report['analyze_s']:.1f} s | |",
    ]
    if "chromium_s" in report:
        lines.append(f"| headless Chromium: load, unpack, search one firm (`--dump-dom`), wall | "
                     f"{report['chromium_s']:.1f} s (found: {report['chromium_found']}) | |")
    lines += [
        "",
        "## `raw_value` in `drivers.csv` at 1M firm-years",
        "",
        f"{raw['rows']:,} driver rows (a million firm-years, both measures, five drivers), "
        f"{100 * raw['clipped_share']:.1f}% of them with a raw value (the share on the "
        "demo), written by levgap's table writer to memory; one run each, interleaved.",
        "",
        "| format | with raw_value | without | cost |",
        "|---|---|---|---|",
    ]
    for fmt in ("csv", "parquet"):
        w, wo = raw[f"{fmt}_with_s"], raw[f"{fmt}_without_s"]
        bw, bwo = raw[f"{fmt}_with_bytes"], raw[f"{fmt}_without_bytes"]
        lines.append(f"| {fmt} | {w:.1f} s, {bw / 1e6:.0f} MB | {wo:.1f} s, {bwo / 1e6:.0f} MB"
                     f" | {g.signed(100 * (w / wo - 1), 0)}% time, "
                     f"{g.signed(100 * (bw / bwo - 1), 1)}% bytes |")  # no negative zero
    lines += [
        "",
        f"Machine: {platform.machine()}, {os.cpu_count()} cores, Python "
        f"{platform.python_version()}; 1-minute load average at the end {load:.2f} (a shared "
        "machine: wall times vary with other work).",
        "",
    ]
    path = HERE / "RESULTS-screen.md"
    path.write_text("\n".join(lines), encoding="utf-8")
    return path


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--firms", type=int, default=50_000)
    ap.add_argument("--driver-rows", type=int, default=10_000_000)
    a = ap.parse_args()
    report = report_at(a.firms)
    print(report)
    raw = raw_value_cost(a.driver_rows)
    print(raw)
    print(f"written {write_results(report, raw)}")


if __name__ == "__main__":
    main()
