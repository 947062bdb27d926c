"""Edge cases of the analysis: no peers in a year, no variation, leases, zero market value."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from _synthetic import panel

from levgap.config import ModelSpec
from levgap.errors import ModelError
from levgap.pipeline import analyze


def _data(seed: int = 8) -> pd.DataFrame:
    return panel(seed, industries=6, firms=(8, 10), years=6).drop(
        columns=["true_target", "spread"])


def test_a_firm_year_alone_in_its_fiscal_year_takes_peers_from_other_years() -> None:
    p = _data()
    lone = p.iloc[[0]].copy()
    lone["fiscal_year"] = 2030
    lone["firm_id"] = "LONE"
    r = analyze(pd.concat([p, lone], ignore_index=True), spec=ModelSpec(measures=("book",)))
    row = r.targets[r.targets["firm_id"] == "LONE"].iloc[0]
    assert "peers_other_years" in row["flags"]
    assert row["peer_count"] == len(p)
    assert np.isfinite([row["peer_median"], row["peer_target"], row["gap_z"]]).all()
    assert row["status"] in ("over", "within", "under")
    d = r.drivers[r.drivers["firm_id"] == "LONE"]
    assert row["target"] - row["peer_target"] == pytest.approx(d["contribution"].sum(),
                                                               abs=1e-12)


def test_a_measure_without_variation_is_skipped_with_one_note() -> None:
    p = _data()
    p["total_debt"] = 0.0
    with pytest.raises(ModelError, match="at least one measure must be estimable") as info:
        analyze(p)
    assert "no variation to model" in str(info.value)
    q = _data()
    q["market_equity"] = 0.0
    q.loc[q["total_debt"] == 0, "total_debt"] = 1.0  # market leverage 1 everywhere
    with pytest.raises(ModelError, match="got market_to_book constant"):
        analyze(q)  # market-to-book is then constant too: named, not fitted
    drivers = ("tangibility", "profitability", "earnings_volatility", "size")
    r = analyze(q, spec=ModelSpec(drivers=drivers))
    assert set(r.targets["measure"]) == {"book"}
    assert any("market: every firm-year has the same market leverage" in w
               for w in r.manifest["warnings"])
    assert r.targets["gap_z"].notna().all()


def test_leases_pushing_debt_above_assets_are_flagged_and_left_out_of_book() -> None:
    p = _data()
    p["lease_liabilities"] = 0.0
    p.loc[3, "lease_liabilities"] = p.loc[3, "total_assets"]
    r = analyze(p, spec=ModelSpec(leases_as_debt=True))
    key = (p.loc[3, "firm_id"], p.loc[3, "fiscal_year"])
    ex = r.exclusions.set_index(["firm_id", "fiscal_year"]).loc[[key]]
    assert list(ex["reason"]) == ["debt_above_assets_with_leases"]
    assert list(ex["measure"]) == ["book"]
    t = r.targets.set_index(["firm_id", "fiscal_year"]).loc[[key]]
    assert list(t["measure"]) == ["market"]
    assert "debt_above_assets_with_leases" in t["flags"].iloc[0]


def test_zero_debt_and_zero_market_equity_has_its_own_reason() -> None:
    p = _data()
    p.loc[5, ["total_debt", "market_equity"]] = 0.0
    p.loc[6, "market_equity"] = np.nan
    r = analyze(p)
    ex = r.exclusions[r.exclusions["measure"] == "market"].set_index("source_row")["reason"]
    assert ex.loc[6] == "no_market_value" and ex.loc[7] == "no_market_equity"
    counts = r.manifest["counts"]
    assert counts["measure_omissions"] == {"market:no_market_equity": 1,
                                           "market:no_market_value": 1}


def test_peer_digits_change_the_peers_not_the_model() -> None:
    p = _data(9)
    base = analyze(p, spec=ModelSpec(measures=("book",)))
    wide = analyze(p, spec=ModelSpec(measures=("book",), peer_digits=1))
    pd.testing.assert_frame_equal(base.coefficients, wide.coefficients)
    np.testing.assert_array_equal(base.targets["target"], wide.targets["target"])
    # one-digit peers: every firm of the year but itself
    per_year = p.groupby("fiscal_year").size()
    expected = wide.targets["fiscal_year"].map(per_year) - 1
    assert (wide.targets["peer_count"] == expected).all()
    assert (base.targets["peer_count"] < expected).all()
    coarse = analyze(p, spec=ModelSpec(measures=("book",), industry_digits=1))
    assert not np.allclose(coarse.targets["target"], base.targets["target"])


def test_debt_to_target_is_a_recapitalisation() -> None:
    p = _data(10)
    r = analyze(p)
    t = r.targets.merge(p[["firm_id", "fiscal_year", "total_debt", "total_assets",
                           "market_equity"]], on=["firm_id", "fiscal_year"])
    book, market = t[t["measure"] == "book"], t[t["measure"] == "market"]
    np.testing.assert_allclose(book["debt_to_target"],
                               book["target"] * book["total_assets"] - book["total_debt"],
                               rtol=1e-12)
    # market: debt plus market equity held fixed
    np.testing.assert_allclose(
        market["debt_to_target"],
        market["target"] * (market["total_debt"] + market["market_equity"])
        - market["total_debt"], rtol=1e-12)


def test_explain_answers_for_a_firm_year_alone_in_its_year(tmp_path) -> None:
    from typer.testing import CliRunner

    from levgap.cli import app

    p = _data(11)
    lone = p.iloc[[0]].copy()
    lone["fiscal_year"], lone["firm_id"] = 2030, "LONE"
    src = tmp_path / "panel.csv"
    pd.concat([p, lone], ignore_index=True).to_csv(src, index=False)
    out = tmp_path / "out"
    runner = CliRunner()
    r = runner.invoke(app, ["analyze", str(src), "--out", str(out), "--quiet", "--no-report"])
    assert r.exit_code == 0, r.output
    r = runner.invoke(app, ["explain", str(out), "LONE"])
    assert r.exit_code == 0, r.output
    assert "2030" in r.output and "Traceback" not in r.output
