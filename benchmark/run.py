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
import synth  # noqa: E402

GOAL_SIZE = 1_000_000
UNSEEN = synth.SynthSpec(rows=300_000, industries=45, years=15, seed=7, last_year=2019,
                         no_market_share=0.10, id_prefix="UNS", order="year")
STARTUP_GOAL_S = 0.5
GOALS = {
    "b_over_a": 1.5,  # at most
    "c_over_b": 20.0,  # at least
    "d_over_lean_time": 3.0,  # at most
    "d_over_lean_rss": 2.5,  # at most
    "fit_growth": 11.0,  # at most
}


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


def interleave(fns: dict[str, Callable[[], Any]], repeat: int, warmup: int) -> dict[str, list]:
    """Run each function ``warmup`` times, then ``repeat`` rounds of all of them in turn."""
    for _ in range(warmup):
        for fn in fns.values():
            fn()
    times: dict[str, list] = {k: [] for k in fns}
    for _ in range(repeat):
        for k, fn in fns.items():
            times[k].append(timed(fn)[0])
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
    "open(sys.argv[1], 'w').write(json.dumps({'seconds': t, 'rss_kb': ru.ru_maxrss, 'rc': rc}))\n"
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
        r = {"seconds": float("nan"), "rss_kb": float("nan"), "rc": proc.returncode or -1}
    result = {"seconds": r["seconds"], "rss_mb": r["rss_kb"] / 1024.0, "rc": r["rc"]}
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
            "rss_mb": median([r["rss_mb"] for r in ok]),
            "runs": len(ok),
            "warmups": warmed[k],
            "all_seconds": [round(r["seconds"], 4) for r in ok],
            "all_rss_mb": [round(r["rss_mb"], 1) for r in ok],
        }
        if bad:
            out[k]["error"] = bad[0].get("error", "failed")
    return out


# ---------------------------------------------------------------------------------------------
# The arrays of (a), (b), (c)


def model_arrays(parquet: Path) -> dict:
    """Book leverage, the five drivers and the codes, built by the lean implementation."""
    cols = lean.read(parquet)
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


