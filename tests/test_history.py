"""Gap history: the columns equal a plain loop over each firm's years, on random panels with
missing years, and the analysis writes the same columns the targets table implies."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from levgap.history import HISTORY_COLUMNS, PERSISTENT_YEARS, history_arrays, with_history


def _panel(seed: int) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    rng = np.random.default_rng(seed)
    rows = []
    for f in range(40):
        years = sorted(rng.choice(np.arange(2000, 2014), size=rng.integers(1, 12),
                                  replace=False))
        rows += [(f, y) for y in years]
    rng.shuffle(rows)
    firm = np.array([r[0] for r in rows])
    year = np.array([r[1] for r in rows])
    side = rng.choice([-1, 0, 1], size=len(rows), p=[0.3, 0.4, 0.3])
    gap = rng.normal(0, 0.1, len(rows))
    return firm, year, gap, side


def _brute(firm, year, gap, side) -> dict[str, np.ndarray]:
    n = len(gap)
    out = {k: np.full(n, np.nan) for k in HISTORY_COLUMNS}
    new = np.zeros(n, dtype=bool)
    for i in range(n):
        mine = {int(year[j]): j for j in range(n) if firm[j] == firm[i]}
        t = int(year[i])
        if t - 1 in mine:
            out["gap_prev"][i] = gap[mine[t - 1]]
            out["gap_change"][i] = gap[i] - gap[mine[t - 1]]
            new[i] = side[i] != 0 and side[mine[t - 1]] != side[i]
        earlier = [gap[j] for y, j in mine.items() if y < t]
        if earlier:
            out["gap_mean_prior"][i] = np.mean(earlier)
        count, y = 0, t
        while side[i] != 0 and y in mine and side[mine[y]] == side[i]:
            count, y = count + 1, y - 1
        out["years_outside"][i] = count
    out["newly_outside"] = new
    return out


@pytest.mark.parametrize("seed", range(6))
def test_history_equals_a_plain_loop(seed: int) -> None:
    firm, year, gap, side = _panel(seed)
    got = history_arrays(firm, year, gap, side)
    want = _brute(firm, year, gap, side)
    for name in HISTORY_COLUMNS:
        np.testing.assert_allclose(got[name], want[name], rtol=0, atol=1e-12, err_msg=name)
    np.testing.assert_array_equal(got["flags"]["newly_outside"], want["newly_outside"])
    np.testing.assert_array_equal(got["flags"]["persistent"],
                                  want["years_outside"] >= PERSISTENT_YEARS)


def test_a_missing_year_or_a_change_of_side_starts_the_count_again() -> None:
    firm = np.zeros(7, dtype=int)
    year = np.array([2000, 2001, 2002, 2004, 2005, 2006, 2007])
    side = np.array([1, 1, 1, 1, 1, -1, -1])
    got = history_arrays(firm, year, np.zeros(7), side)
    assert got["years_outside"].tolist() == [1, 2, 3, 1, 2, 1, 2]
    assert got["flags"]["persistent"].tolist() == [False, False, True] + [False] * 4
    # 2000 has no year before it and 2004 follows a missing year: neither is "new"
    assert got["flags"]["newly_outside"].tolist() == [False] * 5 + [True, False]


def test_analysis_history_matches_its_targets_table() -> None:
    import levgap
    from levgap.demo import make_panel

    result = levgap.analyze(make_panel(seed=19).query("fiscal_year >= 2018"))
    t = result.targets
    again = with_history(t.drop(columns=list(HISTORY_COLUMNS)).assign(
        flags=t["flags"].str.replace(r"(^|;)(persistent|newly_outside)(?=;|$)", "",
                                     regex=True).str.strip(";")))
    for name in HISTORY_COLUMNS:
        np.testing.assert_allclose(t[name].to_numpy(float), again[name].to_numpy(float),
                                   rtol=0, atol=1e-12, err_msg=name)
    flags = pd.Series([set(f.split(";")) - {""} for f in t["flags"]])
    again_flags = pd.Series([set(f.split(";")) - {""} for f in again["flags"]])
    assert (flags == again_flags).all()
    assert t["years_outside"].dtype.kind == "i"


def test_a_run_that_reports_one_year_keeps_the_earlier_years_history() -> None:
    import levgap
    from levgap.config import ModelSpec
    from levgap.demo import make_panel

    panel = make_panel(seed=19).query("fiscal_year >= 2019")
    full = levgap.analyze(panel, spec=ModelSpec(measures=("book",))).targets
    one = levgap.analyze(panel, spec=ModelSpec(measures=("book",), year=2023)).targets
    assert set(one["fiscal_year"]) == {2023}
    want = full[full["fiscal_year"] == 2023].set_index("firm_id")
    got = one.set_index("firm_id").loc[want.index]
    assert got["gap_prev"].notna().mean() > 0.9
    for name in HISTORY_COLUMNS:
        np.testing.assert_allclose(got[name].to_numpy(float), want[name].to_numpy(float),
                                   rtol=0, atol=1e-12, err_msg=name)


def test_a_folder_written_before_the_history_columns_stays_readable(tmp_path) -> None:
    """A run written before issue 13 has no history columns nor raw_value: every reader
    computes the history from the targets' own rows (and leaves raw_value blank)."""
    import dataclasses
    import json

    from typer.testing import CliRunner

    import levgap
    from levgap.cli import app
    from levgap.config import ModelSpec
    from levgap.demo import make_panel

    result = levgap.analyze(make_panel(seed=19).query("fiscal_year >= 2019"),
                            spec=ModelSpec(measures=("book",)))
    old_flags = result.targets["flags"].str.replace(
        r"(^|;)(persistent|newly_outside)(?=;|$)", "", regex=True).str.strip(";")
    old = dataclasses.replace(
        result, targets=result.targets.drop(columns=list(HISTORY_COLUMNS)).assign(
            flags=old_flags), drivers=result.drivers.drop(columns=["raw_value"]))
    old.write(tmp_path / "old", report=False)
    res = levgap.open_results(tmp_path / "old")
    for name in HISTORY_COLUMNS:
        np.testing.assert_allclose(res.targets[name].to_numpy(float),
                                   result.targets[name].to_numpy(float), atol=1e-12)
    assert res.drivers["raw_value"].isna().all()
    screen = CliRunner().invoke(app, ["screen", str(tmp_path / "old"), "--persistent",
                                      "--format", "json"])
    rows = json.loads(screen.stdout)["rows"]
    t = result.targets
    want = t[(t["fiscal_year"] == 2023) & t["flags"].str.contains("persistent")]
    assert sorted(r["firm_id"] for r in rows) == sorted(want["firm_id"])
    assert {r["years_outside"] for r in rows} <= set(want["years_outside"])
