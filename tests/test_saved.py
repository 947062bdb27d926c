"""The saved model: model.json scores firm-years without the panel and reproduces the run."""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest

import levgap
from levgap.config import ModelSpec
from levgap.demo import make_panel
from levgap.errors import ModelError, OutputError
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


def test_a_firm_year_scored_alone_imputes_its_volatility_and_earlier_rows_reproduce_it(
        saved) -> None:
    # README "Saved model": earnings volatility needs the firm's earlier years
    panel, result, model = saved
    t = result.targets.set_index(KEY)
    firm = panel["firm_id"].iloc[0]
    year = int(panel.loc[panel["firm_id"] == firm, "fiscal_year"].sort_values().iloc[3])
    mine = panel[panel["firm_id"] == firm]
    alone = model.score(mine[mine["fiscal_year"] == year]).set_index(KEY)
    both = model.score(mine[mine["fiscal_year"] <= year]).set_index(KEY)
    key = (firm, year, "book")
    assert "volatility_imputed" not in str(t.loc[key, "flags"])
    assert "volatility_imputed" in alone.loc[key, "flags"]
    assert abs(alone.loc[key, "target"] - t.loc[key, "target_full"]) > 1e-6
    assert abs(both.loc[key, "target"] - t.loc[key, "target_full"]) <= 1e-12
    assert "volatility_imputed" not in both.loc[key, "flags"]


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


def test_scores_carry_the_band_status_gap_and_saved_peers(saved) -> None:
    panel, result, model = saved
    scored = model.score(panel)
    band = model.band("book")
    book = scored[scored["measure"] == "book"].reset_index(drop=True)
    level = np.array([model.record["industries"]["labels"].index(i) for i in book["industry"]])
    low, high = band.limits(book["target"].to_numpy(), level)
    np.testing.assert_array_equal(book["band_low"], low)
    np.testing.assert_array_equal(book["band_high"], high)
    np.testing.assert_allclose(book["gap"], book["actual"] - book["target"], rtol=0, atol=0)
    np.testing.assert_allclose(book["gap_z"] * band.scale[level], book["gap"], rtol=1e-12)
    status = np.where(book["actual"] > high, "over",
                      np.where(book["actual"] < low, "under", "within"))
    np.testing.assert_array_equal(book["status"], status)
    assert (book["fold"] == -1).all()
    assert not book["flags"].str.contains("not_in_model").any()
    # the saved peer table: medians of every firm-year of the industry and year
    peers = model.record["measures"]["book"]["peers"]
    assert peers["columns"] == [*model.drivers, "leverage"]
    t = result.targets[result.targets["measure"] == "book"]
    d = result.drivers[result.drivers["measure"] == "book"].pivot(
        index=["firm_id", "fiscal_year"], columns="driver", values="firm_value")
    g = t.merge(d.reset_index(), on=["firm_id", "fiscal_year"]).groupby(
        ["industry", "fiscal_year"])
    med = g[[*model.drivers, "actual"]].median()
    for (ind, year), row in med.iloc[::7].iterrows():
        count, *values = peers["industry_year"][f"{ind}|{year}"]
        assert count == g.size()[(ind, year)]
        np.testing.assert_allclose(values, row.to_numpy(), rtol=1e-12)
    first = book.iloc[0]
    key = f"{first['industry']}|{first['fiscal_year']}"
    assert first["peer_count"] == peers["industry_year"][key][0]
    assert first["peer_median"] == peers["industry_year"][key][-1]
    for j, name in enumerate(model.drivers):
        assert first[f"{name}_peer"] == peers["industry_year"][key][1 + j]
    yr = t.merge(d.reset_index(), on=["firm_id", "fiscal_year"]).groupby("fiscal_year")
    count, *values = peers["year"][str(first["fiscal_year"])]
    assert count == yr.size()[first["fiscal_year"]]
    np.testing.assert_allclose(values, yr[[*model.drivers, "actual"]].median().loc[
        first["fiscal_year"]].to_numpy(), rtol=1e-12)


def test_rows_without_market_value_have_no_status(saved) -> None:
    panel, _, model = saved
    rows = panel[panel["market_equity"].isna()].head(3)
    s = model.score(rows)
    market = s[s["measure"] == "market"]
    assert len(market) == 3 and (market["status"] == "").all() and market["actual"].isna().all()
    assert (s.loc[s["measure"] == "book", "status"] != "").all()


def test_unseen_industries_and_years_borrow_as_documented(saved) -> None:
    panel, _, model = saved
    fit = model.fit("book")
    labels = model.record["industries"]["labels"]
    row = panel[panel["industry"] == "3711"].iloc[[0]].copy()
    alpha, w = fit.effects[0], fit.effect_weights[0]
    small = np.array(model.record["industries"]["small"])
    own = np.flatnonzero(~small & ~np.isnan(alpha))
    # 3799 shares "37" with 3711 (3716 is small: not a member); 0999 shares nothing
    cases = {"3799": [labels.index("3711")], "0999": list(own), "ABC": list(own)}
    for code, members in cases.items():
        row["industry"] = code
        got = model.industry_effect(fit, np.array([code]), np.array([-1]))[0]
        expected = alpha[members] @ w[members] / w[members].sum()
        assert got == pytest.approx(expected, abs=1e-14), code
        scored = model.score(row)
        assert "industry_not_in_model" in scored["flags"].iloc[0]
    level, year, new_ind, new_year = model.codes(np.array(["3711", "zz"]),
                                                 np.array([2016, 2040]))
    assert list(level) == [labels.index("3711"), -1] and list(new_ind) == [False, True]
    years = model.record["years"]
    assert list(year) == [years.index(2016), len(years) - 1]
    assert list(new_year) == [False, True]
    early = model.codes(np.array(["3711"]), np.array([1990]))
    assert early[1][0] == 0 and early[3][0]
    off = model.score(row.assign(industry="3711", fiscal_year=2040))
    same = model.score(row.assign(industry="3711", fiscal_year=max(years)))
    assert "year_not_in_model" in off["flags"].iloc[0]
    assert "year_not_in_model" not in same["flags"].iloc[0]


