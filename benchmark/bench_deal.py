"""Benchmark of the deal check: a merger and a recapitalisation scored on the demo.

Goal (issue 12): ``levgap proforma`` with a merger scenario, and with a recapitalisation
scenario, each runs on the demo in under 2 s. Measured as a user meets it: the whole command
in a fresh child process (interpreter start-up and imports included), median of ``repeat``
runs after one warm-up, the two files interleaved; and, beside it, ``levgap.proforma`` in
process (the work itself, imports paid once). The demo's results folder is written once
under ``benchmark/data/`` (git-ignored).

Run::

    python benchmark/bench_deal.py [--repeat 5]

``run(repeat, quick) -> dict`` serves the benchmark suite (``run.py`` lists it among the
other benchmarks); run alone, it also writes ``benchmark/RESULTS-deal.md``.
"""

from __future__ import annotations

import argparse
import json
import os
import platform
import resource
import statistics
import subprocess
import sys
import time
from pathlib import Path
from typing import Any

HERE = Path(__file__).resolve().parent
DATA = HERE / "data"
GOAL_S = 2.0
FIRM = "TR0144"
SCENARIOS = {
    "merger": """
[assumptions]
tax_rate = 0.25
interest_rate = 0.065
risk_free_rate = 0.03

[[scenario]]
name = "merge TR0145"
merge_with = "TR0145"
merge_price = 250.0
debt_raised = 250.0
""",
    "recap": """
[assumptions]
tax_rate = 0.25
interest_rate = 0.065
risk_free_rate = 0.03

[[scenario]]
name = "recap 200"
debt_raised = 200.0
equity_bought_back = 200.0
""",
}


def _levgap() -> list[str]:
    exe = Path(sys.executable).with_name("levgap")
    return [str(exe)] if exe.exists() else [sys.executable, "-m", "levgap"]


def demo_results(work: Path) -> Path:
    """The demo's results folder (``levgap demo``), written once (again when a folder left by
    an older levgap no longer verifies)."""
    from levgap.errors import OutputError
    from levgap.outputs import verify_run

    out = work / "deal-demo"
    try:
        fresh = (out / "model.json").is_file() and verify_run(out) is not None
    except OutputError:
        fresh = False
    if not fresh:
        subprocess.run([*_levgap(), "demo", "--out", str(out), "--force"], check=True,
                       capture_output=True, text=True)
    return out


def _child(out: Path, scenario: Path) -> tuple[float, float]:
    """Wall time and CPU time (user + system) of one ``levgap proforma`` process."""
    before = resource.getrusage(resource.RUSAGE_CHILDREN)
    t0 = time.perf_counter()
    subprocess.run([*_levgap(), "proforma", str(out), FIRM, "--scenario", str(scenario)],
                   check=True, capture_output=True, text=True)
    wall = time.perf_counter() - t0
    after = resource.getrusage(resource.RUSAGE_CHILDREN)
    return wall, (after.ru_utime - before.ru_utime) + (after.ru_stime - before.ru_stime)


def run(repeat: int = 5, quick: bool = False, data_dir: Path = DATA,
        demo: Path | None = None) -> dict[str, Any]:
    """Median wall times of the merger and the recapitalisation, child process and in process.

    Parameters
    ----------
    repeat : int, default=5
        Timed runs of each scenario (1 with ``quick``, and no warm-up).
    quick : bool, default=False
        One run each, no warm-up (the smoke test).
    data_dir : pathlib.Path, default=benchmark/data
        Where the scenario files and, unless ``demo`` is given, the demo's results go.
    demo : pathlib.Path, optional
        A results folder written by ``levgap demo``, used instead of writing one.

    Returns
    -------
    dict
        ``<name>_command_s`` (fresh process, wall), ``<name>_command_cpu_s`` (its user plus
    system CPU time), ``<name>_in_process_s`` (``levgap.proforma``),
        ``goal_s``, ``goal_met``, the load average at the start, and every run.
    """
    import levgap

    data_dir.mkdir(parents=True, exist_ok=True)
    out = demo if demo is not None else demo_results(data_dir)
    files = {}
    for name, text in SCENARIOS.items():
        files[name] = data_dir / f"deal-{name}.toml"
        files[name].write_text(text, encoding="utf-8")
    repeat = 1 if quick else repeat
    load = os.getloadavg()[0] if hasattr(os, "getloadavg") else float("nan")
    runs: dict[str, list[float]] = {f"{n}_command_s": [] for n in SCENARIOS}
    runs.update({f"{n}_command_cpu_s": [] for n in SCENARIOS})
    runs.update({f"{n}_in_process_s": [] for n in SCENARIOS})
    if not quick:
        for name in SCENARIOS:  # warm-up: file caches, the first import of each module
            _child(out, files[name])
            levgap.proforma(out, FIRM, files[name])
    for _ in range(repeat):
        for name in SCENARIOS:
            wall, cpu = _child(out, files[name])
            runs[f"{name}_command_s"].append(wall)
            runs[f"{name}_command_cpu_s"].append(cpu)
            t0 = time.perf_counter()
            levgap.proforma(out, FIRM, files[name])
            runs[f"{name}_in_process_s"].append(time.perf_counter() - t0)
    result: dict[str, Any] = {k: statistics.median(v) for k, v in runs.items()}
    result["goal_s"] = GOAL_S
    result["goal_met"] = all(result[f"{n}_command_s"] < GOAL_S for n in SCENARIOS)
    result["load_average_at_start"] = load
    result["repeat"] = repeat
    result["runs"] = runs
    return result


def _markdown(res: dict[str, Any]) -> str:
    rows = "\n".join(
        f"| {name} | {res[f'{name}_command_s']:.2f} | {res[f'{name}_command_cpu_s']:.2f} | "
        f"{res[f'{name}_in_process_s']:.2f} | "
        f"{'met' if res[f'{name}_command_s'] < GOAL_S else 'NOT MET'} |"
        for name in SCENARIOS)
    return f"""# Deal check timing (`benchmark/bench_deal.py`)

Goal: a merger scenario and a recapitalisation scenario each run on the demo in under
{GOAL_S:.0f} s (`levgap proforma demo-out {FIRM} --scenario FILE`, a fresh process each time,
interpreter start-up and imports included). Median of {res['repeat']} runs after a warm-up;
in process: `levgap.proforma(...)` with the imports already paid.

| scenario | command, wall s | command, CPU s | in process, wall s | goal (wall) |
|---|---|---|---|---|
{rows}

Machine: {platform.machine()}, {os.cpu_count()} cores, Python {platform.python_version()};
1-minute load average at the start {res['load_average_at_start']:.2f} (a shared machine: other
work slows every wall time; the CPU time of the command, user plus system, is what it costs
when it has a core to itself, start-up included). Every run: `{json.dumps(res['runs'])}`.
"""


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--repeat", type=int, default=5)
    args = ap.parse_args(argv)
    res = run(repeat=args.repeat)
    (HERE / "RESULTS-deal.md").write_text(_markdown(res), encoding="utf-8")
    print(json.dumps({k: v for k, v in res.items() if k != "runs"}, indent=2))
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
