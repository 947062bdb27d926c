"""Specifications: effects, derived and input drivers, the estimation sample and
``levgap.estimate``, each against a direct computation."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm
from _synthetic import panel as synthetic_panel

import levgap
from levgap.config import ModelSpec, RunConfig
from levgap.errors import ConfigError, ModelError, SchemaError
from levgap.estimation import estimate, sample_of
from levgap.features import build_features
from levgap.models.famamacbeth import fit_famamacbeth
from levgap.models.within import fit_within
from levgap.pipeline import analyze


@pytest.fixture(scope="module")
def panel() -> pd.DataFrame:
    p = synthetic_panel(31, industries=8, firms=(8, 12), years=6)
    rng = np.random.default_rng(31)
    p["revenue"] = p["total_assets"] * rng.uniform(0.5, 1.5, len(p))
    p.loc[rng.random(len(p)) < 0.05, "revenue"] = np.nan
    p["dividends_paid"] = np.where(rng.random(len(p)) < 0.4, rng.uniform(1, 5, len(p)),
                                   np.where(rng.random(len(p)) < 0.5, 0.0, np.nan))
    p["employees"] = rng.integers(50, 5000, len(p)).astype(float)
    return p.drop(columns=["true_target", "spread"])


def test_refusals_name_the_option() -> None:
    with pytest.raises(ConfigError, match=r"effects must be one of \['industry,year', "
                                          r"'firm,year', 'year', 'none'\]; got 'firm'"):
        ModelSpec(effects="firm")
    with pytest.raises(ConfigError, match="industry_median_leverage with industry effects"):
        ModelSpec(drivers=("tangibility", "industry_median_leverage"))
    with pytest.raises(ConfigError, match="must not include firm with the fama-macbeth"):
        ModelSpec(effects="firm,year", estimator="fama-macbeth")
    with pytest.raises(ConfigError, match="input_drivers must name numeric columns"):
        ModelSpec(input_drivers=("book",))
    assert ModelSpec(effects=" Year ").effects == "year"
    assert ModelSpec(effects="none").absorbs == ()


def test_analyze_refuses_what_cannot_give_a_target(panel: pd.DataFrame) -> None:
    with pytest.raises(ConfigError, match="levgap estimate PANEL --effects firm,year"):
        analyze(panel, spec=ModelSpec(effects="firm,year"))
    with pytest.raises(ConfigError, match="--estimator fama-macbeth"):
        analyze(panel, spec=ModelSpec(estimator="fama-macbeth", effects="year"))


def _brute_loo(f: pd.DataFrame, measure: str) -> np.ndarray:
    y = f[measure].to_numpy(dtype=float)
    out = np.empty(len(f))
    for i in range(len(f)):
        same = ((f["industry"] == f["industry"].iloc[i])
                & (f["fiscal_year"] == f["fiscal_year"].iloc[i])).to_numpy(copy=True)
        same[i] = False
        others = y[same & np.isfinite(y)]
        if len(others) == 0:
            year = (f["fiscal_year"] == f["fiscal_year"].iloc[i]).to_numpy(copy=True).copy()
            year[i] = False
            others = y[year & np.isfinite(y)]
        out[i] = np.median(others)
    return out


def test_industry_median_leverage_is_leave_one_out_per_measure(panel: pd.DataFrame) -> None:
    p = panel.copy()
    p.loc[p.index[::7], "market_equity"] = np.nan  # rows without the market measure
    lone = p["industry"] == p["industry"].iloc[0]
    p.loc[p.index[lone & (p["fiscal_year"] == 2010)][0], "industry"] = "9999"  # alone
    p["source_row"], p["flags"] = np.arange(1, len(p) + 1), ""
    spec = ModelSpec(effects="year", drivers=("tangibility", "industry_median_leverage"))
    f = build_features(p, spec).frame
    for m in ("book", "market"):
        np.testing.assert_allclose(f[f"industry_median_leverage_{m}"], _brute_loo(f, m),
                                   rtol=0, atol=1e-15)
    alone = (f["industry"] == "9999").to_numpy()
    assert f.loc[alone, "flags"].str.contains("industry_median_imputed").all()
    assert not f.loc[~alone, "flags"].str.contains("industry_median_imputed").any()
    # the model uses each measure's own median
    a = analyze(p, spec=ModelSpec(effects="year", model="linear",
                                  drivers=("tangibility", "industry_median_leverage")),
                sample=True)
    s = a.sample
    d = a.drivers[a.drivers["driver"] == "industry_median_leverage"]
    for m in ("book", "market"):
        got = d[d["measure"] == m].set_index(["firm_id", "fiscal_year"])["firm_value"]
        want = s[s[f"in_{m}"] == 1].set_index(["firm_id", "fiscal_year"])[
            f"industry_median_leverage_{m}"]
        np.testing.assert_allclose(got.loc[want.index], want, rtol=0, atol=0)


def test_derived_drivers_and_their_ledger(panel: pd.DataFrame) -> None:
    spec = ModelSpec(model="linear", drivers=("tangibility", "log_revenue", "dividend_payer"),
                     input_drivers=("employees",))
    a = analyze(panel, spec=spec, sample=True)
    s = a.sample.set_index(["firm_id", "fiscal_year"])
    p = panel.set_index(["firm_id", "fiscal_year"]).loc[s.index]
    np.testing.assert_allclose(s["log_revenue_raw"], np.log(p["revenue"]))
    paid = p["dividends_paid"].to_numpy()
    np.testing.assert_array_equal(s["dividend_payer"], np.where(paid > 0, 1.0, 0.0))
    assert (s["dividend_payer"].isin([0.0, 1.0])).all()  # an indicator is never winsorised
    missing = np.isnan(paid)
    assert s["flags"].str.contains("dividends_missing").to_numpy().tolist() == missing.tolist()
    np.testing.assert_allclose(s["employees_raw"], p["employees"])
    # every input row is used or in the ledger: rows without revenue > 0 as driver_missing
    no_rev = panel["revenue"].isna()
    led = a.exclusions[a.exclusions["reason"] == "driver_missing"]
    assert len(led) == no_rev.sum() and (led["measure"] == "").all()
    assert led["detail"].str.contains("log_revenue needs revenue above zero").all()
    assert len(s) + len(a.exclusions[a.exclusions["measure"] == ""]) == len(panel)
    terms = a.coefficients[a.coefficients["measure"] == "book"]["term"].tolist()
    assert terms == ["tangibility", "log_revenue", "dividend_payer", "employees"]
    built = a.manifest["specification"]["built"]
    assert built["employees"].startswith("the input column employees, as given")
    assert "dividends_paid > 0" in built["dividend_payer"]


def test_input_drivers_from_a_file(tmp_path, panel: pd.DataFrame) -> None:
    p = panel.copy()
    p = p.rename(columns={"employees": "Head Count"})
    p["Head Count"] = p["Head Count"].astype(object)
    p.loc[p.index[3], "Head Count"] = "n.a."
    path = tmp_path / "p.csv"
    p.to_csv(path, index=False)
    cfg = RunConfig(model=ModelSpec(model="linear", measures=("book",),
                                    input_drivers=("head_count",)))
    with pytest.warns(levgap.DataWarning, match="input driver head_count must be a number"):
        data = levgap.read_panel(path, config=cfg)
    assert "head_count" in data.data and "Head Count" not in str(data.warnings)
    a = analyze(data, config=cfg)
    assert (a.exclusions["reason"] == "driver_missing").sum() == 1
    bad = RunConfig(model=ModelSpec(input_drivers=("staff",)))
    with pytest.raises(SchemaError, match=r"p.csv: \[model\] input_drivers names 'staff', "
                                          "which must match one header"):
        levgap.read_panel(path, config=bad)


def test_effects_year_and_none(panel: pd.DataFrame) -> None:
    for effects, absorbed in (("year", {"year"}), ("none", set())):
        a = analyze(panel, spec=ModelSpec(model="linear", measures=("book",),
                                          effects=effects), sample=True)
        assert set(a.manifest["specification"]["absorbed"]) == absorbed
        s = a.sample
        assert (s["effect_group"] == "(all industries)").all()
        X = s[list(a.manifest["drivers"])].to_numpy()
        Z = [np.ones(len(s)), X]
        if "year" in absorbed:
            Z.append(pd.get_dummies(pd.Categorical(s["fiscal_year"]), drop_first=True,
                                    dtype=float).to_numpy())
        ref = sm.OLS(s["book"].to_numpy(), np.column_stack(Z)).fit(
            cov_type="cluster", cov_kwds={"groups": pd.factorize(s["firm_id"])[0]})
        got = a.coefficients.set_index("term")
        np.testing.assert_allclose(got["estimate"], ref.params[1:X.shape[1] + 1], atol=1e-8)
        np.testing.assert_allclose(got["std_error"], ref.bse[1:X.shape[1] + 1], atol=1e-8)


def test_the_sample_reproduces_the_estimates(panel: pd.DataFrame) -> None:
    """sample.csv holds the exact rows and driver values: statsmodels on it with explicit
    industry and year dummies gives the run's coefficients (no pooled industry here)."""
    a = analyze(panel, spec=ModelSpec(model="linear", lag_drivers=True), sample=True)
    s = a.sample
    drivers = list(a.manifest["drivers"])
    for m in ("book", "market"):
        rows = s[s[f"in_{m}"] == 1]
        Z = np.column_stack([np.ones(len(rows)), rows[drivers].to_numpy(),
                             pd.get_dummies(pd.Categorical(rows["effect_group"]),
                                            drop_first=True, dtype=float).to_numpy(),
                             pd.get_dummies(pd.Categorical(rows["fiscal_year"]),
                                            drop_first=True, dtype=float).to_numpy()])
        ref = sm.OLS(rows[m].to_numpy(), Z).fit()
        got = a.coefficients[a.coefficients["measure"] == m]["estimate"].to_numpy()
        np.testing.assert_allclose(got, ref.params[1:len(drivers) + 1], atol=1e-8)
    # lagged drivers: the raw values are lagged alike (the previous year's statements)
    prev = panel.set_index(["firm_id", "fiscal_year"])
    key = list(zip(s["firm_id"], s["fiscal_year"] - 1, strict=True))
    np.testing.assert_allclose(s["tangibility_raw"],
                               (prev["ppe_net"] / prev["total_assets"]).loc[key].to_numpy())
    assert (a.exclusions["reason"] == "no_prior_year").sum() == panel["firm_id"].nunique()