def bench_fits(a: dict, repeat: int, warmup: int, sm_runs: int, sm_warmup: int) -> dict:
    res: dict[str, Any] = {"rows": int(len(a["y"]))}
    try:
        import levgap.models.linear  # noqa: F401
        have_levgap = True
    except ImportError as exc:
        have_levgap = False
        res["b_error"] = f"levgap.models.linear not importable: {exc}"
    fns = {"a": lambda: run_limit(a)}
    if have_levgap:
        fns["b"] = lambda: run_levgap_fit(a)
    times = interleave(fns, repeat, warmup)
    res["a_s"] = median(times["a"])
    res["a_all"] = [round(t, 4) for t in times["a"]]
    fa = run_limit(a)
    if have_levgap:
        res["b_s"] = median(times["b"])
        res["b_all"] = [round(t, 4) for t in times["b"]]
        res["b_over_a"] = res["b_s"] / res["a_s"]
        fb = run_levgap_fit(a)
        res["max_abs_diff_coef_b_a"] = float(np.abs(np.asarray(fb.coef)[1:] - fa.coef).max())
        res["max_rel_diff_se_b_a"] = float(
            np.abs(np.asarray(fb.std_error)[1:] / fa.std_error - 1).max())
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
        if "b_s" in res:
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
                     flags: list[str], *, large: bool, csv_runs_large: int,
                     with_bar: bool) -> dict:
    """(d) with CSV and with Parquet outputs, the lean implementation, and the read baseline.

    With ``with_bar`` a fourth command repeats (d) Parquet with stderr a terminal, so the
    progress bar is drawn: its cost is the difference to (d) Parquet (stderr a file).
    Only (d) Parquet takes the warm-up run (it warms the file cache and the byte-code for
    all); at large sizes (d) CSV, which no goal compares, runs ``csv_runs_large`` times.
    """
    lg = levgap_cmd()
    d_csv, d_pq, lean_out = work / "d-csv", work / "d-parquet", work / "lean"
    cmds = {
        "d_parquet": lambda: [*lg, "analyze", str(paths["parquet"]), "--out",
                              str(fresh(d_pq)), "--measure", "both", "--format", "parquet",
                              *flags],
        "lean": lambda: [sys.executable, str(HERE / "lean.py"), str(paths["parquet"]),
                         "--out", str(fresh(lean_out)), "--measure", "both"],
        "d_csv": lambda: [*lg, "analyze", str(paths["csv"]), "--out", str(fresh(d_csv)),
                          "--measure", "both", "--format", "csv", *flags],
    }
    if with_bar:
        cmds["d_parquet_bar"] = lambda: [
            *lg, "analyze", str(paths["parquet"]), "--out", str(fresh(work / "d-bar")),
            "--measure", "both", "--format", "parquet", *flags]
    res = child_series(cmds, repeat, warmup, work / "logs", tty=frozenset({"d_parquet_bar"}),
                       repeats={"d_csv": csv_runs_large} if large else None,
                       warm=frozenset({"d_parquet"}))
    d: dict[str, Any] = {k: res[k] for k in cmds}
    d.update(read_times(paths, repeat, warmup))
    d["d_csv_over_read"] = d["d_csv"]["seconds"] / d["read_csv_s"]
    d["d_parquet_over_read"] = d["d_parquet"]["seconds"] / d["read_parquet_s"]
    d["d_csv_over_d_parquet"] = d["d_csv"]["seconds"] / d["d_parquet"]["seconds"]
    d["d_over_lean_time"] = d["d_parquet"]["seconds"] / d["lean"]["seconds"]
    d["d_over_lean_rss"] = d["d_parquet"]["rss_mb"] / d["lean"]["rss_mb"]
    d["outputs_csv"] = sorted(p.name for p in d_csv.glob("*")) if d_csv.exists() else []
    d["outputs_parquet"] = sorted(p.name for p in d_pq.glob("*")) if d_pq.exists() else []
    if with_bar:
        last = work / "logs" / f"d_parquet_bar-{max(d['d_parquet_bar']['runs'] - 1, 0)}"
        out = last.with_suffix(".out")
        text = out.read_text(errors="replace") if out.exists() else ""
        err = last.with_suffix(".err")
        drawn = err.read_text(errors="replace") if err.exists() else ""
        base = d["d_parquet"]["seconds"]
        spread = [abs(t / base - 1.0) for t in d["d_parquet"]["all_seconds"]]
        d["progress"] = {
            "bar": d["d_parquet_bar"], "no_bar": d["d_parquet"],
            "stdout_has_bar": ("\r" in text) or ("cross-fit" in text),
            "bar_drawn_on_stderr": "cross-fit" in drawn,
            "overhead": d["d_parquet_bar"]["seconds"] / base - 1.0,
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
                           "parquet", *flags],
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


def bench_startup(small: dict[str, Path], outputs: Path, big_outputs: Path | None, work: Path,
                  repeat: int, warmup: int, quick: bool) -> dict:
    lg = levgap_cmd()
    firm = _first_firm(outputs)
    cmds: dict[str, Callable[[], list[str]]] = {
        "--help": lambda: [*lg, "--help"],
        "--version": lambda: [*lg, "--version"],
        "check": lambda: [*lg, "check", str(small["csv"])],
        "screen": lambda: [*lg, "screen", str(outputs)],
        "explain": lambda: [*lg, "explain", str(outputs), firm or "?"],
        "template": lambda: [*lg, "template", "--out", str(fresh(work / "template"))],
    }
    n = repeat
    res = child_series(cmds, n, warmup, work / "logs")
    if big_outputs is not None and big_outputs.exists():
        big = child_series({"screen_large": lambda: [*lg, "screen", str(big_outputs)]},
                           repeat, warmup, work / "logs")
        res.update(big)
    return res


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


def bench_extra(name: str, csv_1m: Path | None, rows: int, repeat: int, quick: bool) -> dict:
    """Run benchmark/<name>.py's ``run(...)`` when the file exists."""
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
        t0 = time.perf_counter()
        result = mod.run(**kwargs)
        return {"status": "ok", "seconds_total": time.perf_counter() - t0, "kwargs":
                {k: str(v) for k, v in kwargs.items()},
                "result": json.loads(json.dumps(result, default=str))}
    except Exception as exc:  # noqa: BLE001 - another engineer's benchmark must not stop ours
        return {"status": "error", "note": f"{type(exc).__name__}: {exc}"}


