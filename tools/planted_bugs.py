"""Plant each known bug in a copy of the repository and check that its tests fail.

    .venv/bin/python tools/planted_bugs.py          # every bug (a few minutes on 2 cores)
    .venv/bin/python tools/planted_bugs.py 0 3      # only those numbers

Each bug is one textual edit of ``src/`` (it must match exactly once, so a refactor that
moves the code makes the script say so rather than pass). The copy is made from the files
git tracks, in a temporary folder; the work tree is never edited. DEVELOPERS.md ("Planted
bugs") lists the same table with the tests that fail.
"""

from __future__ import annotations

import os
import shutil
import subprocess
import sys
import tempfile
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
BRUTE = "tests/test_pipeline_brute.py"
INFERENCE = "tests/test_inference.py"

BUGS: list[tuple[str, str, str, str, str]] = [
    ("leave-one-out median keeps the row itself (in _loo_medians, the path analyze uses)",
     "src/levgap/attribution.py",
     "p_hi = np.clip(start + half + (half >= rank), 0, n - 1)",
     "p_hi = np.clip(start + half, 0, n - 1)", BRUTE),
    ("winsorising limits pooled over all years", "src/levgap/transforms.py",
     "limits[name] = year_limits(values, year, years, lo, hi)",
     "limits[name] = np.repeat(np.nanquantile(values, [lo, hi])[None, :], len(years), axis=0)",
     BRUTE),
    ("winsorising switched off", "src/levgap/transforms.py",
     "    if lo > 0.0 or hi < 1.0:\n", "    if False:\n", BRUTE),
    ("folds dealt per row, not per firm (pipeline)", "src/levgap/pipeline.py",
     "folds = assign_folds(firm, level, spec.folds, spec.seed)",
     "folds = assign_folds(np.arange(len(firm)), level, spec.folds, spec.seed)", BRUTE),
    ("band percentile: the tail is 1 - coverage, not half of it", "src/levgap/band.py",
     "a = (1.0 - coverage) / 2.0", "a = 1.0 - coverage", BRUTE),
    ("gap_z scaled by the pooled scale, not the industry's", "src/levgap/pipeline.py",
     '"gap_z": bands.gap_z(gap, band.scale_of(ctx.level[rows]))[keep]',
     '"gap_z": bands.gap_z(gap, np.full(len(rows), band.pooled_scale))[keep]', BRUTE),
    ("p-values from the normal, not Student's t", "src/levgap/models/result.py",
     "p = 2.0 * special.stdtr(self.df_inference, -np.abs(t))",
     "p = 2.0 * special.ndtr(-np.abs(t))", INFERENCE),
    ("intervals from the normal quantile, not Student's t", "src/levgap/models/result.py",
     "q = special.stdtrit(self.df_inference, 0.5 + coverage / 2.0)",
     "q = special.ndtri(0.5 + coverage / 2.0)", INFERENCE),
    ("clustered degrees of freedom N - P, not G - 1", "src/levgap/models/covariance.py",
     "df = min(n_cl) - 1\n", "df = n - n_params\n", INFERENCE),
    ("market debt to target keeps market equity fixed (T E / (1 - T) - D)",
     "src/levgap/recap.py",
     "amount = np.clip(t, 0.0, 1.0) * base - d",
     "amount = (np.clip(t, 0.0, 1.0) * base - d) if measure == 'book' else "
     "t * np.asarray(market_equity, dtype=float) / (1 - t) - d", BRUTE),
]
"""(bug, file, original text, planted text, test file to run)."""


def copy_tree(dest: Path) -> None:
    """The files git tracks in the work tree (with uncommitted edits), copied to ``dest``."""
    names = subprocess.run(["git", "ls-files", "-z"], cwd=ROOT, capture_output=True,
                           check=True).stdout.decode().split("\0")
    for name in filter(None, names):
        src = ROOT / name
        if src.is_file():
            (dest / name).parent.mkdir(parents=True, exist_ok=True)
            shutil.copy2(src, dest / name)


def check(copy: Path, number: int) -> bool:
    """Plant bug ``number``, run its tests, restore the file; True if a test failed."""
    name, rel, old, new, tests = BUGS[number]
    path = copy / rel
    text = path.read_text(encoding="utf-8")
    if text.count(old) != 1:
        print(f"[{number}] {name}: the original text is not found once in {rel}; update "
              "tools/planted_bugs.py")
        return False
    path.write_text(text.replace(old, new), encoding="utf-8")
    try:
        env = dict(os.environ, PYTHONPATH=str(copy / "src"))
        done = subprocess.run([sys.executable, "-m", "pytest", "-q", "-p", "no:cacheprovider",
                               tests], cwd=copy, env=env, capture_output=True, text=True,
                              timeout=1800, check=False)
    finally:
        path.write_text(text, encoding="utf-8")
    failed = [line.split(" ")[1] for line in done.stdout.splitlines()
              if line.startswith("FAILED ")]
    print(f"[{number}] {name}: {'caught' if failed else 'NOT CAUGHT'}")
    for test in failed:
        print(f"      {test}")
    return bool(failed)


def main(argv: list[str]) -> int:
    numbers = [int(a) for a in argv] or list(range(len(BUGS)))
    with tempfile.TemporaryDirectory(prefix="levgap-planted-") as tmp:
        copy = Path(tmp)
        copy_tree(copy)
        caught = [check(copy, i) for i in numbers]
    return 0 if all(caught) else 1


if __name__ == "__main__":
    sys.exit(main(sys.argv[1:]))
