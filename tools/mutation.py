"""Mutation check of the engine with mutmut, one module at a time (DEVELOPERS.md).

    .venv/bin/python tools/mutation.py                 # every module, then the report
    .venv/bin/python tools/mutation.py band attribution
    .venv/bin/python tools/mutation.py --report        # the table and unexplained survivors
    .venv/bin/python tools/mutation.py --report band   # the same for some modules only
    .venv/bin/python tools/mutation.py --all band      # re-test every mutant, killed ones too

``[tool.mutmut]`` in pyproject.toml names the files mutated and the test files mutmut may
use. Each module here runs with two workers and only the test files relevant to it (passed to
pytest as a ``-k`` filter on the file names through ``PYTEST_ADDOPTS``); within them mutmut
runs, for each mutant, only the tests that call the mutated function, fastest first.
Results accumulate in ``mutants/`` (git-ignored); a later run re-tests only the module's
mutants not yet caught nor listed as equivalent (survivors, and those never checked), so it
resumes where a bounded run stopped and checks survivors again after a sharper test (``--all``
re-tests every one). The report counts, per module, the mutants killed, the survivors listed
as equivalent in DEVELOPERS.md ("Equivalent mutants"), and any other survivor, which it
names: the check passes when there is none, every mutant was run, and no name listed as
equivalent is one the tests kill (a stale name).
"""

from __future__ import annotations

import argparse
import json
import os
import re
import subprocess
import sys
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
MUTMUT = Path(sys.executable).parent / "mutmut"
WORKERS = 2
TIMEOUT_S = 4 * 3600

MODEL_CORE = ("test_models.py", "test_fractional.py", "test_numerics.py", "test_inference.py",
              "test_design.py", "test_covariance.py")
MODULES: dict[str, tuple[str, ...]] = {
    "band": ("test_band.py", "test_pipeline_brute.py", "test_saved.py"),
    "attribution": ("test_attribution.py", "test_pipeline_brute.py"),
    "features": ("test_features.py", "test_pipeline_brute.py", "test_pipeline_edges.py",
                 "test_specifications.py"),
    "transforms": ("test_transforms.py", "test_features.py", "test_pipeline_brute.py",
                   "test_saved.py"),
    "groups": ("test_groups.py", "test_features.py", "test_pooling.py",
               "test_pipeline_brute.py"),
    "models.design": MODEL_CORE,
    "models.identify": MODEL_CORE,
    "models.linalg": MODEL_CORE,
    "models.linear": (*MODEL_CORE, "test_pooling.py"),
    "models.fractional": (*MODEL_CORE, "test_pooling.py"),
    "models.assemble": MODEL_CORE,
    "models.covariance": MODEL_CORE,
    "models.result": (*MODEL_CORE, "test_result.py", "test_saved.py"),
    "models.shapley": ("test_shapley.py", "test_attribution.py"),
    "models.pooling": ("test_pooling.py", "test_models.py"),
    "models.crossfit": ("test_crossfit.py", "test_pipeline_brute.py"),
    "models.saved": ("test_saved.py",),
    "models.record": ("test_saved.py",),
    # the research estimators (estimation table only); their test files must be in
    # pyproject's pytest_add_cli_args_test_selection too
    "models.within": ("test_within.py", "test_specifications.py"),
    "models.famamacbeth": ("test_famamacbeth.py", "test_specifications.py"),
    "models.adjust": ("test_adjust.py",),
    "models.estimates": ("test_within.py", "test_famamacbeth.py", "test_specifications.py"),
}
"""Module (under ``levgap``) -> the test files its mutants run against."""

KILLED = {1, 3, 24, -24, 152, 255, 36}
"""Exit codes of a mutant the tests caught: a failure, or a timeout (the mutant made them run
far longer than their recorded time)."""
STATUS = {0: "survived", 5: "no tests", 33: "no tests", None: "not checked"}


