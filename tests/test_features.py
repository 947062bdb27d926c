"""Measures and drivers, each checked against a direct computation."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from levgap.config import ModelSpec
from levgap.errors import ModelError
from levgap.features import build_features, lag_rows, trailing_volatility
from levgap.groups import WHOLE_SAMPLE, industry_levels
from levgap.transforms import clip_to_limits, year_limits


def _panel() -> pd.DataFrame:
    rows = []
    for f, ind in (("A", "3711"), ("B", "3711"), ("C", "2834")):
        for i, y in enumerate(range(2015, 2021)):
            rows.append({
                "firm_id": f, "fiscal_year": y, "industry": ind,
                "total_assets": 100.0 + 10 * i, "total_debt": 20.0 + i, "ppe_net": 40.0,
                "ebitda": 10.0 + (i % 3) * (2 if f == "A" else 1), "book_equity": 50.0,
                "market_equity": np.nan if f == "C" else 80.0 + i,
                "source_row": len(rows) + 1, "flags": "",
            })
    return pd.DataFrame(rows)


def test_measures_and_drivers_match_their_definitions() -> None:
    p = _panel()
    f = build_features(p, ModelSpec(winsorize=(0.0, 1.0))).frame
    np.testing.assert_allclose(f["book"], p["total_debt"] / p["total_assets"])
    mkt = p["total_debt"] / (p["total_debt"] + p["market_equity"])
    np.testing.assert_allclose(f["market"], mkt)
    np.testing.assert_allclose(f["tangibility"], p["ppe_net"] / p["total_assets"])
    np.testing.assert_allclose(f["profitability"], p["ebitda"] / p["total_assets"])
    np.testing.assert_allclose(f["size"], np.log(p["total_assets"]))
    has = p["market_equity"].notna()
    mtb = (p["total_assets"] - p["book_equity"] + p["market_equity"]) / p["total_assets"]
    np.testing.assert_allclose(f.loc[has, "market_to_book"], mtb[has])
    assert f.loc[~has, "flags"].str.contains("mtb_imputed").all()
    assert not f.loc[has, "flags"].str.contains("mtb_imputed").any()


def test_volatility_window_and_imputation() -> None:
    p = _panel()
    f = build_features(p, ModelSpec(winsorize=(0.0, 1.0))).frame
    prof = p["ebitda"] / p["total_assets"]
    a = p["firm_id"] == "A"
    # third year of firm A: sd (ddof 1) of its first three profitability values
    expected = np.std(prof[a].iloc[:3], ddof=1)
    assert f.loc[a, "earnings_volatility"].iloc[2] == pytest.approx(expected)
    # sixth year: window of five years, 2016-2020
    assert f.loc[a, "earnings_volatility"].iloc[5] == pytest.approx(
        np.std(prof[a].iloc[1:6], ddof=1))
    # first two years are imputed and flagged
    assert f.loc[a, "flags"].iloc[:2].str.contains("volatility_imputed").all()
    assert not f.loc[a, "flags"].iloc[2:].str.contains("volatility_imputed").any()


def test_trailing_volatility_skips_gaps_in_years() -> None:
    firm = np.array(["x"] * 4)
    year = np.array([2010, 2011, 2016, 2017])
    v = np.array([0.1, 0.2, 0.3, 0.5])
    out = trailing_volatility(firm, year, v)
    # 2017's window is 2013-2017: only 2016 and 2017 -> fewer than three observations
    assert np.isnan(out).all()


def test_winsorize_within_year() -> None:
    rng = np.random.default_rng(0)
    v = rng.normal(size=1000)
    g = np.repeat([1, 2], 500)
    years = np.array([1, 2])
    out, clipped = clip_to_limits(v, g, years, year_limits(v, g, years, 0.01, 0.99))
    for k in (1, 2):
        sel = g == k
        # an independent computation: numpy's quantiles of that year alone
        lo, hi = np.quantile(v[sel], [0.01, 0.99])
        assert out[sel].min() == pytest.approx(lo) and out[sel].max() == pytest.approx(hi)
        assert clipped[sel].sum() == ((v[sel] < lo) | (v[sel] > hi)).sum()


def test_winsorising_is_by_year_in_the_features() -> None:
    # A year with a wide spread must not set the other year's limits (pooled winsorising would).
    rows = []
    rng = np.random.default_rng(3)
    for year, spread in ((2020, 1.0), (2021, 10.0)):
        for i in range(200):
            rows.append({"firm_id": f"f{i}", "fiscal_year": year, "industry": "1000",
                         "total_assets": 100.0, "total_debt": 10.0, "ppe_net": 30.0,
                         "ebitda": float(np.clip(rng.normal(0, spread), -99, 99)),
                         "book_equity": 50.0, "source_row": len(rows) + 1, "flags": ""})
    p = pd.DataFrame(rows)
    f = build_features(p, ModelSpec(drivers=("profitability",))).frame
    for year in (2020, 2021):
        raw = p.loc[p["fiscal_year"] == year, "ebitda"] / 100.0
        got = f.loc[f["fiscal_year"] == year, "profitability"]
        lo, hi = np.quantile(raw, [0.01, 0.99])
        assert got.min() == pytest.approx(lo) and got.max() == pytest.approx(hi)
    assert f["flags"].str.contains("winsorised").sum() == 8


def test_industry_levels_pool_toward_prefix_then_whole_sample() -> None:
    peer = pd.Series(["3711"] * 6 + ["3716"] * 2 + ["9990"] * 2 + ["2834"] * 5)
    firm = pd.Series([f"f{i}" for i in range(len(peer))])
    lv = industry_levels(peer, firm, 5)
    labels = list(lv.labels)
    assert labels == ["2834", "3711", "3716", "9990"]
    assert list(lv.small) == [False, False, True, True]
    p3716, p9990 = lv.parent[2], lv.parent[3]
    assert lv.parent_labels[p3716] == "371" and lv.parent_labels[p9990] == WHOLE_SAMPLE
    assert list(lv.labels[lv.members[p3716]]) == ["3711"]
    assert list(lv.labels[lv.members[p9990]]) == ["2834", "3711"]


def test_peer_digits_group_codes_and_leases() -> None:
    p = _panel()
    p["lease_liabilities"] = [5.0] * 6 + [np.nan] * 12
    f = build_features(p, ModelSpec(peer_digits=2, leases_as_debt=True)).frame
    assert set(f["peer_group"]) == {"37", "28"}
    expected = (p["total_debt"] + 5) / p["total_assets"]
    np.testing.assert_allclose(f["book"].iloc[:6], expected.iloc[:6])
    assert f["flags"].iloc[6:].str.contains("no_lease_data").all()


def test_rd_intensity_adds_indicator() -> None:
    p = _panel()
    p["rd_expense"] = [1.0] * 12 + [np.nan] * 6
    feats = build_features(p, ModelSpec(drivers=("tangibility", "rd_intensity"),
                                         winsorize=(0.0, 1.0)))
    assert feats.drivers == ("tangibility", "rd_intensity", "rd_missing")
    assert (feats.frame["rd_missing"].iloc[12:] == 1).all()
    assert (feats.frame["rd_intensity"].iloc[12:] == 0).all()



def test_rd_indicator_is_left_out_when_constant_and_errors_name_rd_intensity() -> None:
    # review L7: with rd_expense in every row the indicator is constant; it is not a driver
    # (the model used to refuse the run naming the internal rd_missing)
    p = _panel()
    p["rd_expense"] = np.linspace(1.0, 5.0, len(p))
    feats = build_features(p, ModelSpec(drivers=("tangibility", "rd_intensity"),
                                         winsorize=(0.0, 1.0)))
    assert feats.drivers == ("tangibility", "rd_intensity")
    from levgap.models.identify import _shown

    assert _shown(["rd_intensity", "rd_missing"]) == "rd_intensity"
    assert _shown(["size", "rd_missing"]).startswith("size, rd_intensity (")


def test_effect_level_and_peer_group_are_separate_settings() -> None:
    p = _panel()
    peers = build_features(p, ModelSpec(peer_digits=2))
    assert set(peers.frame["peer_group"]) == {"37", "28"}
    assert list(peers.levels.labels) == ["2834", "3711"]  # the model keeps 4 digits
    effect = build_features(p, ModelSpec(industry_digits=2))
    assert list(effect.levels.labels) == ["28", "37"]
    assert set(effect.frame["peer_group"]) == {"3711", "2834"}


def test_identity_columns_default_source_rows_flags_and_names() -> None:
    p = _panel().drop(columns=["source_row", "flags"])
    p["industry"] = " " + p["industry"] + " "
    p["firm_name"] = ["Alpha"] * 6 + [np.nan] * 12
    f = build_features(p, ModelSpec(winsorize=(0.0, 1.0), industry_digits=3)).frame
    np.testing.assert_array_equal(f["source_row"], np.arange(1, 19))
    assert list(f["firm_name"].iloc[[0, 6]]) == ["Alpha", ""]
    assert f["fiscal_year"].dtype == np.int64
    assert set(f["effect_group"]) == {"371", "283"} and set(f["peer_group"]) == {"3711", "2834"}
    assert f["flags"].str.contains("volatility_imputed").sum() == 6  # no other flag, no NaN
    unnamed = build_features(_panel(), ModelSpec(winsorize=(0.0, 1.0))).frame
    assert (unnamed["firm_name"] == "").all()


def test_market_leverage_is_missing_without_a_market_value() -> None:
    p = _panel()
    p.loc[0, ["total_debt", "market_equity"]] = 0.0
    f = build_features(p, ModelSpec(winsorize=(0.0, 1.0))).frame
    assert np.isnan(f.loc[0, "market"]) and np.isnan(f.loc[12:, "market"]).all()
    assert f.loc[1, "market"] == pytest.approx(21.0 / (21.0 + 81.0))
    none = build_features(p.drop(columns=["market_equity"]),
                          ModelSpec(drivers=("tangibility", "size"), winsorize=(0.0, 1.0)))
    assert np.isnan(none.frame["market"]).all() and np.isnan(none.frame["market_equity"]).all()


def test_leases_flag_missing_data_and_debt_above_assets() -> None:
    p = _panel()
    p["lease_liabilities"] = [5.0] * 5 + [200.0] + [np.nan] * 12
    f = build_features(p, ModelSpec(leases_as_debt=True, winsorize=(0.0, 1.0))).frame
    assert f.loc[5, "book"] == pytest.approx((25.0 + 200.0) / 150.0)
    assert f.loc[5, "flags"].split(";") == ["debt_above_assets_with_leases"]
    assert (f.loc[6:, "flags"].str.split(";").str[0] == "no_lease_data").all()
    assert not f.loc[:4, "flags"].str.contains("debt_above|no_lease").any()
    plain = build_features(p, ModelSpec(winsorize=(0.0, 1.0))).frame
    np.testing.assert_allclose(plain["book"], p["total_debt"] / p["total_assets"])


def test_given_volatility_overrides_where_given_and_rd_intensity() -> None:
    p = _panel()
    p["earnings_volatility"] = [0.5] + [np.nan] * 17
    p["rd_expense"] = [2.0] * 6 + [np.nan] * 12
    spec = ModelSpec(drivers=("earnings_volatility", "rd_intensity"), winsorize=(0.0, 1.0))
    feats = build_features(p, spec)
    f = feats.frame
    assert f.loc[0, "earnings_volatility"] == 0.5 and "volatility_imputed" not in f.loc[0, "flags"]
    prof = p["ebitda"] / p["total_assets"]
    assert f.loc[2, "earnings_volatility"] == pytest.approx(np.std(prof[:3], ddof=1))
    np.testing.assert_allclose(f.loc[:5, "rd_intensity"], 2.0 / p["total_assets"][:6])
    assert (f.loc[6:, "rd_intensity"] == 0).all() and (f.loc[:5, "rd_missing"] == 0).all()
    assert feats.drivers == ("earnings_volatility", "rd_intensity", "rd_missing")
    np.testing.assert_allclose(f["rd_intensity_raw"], f["rd_intensity"])


def test_drivers_without_data_are_dropped_with_a_note_unless_kept() -> None:
    p = _panel().drop(columns=["market_equity"])
    feats = build_features(p, ModelSpec(winsorize=(0.0, 1.0)))
    assert "market_to_book" not in feats.drivers
    assert feats.notes == ("driver market_to_book left out of the model: no row has "
                           "market_equity (or shares_outstanding and share_price).",)
    short = p[p["fiscal_year"] == 2015]
    notes = build_features(short, ModelSpec(winsorize=(0.0, 1.0))).notes
    assert any("earnings_volatility left out of the model: no firm has the three" in x
               for x in notes)
    given = build_features(p, ModelSpec(winsorize=(0.0, 1.0)), transforms=feats.transforms)
    assert "market_to_book" in given.drivers and given.notes == ()
    with pytest.raises(ModelError, match="at least one driver"):
        build_features(p, ModelSpec(drivers=("market_to_book",), winsorize=(0.0, 1.0)))


def test_given_transforms_flag_rows_outside_the_fitted_range() -> None:
    p = _panel()
    feats = build_features(p, ModelSpec(winsorize=(0.1, 0.9)))
    assert feats.frame["flags"].str.contains("winsorised").any()
    assert not feats.frame["flags"].str.contains("outside_fitted_range").any()
    again = build_features(p, ModelSpec(winsorize=(0.1, 0.9)), transforms=feats.transforms)
    np.testing.assert_array_equal(again.frame["flags"].str.contains("outside_fitted_range"),
                                  feats.frame["flags"].str.contains("winsorised"))
    assert not again.frame["flags"].str.contains("winsorised").any()
    assert again.transforms is feats.transforms
    for name in feats.drivers:
        np.testing.assert_array_equal(again.frame[name], feats.frame[name])


def test_small_industries_are_flagged_and_drivers_lagged() -> None:
    p = _panel()
    f = build_features(p, ModelSpec(min_industry_firms=2, winsorize=(0.0, 1.0))).frame
    assert f["flags"].str.contains("industry_effect_pooled").tolist() == [False] * 12 + [True] * 6
    lag = build_features(p.iloc[::-1].reset_index(drop=True),
                         ModelSpec(lag_drivers=True, winsorize=(0.0, 1.0))).frame
    now = build_features(p, ModelSpec(winsorize=(0.0, 1.0))).frame.set_index(
        ["firm_id", "fiscal_year"])
    for row in lag.itertuples():
        if row.fiscal_year == 2015:
            assert np.isnan(row.tangibility) and np.isnan(row.size)
        else:
            prev = now.loc[(row.firm_id, row.fiscal_year - 1)]
            assert row.size == prev["size"] and row.profitability == prev["profitability"]
    gap = p[p["fiscal_year"] != 2017]
    lagged = build_features(gap, ModelSpec(lag_drivers=True, winsorize=(0.0, 1.0))).frame
    assert np.isnan(lagged.loc[lagged["fiscal_year"] == 2018, "size"]).all()


def test_add_flag_appends_codes() -> None:
    from levgap.features import add_flag

    flags = pd.Series(["", "a", ""])
    out = add_flag(flags, np.array([True, True, False]), "b")
    assert list(out) == ["b", "a;b", ""] and list(flags) == ["", "a", ""]
    same = add_flag(flags, np.zeros(3, dtype=bool), "b")
    assert list(same) == ["", "a", ""]


def test_trailing_window_is_five_years_in_any_row_order() -> None:
    firm = np.array(["x"] * 7 + ["y"] * 3)
    year = np.array([2010, 2011, 2012, 2013, 2014, 2015, 2016, 2014, 2015, 2016])
    v = np.array([0.1, 0.5, 0.2, 0.9, 0.3, 0.4, 0.8, 0.2, 0.3, 0.7])
    perm = np.random.default_rng(1).permutation(10)
    out = np.empty(10)
    out[perm] = trailing_volatility(firm[perm], year[perm], v[perm])
    assert np.isnan(out[:2]).all()
    assert out[2] == pytest.approx(np.std(v[:3], ddof=1))
    assert out[4] == pytest.approx(np.std(v[:5], ddof=1))  # 2010-2014: five years
    assert out[5] == pytest.approx(np.std(v[1:6], ddof=1))  # 2010 left the window
    assert out[6] == pytest.approx(np.std(v[2:7], ddof=1))
    assert out[9] == pytest.approx(np.std(v[7:], ddof=1))  # y's own three years only
    with_nan = v.copy()
    with_nan[3] = np.nan
    got = trailing_volatility(firm, year, with_nan)
    assert got[4] == pytest.approx(np.nanstd(with_nan[:5], ddof=1))  # NaN years skipped


def _tokens(flags: pd.Series) -> list[set[str]]:
    return [set(x.split(";")) - {""} for x in flags]


def test_flags_are_exact_codes_after_the_rows_own() -> None:
    p = _panel()
    p["flags"] = ["fx_converted"] + [""] * 17
    p["source_row"] = np.arange(18) * 3 + 7
    f = build_features(p, ModelSpec(winsorize=(0.1, 0.9), min_industry_firms=2)).frame
    np.testing.assert_array_equal(f["source_row"], p["source_row"])
    assert f.loc[0, "flags"].split(";")[0] == "fx_converted"
    tokens = _tokens(f["flags"])
    assert {"winsorised", "volatility_imputed", "industry_effect_pooled",
            "mtb_imputed"} == set().union(*tokens) - {"fx_converted"}
    assert all("industry_effect_pooled" in t for t in tokens[12:])
    again = build_features(p, ModelSpec(winsorize=(0.1, 0.9), min_industry_firms=2),
                           transforms=build_features(p, ModelSpec(
                               winsorize=(0.1, 0.9))).transforms).frame
    assert "outside_fitted_range" in set().union(*_tokens(again["flags"]))


def test_money_in_integers_text_and_small_units() -> None:
    p = _panel()
    p["total_assets"] = p["total_assets"].astype(int)
    p["total_debt"] = (p["total_debt"] / 100.0)  # debt plus market value below one
    p["market_equity"] = p["market_equity"] / 1000.0
    p["rd_expense"] = ["n/a", "2"] + [np.nan] * 16
    f = build_features(p, ModelSpec(drivers=("tangibility", "rd_intensity"),
                                    winsorize=(0.0, 1.0))).frame
    assert f["total_assets"].dtype == float and f["total_debt"].dtype == float
    mkt = p["total_debt"] / (p["total_debt"] + p["market_equity"])
    np.testing.assert_allclose(f.loc[:11, "market"], mkt[:12])
    assert list(f["rd_missing"][:3]) == [1.0, 0.0, 1.0]
    assert f.loc[1, "rd_intensity"] == pytest.approx(2.0 / p.loc[1, "total_assets"])


def test_optional_columns_absent() -> None:
    p = _panel()
    feats = build_features(p, ModelSpec(drivers=("tangibility", "rd_intensity"),
                                        winsorize=(0.0, 1.0)))
    # no rd_expense at all: the indicator would be constant, so it is no driver (review L7)
    assert "rd_missing" not in feats.drivers and (feats.frame["rd_intensity"] == 0.0).all()
    leases = build_features(p, ModelSpec(leases_as_debt=True, winsorize=(0.0, 1.0))).frame
    assert all("no_lease_data" in t for t in _tokens(leases["flags"]))
    np.testing.assert_allclose(leases["book"], p["total_debt"] / p["total_assets"])


def test_leases_up_to_assets_are_not_above_assets() -> None:
    p = _panel()
    p["lease_liabilities"] = np.nan
    p.loc[0, "lease_liabilities"] = p.loc[0, "total_assets"] - p.loc[0, "total_debt"]
    p.loc[1, "lease_liabilities"] = 1.0
    f = build_features(p, ModelSpec(leases_as_debt=True, winsorize=(0.0, 1.0))).frame
    assert f.loc[0, "book"] == 1.0
    assert "debt_above_assets_with_leases" not in f.loc[0, "flags"]
    assert f.loc[1, "book"] == pytest.approx(22.0 / 110.0)
    np.testing.assert_allclose(f.loc[2:, "book"], (p["total_debt"] / p["total_assets"])[2:])


def test_lag_takes_the_first_row_as_a_previous_year_and_one_row_alone() -> None:
    p = _panel()
    f = build_features(p, ModelSpec(lag_drivers=True, winsorize=(0.0, 1.0))).frame
    now = build_features(p, ModelSpec(winsorize=(0.0, 1.0))).frame
    assert f.loc[1, "size"] == now.loc[0, "size"]  # the previous year is row 0
    one = build_features(p.iloc[[3]], ModelSpec(lag_drivers=True,
                                                drivers=("tangibility", "size"),
                                                winsorize=(0.0, 1.0))).frame
    assert np.isnan(one[["tangibility", "size"]].to_numpy()).all()


def test_lagged_drivers_lag_their_unwinsorised_values_too() -> None:
    p = _panel()
    now = build_features(p, ModelSpec(winsorize=(0.05, 0.95))).frame.set_index(
        ["firm_id", "fiscal_year"])
    lag = build_features(p, ModelSpec(lag_drivers=True, winsorize=(0.05, 0.95))).frame
    assert "profitability_raw" in lag
    for row in lag.itertuples():
        if row.fiscal_year == 2015:
            assert np.isnan(row.profitability_raw) and np.isnan(row.size_raw)
        else:
            prev = now.loc[(row.firm_id, row.fiscal_year - 1)]
            assert row.profitability_raw == prev["profitability_raw"]
            assert row.size_raw == prev["size_raw"]


def test_parent_groups_named_in_the_configuration_reach_the_levels() -> None:
    # C (2834) is small; by code prefix it has no parent and takes the whole sample; named
    # in [industries] with 3711 it takes 3711's group
    p = _panel()
    spec = ModelSpec(min_industry_firms=2, winsorize=(0.0, 1.0))
    plain = build_features(p, spec).levels
    named = build_features(p, spec, parents={"2834": "health", "3711": "health"}).levels
    assert plain.parent_labels == (WHOLE_SAMPLE,)
    assert named.parent_labels == ("health",)


def test_lag_rows_takes_the_firms_previous_fiscal_year() -> None:
    f = pd.DataFrame({"firm_id": ["a", "a", "b", "a", "b"],
                      "fiscal_year": [2020, 2021, 2021, 2023, 2019],
                      "x": [1.0, 2.0, 3.0, 4.0, 5.0], "x_raw": [10.0, 20.0, 30.0, 40.0, 50.0]})
    lag_rows(f, ["x"])
    np.testing.assert_array_equal(f["has_prior_year"], [False, True, False, False, False])
    np.testing.assert_array_equal(f["x"], [np.nan, 1.0, np.nan, np.nan, np.nan])
    np.testing.assert_array_equal(f["x_raw"], [np.nan, 10.0, np.nan, np.nan, np.nan])


def test_raw_drivers_revenue_dividends_and_rd_missing_by_hand() -> None:
    """Each added driver against its definition (DESIGN.md), on five hand-made rows:
    log_revenue is ln(revenue) for revenue > 0 (negative below 1) and missing at 0;
    dividend_payer is 1 for any positive payment, 0 for none, missing when not reported;
    rd_missing comes right after rd_intensity."""
    from levgap.features import raw_drivers

    n = 5
    data = pd.DataFrame({
        "ppe_net": [1.0] * n, "ebitda": [1.0] * n, "book_equity": [1.0] * n,
        "rd_expense": [np.nan, 1.0, 2.0, np.nan, 0.5],
        "revenue": [0.0, 0.5, 1.0, 2.0, np.nan],
        "dividends_paid": [0.0, 0.5, 2.0, np.nan, 1.0],
    })
    f = pd.DataFrame({"total_assets": [10.0] * n, "firm_id": list("abcde"),
                      "fiscal_year": [2020] * n})
    spec = ModelSpec(drivers=("tangibility", "rd_intensity", "log_revenue", "dividend_payer",
                              "size"))
    raw, drivers, _ = raw_drivers(data, f, spec, n)
    np.testing.assert_array_equal(
        raw["log_revenue"], [np.nan, np.log(0.5), 0.0, np.log(2.0), np.nan])
    np.testing.assert_array_equal(raw["dividend_payer"], [0.0, 1.0, 1.0, np.nan, 1.0])
    assert raw["dividend_payer"].dtype == np.float64
    assert drivers == ["tangibility", "rd_intensity", "rd_missing", "log_revenue",
                       "dividend_payer", "size"]
    np.testing.assert_array_equal(raw["rd_missing"], [1.0, 0.0, 0.0, 1.0, 0.0])


def _median_panel() -> pd.DataFrame:
    """Two fiscal years: a, b and c share industry 1000, d is alone in 2000; assets 100 and
    market equity 90 everywhere, so book = debt / 100 and market = debt / (debt + 90)."""
    debt = {("a", 2020): 10.0, ("b", 2020): 20.0, ("c", 2020): 40.0, ("d", 2020): 30.0,
            ("a", 2021): 20.0, ("b", 2021): 30.0, ("c", 2021): 50.0, ("d", 2021): 10.0}
    paid = {("a", 2020): np.nan, ("b", 2020): 0.0}
    rows = [{"firm_id": f, "fiscal_year": y, "industry": "2000" if f == "d" else "1000",
             "total_assets": 100.0, "total_debt": d, "market_equity": 90.0, "ppe_net": 40.0,
             "ebitda": 10.0, "book_equity": 50.0, "dividends_paid": paid.get((f, y), 5.0),
             "source_row": i + 1, "flags": ""}
            for i, ((f, y), d) in enumerate(debt.items())]
    return pd.DataFrame(rows)


# leave-one-out industry-year medians of _median_panel, by hand (rows a b c d of 2020, then
# of 2021); d has no other firm of its industry, so it takes the median of the year's others
_MED_BOOK = [0.3, 0.25, 0.15, 0.2, 0.4, 0.35, 0.25, 0.3]
_MED_MARKET = [np.median([20 / 110, 40 / 130]), np.median([0.1, 40 / 130]),
               np.median([0.1, 20 / 110]), 20 / 110,
               np.median([0.25, 50 / 140]), np.median([20 / 110, 50 / 140]),
               np.median([20 / 110, 0.25]), 0.25]
_MEDIAN_SPEC = {"drivers": ("tangibility", "industry_median_leverage", "dividend_payer"),
                "effects": "year", "winsorize": (0.0, 1.0), "min_industry_firms": 1}


def test_industry_median_columns_raw_value_and_flags_by_hand() -> None:
    """The industry median driver's columns (each measure's, the driver's and its raw value,
    which the estimation sample and the saved model's scores read), and the flags of the
    industry median and dividend blocks, exactly."""
    f = build_features(_median_panel(), ModelSpec(**_MEDIAN_SPEC)).frame
    np.testing.assert_allclose(f["industry_median_leverage_book"], _MED_BOOK, rtol=1e-12)
    np.testing.assert_allclose(f["industry_median_leverage_market"], _MED_MARKET, rtol=1e-12)
    np.testing.assert_allclose(f["industry_median_leverage"], _MED_BOOK, rtol=1e-12)
    np.testing.assert_allclose(f["industry_median_leverage_raw"].to_numpy(dtype=float),
                               _MED_BOOK, rtol=1e-12)
    # a's 2020 dividends are blank: not a payer, flagged; b's are 0: not a payer, unflagged
    np.testing.assert_array_equal(f["dividend_payer"], [0.0, 0.0, 1, 1, 1, 1, 1, 1])
    assert _tokens(f["flags"]) == [{"dividends_missing"}, set(), set(),
                                   {"industry_median_imputed"}, set(), set(), set(),
                                   {"industry_median_imputed"}]


def test_lagged_industry_medians_are_the_previous_years_for_every_measure() -> None:
    """With lag_drivers, each measure's industry median column (the market one is the
    market model's driver) and the raw value take the firm's previous fiscal year."""
    f = build_features(_median_panel(), ModelSpec(lag_drivers=True, **_MEDIAN_SPEC)).frame
    gap = [np.nan] * 4
    for col, prior in (("industry_median_leverage_book", _MED_BOOK),
                       ("industry_median_leverage_market", _MED_MARKET),
                       ("industry_median_leverage", _MED_BOOK),
                       ("industry_median_leverage_raw", _MED_BOOK)):
        np.testing.assert_allclose(f[col].to_numpy(dtype=float), gap + prior[:4], rtol=1e-12,
                                   err_msg=col)


def test_drivers_whose_columns_are_absent_are_left_out_with_a_note() -> None:
    """No revenue, dividends_paid or input driver column at all (a frame given to
    build_features or SavedModel.score need not have them): a note each, no error."""
    p = _median_panel().drop(columns=["dividends_paid"])
    feats = build_features(p, ModelSpec(drivers=("tangibility", "log_revenue",
                                                 "dividend_payer"),
                                        input_drivers=("order_backlog",),
                                        winsorize=(0.0, 1.0)))
    assert feats.drivers == ("tangibility",)
    assert feats.notes == (
        "driver log_revenue left out of the model: no row has revenue above zero.",
        "driver dividend_payer left out of the model: no row has dividends_paid.",
        "driver order_backlog left out of the model: no data.")
