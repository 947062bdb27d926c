"""Speed of adjustment: planted speeds recovered by the corrected estimator, the documented
biases of the others, half-lives and expected paths."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from _synthetic import adjusting_panel
from typer.testing import CliRunner

from levgap.adjustment import speed_of_adjustment
from levgap.cli import app
from levgap.errors import ModelError
from levgap.models.adjust import ESTIMATORS, expected_paths, half_life, prepare


def _simulate(speed: float, seed: int, firms: int = 500, years: int = 12
              ) -> tuple[np.ndarray, ...]:
    """Partial adjustment toward a known target plus a firm's own offset (firm effect)."""
    rng = np.random.default_rng(seed)
    firm = np.repeat(np.arange(firms), years)
    year = np.tile(np.arange(years), firms) + 2000
    target = np.empty(firms * years)
    lev = np.empty(firms * years)
    offset = rng.normal(0, 0.08, firms)
    for i in range(firms):
        tg = 0.1 + 0.5 * (rng.uniform(0.1, 0.5) + rng.normal(0, 0.05, years))
        L = tg[0] + offset[i] + rng.normal(0, 0.03 / np.sqrt(1 - (1 - speed) ** 2))
        for t in range(years):
            if t:
                L = (1 - speed) * L + speed * (tg[t] + offset[i]) + rng.normal(0, 0.03)
            lev[i * years + t], target[i * years + t] = L, tg[t]
    return firm, year, lev, target


@pytest.mark.parametrize(("speed", "seed"), [(0.15, 8101), (0.35, 8102)])
def test_planted_speed_and_the_documented_biases(speed: float, seed: int) -> None:
    lags = prepare(*_simulate(speed, seed))
    est = {name: fit(lags) for name, fit in ESTIMATORS.items()}
    ld = est["long-difference"]
    # the corrected estimator recovers the planted speed within two standard errors
    assert abs(ld.speed - speed) <= 2 * ld.std_error, ld
    assert ld.difference == 4 and ld.n_firms == 500
    # pooled least squares: biased toward slow adjustment (firm effects in the error)
    pooled = est["pooled"]
    assert pooled.speed + 2 * pooled.std_error < speed
    # firm effects: biased toward fast adjustment in a short panel (Nickell)
    fe = est["firm-effects"]
    assert fe.speed - 2 * fe.std_error > speed
    # REFERENCES.md "estimator bias": Flannery and Hankins (2013); Iliev and Welch (2010)
    assert "slow" in pooled.bias and "fast" in fe.bias and "corrected" in ld.bias


def test_half_life() -> None:
    # REFERENCES.md "half-life of a gap" (formula): ln(0.5)/ln(1 - 0.344) = 1.644 years.
    assert float(half_life(0.344)) == pytest.approx(1.644, abs=5e-4)
    assert float(half_life(0.5)) == pytest.approx(1.0)
    assert np.isinf(half_life(-0.1)) and float(half_life(1.2)) == 0.0


def test_expected_path_closes_the_gap_geometrically() -> None:
    lags = prepare(np.array(["a", "a", "b"]), np.array([2020, 2021, 2021]),
                   np.array([0.5, 0.4, 0.1]), np.array([0.3, 0.2, 0.3]))
    p = expected_paths(lags, 0.25, horizon=3)
    a = p[p["firm_id"] == "a"]
    assert a["from_year"].unique().tolist() == [2021]
    np.testing.assert_allclose(a["gap"], 0.2 * 0.75 ** np.arange(4))
    assert p[p["firm_id"] == "b"]["expected_leverage"].iloc[-1] == pytest.approx(
        0.3 - 0.2 * 0.75**3)


def test_refusals() -> None:
    with pytest.raises(ModelError, match="one row per firm and year"):
        prepare(np.array(["a", "a"]), np.array([1, 1]), np.zeros(2), np.zeros(2))
    short = prepare(*_simulate(0.3, 1, firms=20, years=3))
    with pytest.raises(ModelError, match="at least four consecutive fiscal years"):
        ESTIMATORS["long-difference"](short)
    res = speed_of_adjustment(pd.DataFrame({
        "firm_id": np.repeat(["a", "b", "c"], 3), "fiscal_year": np.tile([1, 2, 3], 3),
        "measure": "book", "actual": np.linspace(0.1, 0.5, 9),
        "target": np.linspace(0.2, 0.3, 9)}))
    assert res.table["estimator"].tolist() == ["pooled", "firm-effects"]
    assert any("long-difference" in n for n in res.notes)


@pytest.mark.parametrize(("speed", "seed"), [(0.15, 101), (0.35, 202)])
def test_cli_recovers_a_planted_speed_from_a_panel(tmp_path, speed: float, seed: int) -> None:
    """End to end on a panel the project has not seen: the target is levgap's own
    (cross-fitted, linear model), not the simulation's."""
    panel = adjusting_panel(seed, speed).drop(columns="true_target")
    path = tmp_path / "panel.csv"
    panel.to_csv(path, index=False)
    cfg = tmp_path / "run.toml"
    cfg.write_text('[model]\nmodel = "linear"\ndrivers = ["tangibility", "profitability"]\n',
                   encoding="utf-8")
    out = tmp_path / "adj"
    res = CliRunner().invoke(app, ["adjust", str(path), "--config", str(cfg), "--measure",
                                   "book", "--out", str(out)])
    assert res.exit_code == 0, res.output
    assert "Flannery and Rangan (2006)" in res.output and "Huang and Ritter" in res.output
    table = pd.read_csv(out / "adjustment.csv")
    ld = table[table["estimator"] == "long-difference"].iloc[0]
    assert abs(ld["speed"] - speed) <= 2 * ld["std_error"]
    assert ld["corrected"] == "yes" and "0.34" in ld["published"]
    assert table.set_index("estimator").loc["pooled", "speed"] < speed
    assert table.set_index("estimator").loc["firm-effects", "speed"] > speed
    paths = pd.read_csv(out / "paths.csv", dtype={"firm_id": str})
    assert paths["firm_id"].nunique() == panel["firm_id"].nunique()
    first = paths[paths["years_ahead"] == 1]
    np.testing.assert_allclose(first["gap"], (1 - ld["speed"]) * paths.loc[
        paths["years_ahead"] == 0, "gap"].to_numpy(), atol=1e-12)
