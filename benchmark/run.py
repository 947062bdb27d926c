"""levgap's benchmark suite (entry point of ``make bench``).

Usage::

    python benchmark/run.py [--sizes 10k,100k,1m] [--repeat 3] [--quick]

Every figure is the median of ``--repeat`` runs after one warm-up run (``--quick`` skips the
warm-ups and shrinks the never-seen panel; it is what the smoke test uses). Figures that are
compared with each other come from the same invocation, and their runs are interleaved, so
a busy neighbour on the machine slows both sides of a ratio alike. Ratios, not absolute
times, are the claims.

Writes ``RESULTS.md``, ``results.json`` and ``profile-<size>.txt`` into ``--results-dir``
(default: this folder). See ``benchmark/README.md`` for what each figure means.
"""

from __future__ import annotations

import argparse
import datetime as dt
import importlib.util
import inspect
import json
import os
import platform
import shutil
import statistics
import subprocess
import sys
import threading
import time
from collections.abc import Callable
from importlib.metadata import PackageNotFoundError, version
from pathlib import Path
from typing import Any

import numpy as np

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE))

import lean  # noqa: E402
import limit  # noqa: E402
import newton  # noqa: E402
import synth  # noqa: E402

GOAL_SIZE = 1_000_000
UNSEEN = synth.SynthSpec(rows=300_000, industries=45, years=15, seed=7, last_year=2019,
                         no_market_share=0.10, id_prefix="UNS", order="year")
STARTUP_GOAL_S = 0.5
GOALS = {
    "b_over_a": 1.5,  # at most
    "c_over_b": 20.0,  # at least
    "b2_over_a2": 2.0,  # at most: fractional fit / plain Newton loop (issue 10)
    "d_over_lean_time": 3.0,  # at most: linear model
    "d_over_lean_rss": 2.5,  # at most
    "frac_over_lean_time": 6.0,  # at most: the fractional default (issues 10 and 15)
    "fit_growth": 11.0,  # at most, for 10x the rows
    "fit_10m_s": 3.0,  # at most: the linear fit alone at 10m firm-years
}
MODELS = ("linear", "fractional")


# ---------------------------------------------------------------------------------------------
# Measuring


def label(rows: int) -> str:
    if rows % 1_000_000 == 0:
        return f"{rows // 1_000_000}m"
    if rows % 1_000 == 0:
        return f"{rows // 1_000}k"
    return str(rows)


def median(xs: list[float]) -> float:
    return float(statistics.median(xs)) if xs else float("nan")


def timed(fn: Callable[[], Any]) -> tuple[float, Any]:
    t0 = time.perf_counter()
    out = fn()
    return time.perf_counter() - t0, out


def load() -> float:
    """The one-minute load average (other work on the machine)."""
    return round(os.getloadavg()[0], 2) if hasattr(os, "getloadavg") else float("nan")


def interleave(fns: dict[str, Callable[[], Any]], repeat: int, warmup: int) -> dict[str, list]:
    """Run each function ``warmup`` times, then ``repeat`` rounds of all of them in turn.

    Returns the wall times per function, and under ``<key>_cpu`` the CPU times (this
    process, all threads): on a shared machine the CPU time is what a run costs when it has
    the cores to itself."""
    for _ in range(warmup):
        for fn in fns.values():
            fn()
    times: dict[str, list] = {k: [] for k in fns}
    times.update({f"{k}_cpu": [] for k in fns})
    for _ in range(repeat):
        for k, fn in fns.items():
            c0 = time.process_time()
            times[k].append(timed(fn)[0])
            times[f"{k}_cpu"].append(time.process_time() - c0)
    return times


# A tiny intermediate process starts each measured command and reports the command's own
# peak RSS (RUSAGE_CHILDREN of a process that has had no other child). Starting the command
# straight from this process would not do: the child's high-water mark would include this
# process's memory, shared between fork and exec.
_WRAPPER = (
    "import json, resource, subprocess, sys, time\n"
    "t0 = time.perf_counter()\n"
    "rc = subprocess.call(sys.argv[2:])\n"
    "t = time.perf_counter() - t0\n"
    "ru = resource.getrusage(resource.RUSAGE_CHILDREN)\n"
    "open(sys.argv[1], 'w').write(json.dumps({'seconds': t, 'rss_kb': ru.ru_maxrss, 'rc': rc,\n"
    "    'cpu': ru.ru_utime + ru.ru_stime}))\n"
)


def _drain(fd: int, sink: Path) -> None:
    with open(sink, "wb") as fh:
        while True:
            try:
                chunk = os.read(fd, 65536)
            except OSError:
                break
            if not chunk:
                break
            fh.write(chunk)


def run_child(cmd: list[str], *, log: Path, tty_stderr: bool = False) -> dict:
    """Run ``cmd`` in a fresh child: wall time and the child's peak RSS.

    With ``tty_stderr`` the child's stderr is a pseudo-terminal (so a progress bar renders;
    what it draws is kept in ``<log>.err``); otherwise a file. stdout always goes to a file.
    """
    log.parent.mkdir(parents=True, exist_ok=True)
    out_path, err_path = log.with_suffix(".out"), log.with_suffix(".err")
    rec = log.with_suffix(".json")
    rec.unlink(missing_ok=True)
    env = dict(os.environ)
    wrapped = [sys.executable, "-S", "-c", _WRAPPER, str(rec), *cmd]
    if tty_stderr:
        import pty

        master, slave = pty.openpty()
        env.setdefault("TERM", "xterm-256color")
        with open(out_path, "wb") as out:
            proc = subprocess.Popen(wrapped, stdout=out, stderr=slave,
                                    stdin=subprocess.DEVNULL, env=env)
        os.close(slave)
        drain = threading.Thread(target=_drain, args=(master, err_path), daemon=True)
        drain.start()
        proc.wait()
        drain.join(timeout=10)
        os.close(master)
    else:
        with open(out_path, "wb") as out, open(err_path, "wb") as err:
            proc = subprocess.Popen(wrapped, stdout=out, stderr=err,
                                    stdin=subprocess.DEVNULL, env=env)
            proc.wait()
    try:
        r = json.loads(rec.read_text())
    except (OSError, ValueError):
        r = {"seconds": float("nan"), "rss_kb": float("nan"), "rc": proc.returncode or -1,
             "cpu": float("nan")}
    result = {"seconds": r["seconds"], "rss_mb": r["rss_kb"] / 1024.0, "rc": r["rc"],
              "cpu": r.get("cpu", float("nan")), "load": load()}
    if r["rc"] != 0:
        tail = err_path.read_text(errors="replace")[-2000:] if err_path.exists() else ""
        result["error"] = tail.strip().splitlines()[-1] if tail.strip() else "non-zero exit"
    return result