def test_estimate_runs_each_estimator(panel: pd.DataFrame) -> None:
    # size grows by the same step every year in this panel: the firm and year effects
    # absorb it, and the within estimator says so
    with pytest.raises(ModelError, match="got size constant within every firm"):
        estimate(panel, spec=ModelSpec(effects="firm,year", measures=("book",)))
    drivers = ("tangibility", "profitability", "earnings_volatility", "market_to_book")
    fe = estimate(panel, spec=ModelSpec(effects="firm,year", measures=("book",),
                                        drivers=drivers), sample=True)
    s = fe.sample
    X = s[list(fe.manifest["drivers"])].to_numpy()
    ref = fit_within(s["book"].to_numpy(), X, firm=s["firm_id"].to_numpy(),
                     year=s["fiscal_year"].to_numpy(), clusters=(s["firm_id"].to_numpy(),))
    np.testing.assert_allclose(fe.coefficients["estimate"], ref.coef, rtol=0, atol=1e-13)
    np.testing.assert_allclose(fe.coefficients["std_error"], ref.std_error, rtol=0, atol=1e-13)
    assert fe.model_fit["model"].tolist() == ["within"]
    assert np.isnan(fe.model_fit["r2_oos"]).all()
    assert fe.manifest["specification"]["absorbed"]["firm"]["levels"] == s["firm_id"].nunique()
    fm = estimate(panel, spec=ModelSpec(estimator="fama-macbeth", effects="industry,year",
                                        measures=("book",), drivers=drivers))
    ref = fit_famamacbeth(s["book"].to_numpy(), X, year=s["fiscal_year"].to_numpy(),
                          industry=s["industry"].to_numpy(), names=fe.manifest["drivers"])
    np.testing.assert_allclose(fm.coefficients["estimate"], ref.coef, rtol=0, atol=1e-12)
    assert fm.coefficients["n_years"].tolist() == ref.columns["n_years"].tolist()
    assert {"std_error_plain", "std_error_nw", "nw_lags"} <= set(fm.coefficients)
    pooled = estimate(panel, spec=ModelSpec(model="linear", measures=("book",)))
    full = analyze(panel, spec=ModelSpec(model="linear", measures=("book",)))
    np.testing.assert_allclose(pooled.coefficients["estimate"],
                               full.coefficients["estimate"], rtol=0, atol=1e-12)
    assert pooled.model_fit["r2_oos"].iloc[0] == pytest.approx(
        full.model_fit["r2_oos"].iloc[0], abs=1e-12)
    assert len(sample_of(panel, RunConfig(model=ModelSpec(measures=("book",))))) == len(s)