def test_folds_of_panel_firms_new_firms_and_a_given_fold(saved) -> None:
    panel, result, model = saved
    one = result.targets[result.targets["measure"] == "book"].iloc[0]
    assert model.fold_of("book", one["firm_id"]) == one["fold"]
    assert model.fold_of("book", "no such firm") is None
    rows = panel[panel["firm_id"] == one["firm_id"]].head(1)
    new = rows.assign(firm_id="NEWCO")
    both = pd.concat([rows, new], ignore_index=True)
    s = model.score(both, fold="firm")
    book = s[s["measure"] == "book"]
    assert list(book["fold"]) == [one["fold"], -1]
    full = model.score(new)
    assert book["target"].iloc[1] == full.loc[full["measure"] == "book", "target"].iloc[0]
    given = model.score(both, fold=int(one["fold"]))
    assert (given["fold"] == one["fold"]).all()
    with pytest.raises(ModelError, match="fold must be one of the run's folds; got 99"):
        model.score(both, fold=99)
    with pytest.raises(ModelError, match="measure must be one of"):
        model.band("leverage")


def test_the_specification_and_record_are_read_back(saved) -> None:
    _, result, model = saved
    spec = model.spec
    assert isinstance(spec.measures, tuple) and isinstance(spec.winsorize, tuple)
    assert spec.model == model.model
    assert model.measures == ("book", "market") and model.drivers == tuple(
        result.manifest["drivers"])
    rec = model.record
    assert rec["format"] == "levgap-model" and rec["format_version"] == 1
    assert rec["transforms"]["quantiles"] == [0.01, 0.99]
    assert rec["years"] == sorted(rec["years"]) and len(rec["years"]) == 10
    pooled = {p["industry"]: p for p in rec["measures"]["book"]["pooled"]}
    assert set(pooled) == {"3716", "9990"}
    assert pooled["3716"]["parent"] == "371" and pooled["3716"]["firms"] == 3
    t = result.targets[result.targets["measure"] == "book"]
    assert pooled["3716"]["rows"] == (t["industry"] == "3716").sum()
    assert 0 < pooled["3716"]["weight"] < 1
    assert rec["measures"]["book"]["components"]["tau2"] > 0
    assert rec["measures"]["book"]["contributions"] == "shapley"
    assert len(rec["measures"]["book"]["folds"]) == 5
    old = dict(rec["spec"], an_old_option=1)
    assert levgap.models.saved.SavedModel({**rec, "spec": old}).spec == spec


def test_unreadable_or_newer_saved_models_are_clear_errors(tmp_path) -> None:
    from levgap.outputs import RunWriter

    def folder(name: str, text: str):
        # a verified run whose model.json holds `text` (the run is checked first)
        with RunWriter(tmp_path / name, run_id="abc") as run:
            run.add("model.json", text.encode("utf-8"))
            run.commit({})
        return tmp_path / name

    with pytest.raises(OutputError, match="model.json must be valid JSON"):
        levgap.load_model(folder("broken", "{not json"))
    with pytest.raises(OutputError, match="levgap saved model"):
        levgap.load_model(folder("list", "[1, 2]"))
    newer = {"format": FORMAT, "format_version": 2, "run_id": "abc"}
    with pytest.raises(OutputError, match="saved-model format 2 is newer"):
        levgap.load_model(folder("newer", json.dumps(newer)))
    for bad in ("x", [1], None):
        odd = {"format": FORMAT, "format_version": bad, "run_id": "abc"}
        with pytest.raises(OutputError, match="format_version must be a whole number"):
            levgap.load_model(folder(f"odd{bad!s:.1}", json.dumps(odd)))
    plain = {"format": FORMAT, "run_id": "abc"}
    assert levgap.load_model(folder("plain", json.dumps(plain))).record == plain


def test_rows_to_score_must_be_a_schema_frame(saved) -> None:
    panel, _, model = saved
    with pytest.raises(ModelError, match="rows must be a pandas DataFrame"):
        model.score(panel.to_dict("records"))
    with pytest.raises(ModelError, match="got no ppe_net"):
        model.score(panel.drop(columns=["ppe_net"]).head(2))
    text = panel.head(2).astype({"total_assets": str, "fiscal_year": str})
    text["industry"] = text["industry"].astype(int)
    a = model.score(text)
    b = model.score(panel.head(2))
    np.testing.assert_allclose(a["target"], b["target"], rtol=0, atol=0)
    assert (a["industry"] == b["industry"]).all()


# -- mutation survivors, part A


@pytest.fixture(scope="module")
def median_model(tmp_path_factory):
    """A linear model with the industry median leverage driver (year effects only, as that
    driver needs): scoring reads its saved medians."""
    panel = make_panel(3)
    spec = ModelSpec(model="linear", effects="year",
                     drivers=("tangibility", "industry_median_leverage"))
    out = tmp_path_factory.mktemp("median")
    analyze(panel, spec=spec).write(out, report=False)
    return panel, levgap.load_model(out)


def _flags_joined(*parts: str) -> str:
    return ";".join(p for p in parts if p)


def test_not_in_model_flags_are_appended_exactly(saved) -> None:
    panel, _, model = saved
    firm = panel["firm_id"].iloc[0]
    rows = panel[panel["firm_id"] == firm].sort_values("fiscal_year").reset_index(drop=True)
    base = model.score(rows)
    moved = model.score(rows.assign(industry="ZZZ"))
    assert (base["flags"] == "").any() and (base["flags"] != "").any()  # both cases met
    for before, after in zip(base["flags"], moved["flags"], strict=True):
        assert after == _flags_joined(before, "industry_not_in_model")
    later = rows.iloc[[-1]].assign(fiscal_year=2040, industry="ZZZ")
    for flags in model.score(later)["flags"]:
        assert flags.split(";")[-2:] == ["industry_not_in_model", "year_not_in_model"]
        assert flags.split(";").count("year_not_in_model") == 1
    known = model.score(rows.iloc[[-1]].assign(fiscal_year=2040))
    assert all(f.split(";")[-1] == "year_not_in_model" for f in known["flags"])
    assert not known["flags"].str.contains("industry_not_in_model").any()