def child_series(cmds: dict[str, Callable[[], list[str]]], repeat: int, warmup: int,
                 logdir: Path, tty: frozenset[str] = frozenset(),
                 repeats: dict[str, int] | None = None,
                 warm: frozenset[str] | None = None) -> dict[str, dict]:
    """Interleaved child runs: per command, median seconds and median peak RSS (MB).

    ``repeats`` lowers the number of timed runs of some commands (the slow ones at 1m);
    ``warm`` restricts the warm-up runs to some commands.
    """
    repeats = repeats or {}
    runs: dict[str, list] = {k: [] for k in cmds}
    warmed: dict[str, int] = {k: 0 for k in cmds}
    for w in range(warmup):
        for k, make in cmds.items():
            if warm is not None and k not in warm:
                continue
            r = run_child(make(), log=logdir / f"{k}-warmup{w}", tty_stderr=k in tty)
            warmed[k] += 1
            if r["rc"] != 0:
                runs[k].append(r)
    for i in range(repeat):
        for k, make in cmds.items():
            if runs[k] and runs[k][-1]["rc"] != 0:
                continue  # a command that fails once is not timed again
            if i >= repeats.get(k, repeat):
                continue
            runs[k].append(run_child(make(), log=logdir / f"{k}-{i}", tty_stderr=k in tty))
    out = {}
    for k, rs in runs.items():
        ok = [r for r in rs if r["rc"] == 0]
        bad = [r for r in rs if r["rc"] != 0]
        out[k] = {
            "seconds": median([r["seconds"] for r in ok]),
            "cpu_s": median([r["cpu"] for r in ok]),
            "rss_mb": median([r["rss_mb"] for r in ok]),
            "runs": len(ok),
            "warmups": warmed[k],
            "all_seconds": [round(r["seconds"], 4) for r in ok],
            "all_cpu_s": [round(r["cpu"], 4) for r in ok],
            "all_rss_mb": [round(r["rss_mb"], 1) for r in ok],
            "load": [r["load"] for r in ok],
        }
        if bad:
            out[k]["error"] = bad[0].get("error", "failed")
    return out


# ---------------------------------------------------------------------------------------------
# The arrays of (a), (b), (c)


def model_arrays(parquet: Path) -> dict:
    """Book leverage, the five drivers and the codes, built by the lean implementation."""
    return _arrays(lean.read(parquet))


def model_arrays_in_memory(rows: int) -> dict:
    """The same arrays for a synthetic panel built in memory (the fit-only sizes: no files)."""
    import pyarrow as pa
    import pyarrow.compute as pc

    table = synth.make_table(synth.SynthSpec(rows))
    cols: dict = {"n_input": table.num_rows}
    for c in lean.TEXT:
        cols[c] = lean._codes(table[c])
    cols["fiscal_year"] = table["fiscal_year"].cast(pa.float64()).to_numpy()
    for c in lean.NUMERIC:
        cols[c] = pc.fill_null(table[c].cast(pa.float64()), np.nan).to_numpy()
    del table
    return _arrays(cols)


def _arrays(cols: dict) -> dict:
    keep, _ = lean.validate(cols)
    b = lean.build(cols, keep)
    y = b["measures"]["book"]
    firm = np.unique(b["firm"], return_inverse=True)[1]
    return {
        "y": y, "X": np.ascontiguousarray(b["X"]), "industry": b["ind"].astype(np.int64),
        "year": (b["year"] - b["year"].min()).astype(np.int64), "firm": firm.astype(np.int64),
    }


def run_limit(a: dict) -> limit.LimitFit:
    return limit.fit(a["y"], a["X"], (a["industry"], a["year"]), a["firm"])


def run_levgap_fit(a: dict) -> Any:
    from levgap.models.linear import fit_linear

    return fit_linear(a["y"], a["X"], effects=[a["industry"], a["year"]],
                      clusters=(a["firm"],), names=lean.DRIVERS)


def run_newton(a: dict) -> newton.NewtonFit:
    return newton.fit(a["y"], a["X"], (a["industry"], a["year"]), a["firm"])


def run_levgap_fractional(a: dict) -> Any:
    from levgap.models.fractional import fit_fractional

    return fit_fractional(a["y"], a["X"], effects=[a["industry"], a["year"]],
                          clusters=(a["firm"],), names=lean.DRIVERS)


def run_statsmodels(a: dict) -> Any:
    """The route a user would otherwise take: explicit dummies, OLS, firm-clustered errors."""
    import statsmodels.api as sm

    y, X = a["y"], a["X"]
    ind = np.unique(a["industry"], return_inverse=True)[1]
    yr = np.unique(a["year"], return_inverse=True)[1]
    n_i, n_y = int(ind.max()) + 1, int(yr.max()) + 1
    n = len(y)
    Z = np.zeros((n, 1 + (n_i - 1) + (n_y - 1) + X.shape[1]))
    Z[:, 0] = 1.0
    rows = np.arange(n)
    m = ind > 0
    Z[rows[m], ind[m]] = 1.0
    m = yr > 0
    Z[rows[m], n_i - 1 + yr[m]] = 1.0
    Z[:, n_i + n_y - 1:] = X
    return sm.OLS(y, Z).fit(cov_type="cluster", cov_kwds={"groups": a["firm"]})


def bench_fits(a: dict, repeat: int, warmup: int, sm_runs: int, sm_warmup: int,
               fractional: bool = True) -> dict:
    """(a) limit and (b) levgap's linear fit; (a2) the plain Newton loop and (b2) levgap's
    fractional fit; (c) statsmodels. Runs interleaved; wall and CPU times."""
    res: dict[str, Any] = {"rows": int(len(a["y"])), "load_start": load()}
    fns = {"a": lambda: run_limit(a), "b": lambda: run_levgap_fit(a)}
    if fractional:
        fns.update({"a2": lambda: run_newton(a), "b2": lambda: run_levgap_fractional(a)})
    times = interleave(fns, repeat, warmup)
    for k in fns:
        res[f"{k}_s"] = median(times[k])
        res[f"{k}_cpu_s"] = median(times[f"{k}_cpu"])
        res[f"{k}_all"] = [round(t, 4) for t in times[k]]
        res[f"{k}_cpu_all"] = [round(t, 4) for t in times[f"{k}_cpu"]]
    res["load_end"] = load()
    res["b_over_a"] = res["b_s"] / res["a_s"]
    res["b_over_a_cpu"] = res["b_cpu_s"] / res["a_cpu_s"]
    fa, fb = run_limit(a), run_levgap_fit(a)
    res["max_abs_diff_coef_b_a"] = float(np.abs(np.asarray(fb.coef)[1:] - fa.coef).max())
    res["max_rel_diff_se_b_a"] = float(
        np.abs(np.asarray(fb.std_error)[1:] / fa.std_error - 1).max())
    if fractional:
        res["b2_over_a2"] = res["b2_s"] / res["a2_s"]
        res["b2_over_a2_cpu"] = res["b2_cpu_s"] / res["a2_cpu_s"]
        fn, ff = run_newton(a), run_levgap_fractional(a)
        res["newton_iterations"], res["levgap_iterations"] = fn.iterations, ff.iterations
        res["max_abs_diff_coef_b2_a2"] = float(np.abs(np.asarray(ff.coef)[1:] - fn.coef).max())
        res["max_rel_diff_se_b2_a2"] = float(
            np.abs(np.asarray(ff.std_error)[1:] / fn.std_error - 1).max())
        del fn, ff
    if sm_runs > 0:
        import statsmodels.api  # noqa: F401  (import cost is not part of the fit)

        for _ in range(sm_warmup):
            run_statsmodels(a)
        ts, fc = [], None
        for _ in range(sm_runs):
            t, fc = timed(lambda: run_statsmodels(a))
            ts.append(t)
        k = a["X"].shape[1]
        res["c_s"] = median(ts)
        res["c_all"] = [round(t, 3) for t in ts]
        res["c_runs"], res["c_warmup"] = sm_runs, sm_warmup
        res["max_abs_diff_coef_c_a"] = float(np.abs(fc.params[-k:] - fa.coef).max())
        res["max_rel_diff_se_c_a"] = float(np.abs(fc.bse[-k:] / fa.std_error - 1).max())
        res["c_over_b"] = res["c_s"] / res["b_s"]
        del fc
    return res