def test_expected_signs_in_coefficients(panel: pd.DataFrame) -> None:
    rng = np.random.default_rng(5)
    p = panel.assign(rd_expense=np.where(rng.random(len(panel)) < 0.3, np.nan,
                                         panel["total_assets"] * rng.uniform(0, 0.1,
                                                                             len(panel))))
    a = analyze(p, spec=ModelSpec(model="linear", measures=("book",),
                                      drivers=("tangibility", "profitability", "size",
                                               "rd_intensity")))
    c = a.coefficients.set_index("term")
    assert c.loc["tangibility", "expected_sign"] == "positive"
    assert c.loc["profitability", "expected_sign"] == "negative"
    assert c.loc["rd_missing", "expected_sign"] == "" and c.loc["rd_missing", "agrees"] == ""
    for term in ("tangibility", "profitability", "size"):
        want = "yes" if (c.loc[term, "estimate"] > 0) == (
            c.loc[term, "expected_sign"] == "positive") else "no"
        assert c.loc[term, "agrees"] == want
    assert "Frank and Goyal (2009)" in c.loc["tangibility", "sign_source"]
    assert "not reliable for book leverage" in c.loc["size", "sign_source"]


def test_saved_model_scores_with_the_industry_median(panel: pd.DataFrame, tmp_path) -> None:
    spec = ModelSpec(model="linear", effects="year", measures=("book",),
                     drivers=("tangibility", "profitability", "industry_median_leverage"))
    a = analyze(panel, spec=spec, sample=True)
    a.write(tmp_path / "run", report=False)
    model = levgap.load_model(tmp_path / "run")
    rows = panel.head(5).copy()
    s = a.sample.set_index(["firm_id", "fiscal_year"])
    rows["industry_median_leverage"] = s.loc[list(zip(rows["firm_id"], rows["fiscal_year"],
                                                      strict=True)),
                                             "industry_median_leverage_book"].to_numpy()
    scored = model.score(rows)
    t = a.targets.set_index(["firm_id", "fiscal_year"])
    want = t.loc[list(zip(rows["firm_id"], rows["fiscal_year"], strict=True)), "target_full"]
    np.testing.assert_allclose(scored["target"], want.to_numpy(), atol=1e-12)
    new = rows.drop(columns="industry_median_leverage").assign(firm_id="NEW")
    got = model.score(new)["industry_median_leverage"].to_numpy()
    y = panel["total_debt"] / panel["total_assets"]
    for i, r in enumerate(new.itertuples()):
        cell = (panel["industry"] == r.industry) & (panel["fiscal_year"] == r.fiscal_year)
        assert got[i] == pytest.approx(float(np.median(y[cell])))
    with pytest.raises(ModelError):
        estimate(panel.head(3), spec=ModelSpec(estimator="fama-macbeth", effects="year"))