def test_peers_fall_back_to_the_year_then_the_latest_year(saved) -> None:
    panel, _, model = saved
    row = panel.iloc[[0]].assign(industry="ZZZ")
    for measure in model.measures:
        table = model.record["measures"][measure]["peers"]
        latest = table["year"][str(max(int(t) for t in table["year"]))]
        for year, want in ((2016, table["year"]["2016"]), (2040, latest)):
            s = model.score(row.assign(fiscal_year=year))
            s = s[s["measure"] == measure].iloc[0]
            assert s["peer_count"] == want[0] and s["peer_median"] == want[-1]
            assert [s[f"{d}_peer"] for d in model.drivers] == want[1:-1]
        assert want != table["year"]["2016"]  # the two cases differ
    s = model.score(panel.head(3))
    assert s["peer_count"].dtype == np.int64 and s["fold"].dtype == np.int64
    for col in ("peer_median", *(f"{d}_peer" for d in model.drivers)):
        assert s[col].dtype == np.float64, col


def test_a_given_peer_profile_of_whole_numbers_is_read_as_numbers(saved) -> None:
    panel, _, model = saved
    rows = panel.head(3)
    ints = pd.DataFrame({d: [0, 1, 2] for d in model.drivers})
    a = model.score(rows, peer_profile=ints)
    b = model.score(rows, peer_profile=ints.astype(float))
    for d in model.drivers:
        assert a[f"{d}_peer"].dtype == np.float64
        np.testing.assert_array_equal(a[f"{d}_contribution"], b[f"{d}_contribution"])
    np.testing.assert_array_equal(a["peer_target"], b["peer_target"])


def test_identity_link_contributions_are_the_exact_term_differences(saved) -> None:
    # models.shapley: with the identity link the contributions are beta_j x_j - beta_j p_j,
    # computed directly (the coalition average reduces to it, but rounds differently)
    panel, _, model = saved
    s = model.score(panel.head(300))
    for measure in model.measures:
        m = s[s["measure"] == measure]
        beta = model.fit(measure).coef[1:]
        total = np.zeros(len(m))
        for j, d in enumerate(model.drivers):
            c = m[f"{d}_contribution"].to_numpy()
            total += c
            if model.model == "linear":
                want = m[d].to_numpy() * beta[j] - m[f"{d}_peer"].to_numpy() * beta[j]
                np.testing.assert_array_equal(c, want)
        np.testing.assert_allclose(total, m["target"] - m["peer_target"], atol=1e-12)


def test_refused_rows_keep_their_identity_and_the_table_its_kinds(saved) -> None:
    panel, _, model = saved
    rows = panel.iloc[:4].copy()
    rows.loc[rows.index[1], "total_assets"] = -5.0
    s = model.score(rows)
    assert list(s.index) == list(range(len(rows) * len(model.measures)))
    good = model.score(rows.iloc[[0, 2, 3]])
    assert list(s.columns) == list(good.columns)
    for col, kind in (("fiscal_year", np.int64), ("fold", np.int64), ("target", np.float64)):
        assert s[col].dtype == kind, col
    bad = s[s["flags"] == "not_scorable"]
    assert len(bad) == len(model.measures)
    src = rows.iloc[1]
    assert (bad["firm_id"] == src["firm_id"]).all() and (bad["industry"] == src["industry"]).all()
    assert (bad["fiscal_year"] == src["fiscal_year"]).all() and (bad["fold"] == -1).all()
    assert list(bad["measure"]) == list(model.measures)
    firm = model.score(rows, fold="firm")
    firm = firm[firm["flags"] == "not_scorable"]
    assert list(firm["fold"]) == [model.fold_of(m, src["firm_id"]) for m in model.measures]


def test_rows_without_a_fiscal_year_or_all_refused_are_blank(saved) -> None:
    panel, _, model = saved
    rows = panel.iloc[:3].astype({"fiscal_year": float})
    rows.loc[rows.index[1], "fiscal_year"] = np.nan
    s = model.score(rows)
    bad = s[s["flags"] == "not_scorable"]
    assert len(bad) == len(model.measures) and bad["fiscal_year"].isna().all()
    assert set(bad["note"]) == {"fiscal_year must be a whole number"}
    assert s.loc[s["flags"] != "not_scorable", "target"].notna().all()
    every = panel.iloc[:2].assign(total_assets=-1.0)
    s = model.score(every)
    assert (s["flags"] == "not_scorable").all() and s["target"].isna().all()
    assert list(s["fiscal_year"]) == list(every["fiscal_year"]) * len(model.measures)


def test_industry_effects_of_seen_levels_and_the_prefix_rule(saved) -> None:
    _, _, model = saved
    fit = model.fit("book")
    labels = model.record["industries"]["labels"]
    alpha, w = fit.effects[0], fit.effect_weights[0]
    seen = np.arange(len(labels))
    got = model.industry_effect(fit, np.array(labels, dtype=object), seen)
    np.testing.assert_array_equal(got, fit.effect_of(0, seen))

    def mean_of(names):
        idx = [labels.index(x) for x in names]
        return alpha[idx] @ w[idx] / w[idx].sum()

    # the longest shared leading part first: "739" shares "73" with 7372 only, "37" (shorter
    # than the codes) and "3999" share only "3" (3312, 3711; 3716 is small)
    for code, members in (("739", ["7372"]), ("37", ["3312", "3711"]),
                          ("3999", ["3312", "3711"])):
        one = model.industry_effect(fit, np.array([code]), np.array([-1]))[0]
        assert one == pytest.approx(mean_of(members), abs=1e-14), code
    # a small industry is never a member, whether or not its effect is set
    ind = model.record["industries"]
    small = list(ind["small"])
    small[labels.index("3711")] = True
    other = levgap.models.saved.SavedModel(
        {**model.record, "industries": {**ind, "small": small}})
    one = other.industry_effect(fit, np.array(["3799"]), np.array([-1]))[0]
    assert one == pytest.approx(mean_of(["3312"]), abs=1e-14)