# ---------------------------------------------------------------------------------------------
# End to end


def levgap_cmd() -> list[str]:
    exe = Path(sys.executable).parent / "levgap"
    return [str(exe)] if exe.exists() else [sys.executable, "-m", "levgap"]


def analyze_flags() -> tuple[list[str] | None, str]:
    """Extra flags for `levgap analyze` (no report), or None when the command is absent."""
    try:
        out = subprocess.run([*levgap_cmd(), "analyze", "--help"], capture_output=True,
                             text=True, timeout=120, env={**os.environ, "COLUMNS": "200"})
    except (OSError, subprocess.TimeoutExpired) as exc:
        return None, f"levgap not runnable: {exc}"
    if out.returncode != 0:
        return None, "`levgap analyze` is not available yet"
    flags = []
    if "--no-report" in out.stdout:
        flags.append("--no-report")
    if "--force" in out.stdout:
        flags.append("--force")
    return flags, ""


def fresh(path: Path) -> Path:
    shutil.rmtree(path, ignore_errors=True)
    return path


def read_times(paths: dict[str, Path], repeat: int, warmup: int) -> dict[str, float]:
    import pyarrow.csv as pacsv
    import pyarrow.parquet as pq

    t = interleave({"csv": lambda: pacsv.read_csv(paths["csv"]),
                    "parquet": lambda: pq.read_table(paths["parquet"])}, repeat, warmup)
    return {"read_csv_s": median(t["csv"]), "read_parquet_s": median(t["parquet"])}


def bench_end_to_end(paths: dict[str, Path], work: Path, repeat: int, warmup: int,
                     flags: list[str], *, large: bool, slow_runs_large: int,
                     with_bar: bool) -> dict:
    """The default path and the Parquet path, each model, against the lean implementation.

    - ``default_<model>``: ``levgap analyze PANEL.csv --out DIR --measure both --model M``:
      CSV in, CSV out and the report (what a user runs);
    - ``parquet_<model>``: Parquet in, Parquet out, no report;
    - ``lean_csv`` (CSV in and out) and ``lean`` (Parquet in and out): ``lean.py``.

    All interleaved; one warm-up run of ``parquet_linear`` (it warms the file cache and the
    byte-code for all). With ``with_bar`` a further command repeats ``parquet_linear`` with
    stderr a terminal, so the progress bar is drawn. At large sizes the default path runs
    ``slow_runs_large`` times.
    """
    lg = levgap_cmd()
    force = [f for f in flags if f != "--no-report"]
    cmds: dict[str, Callable[[], list[str]]] = {}
    for model in MODELS:
        cmds[f"default_{model}"] = lambda m=model: [
            *lg, "analyze", str(paths["csv"]), "--out", str(fresh(work / f"default-{m}")),
            "--measure", "both", "--model", m, *force]
        cmds[f"parquet_{model}"] = lambda m=model: [
            *lg, "analyze", str(paths["parquet"]), "--out", str(fresh(work / f"parquet-{m}")),
            "--measure", "both", "--format", "parquet", "--model", m, *flags]
    cmds["lean_csv"] = lambda: [sys.executable, str(HERE / "lean.py"), str(paths["csv"]),
                                "--out", str(fresh(work / "lean-csv")), "--measure", "both",
                                "--format", "csv"]
    cmds["lean"] = lambda: [sys.executable, str(HERE / "lean.py"), str(paths["parquet"]),
                            "--out", str(fresh(work / "lean")), "--measure", "both"]
    if with_bar:
        cmds["bar"] = lambda: [
            *lg, "analyze", str(paths["parquet"]), "--out", str(fresh(work / "bar")),
            "--measure", "both", "--format", "parquet", "--model", "linear", *flags]
    slow = {f"default_{m}": slow_runs_large for m in MODELS} if large else None
    d: dict[str, Any] = {"load_start": load()}
    d.update(child_series(cmds, repeat, warmup, work / "logs", tty=frozenset({"bar"}),
                          repeats=slow, warm=frozenset({"parquet_linear"})))
    d["load_end"] = load()
    d.update(read_times(paths, repeat, warmup))

    def ratio(a: str, b: str, key: str = "seconds") -> float:
        return d[a][key] / d[b][key] if d[b][key] else float("nan")

    for m in MODELS:
        d[f"default_{m}_over_lean_csv"] = ratio(f"default_{m}", "lean_csv")
        d[f"default_{m}_over_lean_csv_cpu"] = ratio(f"default_{m}", "lean_csv", "cpu_s")
        d[f"default_{m}_over_lean_csv_rss"] = ratio(f"default_{m}", "lean_csv", "rss_mb")
        d[f"default_{m}_over_lean"] = ratio(f"default_{m}", "lean")
        d[f"parquet_{m}_over_lean"] = ratio(f"parquet_{m}", "lean")
        d[f"parquet_{m}_over_lean_cpu"] = ratio(f"parquet_{m}", "lean", "cpu_s")
        d[f"parquet_{m}_over_lean_rss"] = ratio(f"parquet_{m}", "lean", "rss_mb")
    d["outputs_default"] = sorted(p.name for p in (work / "default-linear").glob("*"))
    d["output_mb"] = {m: {p.name: round(p.stat().st_size / 1e6, 2)
                          for p in sorted((work / f"default-{m}").glob("*")) if p.is_file()}
                      for m in MODELS}
    d["outputs_parquet"] = sorted(p.name for p in (work / "parquet-linear").glob("*"))
    if with_bar:
        last = work / "logs" / f"bar-{max(d['bar']['runs'] - 1, 0)}"
        out = last.with_suffix(".out")
        text = out.read_text(errors="replace") if out.exists() else ""
        err = last.with_suffix(".err")
        drawn = err.read_text(errors="replace") if err.exists() else ""
        base = d["parquet_linear"]["seconds"]
        spread = [abs(t / base - 1.0) for t in d["parquet_linear"]["all_seconds"]]
        d["progress"] = {
            "bar": d["bar"], "no_bar": d["parquet_linear"],
            "stdout_has_bar": ("\r" in text) or ("cross-fit" in text),
            "bar_drawn_on_stderr": "cross-fit" in drawn,
            "overhead": d["bar"]["seconds"] / base - 1.0,
            "noise": max(spread) if spread else float("nan"),
        }
    return d