def test_what_each_measure_absorbed(panel: pd.DataFrame) -> None:
    """A measure observed in one year absorbs no year effect, whatever the panel spans."""
    from levgap.report.publication import RunTables, comparison_table

    p = panel.copy()
    p.loc[p["fiscal_year"] < p["fiscal_year"].max(), "market_equity"] = np.nan
    a = analyze(p, spec=ModelSpec(model="linear"))
    spec = a.manifest["specification"]
    assert spec["absorbed_by_measure"]["market"]["year"]["levels"] == 1
    assert spec["absorbed_by_measure"]["book"]["year"]["levels"] == p["fiscal_year"].nunique()
    own = spec["absorbed_by_measure"]["book"]["industry"]
    assert own["own"] + own["pooled"] == p["industry"].nunique()
    md = comparison_table([RunTables(a.coefficients, a.model_fit, a.manifest)],
                          fmt="markdown")
    assert f"| Year effects |  | {p['fiscal_year'].nunique()} years | 1 year, none absorbed |" \
        in md


def test_report_firm_table_shows_each_measures_own_industry_median(panel: pd.DataFrame
                                                                     ) -> None:
    """The report's firm table keeps one firm value per driver; a measure-specific driver is
    overridden per measure (``fo``), so the market view never shows the book median."""
    from levgap.report.universe import firm_payload

    a = analyze(panel, spec=ModelSpec(effects="year", model="linear",
                                      drivers=("tangibility", "industry_median_leverage")))
    year = int(a.targets["fiscal_year"].max())
    pay = firm_payload(a.targets, a.drivers, a.manifest, year)
    k, j = len(pay["drivers"]), pay["drivers"].index("industry_median_leverage")
    scale = 10.0 ** pay["dec"][j]
    from levgap.report.universe import unpack

    fvals = unpack(pay["fv"])
    d = a.drivers[(a.drivers["fiscal_year"] == year)
                  & (a.drivers["driver"] == "industry_median_leverage")]
    differs = 0
    for m in ("book", "market"):
        over = dict(zip(pay["m"][m]["fo"][::2], pay["m"][m]["fo"][1::2], strict=True))
        for r in d[d["measure"] == m].itertuples():
            at = pay["ids"].index(str(r.firm_id)) * k + j
            shown = over.get(at, fvals[at])  # what universe.js shows
            assert shown == round(r.firm_value * scale), (m, r.firm_id)
            differs += at in over
    assert differs > 0  # the two measures' medians differ somewhere


