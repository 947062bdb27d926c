"""``analyze``'s own output against brute-force recomputations from its tables and the panel.

Each check rebuilds a column of targets.csv or drivers.csv from first principles (loops over
rows, ``np.median``, ``np.quantile``, the normal distribution from ``scipy.stats``) and never
calls the helper that the pipeline uses, so that a bug in the code path ``analyze`` actually
takes cannot hide behind a unit test of a helper it does not call.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from _synthetic import panel
from scipy import stats

from levgap.config import ModelSpec
from levgap.pipeline import analyze

KEY = ["firm_id", "fiscal_year"]
DRIVERS = ("tangibility", "profitability", "earnings_volatility", "size", "market_to_book")
# Small industries: "5001" has one firm (no peer of its own: it looks across its parent
# "5000"), "5012" two firms (each the other's only peer), "5023" four (pooled, but with peers).
SMALL = (("5001", 1, 0.05), ("5012", 2, -0.03), ("5023", 4, 0.04))


def _data(seed: int = 31) -> pd.DataFrame:
    p = panel(seed, industries=6, firms=(5, 9), years=6, small=SMALL)
    p = p.drop(columns=["true_target", "spread"])
    rng = np.random.default_rng(seed)
    # Years differ in their spread of profitability, so limits pooled over years differ from
    # each year's own; and a few planted outliers, so that switching winsorising off shows.
    scale = 1.0 + 0.6 * (p["fiscal_year"] - p["fiscal_year"].min())
    p["ebitda"] = p["total_assets"] * (0.1 + (p["ebitda"] / p["total_assets"] - 0.1) * scale)
    out = rng.choice(len(p), 6, replace=False)
    p.loc[out[:3], "ebitda"] = -2.5 * p.loc[out[:3], "total_assets"]
    p.loc[out[3:], "ppe_net"] = 0.999 * p.loc[out[3:], "total_assets"]
    # some rows without market equity: market_to_book imputed, market leverage left out
    p.loc[rng.choice(len(p), 8, replace=False), "market_equity"] = np.nan
    return p


@pytest.fixture(scope="module")
def data() -> pd.DataFrame:
    return _data()


@pytest.fixture(scope="module")
def run(data):
    return analyze(data)


def _wide(result, measure: str) -> tuple[pd.DataFrame, np.ndarray, np.ndarray]:
    """The measure's targets rows and, aligned with them, the drivers' firm and peer values."""
    t = result.targets[result.targets["measure"] == measure].reset_index(drop=True)
    d = result.drivers[result.drivers["measure"] == measure]
    idx = pd.MultiIndex.from_frame(t[KEY])
    firm = d.pivot(index=KEY, columns="driver", values="firm_value").reindex(idx)
    peer = d.pivot(index=KEY, columns="driver", values="peer_value").reindex(idx)
    names = list(result.manifest["drivers"])
    return t, firm[names].to_numpy(), peer[names].to_numpy()


# -- peer medians (leave-one-out) --------------------------------------------------------


def _peer_rows(t: pd.DataFrame, pooled: list[dict]) -> list[np.ndarray]:
    """Each row's peers by DESIGN.md's fallback: the firm's industry in that year without the
    firm; else its parent's member industries (and the small industries pooled toward the
    same parent) in that year; else the whole year; else every other firm-year."""
    parent_of = {p["industry"]: p["parent"] for p in pooled}
    members = {p["parent"]: set(p["members"]) for p in pooled}
    ind, year = t["industry"].to_numpy(), t["fiscal_year"].to_numpy()
    out = []
    for i in range(len(t)):
        other = np.arange(len(t)) != i
        same_year = other & (year == year[i])
        steps = [same_year & (ind == ind[i])]
        if ind[i] in parent_of:
            family = members[parent_of[ind[i]]] | {k for k, v in parent_of.items()
                                                     if v == parent_of[ind[i]]}
            steps.append(same_year & np.isin(ind, list(family)))
        steps += [same_year, other]
        out.append(next((np.flatnonzero(s) for s in steps if s.any()), np.empty(0, int)))
    return out


@pytest.mark.parametrize("measure", ["book", "market"])
def test_peer_median_profile_and_count_equal_brute_force(run, measure: str) -> None:
    t, X, X_peer = _wide(run, measure)
    peers = _peer_rows(t, run.manifest["pooled_industries"])
    y = t["actual"].to_numpy()
    med = np.array([np.median(y[p]) for p in peers])
    prof = np.array([np.median(X[p], axis=0) for p in peers])
    # np.median takes the mean of the two middle values of an even group: the definition.
    np.testing.assert_allclose(t["peer_median"], med, rtol=0, atol=1e-15)
    np.testing.assert_allclose(X_peer, prof, rtol=0, atol=1e-15)
    np.testing.assert_array_equal(t["peer_count"], [len(p) for p in peers])
    # the panel exercises every case: odd and even groups, a firm with one peer, a lone firm
    sizes = {len(p) for p in peers}
    assert {1} <= sizes and any(s % 2 for s in sizes) and any(s % 2 == 0 for s in sizes)
    lone = t["industry"] == "5001"
    assert lone.any() and (t.loc[lone, "peer_count"] > 1).all()


# -- winsorising by fiscal year -----------------------------------------------------------


def _raw_drivers(p: pd.DataFrame) -> pd.DataFrame:
    """The drivers by DESIGN.md's definitions, with the volatility and market-to-book
    imputation done by pandas group medians: the industry-year median, else the year's, else
    (a year in which no firm has the value: the first years of the panel for volatility) the
    nearest earlier year's, else the nearest later year's."""
    a = p["total_assets"]
    prof = p["ebitda"] / a
    out = pd.DataFrame({"tangibility": p["ppe_net"] / a, "profitability": prof,
                        "size": np.log(a),
                        "market_to_book": (a - p["book_equity"] + p["market_equity"]) / a})
    vol = np.full(len(p), np.nan)
    for i in range(len(p)):
        w = (p["firm_id"] == p["firm_id"].iloc[i]) & p["fiscal_year"].between(
            p["fiscal_year"].iloc[i] - 4, p["fiscal_year"].iloc[i])
        if w.sum() >= 3:
            vol[i] = np.std(prof[w], ddof=1)
    out["earnings_volatility"] = vol
    for col in ("earnings_volatility", "market_to_book"):
        by_iy = out[col].groupby([p["industry"], p["fiscal_year"]]).transform("median")
        by_year = out[col].groupby(p["fiscal_year"]).median().dropna()
        years = by_year.index.to_numpy()
        near = {y: by_year[years[years <= y].max() if (years <= y).any() else years.min()]
                for y in p["fiscal_year"].unique()}
        out[col] = out[col].fillna(by_iy).fillna(p["fiscal_year"].map(near))
    return out


def _winsorised(raw: pd.DataFrame, year: pd.Series, lo: float, hi: float) -> pd.DataFrame:
    out = raw.copy()
    for y in year.unique():
        sel = (year == y).to_numpy()
        for col in raw:
            q = np.quantile(raw.loc[sel, col], [lo, hi])  # linear interpolation
            out.loc[sel, col] = raw.loc[sel, col].clip(q[0], q[1])
    return out


def test_drivers_are_winsorised_within_each_fiscal_year(run, data) -> None:
    t, X, _ = _wide(run, "book")
    p = data.set_index(KEY).loc[pd.MultiIndex.from_frame(t[KEY])].reset_index()
    raw = _raw_drivers(p)
    expected = _winsorised(raw, p["fiscal_year"], 0.01, 0.99)[list(DRIVERS)].to_numpy()
    np.testing.assert_allclose(X, expected, rtol=1e-12, atol=1e-14)
    # and it did something: each year's extremes moved, the planted outliers among them
    moved = ~np.isclose(raw[list(DRIVERS)].to_numpy(), expected, rtol=0, atol=0)
    assert moved.any(axis=1).sum() >= 2 * p["fiscal_year"].nunique()
    flagged = t["flags"].str.contains("winsorised").to_numpy()
    np.testing.assert_array_equal(flagged, moved.any(axis=1))


def test_winsorising_switched_off_keeps_the_raw_drivers(data) -> None:
    r = analyze(data, spec=ModelSpec(measures=("book",), model="linear", winsorize=(0.0, 1.0)))
    t, X, _ = _wide(r, "book")
    p = data.set_index(KEY).loc[pd.MultiIndex.from_frame(t[KEY])].reset_index()
    np.testing.assert_allclose(X, _raw_drivers(p)[list(DRIVERS)].to_numpy(), rtol=1e-12,
                               atol=1e-14)
    assert not t["flags"].str.contains("winsorised").any()


# -- folds: grouped by firm ---------------------------------------------------------------


def test_every_firm_sits_in_one_fold_and_folds_are_balanced(run) -> None:
    for _, t in run.targets.groupby("measure"):
        assert (t.groupby("firm_id")["fold"].nunique() == 1).all()
        per_fold = t.groupby("fold")["firm_id"].nunique()
        assert len(per_fold) == 5 and per_fold.max() - per_fold.min() <= 6


@pytest.mark.parametrize("model", ["fractional", "linear"])
def test_a_firms_own_debt_never_moves_its_own_target(data, model: str) -> None:
    # Pooling "parent" keeps the fit's structure independent of the outcome (the shrunk
    # weights depend on every firm's residuals), so only the folds can carry a firm's own
    # leverage into its target.
    spec = ModelSpec(measures=("book",), model=model, pooling="parent")
    before = analyze(data, spec=spec).targets.set_index(KEY)
    firm = data["firm_id"].iloc[40]
    changed = data.copy()
    mine = changed["firm_id"] == firm
    changed.loc[mine, "total_debt"] = np.minimum(changed.loc[mine, "total_debt"]
                                                 + 0.3 * changed.loc[mine, "total_assets"],
                                                 0.95 * changed.loc[mine, "total_assets"])
    after = analyze(changed, spec=spec).targets.set_index(KEY)
    own = before.index.get_level_values("firm_id") == firm
    assert (after.loc[own, "actual"] > before.loc[own, "actual"] + 0.05).all()
    np.testing.assert_allclose(after.loc[own, "target"], before.loc[own, "target"],
                               rtol=0, atol=1e-9)
    # the firm's debt did reach the other firms' targets (it is in their training folds)
    assert np.abs(after.loc[~own, "target"] - before.loc[~own, "target"]).max() > 1e-6


# -- band and gap_z -----------------------------------------------------------------------


def _band_brute(t: pd.DataFrame, coverage: float, prior: float) -> dict[str, np.ndarray]:
    """DESIGN.md's location-scale band from the targets table alone: each industry's
    interdecile range of the cross-fitted residuals in standard-deviation units, shrunk toward
    the pooled one with weight n / (n + prior) on the log scale; the quantiles of the scaled
    residuals at the coverage; the band clipped to [0, 1]."""
    resid = (t["actual"] - t["target"]).to_numpy()
    ind = t["industry"].to_numpy()
    idr = 2.0 * stats.norm.ppf(0.9)  # interdecile range of a standard normal

    def spread(r: np.ndarray) -> float:
        return float(np.quantile(r, 0.9) - np.quantile(r, 0.1)) / idr

    pooled = spread(resid)
    s = np.empty(len(t))
    for g in np.unique(ind):
        sel = ind == g
        w = sel.sum() / (sel.sum() + prior)
        s[sel] = np.exp(w * np.log(spread(resid[sel])) + (1 - w) * np.log(pooled))
    a = (1.0 - coverage) / 2.0
    q_lo, q_hi = np.quantile(resid / s, a), np.quantile(resid / s, 1.0 - a)
    target = t["target"].to_numpy()
    low = np.clip(target + s * q_lo, 0.0, 1.0)
    high = np.clip(target + s * q_hi, 0.0, 1.0)
    actual = t["actual"].to_numpy()
    status = np.where(actual > high, "over", np.where(actual < low, "under", "within"))
    return {"low": low, "high": high, "gap_z": resid / s, "status": status, "scale": s}


@pytest.mark.parametrize("measure", ["book", "market"])
def test_band_limits_status_and_gap_z_equal_brute_force(run, measure: str) -> None:
    t = run.targets[run.targets["measure"] == measure]
    ref = _band_brute(t, 0.8, 10.0)
    np.testing.assert_allclose(t["band_low"], ref["low"], rtol=0, atol=1e-12)
    np.testing.assert_allclose(t["band_high"], ref["high"], rtol=0, atol=1e-12)
    np.testing.assert_allclose(t["gap_z"], ref["gap_z"], rtol=1e-10, atol=0)
    np.testing.assert_array_equal(t["status"], ref["status"])
    # industries differ in scale, so a pooled scale would not pass the checks above
    assert np.ptp(np.log(ref["scale"])) > 0.1


def test_band_follows_the_configured_coverage(data) -> None:
    spec = ModelSpec(measures=("book",), model="linear", coverage=0.9, band_prior_rows=4.0)
    t = analyze(data, spec=spec).targets
    ref = _band_brute(t, 0.9, 4.0)
    np.testing.assert_allclose(t["band_low"], ref["low"], rtol=0, atol=1e-12)
    np.testing.assert_allclose(t["band_high"], ref["high"], rtol=0, atol=1e-12)
    np.testing.assert_allclose(t["gap_z"], ref["gap_z"], rtol=1e-10, atol=0)
    inside = (t["status"] == "within").mean()
    assert 0.88 <= inside <= 0.92


# -- debt to target -----------------------------------------------------------------------


def _money(t: pd.DataFrame, data: pd.DataFrame) -> pd.DataFrame:
    cols = ["total_debt", "total_assets", "market_equity"]
    return data.set_index(KEY)[cols].reindex(pd.MultiIndex.from_frame(t[KEY])).reset_index()


def test_book_debt_to_target_keeps_assets_fixed(run, data) -> None:
    # DESIGN.md, output contract: a recapitalisation; book leverage with assets fixed,
    # so the debt at target is D* = T * A.
    t = run.targets[run.targets["measure"] == "book"].reset_index(drop=True)
    m = _money(t, data)
    expected = t["target"] * m["total_assets"] - m["total_debt"]
    np.testing.assert_allclose(t["debt_to_target"], expected, rtol=1e-12, atol=1e-9)


def test_market_debt_to_target_keeps_debt_plus_market_equity_fixed(run, data) -> None:
    # DESIGN.md, output contract: a recapitalisation; market leverage with debt plus market
    # equity fixed, so the debt at target is D* = T * (D + E).
    t = run.targets[run.targets["measure"] == "market"].reset_index(drop=True)
    m = _money(t, data)
    expected = t["target"] * (m["total_debt"] + m["market_equity"]) - m["total_debt"]
    np.testing.assert_allclose(t["debt_to_target"], expected, rtol=1e-12, atol=1e-9)
