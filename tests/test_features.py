"""Measures and drivers, each checked against a direct computation."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from levgap.config import ModelSpec
from levgap.features import build_features, trailing_volatility
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
    from levgap.models.design import _shown

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