@pytest.mark.parametrize(("effects", "said"), [
    ("year", "year effects are absorbed and not shown"),
    ("none", "no fixed effects are absorbed"),
])
def test_report_says_what_the_fit_absorbed(panel: pd.DataFrame, effects: str,
                                           said: str) -> None:
    from levgap.report.html import render_report

    a = analyze(panel, spec=ModelSpec(effects=effects, model="linear",
                                      drivers=("tangibility", "profitability")))
    page = render_report(a.tables(), a.manifest)
    assert said in page and "industry and year effects are absorbed" not in page


def test_no_raw_value_for_a_driver_left_as_built(panel: pd.DataFrame) -> None:
    """drivers.csv gives a raw value only where winsorising changed the driver: never for the
    industry median leverage (not winsorised; each measure has its own)."""
    a = analyze(panel, spec=ModelSpec(effects="year", model="linear", drivers=(
        "tangibility", "profitability", "industry_median_leverage")))
    d = a.drivers
    median = d[d["driver"] == "industry_median_leverage"]
    assert median["raw_value"].isna().all()
    assert d.loc[d["driver"] == "profitability", "raw_value"].notna().any()  # others keep it


def test_saved_model_raw_median_is_the_measures_own(panel: pd.DataFrame, tmp_path) -> None:
    spec = ModelSpec(model="linear", effects="year",
                     drivers=("tangibility", "industry_median_leverage"))
    a = analyze(panel, spec=spec)
    a.write(tmp_path / "run", report=False)
    scored = levgap.load_model(tmp_path / "run").score(panel.head(6).assign(firm_id="NEW"))
    col = "industry_median_leverage"
    np.testing.assert_array_equal(scored[col + "_raw"], scored[col])
    by = scored.pivot_table(index="fiscal_year", columns="measure", values=col)
    assert (by["book"] != by["market"]).any()  # the market rows carry the market median