def test_the_saved_industry_median_is_looked_up_by_industry_and_year(median_model) -> None:
    panel, model = median_model
    # another firm in the new industry: a second copy of a firm-year would be refused
    rows = pd.concat([panel.head(4), panel.head(1).assign(industry="ZZZ", firm_id="NEW"),
                      panel.head(1).assign(fiscal_year=2040)], ignore_index=True)
    s = model.score(rows)
    for measure in model.measures:
        saved = model.record["measures"][measure]["industry_median"]
        latest = saved["year"][max(saved["year"], key=int)]
        want = [saved["industry_year"][f"{i}|{t}"] for i, t in
                zip(rows["industry"][:4], rows["fiscal_year"][:4], strict=True)]
        want += [saved["year"][str(rows["fiscal_year"][4])], latest]
        m = s[s["measure"] == measure]
        np.testing.assert_array_equal(m["industry_median_leverage"], want)
        np.testing.assert_array_equal(m["industry_median_leverage_raw"], want)
    book, market = (s.loc[s["measure"] == x, "industry_median_leverage"] for x in model.measures)
    assert (book.to_numpy() != market.to_numpy()).all()  # each measure's own median


def test_a_rows_own_industry_median_overrides_the_saved_one(median_model) -> None:
    panel, model = median_model
    rows = panel.head(3).copy()
    plain = model.score(rows)
    rows["industry_median_leverage"] = pd.array([0.5, None, 0.25], dtype="Float64")
    s = model.score(rows)
    for measure in model.measures:
        got = s.loc[s["measure"] == measure, "industry_median_leverage"].to_numpy()
        saved = plain.loc[plain["measure"] == measure, "industry_median_leverage"].to_numpy()
        np.testing.assert_array_equal(got, [0.5, saved[1], 0.25])
    assert (s["target"] != plain["target"]).sum() == 2 * len(model.measures)



def test_a_seen_industry_keeps_its_own_effect_beside_codes_sharing_its_prefix(saved) -> None:
    _, _, model = saved
    fit = model.fit("book")
    ind = model.record["industries"]
    labels = list(ind["labels"])
    labels[0] = "3712"  # the first level now shares "371" with 3711
    other = levgap.models.saved.SavedModel(
        {**model.record, "industries": {**ind, "labels": labels}})
    one = other.industry_effect(fit, np.array(["3712"]), np.array([0]))[0]
    assert one == fit.effect_of(0, np.array([0]))[0]
    i = labels.index("3711")
    w = fit.effect_weights[0][[0, i]]
    assert one != fit.effects[0][[0, i]] @ w / w.sum()  # what borrowing would give


def test_the_latest_saved_year_is_the_latest_as_a_number(saved) -> None:
    # schema v1 puts no bounds on fiscal_year: 999 comes before 1000
    panel, _, model = saved
    rec = json.loads(json.dumps(model.record))
    for measure in model.measures:
        years = rec["measures"][measure]["peers"]["year"]
        a, b = years["2016"], years["2023"]
        assert a[0] != b[0]
        rec["measures"][measure]["peers"]["year"] = {"999": a, "1000": b}
    other = levgap.models.saved.SavedModel(rec)
    s = other.score(panel.iloc[[0]].assign(industry="ZZZ", fiscal_year=2040))
    for measure in model.measures:
        want = rec["measures"][measure]["peers"]["year"]["1000"]
        got = s[s["measure"] == measure].iloc[0]
        assert got["peer_count"] == want[0] and got["peer_median"] == want[-1]


def test_a_saved_model_naming_a_driver_scoring_cannot_build_is_a_clear_error(saved) -> None:
    panel, _, model = saved
    other = levgap.models.saved.SavedModel(
        {**model.record, "drivers": [*model.drivers, "no_such_driver"]})
    with pytest.raises(ModelError, match="got no no_such_driver"):
        other.score(panel.head(2))


def test_an_infinite_peer_profile_raises_no_warning(saved) -> None:
    import warnings

    panel, _, model = saved
    rows = panel.head(2)
    prof = pd.DataFrame({d: [0.1, 0.1] for d in model.drivers})
    prof.iloc[0, 0] = np.inf
    with warnings.catch_warnings():
        warnings.simplefilter("error")  # no RuntimeWarning may escape
        s = model.score(rows, peer_profile=prof)
    assert np.isfinite(s.loc[s.index % 2 == 1, "peer_target"]).all()


def test_a_one_year_model_returns_rows_all_refused_blank(tmp_path) -> None:
    panel = make_panel(3)
    panel = panel[panel["fiscal_year"] == 2020]
    analyze(panel, spec=ModelSpec(model="linear")).write(tmp_path, report=False)
    model = levgap.load_model(tmp_path)
    assert model.record["years"] == [2020]
    rows = panel.head(2).assign(total_assets=-1.0, fiscal_year=[2020, 2031])
    s = model.score(rows)
    assert (s["flags"] == "not_scorable").all() and s["target"].isna().all()
    assert list(s["fiscal_year"]) == [2020, 2031] * len(model.measures)


# -- mutation survivors, part B
# mutmut credits what a module-scoped fixture runs to the first test that builds it, so the
# tests of the writer (measure_record, _peer_table, saved_record) run `analyze` in their own
# body: a linear fit of the small demo panel (about 0.3 s).

TOP_KEYS_B = {"format", "format_version", "levgap_version", "schema_version", "run_id", "model",
              "spec", "drivers", "industries", "years", "transforms", "measures", "peer_lists"}
MEASURE_KEYS_B = {"full", "folds", "fold_of_firm", "band", "components", "contributions",
                  "pooled", "peers"}


def _b_peer_cells(result, measure: str, model) -> dict[str, pd.DataFrame]:
    """Median driver profile and leverage of the measure's rows by industry-year and year."""
    t = result.targets[result.targets["measure"] == measure]
    d = result.drivers[result.drivers["measure"] == measure].pivot(
        index=["firm_id", "fiscal_year"], columns="driver", values="firm_value")
    g = t.merge(d.reset_index(), on=["firm_id", "fiscal_year"])
    out = {}
    for name, by in (("industry_year", ["industry", "fiscal_year"]), ("year", ["fiscal_year"])):
        grp = g.groupby(by, sort=True)
        med = grp[[*model.drivers, "actual"]].median()
        med.insert(0, "count", grp.size())
        med.index = ["|".join(str(v) for v in (k if isinstance(k, tuple) else (k,)))
                     for k in med.index]
        out[name] = med
    return out