def run(module: str, everyone: bool = False) -> int:
    """Run mutmut on one module's mutants with that module's tests.

    Only the mutants never run, and those run but neither caught nor listed as equivalent,
    are named, unless ``everyone`` (or mutmut has not listed the module's mutants yet).
    """
    tests = MODULES[module]
    env = dict(os.environ, PYTEST_ADDOPTS="-k '" + " or ".join(tests) + "'")
    codes = results().get(module)
    if everyone or not codes:
        names = [f"levgap.{module}.*"]
    else:
        equivalent = equivalent_names()
        names = sorted(k for k, c in codes.items()
                       if c is None or (c not in KILLED and k not in equivalent))
        if not names:
            print(f"== levgap.{module}: every mutant caught already", flush=True)
            return 0
    print(f"== levgap.{module}: {len(names)} name(s); tests {', '.join(tests)}", flush=True)
    cmd = [str(MUTMUT), "run", "--max-children", str(WORKERS), *names]
    (ROOT / "mutants").mkdir(exist_ok=True)
    log = ROOT / "mutants" / f"run-{module}.log"
    try:
        with log.open("w", encoding="utf-8") as fh:
            done = subprocess.run(cmd, cwd=ROOT, env=env, timeout=TIMEOUT_S, stdout=fh,
                                  stderr=subprocess.STDOUT, check=False)
    except subprocess.TimeoutExpired:
        print(f"   stopped after {TIMEOUT_S} s", flush=True)
        return 1
    return done.returncode


def equivalent_names() -> set[str]:
    """Mutants DEVELOPERS.md lists as equivalent (their names, in backquotes)."""
    text = (ROOT / "DEVELOPERS.md").read_text(encoding="utf-8")
    part = text.split("### Equivalent mutants", 1)[-1]
    return set(re.findall(r"`(levgap\.[^`\s]+__mutmut_\d+)`", part))


def results() -> dict[str, dict[str, int | None]]:
    """Exit code of every mutant, by module, from mutmut's ``.meta`` files."""
    out: dict[str, dict[str, int | None]] = {}
    for meta in sorted((ROOT / "mutants" / "src" / "levgap").rglob("*.py.meta")):
        rel = meta.relative_to(ROOT / "mutants" / "src" / "levgap").as_posix()
        module = rel.removesuffix(".py.meta").replace("/", ".")
        if module in MODULES:
            out[module] = json.loads(meta.read_text(encoding="utf-8"))["exit_code_by_key"]
    return out


def report(modules: list[str] | None = None) -> int:
    """Print the score table and every survivor not explained; 1 if there is one.

    ``modules`` limits the table and the verdict to those modules. A mutant never run counts
    as "not run" (never as equivalent); a name listed as equivalent that the tests kill is
    printed as stale (the list names another change after the code moved).
    """
    equivalent = equivalent_names()
    unexplained: list[str] = []
    stale: list[str] = []
    rows = []
    for module, codes in results().items():
        if modules and module not in modules:
            continue
        ran = {k: c for k, c in codes.items() if c is not None}
        killed = sum(1 for c in ran.values() if c in KILLED)
        equiv = sum(1 for k, c in ran.items() if c not in KILLED and k in equivalent)
        other = sorted(k for k, c in ran.items() if c not in KILLED and k not in equivalent)
        stale += sorted(k for k, c in ran.items() if c in KILLED and k in equivalent)
        unexplained += [f"{k} ({STATUS.get(codes[k], codes[k])})" for k in other]
        rows.append((module, len(codes), killed, equiv, len(other), len(codes) - len(ran)))
    print(f"{'module':20} {'mutants':>8} {'killed':>7} {'equivalent':>11} {'other':>6} "
          f"{'not run':>8}")
    for module, total, killed, equiv, other, not_run in rows:
        print(f"{module:20} {total:8d} {killed:7d} {equiv:11d} {other:6d} {not_run:8d}")
    totals = [sum(r[i] for r in rows) for i in range(1, 6)]
    print(f"{'total':20} {totals[0]:8d} {totals[1]:7d} {totals[2]:11d} {totals[3]:6d} "
          f"{totals[4]:8d}")
    for name in unexplained:
        print("unexplained:", name)
    for name in stale:
        print("listed as equivalent but killed (a stale name):", name)
    not_run = [r[0] for r in rows if r[5]]
    if not_run:
        print("not run completely:", ", ".join(not_run))
    return 1 if unexplained or not_run or stale else 0


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("modules", nargs="*", help=f"default: all of {', '.join(MODULES)}")
    parser.add_argument("--report", action="store_true", help="only print the report")
    parser.add_argument("--all", action="store_true",
                        help="re-test every mutant of the modules, not only those not caught")
    args = parser.parse_args(argv)
    unknown = [m for m in args.modules if m not in MODULES]
    if unknown:
        parser.error(f"unknown module {unknown[0]!r}; choose from {', '.join(MODULES)}")
    if not args.report:
        for module in args.modules or list(MODULES):
            run(module, everyone=args.all)
    return report(args.modules)


if __name__ == "__main__":
    sys.exit(main())
