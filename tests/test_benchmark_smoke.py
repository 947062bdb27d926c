"""Smoke test of the benchmark suite: `benchmark/run.py --quick` at 10k firm-years.

It checks that every figure and file is produced, so the suite cannot rot; it asserts no
timings (those depend on the machine and are reported, not tested).
"""

from __future__ import annotations

import json
import subprocess
import sys
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]


@pytest.mark.slow
def _files(folder: Path) -> dict[Path, int]:
    return {p: p.stat().st_mtime_ns for p in folder.rglob("*")} if folder.is_dir() else {}


def test_benchmark_suite_runs_at_10k(tmp_path: Path) -> None:
    results = tmp_path / "results"
    shared = _files(ROOT / "benchmark" / "data")
    proc = subprocess.run(
        [sys.executable, str(ROOT / "benchmark" / "run.py"), "--sizes", "10k", "--repeat", "1",
         "--quick", "--data-dir", str(tmp_path / "data"), "--work-dir", str(tmp_path / "work"),
         "--results-dir", str(results)],
        capture_output=True, text=True, timeout=600,
    )
    assert proc.returncode == 0, proc.stderr[-3000:]
    res = json.loads((results / "results.json").read_text())
    md = (results / "RESULTS.md").read_text()
    assert (results / "profile-10k.txt").stat().st_size > 0

    fits = res["sizes"]["10k"]["fits"]
    for key in ("a_s", "b_s", "a2_s", "b2_s", "c_s", "b_over_a", "b2_over_a2", "c_over_b",
                "b_cpu_s", "b2_cpu_s"):
        assert fits[key] > 0, key
    # (a), (b) and (c) solve the same model, (a2) and (b2) the same fractional model: same
    # estimates, same clustered errors.
    assert fits["max_abs_diff_coef_b_a"] < 1e-8
    assert fits["max_rel_diff_se_b_a"] < 1e-8
    assert fits["max_rel_diff_se_c_a"] < 1e-8
    assert fits["max_abs_diff_coef_b2_a2"] < 1e-8
    assert fits["max_rel_diff_se_b2_a2"] < 1e-8

    e2e = res["sizes"]["10k"]["end_to_end"]
    for run in ("default_linear", "default_fractional", "parquet_linear",
                "parquet_fractional", "lean", "lean_csv"):
        assert "error" not in e2e[run], e2e[run]
        assert e2e[run]["seconds"] > 0 and e2e[run]["rss_mb"] > 0, run
        assert e2e[run]["cpu_s"] > 0, run
    contract = {"targets", "drivers", "coefficients", "model_fit", "exclusions"}
    assert ({f"{t}.csv" for t in contract} | {"run.json", "report.html"}
            <= set(e2e["outputs_default"]))
    assert {f"{t}.parquet" for t in contract} | {"run.json"} <= set(e2e["outputs_parquet"])
    for key in ("default_linear_over_lean_csv", "default_fractional_over_lean_csv",
                "parquet_linear_over_lean", "parquet_fractional_over_lean",
                "default_linear_over_lean_csv_rss"):
        assert e2e[key] > 0, key

    unseen = res["unseen"]
    assert unseen["time_ratio"] > 0 and unseen["rss_ratio"] > 0
    for cmd in ("--help", "--version", "check", "screen", "explain", "template"):
        assert "error" not in res["startup"][cmd], (cmd, res["startup"][cmd])
        assert res["startup"][cmd]["seconds"] > 0
    assert set(res["extra"]) == {"bench_read", "bench_sec", "bench_deal"}
    for name, extra in res["extra"].items():
        assert extra["status"] == "ok", (name, extra)
        assert extra["kwargs"]["data_dir"] == str(tmp_path / "data"), name
    deal = res["extra"]["bench_deal"]
    assert deal["kwargs"]["demo"] == str(tmp_path / "work" / "startup" / "demo")
    # Nothing written to the repository's benchmark/data (tests run in parallel).
    assert _files(ROOT / "benchmark" / "data") == shared
    for key in ("merger_command_s", "recap_command_s", "merger_in_process_s",
                "recap_in_process_s"):
        assert deal["result"][key] > 0, key

    goals = {g["goal"] for g in res["goals"]}
    assert any(g.startswith("(b)/(a)") for g in goals)
    assert any(g.startswith("(c)/(b)") for g in goals)
    for heading in ("## Goals", "## Model fit", "## End to end", "## Start-up",
                    "## A panel the project has never seen", "## Other benchmarks"):
        assert heading in md