def bench_unseen(work: Path, data_dir: Path, repeat: int, warmup: int, flags: list[str],
                 quick: bool) -> dict:
    spec = UNSEEN if not quick else synth.SynthSpec(
        rows=10_000, industries=45, years=15, seed=7, last_year=2019, no_market_share=0.10,
        id_prefix="UNS", order="year")
    paths = synth.ensure_panel(spec, data_dir)
    lg = levgap_cmd()
    cmds = {
        "levgap": lambda: [*lg, "analyze", str(paths["parquet"]), "--out",
                           str(fresh(work / "u-levgap")), "--measure", "book", "--format",
                           "parquet", "--model", "linear", *flags],
        "lean": lambda: [sys.executable, str(HERE / "lean.py"), str(paths["parquet"]), "--out",
                         str(fresh(work / "u-lean")), "--measure", "book"],
    }
    res = child_series(cmds, repeat, warmup, work / "logs")
    res["panel"] = {"rows": spec.rows, "industries": spec.industries, "years": spec.years,
                    "seed": spec.seed, "row_order": spec.order,
                    "no_market_share": spec.no_market_share}
    res["time_ratio"] = res["levgap"]["seconds"] / res["lean"]["seconds"]
    res["rss_ratio"] = res["levgap"]["rss_mb"] / res["lean"]["rss_mb"]
    return res


def demo_outputs(work: Path) -> Path:
    """The demo's panel and outputs (``levgap demo``), written once per run of the suite."""
    out = fresh(work / "demo")
    subprocess.run([*levgap_cmd(), "demo", "--out", str(out), "--force"], check=True,
                   capture_output=True, text=True, timeout=900)
    return out


def bench_startup(demo: Path, big_outputs: Path | None, work: Path, repeat: int,
                  warmup: int, quick: bool = False) -> dict:
    """Quick commands on the demo outputs (``check`` reads the demo panel), in fresh
    processes, median of at least five runs."""
    lg = levgap_cmd()
    firm = _first_firm(demo)
    compile_levgap()
    cmds: dict[str, Callable[[], list[str]]] = {
        "--help": lambda: [*lg, "--help"],
        "--version": lambda: [*lg, "--version"],
        "check": lambda: [*lg, "check", str(demo / "demo_panel.csv")],
        "screen": lambda: [*lg, "screen", str(demo)],
        "explain": lambda: [*lg, "explain", str(demo), firm or "?"],
        "template": lambda: [*lg, "template", "--out", str(fresh(work / "template"))],
    }
    runs = repeat if quick else max(repeat, 5)
    res = child_series(cmds, runs, warmup if quick else max(warmup, 1), work / "logs")
    if big_outputs is not None and big_outputs.exists():
        big = child_series({"screen_large": lambda: [*lg, "screen", str(big_outputs)]},
                           repeat, warmup, work / "logs")
        res.update(big)
    return res


def compile_levgap() -> None:
    """Write levgap's byte-code files before the start-up runs, as an installed package has.

    pip compiles a package's modules when it installs it, and Python writes them on first
    import; with PYTHONDONTWRITEBYTECODE set (as on some shared machines) an editable install
    never gets them, and every start would pay for compiling levgap's modules again.
    """
    import levgap

    subprocess.run([sys.executable, "-m", "compileall", "-q", str(Path(levgap.__file__).parent)],
                   check=False, capture_output=True, timeout=300)


def _first_firm(outputs: Path) -> str | None:
    path = outputs / "targets.csv"
    if not path.exists():
        return None
    import csv

    with open(path, newline="", encoding="utf-8") as fh:
        for row in csv.DictReader(fh):
            return row.get("firm_id")
    return None


def import_check(cmds: dict[str, list[str]], work: Path) -> dict:
    """Heavy modules each quick command imports (``python -X importtime``), and the chain.

    For each heavy module found, the chain of imports that pulled it in (outermost first)
    tells the lead which import to make lazy.
    """
    heavy = ("statsmodels", "sklearn", "matplotlib", "scipy", "pandas", "pyarrow")
    out: dict[str, Any] = {}
    for name, args in cmds.items():
        if name == "template":
            args = ["template", "--out", str(fresh(work / "template-imports"))]
        p = subprocess.run([sys.executable, "-X", "importtime", "-m", "levgap", *args],
                           capture_output=True, text=True, timeout=300)
        stack: list[tuple[int, str]] = []
        chains: dict[str, str] = {}
        exact: set[str] = set()
        # importtime prints a module after its children, indented by depth; read it backwards
        lines = [ln for ln in p.stderr.splitlines() if ln.startswith("import time:")][::-1]
        for ln in lines:
            field = ln.split("|")[-1]
            depth = (len(field) - len(field.lstrip())) // 2
            mod = field.strip()
            while stack and stack[-1][0] >= depth:
                stack.pop()
            stack.append((depth, mod))
            top = mod.split(".")[0]
            # the package's own line (a submodule may be imported later, on first use)
            if top in heavy and (top not in chains or mod == top) and top not in exact:
                chains[top] = " -> ".join(m for _, m in stack)
                if mod == top:
                    exact.add(top)
        out[name] = {m: chains[m] for m in heavy if m in chains}
    return out


def bench_extra(name: str, csv_1m: Path | None, rows: int, repeat: int, quick: bool,
                data_dir: Path, demo: Path | None = None) -> dict:
    """Run benchmark/<name>.py's ``run(...)`` when the file exists.

    Its data go to ``data_dir`` (the suite's ``--data-dir``); a benchmark that needs the demo's
    results gets ``demo`` (the folder ``levgap demo`` wrote for the start-up figures) when
    there is one, instead of running the demo again."""
    path = HERE / f"{name}.py"
    if not path.exists():
        return {"status": "absent", "note": f"benchmark/{name}.py not present; skipped"}
    try:
        spec = importlib.util.spec_from_file_location(f"bench_{name}", path)
        assert spec and spec.loader
        mod = importlib.util.module_from_spec(spec)
        spec.loader.exec_module(mod)
        params = inspect.signature(mod.run).parameters
        kwargs: dict[str, Any] = {}
        for p in params:
            if p in ("path", "panel", "csv", "csv_path", "file") and csv_1m is not None:
                kwargs[p] = csv_1m
            elif p == "repeat":
                kwargs[p] = repeat
            elif p == "quick":
                kwargs[p] = quick
            elif p in ("rows", "size", "n_rows"):
                kwargs[p] = rows
            elif p == "facts" and quick:
                kwargs[p] = 50_000  # a small quarter for the smoke test
            elif p == "quarters" and quick:
                kwargs[p] = 2  # still several quarters read in parallel
            elif p == "data_dir":
                kwargs[p] = data_dir
            elif p == "demo" and demo is not None:
                kwargs[p] = demo
        t0 = time.perf_counter()
        result = mod.run(**kwargs)
        return {"status": "ok", "seconds_total": time.perf_counter() - t0, "kwargs":
                {k: str(v) for k, v in kwargs.items()},
                "result": json.loads(json.dumps(result, default=str))}
    except Exception as exc:  # noqa: BLE001 - another engineer's benchmark must not stop ours
        return {"status": "error", "note": f"{type(exc).__name__}: {exc}"}