def test_b_model_json_holds_every_field_the_run_computed(tmp_path) -> None:
    from levgap.groups import WHOLE_SAMPLE
    from levgap.models.record import FORMAT_VERSION
    from levgap.schema import SCHEMA_VERSION

    # rows shuffled: the saved tables follow (industry, year), not the panel's row order
    panel = make_panel(3).sample(frac=1.0, random_state=5).reset_index(drop=True)
    result = analyze(panel, spec=ModelSpec(model="linear"))
    result.write(tmp_path, report=False)
    model = levgap.load_model(tmp_path)
    mem, rec = result.saved_model, model.record
    # the record in memory is plain JSON data: model.json holds it, plus the writer's run id
    assert json.loads(json.dumps(mem, allow_nan=False)) == mem
    assert mem["run_id"] is None and rec == {**mem, "run_id": rec["run_id"]}
    assert rec["run_id"] == json.loads((tmp_path / "run.json").read_text())["run_id"]
    assert set(rec) == TOP_KEYS_B
    assert rec["format_version"] == FORMAT_VERSION == 1
    assert rec["levgap_version"] == levgap.__version__
    assert rec["schema_version"] == SCHEMA_VERSION
    assert model.model == "linear" and model.spec == ModelSpec(model="linear")
    for measure in ("book", "market"):
        m = rec["measures"][measure]
        t = result.targets[result.targets["measure"] == measure]
        assert set(m) == MEASURE_KEYS_B and m["contributions"] == "shapley"
        assert m["fold_of_firm"] == dict(zip(t["firm_id"], t["fold"].tolist(), strict=True))
        assert [set(f) for f in m["folds"]] == [{"fold", "fit"}] * 5
        assert sorted(f["fold"] for f in m["folds"]) == sorted(set(t["fold"].tolist()))
        c = m["components"]
        assert set(c) == {"tau2", "firm2", "resid2", "info"} and c["tau2"] > 0
        # the small industries: their rows and firms here, the parent, and the empirical-Bayes
        # weight tau2 / (tau2 + firm2 / firms + resid2 / rows) of the saved components
        assert [(p["industry"], p["parent"]) for p in m["pooled"]] == [
            ("3716", "371"), ("9990", WHOLE_SAMPLE)]
        for p in m["pooled"]:
            own = t[t["industry"] == p["industry"]]
            n, f = len(own), own["firm_id"].nunique()
            assert (p["rows"], p["firms"]) == (n, f) and n > 0
            assert p["weight"] == pytest.approx(
                c["tau2"] / (c["tau2"] + c["firm2"] / f + c["resid2"] / n), rel=1e-12)
        peers = m["peers"]
        assert peers["columns"] == [*model.drivers, "leverage"]
        for name, want in _b_peer_cells(result, measure, model).items():
            assert list(peers[name]) == list(want.index)  # every cell, in sorted order
            got = np.array([peers[name][k] for k in want.index], dtype=float)
            np.testing.assert_allclose(got, want.to_numpy(dtype=float), rtol=1e-12)
    # each fold's saved fit reproduces the cross-fitted targets of its firms
    scored = model.score(panel, fold="firm")
    both = result.targets.merge(scored[[*KEY, "target", "fold"]], on=KEY,
                                suffixes=("", "_scored"))
    assert len(both) == len(result.targets)
    np.testing.assert_allclose(both["target_scored"], both["target"], rtol=0, atol=1e-12)
    assert (both["fold_scored"] == both["fold"]).all()
    # an industry without a saved cell takes its year's saved peers
    row = panel.iloc[[0]].assign(industry="0999")
    s = model.score(row).set_index("measure")
    for measure in ("book", "market"):
        cell = rec["measures"][measure]["peers"]["year"][str(int(row["fiscal_year"].iloc[0]))]
        assert s.loc[measure, "peer_count"] == cell[0]
        assert s.loc[measure, "peer_median"] == cell[-1]


def test_b_parent_pooling_saves_no_weights_and_no_components() -> None:
    from levgap.models.saved import SavedModel

    panel = make_panel(3)
    result = analyze(panel, spec=ModelSpec(model="linear", pooling="parent"))
    json.dumps(result.saved_model, allow_nan=False)  # what the writer does: no NaN
    for measure in ("book", "market"):
        m = result.saved_model["measures"][measure]
        assert m["components"] is None
        t = result.targets[result.targets["measure"] == measure]
        assert [(p["industry"], p["rows"], p["weight"]) for p in m["pooled"]] == [
            (i, int((t["industry"] == i).sum()), None) for i in ("3716", "9990")]
    scored = SavedModel(result.saved_model).score(panel)
    both = result.targets.merge(scored[[*KEY, "target"]], on=KEY, suffixes=("", "_scored"))
    np.testing.assert_allclose(both["target_scored"], both["target_full"], rtol=0, atol=1e-12)


def test_b_the_industry_median_driver_saves_its_medians() -> None:
    from levgap.models.saved import SavedModel

    panel = make_panel(3)
    spec = ModelSpec(model="linear", effects="year", measures=("book",),
                     drivers=("tangibility", "profitability", "industry_median_leverage"))
    result = analyze(panel, spec=spec)
    saved = result.saved_model["measures"]["book"]["industry_median"]
    t = result.targets[result.targets["measure"] == "book"]
    cell = t.groupby(["industry", "fiscal_year"])["actual"].median()
    year = t.groupby("fiscal_year")["actual"].median()
    assert saved["industry_year"] == pytest.approx(
        {f"{i}|{y}": v for (i, y), v in cell.items()}, rel=1e-12)
    assert saved["year"] == pytest.approx({str(y): v for y, v in year.items()}, rel=1e-12)
    # a firm not in the panel takes its industry-year's saved median
    new = panel.head(3).assign(firm_id="NEW")
    got = SavedModel(result.saved_model).score(new)["industry_median_leverage"]
    want = [saved["industry_year"][f"{i}|{y}"]
            for i, y in zip(new["industry"], new["fiscal_year"], strict=True)]
    np.testing.assert_array_equal(got, want)