def profile(parquet: Path, work: Path, target: Path, flags: list[str]) -> dict:
    cmd = [sys.executable, "-m", "pyinstrument", "-r", "text", "--no-color", "-o", str(target),
           "-m", "levgap", "analyze", str(parquet), "--out", str(fresh(work / "profile")),
           "--measure", "both", "--format", "parquet", *flags]
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
            sized: bool = True) -> None:
        name = name + (note if sized else "")
        if value is None or not np.isfinite(value):
            rows.append({"goal": name, "value": None, "bound": f"{op} {bound}", "met": None})
            return
        met = value <= bound if op == "<=" else value >= bound if op == ">=" else value < bound
        rows.append({"goal": name, "value": fmt.format(value), "bound": f"{op} {bound}",
                     "met": bool(met)})

    s = sizes.get(at, {}) if at else {}
    f = s.get("fits", {})
    e = s.get("end_to_end", {})
    add("(b)/(a): levgap fit / limit", f.get("b_over_a"), "<=", GOALS["b_over_a"])
    add("(c)/(b): statsmodels with dummies / levgap fit", f.get("c_over_b"), ">=",
        GOALS["c_over_b"], "{:.1f}")
    add("(d) Parquet / lean implementation, time", e.get("d_over_lean_time"), "<=",
        GOALS["d_over_lean_time"])
    add("(d) Parquet / lean implementation, peak RSS", e.get("d_over_lean_rss"), "<=",
        GOALS["d_over_lean_rss"])
    g = res.get("fit_growth", {})
    add("fit time growth 100k -> 1m (levgap, (b))", g.get("b"), "<=", GOALS["fit_growth"])
    u = res.get("unseen", {})
    add("never-seen panel, book only: levgap / lean, time", u.get("time_ratio"), "<=",
        GOALS["d_over_lean_time"], sized=False)
    add("never-seen panel, book only: levgap / lean, peak RSS", u.get("rss_ratio"), "<=",
        GOALS["d_over_lean_rss"], sized=False)
    for cmd, r in res.get("startup", {}).items():
        if cmd == "screen_large":
            continue
        add(f"start-up `levgap {cmd}` (s)", r.get("seconds"), "<", STARTUP_GOAL_S, "{:.3f}",
            sized=False)
    p = res.get("progress", {})
    if p.get("overhead") is not None:
        over = p["overhead"]
        met = (not p.get("stdout_has_bar")) and over <= max(0.03, p.get("noise", 0.0))
        rows.append({"goal": "progress bar on stderr, cost within run-to-run noise" + note,
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
         f"Each figure is the median of {res['repeat']} runs"
         + (" after one warm-up run" if res["warmup"] else " (no warm-up: --quick)")
         + ", runs of compared items interleaved; exceptions are stated beside the figure.",
         "", "## Goals", "", "| goal | measured | bound | met |", "|---|---|---|---|"]
    for g in res["goals"]:
        met = "n/a" if g["met"] is None else ("yes" if g["met"] else "**no**")
        L.append(f"| {g['goal']} | {g['value'] or 'not measured'} | {g['bound']} | {met} |")
    L += ["", "## Model fit: (a) limit, (b) levgap, (c) statsmodels", "",
          "Book leverage on the five drivers with industry and year effects, firm-clustered "
          "errors, on the same in-memory arrays (all rows of the panel).", "",
          "| firm-years | (a) limit s | (b) levgap s | (b)/(a) | (c) statsmodels s | (c)/(b) "
          "| max abs coef diff b-a | max rel SE diff b-a | max rel SE diff c-a |",
          "|---|---|---|---|---|---|---|---|---|"]
    for key, s in res["sizes"].items():
        f = s.get("fits", {})
        c_note = ""
        if f.get("c_runs") is not None and (f["c_runs"] < res["repeat"] or f["c_warmup"] == 0):
            c_note = f" ({f['c_runs']} run{'s' if f['c_runs'] > 1 else ''}" + (
                ", no warm-up)" if f["c_warmup"] == 0 else ")")
        L.append(
            f"| {key} | {fmt_s(f.get('a_s'))} | {fmt_s(f.get('b_s'))} | "
            f"{fmt_s(f.get('b_over_a'), 2)} | {fmt_s(f.get('c_s'), 2)}{c_note} | "
            f"{fmt_s(f.get('c_over_b'), 1)} | {f.get('max_abs_diff_coef_b_a', float('nan')):.1e}"
            f" | {f.get('max_rel_diff_se_b_a', float('nan')):.1e} | "
            f"{f.get('max_rel_diff_se_c_a', float('nan')):.1e} |")
    g = res.get("fit_growth", {})
    if g:
        L += ["", f"Fit time growth 100k -> 1m: (a) {fmt_s(g.get('a'), 2)}x, "
                  f"(b) {fmt_s(g.get('b'), 2)}x (10x the rows)."]
    L += ["", "## End to end: `levgap analyze` vs reading the file vs the lean implementation",
          "", "`levgap analyze PANEL --out DIR --measure both` in a fresh child process (time "
          "includes interpreter start-up and imports; peak RSS of that process from "
          "`os.wait4`), CSV input with CSV outputs and Parquet input with Parquet outputs, no "
          "report. The read baseline is `pyarrow` reading the same file in this process. "
          "The lean implementation (`benchmark/lean.py`) reads the Parquet file and writes "
          "Parquet. One warm-up run of (d) Parquet precedes the timed runs (it warms the file "
          "cache and the byte-code for all three).", "",
          "| firm-years | read CSV s | (d) CSV s | (d) CSV / read | (d) CSV RSS MB | "
          "read Parquet s | (d) Parquet s | (d) Parquet / read | (d) Parquet RSS MB | "
          "lean s | lean RSS MB | (d) Parquet / lean time | (d) Parquet / lean RSS |",
          "|---|---|---|---|---|---|---|---|---|---|---|---|---|"]
    for key, s in res["sizes"].items():
        e = s.get("end_to_end")
        if not e:
            L.append(f"| {key} | " + " | ".join(["-"] * 12) + " |")
            continue
        L.append(
            f"| {key} | {fmt_s(e['read_csv_s'])} | {fmt_s(e['d_csv']['seconds'], 2)}"
            f"{_runs_note(e['d_csv'], res)} | "
            f"{fmt_s(e['d_csv_over_read'], 1)} | {fmt_s(e['d_csv']['rss_mb'], 0)} | "
            f"{fmt_s(e['read_parquet_s'])} | {fmt_s(e['d_parquet']['seconds'], 2)}"
            f"{_runs_note(e['d_parquet'], res)} | "
            f"{fmt_s(e['d_parquet_over_read'], 1)} | {fmt_s(e['d_parquet']['rss_mb'], 0)} | "
            f"{fmt_s(e['lean']['seconds'], 2)}{_runs_note(e['lean'], res)} | "
            f"{fmt_s(e['lean']['rss_mb'], 0)} | "
            f"{fmt_s(e['d_over_lean_time'], 2)} | {fmt_s(e['d_over_lean_rss'], 2)} |")
    errs = [(k, n, r["error"]) for k, s in res["sizes"].items()
            for n, r in (s.get("end_to_end") or {}).items()
            if isinstance(r, dict) and "error" in r]
    for k, n, err in errs:
        L.append(f"\n{k} {n} failed: `{err}`")
    if any(s.get("end_to_end_note") for s in res["sizes"].values()):
        for k, s in res["sizes"].items():
            if s.get("end_to_end_note"):
                L.append(f"\n{k}: {s['end_to_end_note']}")
    u = res.get("unseen")
    if u:
        p = u["panel"]
        L += ["", "## A panel the project has never seen", "",
              f"{p['rows']:,} firm-years, {p['industries']} industries, {p['years']} years, seed "
              f"{p['seed']}, rows ordered by {p['row_order']}, {p['no_market_share']:.0%} of "
              "firms without a market value. `levgap analyze --measure book --format parquet` "
              "vs `lean.py --measure book`, interleaved.", "",
              "| | seconds | peak RSS MB |", "|---|---|---|",
              f"| levgap | {fmt_s(u['levgap']['seconds'], 2)} | "
              f"{fmt_s(u['levgap']['rss_mb'], 0)} |",
              f"| lean | {fmt_s(u['lean']['seconds'], 2)} | {fmt_s(u['lean']['rss_mb'], 0)} |",
              f"| ratio | {fmt_s(u['time_ratio'], 2)} | {fmt_s(u['rss_ratio'], 2)} |"]
    st = res.get("startup")
    if st:
        L += ["", "## Start-up", "", "Wall time of each command in a fresh process (median "
              f"of {res['repeat']} runs after a warm-up); `check` reads the smallest "
              "synthetic panel, `screen` and `explain` read the outputs written for it; "
              "`screen (largest outputs)` reads the CSV outputs of the largest size "
              "(informational).", "", "| command | seconds | peak RSS MB |", "|---|---|---|"]
        for cmd, r in st.items():
            name = "screen (largest outputs)" if cmd == "screen_large" else cmd
            extra = f" (failed: {r['error']})" if "error" in r else ""
            L.append(f"| `levgap {name}` | {fmt_s(r['seconds'])}{extra} | "
                     f"{fmt_s(r['rss_mb'], 0)} |")
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
              f"`{prof['file']}`: pyinstrument text profile of (d) with Parquet outputs at "
              f"{prof['size']} (profiled wall time {fmt_s(prof['seconds_profiled'], 1)} s"
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
    ap.add_argument("--csv-runs-large", type=int, default=1,
                    help="runs of (d) with CSV outputs at 1m firm-years and above")
    ap.add_argument("--no-profile", action="store_true")
    ap.add_argument("--data-dir", type=Path, default=HERE / "data")
    ap.add_argument("--work-dir", type=Path, default=HERE / "out")
    ap.add_argument("--results-dir", type=Path, default=HERE)
    args = ap.parse_args(argv)
    t_suite = time.perf_counter()
    args.results_dir.mkdir(parents=True, exist_ok=True)
    sizes = sorted({synth.parse_size(s) for s in args.sizes.split(",") if s.strip()})
    warmup = 0 if args.quick else 1
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
                csv_runs_large=args.csv_runs_large, with_bar=with_bar)
            if with_bar:
                res["progress"] = {"size": key, **s["end_to_end"].pop("progress")}
        else:
            s["end_to_end_note"] = why
        res["sizes"][key] = s
    keys = {label(r): r for r in sizes}
    if "100k" in keys and "1m" in keys:
        f1, f2 = res["sizes"]["100k"]["fits"], res["sizes"]["1m"]["fits"]
        res["fit_growth"] = {"a": f2["a_s"] / f1["a_s"],
                             "b": f2["b_s"] / f1["b_s"] if "b_s" in f1 and "b_s" in f2 else None}
    if flags is not None:
        largest = label(sizes[-1])
        say("never-seen panel")
        res["unseen"] = bench_unseen(work / "unseen", args.data_dir, repeat, warmup, flags,
                                     args.quick)
        say("start-up")
        smallest = label(sizes[0])
        big = work / largest / "d-csv" if largest != smallest else None
        res["startup"] = bench_startup(panels[smallest], work / smallest / "d-csv", big,
                                       work / "startup", repeat, warmup, args.quick)
        res["imports"] = import_check(
            {"--help": ["--help"], "--version": ["--version"],
             "check": ["check", str(panels[smallest]["csv"])],
             "screen": ["screen", str(work / smallest / "d-csv")],
             "explain": ["explain", str(work / smallest / "d-csv"),
                         _first_firm(work / smallest / "d-csv") or "?"],
             "template": ["template"]}, work / "startup")
        if not args.no_profile:
            say(f"profile at {largest}")
            res["profile"] = {"size": largest, **profile(
                panels[largest]["parquet"], work / "profile",
                args.results_dir / f"profile-{largest}.txt", flags)}
    say("other benchmarks")
    csv_big = panels[label(sizes[-1])]["csv"]
    res["extra"] = {n: bench_extra(n, csv_big, sizes[-1], repeat, args.quick)
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