def profile(csv_path: Path, work: Path, target: Path, flags: list[str]) -> dict:
    """pyinstrument profile of the default path: CSV in, CSV out and the report, default
    model."""
    force = [f for f in flags if f != "--no-report"]
    cmd = [sys.executable, "-m", "pyinstrument", "-r", "text", "--no-color", "-o", str(target),
           "-m", "levgap", "analyze", str(csv_path), "--out", str(fresh(work / "profile")),
           "--measure", "both", *force]
    r = run_child(cmd, log=work / "logs" / "profile")
    return {"file": target.name, "rc": r["rc"], "seconds_profiled": r["seconds"],
            **({"error": r["error"]} if "error" in r else {})}


# ---------------------------------------------------------------------------------------------
# Machine and report


def machine() -> dict:
    import psutil

    cpu = ""
    try:
        for line in Path("/proc/cpuinfo").read_text().splitlines():
            if line.startswith("model name"):
                cpu = line.split(":", 1)[1].strip()
                break
    except OSError:
        pass
    versions = {}
    for pkg in ("levgap", "numpy", "scipy", "pandas", "pyarrow", "statsmodels", "scikit-learn",
                "typer", "rich"):
        try:
            versions[pkg] = version(pkg)
        except PackageNotFoundError:
            versions[pkg] = None
    blas = []
    try:
        from threadpoolctl import threadpool_info

        blas = [{k: i.get(k) for k in ("internal_api", "num_threads", "version")}
                for i in threadpool_info()]
    except Exception:  # noqa: BLE001 - informational only
        pass
    return {
        "date_utc": dt.datetime.now(dt.UTC).strftime("%Y-%m-%d %H:%M UTC"),
        "cores": os.cpu_count(),
        "cores_usable": len(os.sched_getaffinity(0)) if hasattr(os, "sched_getaffinity")
        else os.cpu_count(),
        "memory_gb": round(psutil.virtual_memory().total / 2**30, 1),
        "cpu": cpu,
        "platform": platform.platform(),
        "python": platform.python_version(),
        "versions": versions,
        "blas": blas,
        "thread_env": {k: os.environ.get(k) for k in (
            "OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS")},
    }


def goals(res: dict) -> list[dict]:
    sizes = res["sizes"]
    goal_key = label(GOAL_SIZE)
    at = goal_key if goal_key in sizes else (list(sizes)[-1] if sizes else None)
    note = "" if at == goal_key else f" (measured at {at}, not at the goal size {goal_key})"
    rows: list[dict] = []

    def add(name: str, value: float | None, op: str, bound: float, fmt: str = "{:.2f}",
            sized: bool = True, cpu: float | None = None) -> None:
        name = name + (note if sized else "")
        if value is None or not np.isfinite(value):
            rows.append({"goal": name, "value": None, "bound": f"{op} {bound}", "met": None})
            return
        met = value <= bound if op == "<=" else value >= bound if op == ">=" else value < bound
        shown = fmt.format(value) + ("" if cpu is None or not np.isfinite(cpu)
                                     else f" (CPU {fmt.format(cpu)})")
        rows.append({"goal": name, "value": shown, "bound": f"{op} {bound}", "met": bool(met)})

    s = sizes.get(at, {}) if at else {}
    f = s.get("fits", {})
    e = s.get("end_to_end", {})
    add("(b)/(a): levgap linear fit / limit", f.get("b_over_a"), "<=", GOALS["b_over_a"],
        cpu=f.get("b_over_a_cpu"))
    add("(b2)/(a2): levgap fractional fit / plain Newton loop", f.get("b2_over_a2"), "<=",
        GOALS["b2_over_a2"], cpu=f.get("b2_over_a2_cpu"))
    add("(c)/(b): statsmodels with dummies / levgap fit", f.get("c_over_b"), ">=",
        GOALS["c_over_b"], "{:.1f}")
    add("default path (CSV in, CSV out, report), linear / lean CSV, time",
        e.get("default_linear_over_lean_csv"), "<=", GOALS["d_over_lean_time"],
        cpu=e.get("default_linear_over_lean_csv_cpu"))
    add("default path, linear / lean CSV, peak RSS", e.get("default_linear_over_lean_csv_rss"),
        "<=", GOALS["d_over_lean_rss"])
    add("default path, fractional (default model) / lean CSV, time",
        e.get("default_fractional_over_lean_csv"), "<=", GOALS["frac_over_lean_time"],
        cpu=e.get("default_fractional_over_lean_csv_cpu"))
    add("Parquet path, linear / lean, time", e.get("parquet_linear_over_lean"), "<=",
        GOALS["d_over_lean_time"], cpu=e.get("parquet_linear_over_lean_cpu"))
    add("Parquet path, linear / lean, peak RSS", e.get("parquet_linear_over_lean_rss"), "<=",
        GOALS["d_over_lean_rss"])
    add("Parquet path, fractional / lean, time", e.get("parquet_fractional_over_lean"), "<=",
        GOALS["frac_over_lean_time"], cpu=e.get("parquet_fractional_over_lean_cpu"))
    g = res.get("fit_growth", {})
    add("fit time growth 100k -> 1m, linear (b)", g.get("b"), "<=", GOALS["fit_growth"],
        sized=False, cpu=g.get("b_cpu"))
    add("fit time growth 100k -> 1m, fractional (b2)", g.get("b2"), "<=", GOALS["fit_growth"],
        sized=False, cpu=g.get("b2_cpu"))
    add("fit time growth 1m -> 10m, linear (b)", g.get("b_10m"), "<=", GOALS["fit_growth"],
        sized=False, cpu=g.get("b_10m_cpu"))
    big = res.get("fit_only", {}).get("10m", {})
    add("linear fit alone at 10m firm-years, five drivers, two effects (s)", big.get("b_s"),
        "<=", GOALS["fit_10m_s"], "{:.2f}", sized=False, cpu=big.get("b_cpu_s"))
    u = res.get("unseen", {})
    add("never-seen panel, book only, linear: levgap / lean, time", u.get("time_ratio"), "<=",
        GOALS["d_over_lean_time"], sized=False)
    add("never-seen panel, book only, linear: levgap / lean, peak RSS", u.get("rss_ratio"),
        "<=", GOALS["d_over_lean_rss"], sized=False)
    for cmd, r in res.get("startup", {}).items():
        if cmd == "screen_large":
            continue
        add(f"start-up `levgap {cmd}` on the demo (s)", r.get("seconds"), "<", STARTUP_GOAL_S,
            "{:.3f}", sized=False, cpu=r.get("cpu_s"))
    p = res.get("progress", {})
    if p.get("overhead") is not None:
        over = p["overhead"]
        met = (not p.get("stdout_has_bar")) and over <= max(0.03, p.get("noise", 0.0))
        rows.append({"goal": "progress bar on stderr, cost within run-to-run noise",
                     "value": f"{over * 100:+.1f}% (noise {p.get('noise', 0) * 100:.1f}%)",
                     "bound": "<= max(3%, noise); nothing on stdout", "met": bool(met)})
    return rows