def test_b_given_flags_lead_and_only_documented_codes_are_added(saved) -> None:
    from levgap.codes import ANALYSIS_FLAGS

    panel, _, model = saved
    rows = panel.head(8).copy()
    plain = model.score(rows)
    codes = {c for f in plain["flags"] for c in f.split(";") if c}
    assert codes and codes <= set(ANALYSIS_FLAGS)
    given = ["negative_book_equity", "", None, "market_equity_from_shares"] * 2
    scored = model.score(rows.assign(flags=given))
    for got, own, mine in zip(scored["flags"], plain["flags"], given * len(model.measures),
                              strict=True):
        assert got == ";".join(x for x in (mine, own) if x)


def test_b_rows_indexed_by_a_column_they_keep_are_scored(saved) -> None:
    panel, _, model = saved
    rows = panel.head(4)
    pd.testing.assert_frame_equal(model.score(rows.set_index("firm_id", drop=False)),
                                  model.score(rows))


def test_b_each_schema_rule_a_row_breaks_is_named_in_its_note(saved) -> None:
    from levgap.models.saved import _schema_frame, _unscorable

    panel, _, model = saved
    rows = panel.head(8).copy()
    notes = {1: ("total_assets", 0.0, "total_assets must be a finite number > 0"),
             2: ("total_debt", -1.0, "total_debt must be a finite number >= 0"),
             3: ("ppe_net", -0.5, "ppe_net must be a finite number >= 0"),
             4: ("ebitda", np.inf, "ebitda must be a finite number"),
             5: ("book_equity", np.nan, "book_equity must be a finite number"),
             6: ("total_debt", 0.0, ""),  # the limits of >= 0 and of no limit are allowed
             7: ("ebitda", -5.0, "")}
    for i, (col, value, _) in notes.items():
        rows.loc[rows.index[i], col] = value
    s = model.score(rows)
    want = [""] + [text for _, _, text in notes.values()]
    assert list(s["note"]) == want * len(model.measures)
    assert list(s["target"].isna()) == [w != "" for w in want] * len(model.measures)
    # nullable columns (pandas' convert_dtypes) score as plain ones, a blank as missing
    nullable = panel.head(4).convert_dtypes()
    pd.testing.assert_frame_equal(model.score(nullable), model.score(panel.head(4)))
    nullable.loc[1, "total_debt"] = pd.NA
    s = model.score(nullable)
    assert list(s["note"])[:4] == ["", "total_debt must be a finite number >= 0", "", ""]
    # the year's rule, on the frame (score's output for such rows: see
    # test_every_kind_of_bad_fiscal_year_refuses_its_row_with_a_note)
    nullable.loc[2, "fiscal_year"] = pd.NA
    years = panel.head(4).astype({"fiscal_year": float})
    years.loc[[1, 2], "fiscal_year"] = [2016.5, np.inf]
    for frame, bad in ((nullable, [False, True, True, False]),
                       (years, [False, True, True, False])):
        got, text = _unscorable(_schema_frame(frame))
        assert list(got) == bad
        assert list(text) == ["", "total_debt must be a finite number >= 0"
                              if frame is nullable else "fiscal_year must be a whole number",
                              "fiscal_year must be a whole number", ""]


# -- refused rows do not leak


def _refused_leave_the_rest_as_if_absent(model, rows: pd.DataFrame, refused: list[int],
                                         **kw) -> pd.DataFrame:
    """Score ``rows`` and ``rows`` without ``refused``: the valid rows' output is the same,
    exactly (``peer_count`` is float64 beside a refused row, hence no dtype check)."""
    rows = rows.reset_index(drop=True)
    s = model.score(rows, **kw)
    keep = ~np.isin(np.arange(len(rows)), refused)
    per = np.tile(keep, len(model.measures))
    assert (s.loc[~per, "flags"] == "not_scorable").all()
    alone = model.score(rows[keep].reset_index(drop=True), **kw)
    pd.testing.assert_frame_equal(s[per].reset_index(drop=True), alone, check_dtype=False,
                                  check_exact=True)
    return s


def test_a_refused_year_between_valid_years_leaves_the_firms_other_years_as_if_absent(
        saved) -> None:
    # the refused year would sit in the trailing earnings-volatility window of later years
    panel, _, model = saved
    firm = panel["firm_id"].iloc[0]
    rows = panel[panel["firm_id"] == firm].sort_values("fiscal_year").reset_index(drop=True)
    assert len(rows) >= 6
    for col, value in (("total_assets", -1.0), ("ebitda", np.nan), ("book_equity", np.inf)):
        bad = rows.copy()
        bad.loc[3, col] = value
        s = _refused_leave_the_rest_as_if_absent(model, bad, [3])
        _refused_leave_the_rest_as_if_absent(model, bad, [3], fold="firm")
        assert (s.loc[s["flags"] == "not_scorable", "fiscal_year"] == rows.loc[3, "fiscal_year"]
                ).all()


def test_a_refused_row_alone_in_its_industry_year_leaves_the_others_as_if_absent(
        saved, median_model) -> None:
    # a refused row of a new firm, alone in its industry-year: it must not count toward the
    # frame's industries (with 4 firms of 9990 and 3 of 3711 no industry is large enough to
    # pool into; a fifth 9990 firm would pool 3711) nor its industry medians (the one 9990
    # row of 2023 has no industry median of its own: industry_median_imputed)
    panel, _, model = saved
    small = panel[panel["industry"] == "9990"]
    assert small["firm_id"].nunique() == 4
    other = panel[(panel["industry"] == "3711") & (panel["fiscal_year"] == 2023)].head(3)
    lone = small.iloc[[0]].assign(firm_id="LONE", fiscal_year=2010, total_debt=-1.0)
    rows = pd.concat([small.groupby("firm_id").tail(1), other, lone], ignore_index=True)
    s = _refused_leave_the_rest_as_if_absent(model, rows, [7])
    assert not s["flags"].str.contains("industry_effect_pooled").any()
    panel, model = median_model
    one = panel[(panel["industry"] == "9990") & (panel["fiscal_year"] == 2023)].head(1)
    rows = pd.concat([one, other, lone], ignore_index=True)
    s = _refused_leave_the_rest_as_if_absent(model, rows, [4])
    assert "industry_median_imputed" in s["flags"].iloc[0]


