"""The saved model: model.json scores firm-years without the panel and reproduces the run."""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest

import levgap
from levgap.config import ModelSpec
from levgap.demo import make_panel
from levgap.errors import OutputError
from levgap.models.saved import FORMAT
from levgap.pipeline import analyze

KEY = ["firm_id", "fiscal_year", "measure"]


@pytest.fixture(scope="module", params=["fractional", "linear"])
def saved(request, tmp_path_factory):
    panel = make_panel(3)
    result = analyze(panel, spec=ModelSpec(model=request.param))
    out = tmp_path_factory.mktemp(request.param)
    result.write(out, report=False)
    return panel, result, levgap.load_model(out)


def test_full_sample_targets_are_reproduced(saved) -> None:
    panel, result, model = saved
    scored = model.score(panel)
    m = result.targets.merge(scored[[*KEY, "target"]], on=KEY, suffixes=("", "_scored"))
    assert len(m) == len(result.targets)
    assert np.abs(m["target_full"] - m["target_scored"]).max() <= 1e-12


def test_cross_fitted_targets_are_reproduced_with_the_firms_fold(saved) -> None:
    panel, result, model = saved
    scored = model.score(panel, fold="firm")
    m = result.targets.merge(scored[[*KEY, "target", "fold"]], on=KEY,
                             suffixes=("", "_scored"))
    assert np.abs(m["target"] - m["target_scored"]).max() <= 1e-12
    assert (m["fold"] == m["fold_scored"]).all()
    one = result.targets.iloc[0]
    alone = model.score(panel, fold=int(one["fold"]))
    hit = alone.set_index(KEY).loc[(one["firm_id"], one["fiscal_year"], one["measure"])]
    assert hit["target"] == pytest.approx(one["target"], abs=1e-12)


def test_contributions_against_the_firms_own_peers_match_drivers_csv(saved) -> None:
    panel, result, model = saved
    row = result.targets[result.targets["measure"] == "book"].iloc[10]
    d = result.drivers[(result.drivers["firm_id"] == row["firm_id"])
                       & (result.drivers["fiscal_year"] == row["fiscal_year"])
                       & (result.drivers["measure"] == "book")]
    peer = pd.DataFrame([d.set_index("driver")["peer_value"]])
    mine = panel[panel["firm_id"] == row["firm_id"]]
    scored = model.score(mine, fold=int(row["fold"]), peer_profile=pd.concat(
        [peer] * len(mine), ignore_index=True))
    s = scored[(scored["measure"] == "book") & (scored["fiscal_year"] == row["fiscal_year"])]
    s = s.iloc[0]
    assert s["peer_target"] == pytest.approx(row["peer_target"], abs=1e-12)
    for r in d.itertuples():
        assert s[f"{r.driver}_contribution"] == pytest.approx(r.contribution, abs=1e-12)


def test_new_rows_outside_the_fitted_range_are_flagged_not_silently_clipped(saved) -> None:
    panel, _, model = saved
    row = panel.iloc[[0]].copy()
    row["ppe_net"] = row["total_assets"] * 0.999  # far above the year's 99th percentile
    row["industry"] = "3719"  # never seen: takes the 371* industries' effect
    row["fiscal_year"] = 2031  # never seen: the latest fitted year's effect
    s = model.score(row)
    flags = s["flags"].iloc[0]
    assert "outside_fitted_range" in flags and "industry_not_in_model" in flags
    assert "year_not_in_model" in flags
    assert s["tangibility_raw"].iloc[0] == pytest.approx(0.999)
    limits = model.record["transforms"]["limits"]["tangibility"][-1]
    assert s["tangibility"].iloc[0] == pytest.approx(limits[1])
    assert s["target"].between(0, 1).all() or model.model == "linear"


def test_a_folder_without_a_saved_model_is_a_clear_error(tmp_path) -> None:
    from levgap.outputs import RunWriter

    # the folder is checked as one run first (levgap.outputs.verify_run)
    with pytest.raises(OutputError, match="must hold levgap outputs"):
        levgap.load_model(tmp_path)
    for name, model in (("plain", None), ("other", {"format": "other", "run_id": "abc"}),
                        ("mixed", {"format": FORMAT, "run_id": "another"})):
        with RunWriter(tmp_path / name, run_id="abc") as run:
            if model is not None:
                run.add("model.json", json.dumps(model).encode("utf-8"))
            run.commit({})
    with pytest.raises(OutputError, match="must hold model.json"):
        levgap.load_model(tmp_path / "plain")
    with pytest.raises(OutputError, match="levgap saved model"):
        levgap.load_model(tmp_path / "other")
    with pytest.raises(OutputError, match="mixes two runs"):
        levgap.load_model(tmp_path / "mixed")


def test_rows_the_schema_refuses_are_returned_blank_not_scored(saved) -> None:
    import warnings

    panel, _, model = saved
    rows = panel.iloc[:4].copy().astype({"total_assets": object})
    rows.loc[rows.index[0], "total_assets"] = -5.0
    rows.loc[rows.index[1], "total_assets"] = "abc"
    rows.loc[rows.index[2], "total_assets"] = float("inf")
    with warnings.catch_warnings():
        warnings.simplefilter("error")  # no RuntimeWarning may escape
        s = model.score(rows)
    assert (s.groupby("measure").size() == 4).all()
    bad = s[s["flags"] == "not_scorable"]
    assert len(bad) == 3 * len(model.measures)
    assert bad["target"].isna().all() and (bad["status"] == "").all()
    assert set(bad["note"]) == {"total_assets must be a finite number > 0"}
    good = s[s["flags"] != "not_scorable"]
    assert good["target"].notna().all() and (good["note"] == "").all()