def fmt_s(x: Any, digits: int = 3) -> str:
    if x is None or (isinstance(x, float) and not np.isfinite(x)):
        return "-"
    return f"{x:.{digits}f}"


def _runs_note(r: dict, res: dict) -> str:
    """Say so beside a figure taken from fewer runs, or without warm-up, than the rest."""
    parts = []
    if r.get("runs", res["repeat"]) < res["repeat"]:
        parts.append(f"{r['runs']} run" + ("s" if r["runs"] != 1 else ""))
    return f" ({', '.join(parts)})" if parts else ""


def write_markdown(res: dict, path: Path) -> None:
    m = res["machine"]
    L = ["# levgap benchmark results", "",
         f"Generated by `python benchmark/run.py {' '.join(res['argv'])}` on {m['date_utc']}. "
         "Do not edit by hand: re-run `make bench`.", "",
         f"Machine: {m['cores']} cores ({m['cores_usable']} usable), {m['memory_gb']} GB memory"
         f", {m['cpu'] or 'unknown CPU'}; {m['platform']}; Python {m['python']}.",
         "Libraries: " + ", ".join(f"{k} {v}" for k, v in m["versions"].items()) + ".",
         "BLAS: " + (", ".join(f"{b['internal_api']} {b.get('version') or ''} "
                               f"({b['num_threads']} threads)" for b in m["blas"]) or "unknown")
         + "; thread variables: " + ", ".join(f"{k}={v}" for k, v in m["thread_env"].items())
         + ".", "",
         (f"Each figure is the median of {res['repeat']} runs" if res["repeat"] > 1
          else "Each figure is one run")
         + (" after one warm-up run" if res["warmup"] else
            " (no warm-up: " + ("--quick)" if res["quick"] else "--no-warmup)"))
         + ", runs of compared items interleaved; exceptions are stated beside the figure.",
         "", "## Goals", "", "| goal | measured | bound | met |", "|---|---|---|---|"]
    for g in res["goals"]:
        met = "n/a" if g["met"] is None else ("yes" if g["met"] else "**no**")
        L.append(f"| {g['goal']} | {g['value'] or 'not measured'} | {g['bound']} | {met} |")
    L += ["", "## Model fit: (a) limit, (b) levgap, (a2) Newton loop, (b2) levgap fractional,"
          " (c) statsmodels", "",
          "Book leverage on the five drivers with industry and year effects, firm-clustered "
          "errors, on the same in-memory arrays (all rows of the panel). (a) `limit.py` and (a2) "
          "`newton.py` are plain numpy/scipy written without levgap's code; (b) `fit_linear`, "
          "(b2) `fit_fractional`. Wall seconds, CPU seconds in brackets (this process, all "
          "threads); the load average at the start and end of the runs.", "",
          "| firm-years | (a) s | (b) s | (b)/(a) | (a2) s | (b2) s | (b2)/(a2) | (c) s | (c)/(b) "
          "| coef diff b-a | SE diff b-a | coef diff b2-a2 | SE diff b2-a2 | load |",
          "|---|---|---|---|---|---|---|---|---|---|---|---|---|---|"]
    rows = [(k, s.get("fits", {})) for k, s in res["sizes"].items()]
    rows += [(f"{k} (fit only)", f) for k, f in res.get("fit_only", {}).items()]
    for key, f in rows:
        c_note = ""
        if f.get("c_runs") is not None and (f["c_runs"] < res["repeat"] or f["c_warmup"] == 0):
            c_note = f" ({f['c_runs']} run{'s' if f['c_runs'] > 1 else ''}" + (
                ", no warm-up)" if f["c_warmup"] == 0 else ")")

        def both(k: str, f: dict = f) -> str:
            if f.get(f"{k}_s") is None:
                return "-"
            return f"{fmt_s(f[f'{k}_s'])} ({fmt_s(f.get(f'{k}_cpu_s'))})"

        def diff(k: str, f: dict = f) -> str:
            v = f.get(k)
            return "-" if v is None else f"{v:.1e}"

        L.append(
            f"| {key} | {both('a')} | {both('b')} | {fmt_s(f.get('b_over_a'), 2)} | "
            f"{both('a2')} | {both('b2')} | {fmt_s(f.get('b2_over_a2'), 2)} | "
            f"{fmt_s(f.get('c_s'), 2)}{c_note} | {fmt_s(f.get('c_over_b'), 1)} | "
            f"{diff('max_abs_diff_coef_b_a')} | {diff('max_rel_diff_se_b_a')} | "
            f"{diff('max_abs_diff_coef_b2_a2')} | {diff('max_rel_diff_se_b2_a2')} | "
            f"{f.get('load_start', '-')}-{f.get('load_end', '-')} |")
    g = res.get("fit_growth", {})
    if g:
        L += ["", "Fit time growth for 10x the rows (wall, CPU in brackets): 100k -> 1m: (a) "
              f"{fmt_s(g.get('a'), 2)}x, (b) {fmt_s(g.get('b'), 2)}x ({fmt_s(g.get('b_cpu'), 2)}"
              f"x), (a2) {fmt_s(g.get('a2'), 2)}x, (b2) {fmt_s(g.get('b2'), 2)}x "
              f"({fmt_s(g.get('b2_cpu'), 2)}x); 1m -> 10m: (a) {fmt_s(g.get('a_10m'), 2)}x, (b) "
              f"{fmt_s(g.get('b_10m'), 2)}x ({fmt_s(g.get('b_10m_cpu'), 2)}x)."]
    L += ["", "## End to end: the default path and the Parquet path vs the lean implementation",
          "", "`levgap analyze` in a fresh child process (interpreter start-up and imports "
          "included; peak RSS of that process from `getrusage`), `--measure both`: the **default "
          "path** reads the CSV panel and writes CSV tables and `report.html` (what a user "
          "runs); the **Parquet path** reads Parquet and writes Parquet, no report. Each with "
          "`--model linear` and `--model fractional` (the default). The lean implementation "
          "(`benchmark/lean.py`, linear) does the same job in numpy/pyarrow: `lean CSV` reads "
          "and writes CSV (pyarrow's CSV writer), `lean` Parquet. Runs interleaved" + (
              ", one warm-up (Parquet path, linear)" if res["warmup"] else ", no warm-up")
          + "; wall seconds, CPU seconds of the process in brackets "
          "(user + system: what the run costs with a core to itself), peak RSS in MB.", "",
          "| firm-years | default linear | default fractional | Parquet linear | "
          "Parquet fractional | lean CSV | lean | load |",
          "|---|---|---|---|---|---|---|---|"]
    for key, s_ in res["sizes"].items():
        e = s_.get("end_to_end")
        if not e:
            L.append(f"| {key} | " + " | ".join(["-"] * 7) + " |")
            continue

        def cell(k: str, e: dict = e) -> str:
            r = e.get(k) or {}
            if "error" in r:
                return f"failed: {r['error']}"
            return (f"{fmt_s(r.get('seconds'), 2)} s ({fmt_s(r.get('cpu_s'), 2)}), "
                    f"{fmt_s(r.get('rss_mb'), 0)} MB{_runs_note(r, res)}")

        L.append(f"| {key} | {cell('default_linear')} | {cell('default_fractional')} | "
                 f"{cell('parquet_linear')} | {cell('parquet_fractional')} | "
                 f"{cell('lean_csv')} | {cell('lean')} | "
                 f"{e.get('load_start', '-')}-{e.get('load_end', '-')} |")
    L += ["", "Ratios (time, CPU time in brackets, peak RSS):", "",
          "| firm-years | default linear / lean CSV | default fractional / lean CSV | "
          "default linear / lean (Parquet) | Parquet linear / lean | Parquet fractional / lean |",
          "|---|---|---|---|---|---|"]
    for key, s_ in res["sizes"].items():
        e = s_.get("end_to_end")
        if not e:
            continue

        def rat(k: str, rss: bool = True, e: dict = e) -> str:
            out = f"{fmt_s(e.get(k), 2)} ({fmt_s(e.get(k + '_cpu'), 2)})"
            return out + (f", RSS {fmt_s(e.get(k + '_rss'), 2)}" if rss else "")

        L.append(f"| {key} | {rat('default_linear_over_lean_csv')} | "
                 f"{rat('default_fractional_over_lean_csv')} | "
                 f"{fmt_s(e.get('default_linear_over_lean'), 2)} | "
                 f"{rat('parquet_linear_over_lean')} | {rat('parquet_fractional_over_lean')} |")
    sizes_mb = [(k, s_["end_to_end"]["output_mb"]) for k, s_ in res["sizes"].items()
                if s_.get("end_to_end", {}).get("output_mb")]
    if sizes_mb:
        L += ["", "Files the default path writes (MB, fractional model; `report.html` holds the "
              "universe table of the reported year, sampled charts and bounded tables):", "",
              "| firm-years | " + " | ".join(sizes_mb[-1][1]["fractional"]) + " |",
              "|---|" + "---|" * len(sizes_mb[-1][1]["fractional"])]
        for key, mb in sizes_mb:
            f_ = mb.get("fractional", {})
            L.append(f"| {key} | " + " | ".join(
                fmt_s(f_.get(n), 2) for n in sizes_mb[-1][1]["fractional"]) + " |")
    for key, s_ in res["sizes"].items():
        if s_.get("end_to_end_note"):
            L.append(f"\n{key}: {s_['end_to_end_note']}")
    u = res.get("unseen")
    if u:
        p = u["panel"]
        L += ["", "## A panel the project has never seen", "",
              f"{p['rows']:,} firm-years, {p['industries']} industries, {p['years']} years, seed "
              f"{p['seed']}, rows ordered by {p['row_order']}, {p['no_market_share']:.0%} of "
              "firms without a market value. `levgap analyze --measure book --format parquet` "
              "vs `lean.py --measure book`, both linear, interleaved.", "",
              "| | seconds | peak RSS MB |", "|---|---|---|",
              f"| levgap | {fmt_s(u['levgap']['seconds'], 2)} | "
              f"{fmt_s(u['levgap']['rss_mb'], 0)} |",
              f"| lean | {fmt_s(u['lean']['seconds'], 2)} | {fmt_s(u['lean']['rss_mb'], 0)} |",
              f"| ratio | {fmt_s(u['time_ratio'], 2)} | {fmt_s(u['rss_ratio'], 2)} |"]
    st = res.get("startup")
    if st:
        L += ["", "## Start-up", "", "Wall time of each command in a fresh process (median "
              f"of {res['repeat'] if res['quick'] else max(res['repeat'], 5)} runs), on the "
              "demo (`levgap demo`): "
              "`check` reads the demo panel, `screen` and `explain` read the demo outputs; "
              "`screen (largest outputs)` reads the CSV outputs of the largest size "
              "(informational). CPU seconds (user + system) beside. levgap's byte-code files "
              "are written first (`compileall`), as an installed package has them.", "",
              "| command | seconds | CPU s | peak RSS MB | load |", "|---|---|---|---|---|"]
        for cmd, r in st.items():
            name = "screen (largest outputs)" if cmd == "screen_large" else cmd
            extra = f" (failed: {r['error']})" if "error" in r else ""
            ld = r.get("load") or []
            L.append(f"| `levgap {name}` | {fmt_s(r['seconds'])}{extra} | "
                     f"{fmt_s(r.get('cpu_s'))} | {fmt_s(r['rss_mb'], 0)} | "
                     f"{min(ld) if ld else '-'}-{max(ld) if ld else '-'} |")
        imp = res.get("imports", {})
        if imp:
            L += ["", "Heavy modules each quick command imports (`python -X importtime`), with "
                  "the first import chain that pulls each in:", ""]
            for cmd, mods in imp.items():
                if not mods:
                    L.append(f"- `levgap {cmd}`: none")
                    continue
                L.append(f"- `levgap {cmd}`: " + "; ".join(
                    f"{m} (`{chain}`)" for m, chain in mods.items()))
    p = res.get("progress")
    if p:
        L += ["", "## Progress bar", "",
              f"`levgap analyze` at {p['size']} with stderr a terminal (bar drawn): "
              f"{fmt_s(p['bar']['seconds'], 2)} s; with stderr a file (no bar): "
              f"{fmt_s(p['no_bar']['seconds'], 2)} s; difference {p['overhead'] * 100:+.1f}% "
              f"(largest run-to-run deviation without the bar: {p['noise'] * 100:.1f}%). "
              f"Progress output on stdout: {'yes' if p['stdout_has_bar'] else 'none'}; bar drawn "
              f"on the terminal: {'yes' if p.get('bar_drawn_on_stderr') else 'no'}."]
    L += ["", "## Other benchmarks", ""]
    for name, r in res.get("extra", {}).items():
        if r["status"] == "ok":
            L.append(f"- `{name}`: " + ", ".join(
                f"{k} = {v:.4g}" if isinstance(v, float) else f"{k} = {v}"
                for k, v in r["result"].items() if not isinstance(v, dict | list)))
        else:
            L.append(f"- `{name}`: {r['status']}: {r['note']}")
    prof = res.get("profile")
    if prof:
        L += ["", "## Profile", "",
              f"`{prof['file']}`: pyinstrument text profile of the default path (CSV in, CSV "
              f"out, report, fractional) at {prof['size']} (profiled wall time "
              f"{fmt_s(prof['seconds_profiled'], 1)} s"
              + (f"; failed: {prof['error']}" if "error" in prof else "") + ")."]
    L += ["", f"Suite wall time: {res['suite_seconds']:.0f} s.", ""]
    path.write_text("\n".join(L))