def test_every_kind_of_bad_fiscal_year_refuses_its_row_with_a_note(saved) -> None:
    import warnings

    panel, _, model = saved
    rows = panel.head(6).astype({"fiscal_year": object}).reset_index(drop=True)
    kinds = [2016.5, "abc", None, float("inf"), "2017.25"]
    for i, year in enumerate(kinds):
        rows.loc[i, "fiscal_year"] = year
    with warnings.catch_warnings():
        warnings.simplefilter("error")  # no traceback, no RuntimeWarning
        s = _refused_leave_the_rest_as_if_absent(model, rows, list(range(len(kinds))))
    for measure in model.measures:
        m = s[s["measure"] == measure].reset_index(drop=True)
        bad = m.iloc[: len(kinds)]
        assert (bad["flags"] == "not_scorable").all() and (bad["status"] == "").all()
        assert (bad["note"] == "fiscal_year must be a whole number").all()
        assert bad["target"].isna().all() and bad["actual"].isna().all()
        assert (bad["firm_id"] == rows["firm_id"][: len(kinds)]).all()
        assert (bad["industry"] == rows["industry"][: len(kinds)]).all()
        np.testing.assert_array_equal(  # as given; text reads as blank
            bad["fiscal_year"], [2016.5, np.nan, np.nan, np.inf, 2017.25])
        assert m["fiscal_year"].dtype == np.float64
        assert m.loc[len(kinds), "fiscal_year"] == panel["fiscal_year"].iloc[5]
        assert np.isfinite(m.loc[len(kinds), "target"]) and m.loc[len(kinds), "note"] == ""


def test_no_rows_give_an_empty_frame_of_the_documented_columns(saved) -> None:
    panel, _, model = saved
    full = model.score(panel.head(2))
    for fold in (None, "firm", 0):
        s = model.score(panel.head(0), fold=fold)
        assert len(s) == 0
        assert list(s.columns) == list(full.columns)
        assert s.dtypes.to_dict() == full.dtypes.to_dict()
    every = model.score(panel.head(2).assign(total_assets=-1.0))
    assert list(every.columns) == list(full.columns)
    assert every["target"].isna().all() and (every["flags"] == "not_scorable").all()


@pytest.fixture(scope="module")
def input_model(tmp_path_factory):
    """A linear model with an input driver (a column of the input, used as given)."""
    panel = make_panel(3)
    panel["order_backlog"] = np.random.default_rng(7).normal(size=len(panel))
    out = tmp_path_factory.mktemp("input")
    analyze(panel, spec=ModelSpec(model="linear", measures=("book",),
                                  input_drivers=("order_backlog",))).write(out, report=False)
    return panel, levgap.load_model(out)


def test_rows_without_an_input_drivers_column_are_a_clear_error(input_model) -> None:
    panel, model = input_model
    assert "order_backlog" in model.drivers
    rows = panel.head(3)
    s = model.score(rows)
    np.testing.assert_array_equal(s["order_backlog"], rows["order_backlog"])
    assert s["target"].notna().all()
    with pytest.raises(ModelError, match="rows must give what the drivers need; got no "
                                         "order_backlog"):
        model.score(rows.drop(columns="order_backlog"))
    with pytest.raises(ModelError, match="got no order_backlog"):
        model.score(rows.head(0).drop(columns="order_backlog"))


def test_a_peer_profile_must_match_the_rows(saved) -> None:
    panel, _, model = saved
    rows = panel.head(3).reset_index(drop=True)
    prof = pd.DataFrame({d: [0.1, 0.2, 0.3] for d in model.drivers})
    with pytest.raises(ModelError, match=r"one row per input row \(3\); got 2 rows"):
        model.score(rows, peer_profile=prof.head(2))
    with pytest.raises(ModelError, match=r"one row per input row \(3\); got list"):
        model.score(rows, peer_profile=[])
    with pytest.raises(ModelError, match=f"column per driver; got no {model.drivers[-1]}"):
        model.score(rows, peer_profile=prof.drop(columns=model.drivers[-1]))
    # a refused row's profile row is skipped, the others keep theirs
    bad = rows.assign(total_assets=[1.0, -1.0, 1.0] * rows["total_assets"])
    s = model.score(bad, peer_profile=prof)
    alone = model.score(bad.iloc[[0, 2]], peer_profile=prof.iloc[[0, 2]])
    col = model.drivers[0] + "_peer"
    np.testing.assert_array_equal(s.loc[s["flags"] != "not_scorable", col], alone[col])
    assert s.loc[s["flags"] != "not_scorable", col].tolist() == [0.1, 0.3] * len(model.measures)


def test_a_refused_rows_identity_reads_as_text_and_a_lone_part_year_stays_as_given(
        saved) -> None:
    panel, _, model = saved
    rows = panel.head(3).reset_index(drop=True).astype({"fiscal_year": float})
    rows["firm_id"] = [101, 102, 103]
    rows["industry"] = rows["industry"].astype(int)
    rows.loc[1, "fiscal_year"] = 2016.5  # finite: the only bad year
    s = model.score(rows)
    k = len(model.measures)
    assert list(s["flags"] == "not_scorable") == [False, True, False] * k
    assert s["fiscal_year"].dtype == np.float64
    assert list(s["fiscal_year"]) == list(rows["fiscal_year"]) * k
    assert list(s["firm_id"]) == ["101", "102", "103"] * k
    assert list(s["industry"]) == [str(v) for v in rows["industry"]] * k


def test_finite_extreme_values_score_without_a_floating_point_warning(saved) -> None:
    import warnings

    panel, _, model = saved
    rows = panel.head(3).reset_index(drop=True)
    for col in ("total_assets", "total_debt", "market_equity", "ebitda", "ppe_net",
                "book_equity"):
        rows.loc[1, col] = 1.7e308  # valid, but sums of them overflow
    rows.loc[2, "ebitda"] = -1.7e308
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        s = model.score(rows)
    assert (s["note"] == "").all() and s["target"].notna().all()


