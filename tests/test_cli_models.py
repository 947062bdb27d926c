"""The model options on the command line: --model, compare, and unidentified drivers."""

from __future__ import annotations

import json
from pathlib import Path

import pandas as pd
from _synthetic import panel
from test_numerics import _many_industries
from typer.testing import CliRunner

from levgap.cli import app

runner = CliRunner()


def test_analyze_with_each_model_writes_its_saved_model(tmp_path: Path) -> None:
    src = tmp_path / "panel.csv"
    panel(5, industries=6, firms=(8, 12)).drop(columns=["true_target", "spread"]).to_csv(
        src, index=False)
    for model in ("linear", "fractional"):
        out = tmp_path / model
        r = runner.invoke(app, ["analyze", str(src), "--out", str(out), "--model", model,
                                "--quiet", "--no-report"])
        assert r.exit_code == 0, r.output
        saved = json.loads((out / "model.json").read_text(encoding="utf-8"))
        assert saved["model"] == model and set(saved["measures"]) == {"book", "market"}
        coefs = pd.read_csv(out / "coefficients.csv")
        assert set(coefs["model"]) == {model}
        folds = pd.read_csv(out / "fold_coefficients.csv")
        assert sorted(folds["fold"].unique()) == [0, 1, 2, 3, 4]
    r = runner.invoke(app, ["analyze", str(src), "--out", str(tmp_path / "x"), "--model",
                            "cubist", "--quiet"])
    assert r.exit_code == 2 and "model must be one of" in r.output


def test_compare_prints_and_writes_three_models(tmp_path: Path) -> None:
    src = tmp_path / "panel.csv"
    panel(6, industries=5, firms=(6, 8), years=6).drop(columns=["true_target", "spread"]).to_csv(
        src, index=False)
    out = tmp_path / "comparison.csv"
    r = runner.invoke(app, ["compare", str(src), "--measure", "book", "--out", str(out)])
    assert r.exit_code == 0, r.output
    t = pd.read_csv(out)
    assert list(t["model"]) == ["fractional", "linear", "gradient_boosting"]
    assert t.loc[t["model"] == "fractional", "outside_unit_interval"].iloc[0] == 0.0
    assert t["r2_oos"].between(0, 1).all() and t["coverage"].between(0.7, 0.9).all()
    for name in ("fractional", "linear", "gradient_boosting"):
        assert name in r.output


def test_a_driver_absorbed_by_480_industries_is_exit_2_naming_it(tmp_path: Path) -> None:
    src = tmp_path / "panel.csv"
    _many_industries(7).to_csv(src, index=False)
    cfg = tmp_path / "run.toml"
    cfg.write_text("[model]\nmin_industry_firms = 2\nmeasures = [\"book\"]\n", encoding="utf-8")
    r = runner.invoke(app, ["analyze", str(src), "--out", str(tmp_path / "o"), "--config",
                            str(cfg), "--quiet"])
    assert r.exit_code == 2, r.output
    assert "tangibility" in r.output and "Traceback" not in r.output