# ---------------------------------------------------------------------------------------------


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--sizes", default="10k,100k,1m", help="firm-years, comma separated")
    ap.add_argument("--repeat", type=int, default=3, help="timed runs per figure (median)")
    ap.add_argument("--quick", action="store_true",
                    help="no warm-ups, a small never-seen panel, no progress-bar comparison "
                    "(the smoke test)")
    ap.add_argument("--sm-runs-large", type=int, default=1,
                    help="statsmodels runs at 1m firm-years and above (no warm-up there)")
    ap.add_argument("--slow-runs-large", type=int, default=3,
                    help="runs of the default path (CSV, report) at 1m firm-years and above")
    ap.add_argument("--fit-sizes", default="10m",
                    help="sizes measured for the fit alone (arrays built in memory, no files; "
                    "'' for none; --quick skips them)")
    ap.add_argument("--no-profile", action="store_true")
    ap.add_argument("--no-warmup", action="store_true",
                    help="no warm-up runs (a busy shared machine), everything else as usual")
    ap.add_argument("--data-dir", type=Path, default=HERE / "data")
    ap.add_argument("--work-dir", type=Path, default=HERE / "out")
    ap.add_argument("--results-dir", type=Path, default=HERE)
    args = ap.parse_args(argv)
    t_suite = time.perf_counter()
    args.results_dir.mkdir(parents=True, exist_ok=True)
    sizes = sorted({synth.parse_size(s) for s in args.sizes.split(",") if s.strip()})
    warmup = 0 if args.quick or args.no_warmup else 1
    repeat = max(1, args.repeat)
    work = args.work_dir
    work.mkdir(parents=True, exist_ok=True)
    res: dict[str, Any] = {"argv": list(argv if argv is not None else sys.argv[1:]),
                           "repeat": repeat, "warmup": warmup, "quick": args.quick,
                           "machine": machine(), "sizes": {}}
    flags, why = analyze_flags()

    def say(msg: str) -> None:
        print(f"[{time.perf_counter() - t_suite:6.1f}s] {msg}", file=sys.stderr, flush=True)

    if flags is None:
        say(f"end-to-end items skipped: {why}")
    panels = {}
    # The bar's cost is fixed (ten updates and a refresh thread), so it is measured where a
    # run is short and the cost would show most: the largest size below 1m.
    below = [r for r in sizes if r < GOAL_SIZE]
    bar_size = below[-1] if below else sizes[-1]
    for rows in sizes:
        key = label(rows)
        paths = synth.ensure_panel(synth.SynthSpec(rows), args.data_dir)
        panels[key] = paths
        say(f"{key}: fits")
        a = model_arrays(paths["parquet"])
        large = rows >= GOAL_SIZE
        sm_runs = args.sm_runs_large if large else repeat
        sm_warm = 0 if large else warmup
        s: dict[str, Any] = {"fits": bench_fits(a, repeat, warmup, sm_runs, sm_warm)}
        del a
        if flags is not None:
            say(f"{key}: end to end")
            with_bar = rows == bar_size and not args.quick
            s["end_to_end"] = bench_end_to_end(
                paths, work / key, repeat, warmup, flags, large=large,
                slow_runs_large=args.slow_runs_large, with_bar=with_bar)
            if with_bar:
                res["progress"] = {"size": key, **s["end_to_end"].pop("progress")}
        else:
            s["end_to_end_note"] = why
        res["sizes"][key] = s
    fit_only = [] if args.quick else sorted(
        {synth.parse_size(x) for x in args.fit_sizes.split(",") if x.strip()} - set(sizes))
    res["fit_only"] = {}
    for rows in fit_only:
        key = label(rows)
        say(f"{key}: the fit alone (arrays in memory)")
        a = model_arrays_in_memory(rows)
        res["fit_only"][key] = bench_fits(a, repeat, warmup, 0, 0, fractional=False)
        del a
    fits = {k: v["fits"] for k, v in res["sizes"].items()}
    fits.update(res["fit_only"])
    growth: dict[str, Any] = {}
    for lo, hi, suffix in (("100k", "1m", ""), ("1m", "10m", "_10m")):
        if lo in fits and hi in fits:
            for k in ("a", "b", "a2", "b2"):
                if f"{k}_s" in fits[lo] and f"{k}_s" in fits[hi]:
                    growth[k + suffix] = fits[hi][f"{k}_s"] / fits[lo][f"{k}_s"]
                    growth[k + suffix + "_cpu"] = (fits[hi][f"{k}_cpu_s"]
                                                   / fits[lo][f"{k}_cpu_s"])
    res["fit_growth"] = growth
    if flags is not None:
        largest = label(sizes[-1])
        say("never-seen panel")
        res["unseen"] = bench_unseen(work / "unseen", args.data_dir, repeat, warmup, flags,
                                     args.quick)
        say("start-up")
        demo = demo_outputs(work / "startup")
        big = work / largest / "default-linear"
        res["startup"] = bench_startup(demo, big, work / "startup", repeat, warmup, args.quick)
        res["imports"] = import_check(
            {"--help": ["--help"], "--version": ["--version"],
             "check": ["check", str(demo / "demo_panel.csv")],
             "screen": ["screen", str(demo)],
             "explain": ["explain", str(demo), _first_firm(demo) or "?"],
             "template": ["template"]}, work / "startup")
        if not args.no_profile:
            say(f"profile at {largest}")
            res["profile"] = {"size": largest, **profile(
                panels[largest]["csv"], work / "profile",
                args.results_dir / f"profile-{largest}.txt", flags)}
    say("other benchmarks")
    csv_big = panels[label(sizes[-1])]["csv"]
    res["extra"] = {n: bench_extra(n, csv_big, sizes[-1], repeat, args.quick, args.data_dir,
                                   demo if flags is not None else None)
                    for n in ("bench_read", "bench_sec", "bench_deal")}
    res["goals"] = goals(res)
    res["suite_seconds"] = time.perf_counter() - t_suite
    args.results_dir.mkdir(parents=True, exist_ok=True)
    (args.results_dir / "results.json").write_text(json.dumps(res, indent=2, default=str))
    write_markdown(res, args.results_dir / "RESULTS.md")
    say(f"wrote {args.results_dir / 'RESULTS.md'}")
    for g in res["goals"]:
        mark = "n/a" if g["met"] is None else ("met" if g["met"] else "NOT MET")
        print(f"{mark:8} {g['goal']}: {g['value']} ({g['bound']})")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