# -- identity rules in score


def test_a_blank_or_text_input_driver_refuses_its_row_naming_the_driver(input_model) -> None:
    # issue 9, FAIL 1: analyze leaves such a row out (driver_missing); score gave it a status
    panel, model = input_model
    rows = panel.head(6).astype({"order_backlog": object}).reset_index(drop=True)
    rows.loc[[1, 3, 4], "order_backlog"] = [np.nan, "abc", None]
    s = _refused_leave_the_rest_as_if_absent(model, rows, [1, 3, 4])
    _refused_leave_the_rest_as_if_absent(model, rows, [1, 3, 4], fold="firm")
    bad = s.iloc[[1, 3, 4]]
    assert (bad["note"] == "order_backlog must be a finite number (an input driver)").all()
    assert (bad["status"] == "").all() and bad["target"].isna().all()
    assert (s.drop(index=[1, 3, 4])["status"] != "").all()


@pytest.fixture(scope="module")
def revenue_model(tmp_path_factory):
    """A linear model with log_revenue, a driver without an imputation rule."""
    panel = make_panel(3)
    out = tmp_path_factory.mktemp("revenue")
    analyze(panel, spec=ModelSpec(model="linear", measures=("book",),
                                  drivers=("tangibility", "log_revenue"))).write(
        out, report=False)
    return panel, levgap.load_model(out)


def test_a_row_whose_driver_has_no_value_gets_no_status(revenue_model) -> None:
    # a NaN target (and band) compares as neither under nor over: it must not read "within"
    panel, model = revenue_model
    rows = panel.head(3).reset_index(drop=True)
    rows.loc[1, "revenue"] = 0.0  # log_revenue needs revenue above zero
    s = model.score(rows)
    assert np.isnan(s.loc[1, "target"]) and np.isfinite(s.loc[1, "actual"])
    assert list(s["status"] != "") == [True, False, True]
    assert list(s["note"]) == ["", "no value for the driver log_revenue: no target, no "
                               "status", ""]
    assert s.loc[[0, 2], "target"].notna().all()


def test_blank_identities_are_refused_with_a_note_not_a_traceback(saved) -> None:
    # issue 9, FAILS 2 and 3: analyze's blank tokens (levgap.codes.NA_TOKENS), any case
    panel, _, model = saved
    rows = panel.head(10).astype({"firm_id": object, "industry": object})
    rows = rows.reset_index(drop=True)
    firm = {0: None, 2: np.nan, 3: "", 5: " NA ", 6: "null"}
    industry = {1: None, 4: np.nan, 7: "", 8: "nan"}
    for i, v in firm.items():
        rows.loc[i, "firm_id"] = v
    for i, v in industry.items():
        rows.loc[i, "industry"] = v
    refused = sorted([*firm, *industry])
    s = _refused_leave_the_rest_as_if_absent(model, rows, refused)
    _refused_leave_the_rest_as_if_absent(model, rows, refused, fold="firm")
    k = len(model.measures)
    want = ["firm_id must not be blank" if i in firm else "industry must not be blank"
            if i in industry else "" for i in range(len(rows))]
    assert list(s["note"]) == want * k
    assert (s.loc[s["note"] != "", "status"] == "").all()


def test_every_copy_of_a_firm_year_given_twice_is_refused(saved) -> None:
    panel, _, model = saved
    rows = panel.head(6).reset_index(drop=True)
    exact = rows.iloc[[2]]
    other = rows.iloc[[4]].assign(firm_id=" " + rows.loc[4, "firm_id"] + " ",
                                  fiscal_year=float(rows.loc[4, "fiscal_year"]),
                                  total_debt=rows.loc[4, "total_debt"] / 2)
    rows = pd.concat([rows, exact, other], ignore_index=True)
    s = _refused_leave_the_rest_as_if_absent(model, rows, [2, 4, 6, 7])
    note = "duplicate firm-year: firm_id and fiscal_year must be unique"
    want = [note if i in (2, 4, 6, 7) else "" for i in range(len(rows))]
    assert list(s["note"]) == want * len(model.measures)
    # the same firm in another year, another firm in the same year: no copies
    fine = panel.head(3).assign(fiscal_year=[2001, 2002, 2003])
    fine = pd.concat([fine, fine.iloc[[0]].assign(firm_id="OTHER")], ignore_index=True)
    assert (model.score(fine)["note"] == "").all()


# -- the last survivors of the identity rules (lead)


def test_firm_ids_are_read_as_codes_when_copies_are_found(input_model) -> None:
    # analyze reads the text 1001.0 as the firm 1001 (ingest.cells.text_cells, code=True):
    # the two rows are one firm-year given twice, and both are refused
    panel, model = input_model
    rows = panel.head(2).reset_index(drop=True).astype({"firm_id": object})
    rows["fiscal_year"] = rows["fiscal_year"].iloc[0]
    rows["firm_id"] = ["1001", "1001.0"]
    s = model.score(rows)
    assert (s["note"] == "duplicate firm-year: firm_id and fiscal_year must be unique").all()
    assert (s["status"] == "").all() and s["target"].isna().all()


def test_lagged_drivers_do_not_refuse_a_blank_current_input_driver(tmp_path) -> None:
    # with lag_drivers the value used is the year before's, so a blank in the current year
    # is no reason to refuse the row (its target comes from the previous year's value)
    panel = make_panel(3)
    panel["order_backlog"] = np.random.default_rng(7).normal(size=len(panel))
    analyze(panel, spec=ModelSpec(model="linear", measures=("book",), lag_drivers=True,
                                  input_drivers=("order_backlog",))).write(tmp_path,
                                                                           report=False)
    model = levgap.load_model(tmp_path)
    firm = panel["firm_id"].iloc[0]
    rows = panel[panel["firm_id"] == firm].sort_values("fiscal_year").reset_index(drop=True)
    assert len(rows) >= 2
    last = len(rows) - 1
    rows.loc[last, "order_backlog"] = np.nan
    s = model.score(rows)
    assert s.loc[last, "note"] != "order_backlog must be a finite number (an input driver)"
    assert np.isfinite(s.loc[last, "target"]) and s.loc[last, "status"] != ""
