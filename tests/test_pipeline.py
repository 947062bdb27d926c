"""End to end in memory: truth recovered, shocks found, identities hold, nothing lost."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from levgap.analysis import COEF_COLUMNS, DRIVER_COLUMNS, FIT_COLUMNS, TARGET_COLUMNS
from levgap.config import ModelSpec, RunConfig
from levgap.demo import TRUE_COEFFICIENTS, make_panel, planted_shocks
from levgap.errors import ConfigError, ModelError
from levgap.frames import SIGN_COLUMNS
from levgap.pipeline import analyze


@pytest.fixture(scope="module")
def demo_result():
    return analyze(make_panel(7))


@pytest.fixture(scope="module")
def demo_linear():
    return analyze(make_panel(7), spec=ModelSpec(model="linear"))


def _fresh_panel(seed: int = 11) -> tuple[pd.DataFrame, dict[str, float], pd.DataFrame]:
    """A panel unlike the demo: 30 industries of its own, 9 years, its own truth and shocks."""
    rng = np.random.default_rng(seed)
    truth = {"tangibility": 0.25, "profitability": -0.40, "size": 0.02}
    rows = []
    firm = 0
    for ind in range(30):
        code = f"{5000 + 7 * ind}"
        effect = rng.normal(0, 0.04)
        for _ in range(rng.integers(8, 20)):
            firm += 1
            tang_f, prof_f, size_f = rng.uniform(0.1, 0.8), rng.normal(0.1, 0.04), rng.normal(5, 1)
            fe = rng.normal(0, 0.03)
            for t in range(9):
                tang = np.clip(tang_f + rng.normal(0, 0.03), 0.01, 0.99)
                prof = prof_f + rng.normal(0, 0.03)
                size = size_f + 0.03 * t
                lev = (0.05 + truth["tangibility"] * tang + truth["profitability"] * prof
                       + truth["size"] * size + effect + 0.01 * t + fe + rng.normal(0, 0.03))
                assets = float(np.exp(size))
                rows.append({
                    "firm_id": f"Q{firm:05d}", "fiscal_year": 2010 + t, "industry": code,
                    "total_assets": assets, "total_debt": max(lev, 0.0) * assets,
                    "ppe_net": tang * assets, "ebitda": prof * assets,
                    "book_equity": 0.4 * assets, "market_equity": assets * rng.uniform(0.5, 2),
                })
    panel = pd.DataFrame(rows)
    shocked = panel[panel["fiscal_year"] == 2018].sample(6, random_state=seed)
    shocks = pd.DataFrame({"firm_id": shocked["firm_id"], "fiscal_year": 2018,
                           "direction": ["over", "under"] * 3})
    for s in shocks.itertuples():
        at = (panel["firm_id"] == s.firm_id) & (panel["fiscal_year"] == 2018)
        sign = 1 if s.direction == "over" else -1
        lev = panel.loc[at, "total_debt"] / panel.loc[at, "total_assets"]
        new = np.clip(lev + sign * 0.25, 0.0, 0.95) if sign > 0 else np.clip(lev - 0.25, 0, None)
        panel.loc[at, "total_debt"] = new * panel.loc[at, "total_assets"]
    return panel, truth, shocks


def test_contract_columns(demo_result) -> None:
    r = demo_result
    assert list(r.targets.columns) == list(TARGET_COLUMNS)
    assert list(r.drivers.columns) == list(DRIVER_COLUMNS)
    assert list(r.coefficients.columns) == [*COEF_COLUMNS, *SIGN_COLUMNS]
    assert list(r.model_fit.columns) == list(FIT_COLUMNS)
    assert set(r.targets["status"]) <= {"over", "within", "under"}


def test_demo_truth_recovered_within_three_standard_errors(demo_linear) -> None:
    # the demo's truth is linear in the drivers, so the linear model must recover it
    c = demo_linear.coefficients.query("measure == 'book'").set_index("term")
    for driver, true in TRUE_COEFFICIENTS.items():
        est, se = c.loc[driver, "estimate"], c.loc[driver, "std_error"]
        assert abs(est - true) <= 3 * se, (driver, est, se, true)


def test_demo_market_signs_follow_the_literature(demo_result) -> None:
    c = demo_result.coefficients.query("measure == 'market'").set_index("term")["estimate"]
    # Signs from Rajan and Zingales (1995) JF 50(5) (memory) and Frank and Goyal (2009) FM
    # 38(1), abstract (REFERENCES.md): tangibility +, profitability -, market-to-book -, size +.
    assert c["tangibility"] > 0 and c["profitability"] < 0
    assert c["market_to_book"] < 0 and c["size"] > 0


def test_demo_shocked_firms_flagged(demo_result) -> None:
    t = demo_result.targets.query("measure == 'book'")
    m = t.merge(planted_shocks(7), on=["firm_id", "fiscal_year"])
    assert len(m) == 8
    assert (m["status"] == m["direction"]).all()
    pct = t["gap"].rank(pct=True)
    ranks = pct[t.set_index(["firm_id", "fiscal_year"]).index.isin(
        m.set_index(["firm_id", "fiscal_year"]).index)]
    assert ((ranks > 0.97) | (ranks < 0.03)).all()


def test_band_covers_about_80_percent(demo_result) -> None:
    for _, t in demo_result.targets.groupby("measure"):
        share = (t["status"] == "within").mean()
        assert 0.78 <= share <= 0.82


def test_identity_holds_on_every_row(demo_result) -> None:
    r = demo_result
    s = r.drivers.groupby(["firm_id", "fiscal_year", "measure"])["contribution"].sum()
    m = r.targets.set_index(["firm_id", "fiscal_year", "measure"]).join(s)
    assert np.abs(m["target"] - m["peer_target"] - m["contribution"]).max() <= 1e-12
    assert np.allclose(m["gap"], m["actual"] - m["target"])


def test_demo_pooling_named_in_manifest(demo_result) -> None:
    b = {x["industry"]: x for x in demo_result.manifest["pooled_industries"]}
    assert set(b) == {"3716", "9990"}
    assert b["3716"]["members"] == ["3711"]
    assert b["9990"]["parent"] == "whole sample"
    for item in b.values():  # an industry with rows of its own keeps part of its own level
        assert all(0.0 < w < 1.0 for w in item["weight"].values())


def test_default_targets_and_bands_are_ratios(demo_result) -> None:
    t = demo_result.targets
    for col in ("target", "band_low", "band_high", "target_full", "peer_target"):
        assert t[col].between(0.0, 1.0).all(), col
    assert not ((t["actual"] == 0) & (t["status"] == "over")).any()
    assert (t["band_low"] <= t["target"]).all() and (t["target"] <= t["band_high"]).all()


def test_firms_without_market_equity_get_book_target_and_ledger_line(demo_result) -> None:
    r = demo_result
    ex = r.exclusions[r.exclusions["measure"] == "market"]
    assert len(ex) > 0 and (ex["reason"] == "no_market_equity").all()
    keys = set(zip(ex["firm_id"], ex["fiscal_year"], strict=True))
    book = r.targets[r.targets["measure"] == "book"]
    assert keys <= set(zip(book["firm_id"], book["fiscal_year"], strict=True))


def test_fresh_panel_truth_shocks_and_accounting() -> None:
    panel, truth, shocks = _fresh_panel()
    bad = panel.iloc[:3].copy()
    bad["total_assets"] = [0.0, -5.0, np.nan]
    bad["firm_id"] = ["BAD1", "BAD2", "BAD3"]
    messy = pd.concat([panel, bad], ignore_index=True)
    r = analyze(messy, spec=ModelSpec(measures=("book",), model="linear"))
    c = r.coefficients.set_index("term")
    for driver, true in truth.items():
        assert abs(c.loc[driver, "estimate"] - true) <= 3 * c.loc[driver, "std_error"], driver
    for driver in ("earnings_volatility", "market_to_book"):  # no effect in the truth
        assert abs(c.loc[driver, "estimate"]) <= 3 * c.loc[driver, "std_error"], driver
    t = r.targets
    m = t.merge(shocks, on=["firm_id", "fiscal_year"])
    assert (m["status"] == m["direction"]).all()
    # every input row is used or in the ledger, exactly once
    counts = r.manifest["counts"]
    assert counts["rows_in"] == len(messy)
    assert counts["rows_used"] + counts["rows_excluded"] == len(messy)
    assert len(t) == counts["rows_used"]
    assert sorted(r.exclusions["source_row"]) == [len(panel) + 1, len(panel) + 2,
                                                  len(panel) + 3]


def test_options_change_the_run() -> None:
    panel, _, _ = _fresh_panel(12)
    cfg = RunConfig(model=ModelSpec(measures=("book",), cluster="firm-year", year=2017))
    r = analyze(panel, config=cfg)
    assert set(r.targets["fiscal_year"]) == {2017}
    assert r.manifest["options"]["model"]["cluster"] == "firm-year"
    r2 = analyze(panel, config=RunConfig(model=ModelSpec(measures=("book",),
                                                         cluster="industry")))
    se1 = r.coefficients.set_index("term")["std_error"]
    se2 = r2.coefficients.set_index("term")["std_error"]
    assert not np.allclose(se1, se2)


def test_cross_fit_is_deterministic() -> None:
    panel, _, _ = _fresh_panel(13)
    a = analyze(panel, spec=ModelSpec(measures=("book",)))
    b = analyze(panel, spec=ModelSpec(measures=("book",)))
    pd.testing.assert_frame_equal(a.targets, b.targets)
    fit = a.model_fit.iloc[0]
    assert fit["r2_oos"] < fit["r2"]


def test_empty_after_validation_is_a_clear_error() -> None:
    panel, _, _ = _fresh_panel(14)
    panel["total_assets"] = -1.0
    with pytest.raises(ModelError, match="at least one usable row.*assets_not_positive"):
        analyze(panel)


def _random_panel(seed: int, n_ind: int, n_firms: int, n_years: int) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    rows = []
    for i in range(n_ind):
        for f in range(int(rng.integers(1, n_firms + 1))):
            start = int(rng.integers(0, 3))
            for y in range(start, n_years):
                assets = float(rng.lognormal(4, 1))
                rows.append({
                    "firm_id": f"{i}-{f}", "fiscal_year": 2000 + y, "industry": f"{10 + i}",
                    "total_assets": assets, "total_debt": assets * rng.uniform(0, 0.8),
                    "ppe_net": assets * rng.uniform(0, 1), "ebitda": assets * rng.normal(0.1, 0.1),
                    "book_equity": assets * rng.uniform(-0.1, 0.6),
                    "market_equity": assets * rng.uniform(0.1, 3) if rng.random() > 0.2
                    else np.nan,
                })
    return pd.DataFrame(rows)


@settings(max_examples=12, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(st.integers(0, 10_000), st.integers(3, 8), st.integers(3, 9), st.integers(4, 7))
def test_identity_and_accounting_over_random_panels(seed: int, n_ind: int, n_firms: int,
                                                     n_years: int) -> None:
    panel = _random_panel(seed, n_ind, n_firms, n_years)
    try:
        r = analyze(panel)
    except ModelError:
        return  # too small or collinear for a fit: a clear error, not a wrong answer
    s = r.drivers.groupby(["firm_id", "fiscal_year", "measure"])["contribution"].sum()
    m = r.targets.set_index(["firm_id", "fiscal_year", "measure"]).join(s)
    assert np.abs(m["target"] - m["peer_target"] - m["contribution"]).max() <= 1e-12
    used = set(r.targets["firm_id"] + "/" + r.targets["fiscal_year"].astype(str))
    ledger = r.exclusions[r.exclusions["measure"] == ""]
    assert len(used) + len(ledger) == len(panel)


def test_panel_without_market_equity_column_gets_book_targets() -> None:
    panel, _, _ = _fresh_panel(15)
    r = analyze(panel.drop(columns=["market_equity"]))
    assert set(r.targets["measure"]) == {"book"}
    assert "market_to_book" not in set(r.coefficients["term"])
    assert any("market_to_book left out" in w for w in r.manifest["warnings"])
    assert (r.exclusions["reason"] == "no_market_equity").all()


def test_short_history_drops_volatility_with_a_note() -> None:
    panel, _, _ = _fresh_panel(16)
    r = analyze(panel[panel["fiscal_year"] == 2015], spec=ModelSpec(measures=("book",)))
    assert "earnings_volatility" not in set(r.coefficients["term"])
    assert any("earnings_volatility left out" in w for w in r.manifest["warnings"])


def test_year_outside_the_panel_is_a_config_error() -> None:
    panel, _, _ = _fresh_panel(17)
    with pytest.raises(ConfigError, match="fiscal year of the panel; got 1990"):
        analyze(panel, spec=ModelSpec(year=1990))


def test_debt_to_target_never_asks_for_negative_debt(demo_result) -> None:
    t = demo_result.targets
    panel = make_panel(7).set_index(["firm_id", "fiscal_year"])["total_debt"]
    debt = panel.reindex(pd.MultiIndex.from_frame(t[["firm_id", "fiscal_year"]])).to_numpy()
    assert (t["debt_to_target"] >= -debt - 1e-9).all()
    book = t["measure"] == "book"
    pos = book & (t["target"] >= 0)
    assets = debt[pos] / t.loc[pos, "actual"].where(t.loc[pos, "actual"] > 0)
    ok = assets.notna()
    np.testing.assert_allclose(
        t.loc[pos, "debt_to_target"][ok],
        ((t.loc[pos, "target"] - t.loc[pos, "actual"]) * assets)[ok], rtol=1e-9)


def test_peers_of_a_firm_alone_fall_back_and_median_is_defined(demo_result) -> None:
    t = demo_result.targets
    assert t["peer_median"].notna().all()
    assert (t["peer_count"] > 0).all()
    tiny = t[(t["industry"] == "3716") & (t["measure"] == "book")]
    assert tiny["flags"].str.contains("industry_effect_pooled").all()


def test_a_firm_alone_takes_its_parent_industries_as_peers() -> None:
    panel, _, _ = _fresh_panel(18)
    lone = panel["firm_id"] == panel["firm_id"].iloc[0]
    panel.loc[lone, "industry"] = "5001"  # alone; shares the prefix 500 with 5000 and 5007
    r = analyze(panel, spec=ModelSpec(measures=("book",)))
    b = {x["industry"]: x for x in r.manifest["pooled_industries"]}
    assert b["5001"]["members"] == ["5000", "5007"]
    t = r.targets.set_index(["firm_id", "fiscal_year"])
    for year, row in t[t["industry"] == "5001"].reset_index().set_index("fiscal_year").iterrows():
        peers = t.xs(year, level="fiscal_year")
        peers = peers[peers["industry"].isin(["5000", "5007"])]
        assert row["peer_count"] == len(peers)
        assert row["peer_median"] == pytest.approx(peers["actual"].median())


def test_lagged_drivers_use_the_previous_year_and_ledger_the_first() -> None:
    panel, _, _ = _fresh_panel(19)
    now = analyze(panel, spec=ModelSpec(measures=("book",)))
    lag = analyze(panel, spec=ModelSpec(measures=("book",), lag_drivers=True))
    first = panel.groupby("firm_id")["fiscal_year"].transform("min") == panel["fiscal_year"]
    ex = lag.exclusions[lag.exclusions["reason"] == "no_prior_year"]
    assert len(ex) == int(first.sum()) and (ex["measure"] == "").all()
    counts = lag.manifest["counts"]
    assert counts["rows_used"] + counts["rows_excluded"] == len(panel)
    d_now = now.drivers.set_index(["firm_id", "fiscal_year", "driver"])["firm_value"]
    d_lag = lag.drivers.set_index(["firm_id", "fiscal_year", "driver"])["firm_value"]
    shifted = d_now.rename(index=lambda y: y + 1 if isinstance(y, int | np.integer) else y,
                           level="fiscal_year")
    common = d_lag.index.intersection(shifted.index)
    assert len(common) == len(d_lag)
    np.testing.assert_allclose(d_lag.loc[common], shifted.loc[common])
