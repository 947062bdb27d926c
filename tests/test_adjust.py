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
from levgap.models.adjust import BIAS, ESTIMATORS, expected_paths, half_life, prepare


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
    # lambda >= 1 overshoots: ln(1 - lambda) is undefined, so no half-life (not 0 years).
    assert np.isinf(half_life(-0.1)) and np.isnan(half_life(1.2)) and np.isnan(half_life(1.0))


def _oscillating(direction: float) -> pd.DataFrame:
    """Firms whose leverage jumps past (direction 1) or away from (direction -1) a target of
    0.3 each year: speed about 2 (overshoot) or about -0.2 (no adjustment)."""
    rng = np.random.default_rng(5)
    firms, years = 30, 6
    sign = np.tile(np.where(np.arange(years) % 2 == 0, -1.0, 1.0), firms)
    if direction > 0:
        actual = 0.3 + 0.1 * sign + rng.normal(0, 0.005, firms * years)
    else:
        start = rng.uniform(-0.05, 0.05, firms)  # each gap grows by a fifth a year
        actual = 0.3 + (start[:, None] * 1.2 ** np.arange(years)).ravel()
    return pd.DataFrame({"firm_id": np.repeat([f"f{i}" for i in range(firms)], years),
                         "fiscal_year": np.tile(np.arange(2000, 2000 + years), firms),
                         "measure": "book", "actual": actual, "target": 0.3})


def test_half_life_blank_with_a_note_when_the_speed_overshoots_or_is_not_positive() -> None:
    from rich.console import Console

    from levgap.cli.research import _adjust_table

    over = speed_of_adjustment(_oscillating(1.0))
    pooled = over.table.set_index("estimator").loc["pooled"]
    assert pooled["speed"] > 1 and np.isnan(pooled["half_life"])
    assert any("pooled" in n and "overshoots (lambda >= 1" in n for n in over.notes)
    con = Console(width=200, record=True)
    con.print(_adjust_table(over.table))
    row = next(line for line in con.export_text().splitlines() if "pooled" in line)
    assert "n/a" in row and " 0.0 " not in row
    away = speed_of_adjustment(_oscillating(-1.0))
    pooled = away.table.set_index("estimator").loc["pooled"]
    assert pooled["speed"] <= 0 and np.isnan(pooled["half_life"])
    assert any("pooled" in n and "no adjustment" in n for n in away.notes)


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


# -- mutation survivors


def _hand_panel() -> tuple[np.ndarray, ...]:
    """Six firms, 2000-2009, unbalanced: b lacks 2004, c starts in 2003, d has no target in
    2003 and 2008, e no leverage in 2002; rows shuffled except firm a's 2000 first (it is
    the previous year of another row)."""
    rng = np.random.default_rng(20261202)
    rows = []
    for i, f in enumerate("abcdef"):
        L = 0.2 + 0.05 * i
        for y in range(2000, 2010):
            tg = 0.25 + 0.15 * rng.uniform(-1, 1) + 0.02 * i
            L = L + 0.3 * (tg - L) + 0.01 * i + rng.normal(0, 0.01) if y > 2000 else L
            rows.append((f, y, L, tg))
    frame = pd.DataFrame(rows, columns=["firm", "year", "lev", "tgt"])
    frame = frame[~(((frame.firm == "b") & (frame.year == 2004))
                    | ((frame.firm == "c") & (frame.year < 2003)))]
    frame.loc[(frame.firm == "d") & frame.year.isin([2003, 2008]), "tgt"] = np.nan
    frame.loc[(frame.firm == "e") & (frame.year == 2002), "lev"] = np.nan
    order = np.concatenate([[0], 1 + rng.permutation(len(frame) - 1)])
    frame = frame.iloc[order]
    return (frame["firm"].to_numpy(), frame["year"].to_numpy(), frame["lev"].to_numpy(),
            frame["tgt"].to_numpy())


def _hand_rows(firm, year, lev, tgt, k: int) -> tuple[list, ...]:
    """By dictionary look-up: (firm, dL, gap) of firm-years with the previous year and, for
    ``k > 0``, (firm, y, r, z) of the k-year long difference (``z`` the gap at t - k)."""
    L = {(f, y): v for f, y, v in zip(firm, year, lev, strict=True)}
    T = {(f, y): v for f, y, v in zip(firm, year, tgt, strict=True)}

    def d_and_gap(f, y):
        prev = L.get((f, y - 1), np.nan)
        return L.get((f, y), np.nan) - prev, T.get((f, y), np.nan) - prev

    out = []
    for f, y in sorted(L):
        dl, gp = d_and_gap(f, y)
        if k == 0 and np.isfinite(dl) and np.isfinite(gp):
            out.append((f, dl, gp))
        if k > 0:
            dlk, gpk = d_and_gap(f, y - k)
            if np.isfinite([dl, gp, dlk, gpk]).all():
                out.append((f, dl - dlk, gp - gpk, gpk))
    return tuple(zip(*out, strict=True))


def _hand_iv(y, W, Z, firm, p: int) -> tuple[float, float, int]:
    """Slope (column 1 of W, or 0 without a constant) and its firm-clustered standard error:
    (Z'W)^-1 [sum over firms of Z_g'u_g u_g'Z_g] (W'Z)^-1 times G/(G-1) (N-1)/(N-p)."""
    y, W, Z, firm = np.asarray(y), np.asarray(W), np.asarray(Z), np.asarray(firm)
    A = np.linalg.inv(Z.T @ W)
    theta = A @ (Z.T @ y)
    u = y - W @ theta
    firms = sorted(set(firm))
    meat = sum(np.outer(Z[firm == f].T @ u[firm == f], Z[firm == f].T @ u[firm == f])
               for f in firms)
    n, G = len(y), len(firms)
    V = A @ meat @ A.T * G / (G - 1) * (n - 1) / (n - p)
    j = 1 if np.allclose(W[:, 0], 1) else 0
    return float(theta[j]), float(np.sqrt(V[j, j])), G


def _expected_fields(name: str, lam: float, se: float, G: int, n: int, k: int) -> dict:
    import math

    from scipy import stats

    q = stats.t.ppf(0.975, G - 1)  # Student's t with G - 1 degrees of freedom
    lo, hi = lam - q * se, lam + q * se
    assert 0 < lo < lam < hi < 1, (name, lo, hi)  # every half-life finite and distinct

    def hl(s):
        return math.log(0.5) / math.log(1 - s)

    return {"estimator": name, "speed": lam, "std_error": se, "df": G - 1, "ci_low": lo,
            "ci_high": hi, "half_life": hl(lam), "half_life_low": hl(hi),
            "half_life_high": hl(lo), "n_obs": n, "n_firms": G, "difference": k}


def _assert_fields(est, want: dict) -> None:
    from dataclasses import asdict

    got = asdict(est)
    for key, value in want.items():
        if isinstance(value, float):
            assert got[key] == pytest.approx(value, rel=1e-9, abs=1e-12), key
        else:
            assert got[key] == value and type(got[key]) is type(value), key


def test_every_field_of_each_estimator_against_a_fit_by_hand() -> None:
    """pooled (least squares on a constant and the gap), firm effects (explicit firm
    dummies) and the long difference (instrumental variables, k = 4 by default and 2 when
    asked) on an unbalanced panel, each against its formula computed independently."""
    firm, year, lev, tgt = _hand_panel()
    lags = prepare(firm, year, lev, tgt)
    f, dl, gp = _hand_rows(firm, year, lev, tgt, 0)
    n = len(dl)
    ones = np.ones(n)
    W = np.column_stack([ones, gp])
    lam, se, G = _hand_iv(dl, W, W, f, 2)
    pooled = ESTIMATORS["pooled"](lags)
    _assert_fields(pooled, _expected_fields("pooled", lam, se, G, n, 0))
    # the hand sandwich is statsmodels' clustered covariance (its default small-sample factor)
    import statsmodels.api as sm

    codes = pd.factorize(np.asarray(f))[0]
    ref = sm.OLS(np.asarray(dl), W).fit(cov_type="cluster", cov_kwds={"groups": codes})
    assert (lam, se) == pytest.approx((ref.params[1], ref.bse[1]), rel=1e-9)
    # firm effects: dummies for each firm, no constant; the firm effects are nested in the
    # clusters, so the factor counts the slope and one constant (p = 2, within's "nested")
    D = np.column_stack([gp] + [(np.asarray(f) == g).astype(float) for g in sorted(set(f))])
    lam, se, G = _hand_iv(dl, D, D, f, 2)
    fe = ESTIMATORS["firm-effects"](lags)
    _assert_fields(fe, _expected_fields("firm-effects", lam, se, G, n, 0))
    assert pooled.bias == BIAS["pooled"] and fe.bias == BIAS["firm-effects"]
    for k, asked in ((4, None), (2, 2)):
        f, y, r, z = _hand_rows(firm, year, lev, tgt, k)
        ones = np.ones(len(y))
        lam, se, G = _hand_iv(y, np.column_stack([ones, r]), np.column_stack([ones, z]), f, 2)
        ld = ESTIMATORS["long-difference"](lags, asked)
        _assert_fields(ld, _expected_fields("long-difference", lam, se, G, len(y), k))
        assert ld.bias == BIAS["long-difference"]


def _small(spec: dict[str, list[float]], start: int = 2000) -> tuple[np.ndarray, ...]:
    """Firms' leverage from ``start`` on, each target 0.3 plus a wobble, in firm order."""
    firm, year, lev = [], [], []
    for f, values in spec.items():
        firm += [f] * len(values)
        year += list(range(start, start + len(values)))
        lev += values
    tgt = 0.3 + 0.1 * np.sin(np.arange(len(lev)) * 1.7)
    return np.array(firm), np.array(year), np.array(lev), tgt


def test_the_fewest_firm_years_and_firms_each_estimator_accepts() -> None:
    # pooled: exactly three firm-years with the previous year, from two firms (df 1)
    firm, year, lev, tgt = _small({"a": [0.2, 0.5, 0.1], "b": [0.4, 0.25]})
    est = ESTIMATORS["pooled"](prepare(firm, year, lev, tgt))
    f, dl, gp = _hand_rows(firm, year, lev, tgt, 0)
    assert (est.n_obs, est.n_firms, est.df) == (3, 2, 1)
    assert est.speed == pytest.approx(np.polyfit(gp, dl, 1)[0], rel=1e-9)
    with pytest.raises(ModelError, match="got 2 firm-years with the previous year"):
        ESTIMATORS["pooled"](prepare(*_small({"a": [0.2, 0.5], "b": [0.4, 0.25]})))
    with pytest.raises(ModelError, match="at least two firms; got 1"):
        ESTIMATORS["pooled"](prepare(*_small({"a": [0.2, 0.5, 0.1, 0.3]})))
    # long difference over the shortest span (four years: k = 1), exactly three firm-years
    firm, year, lev, tgt = _small({"a": [0.2, 0.5, 0.1, 0.35], "b": [0.4, 0.25, 0.45]})
    ld = ESTIMATORS["long-difference"](prepare(firm, year, lev, tgt))
    f, y, r, z = _hand_rows(firm, year, lev, tgt, 1)
    assert (ld.n_obs, ld.n_firms, ld.df, ld.difference) == (3, 2, 1, 1)
    ones = np.ones(3)
    lam = np.linalg.solve(np.column_stack([ones, z]).T @ np.column_stack([ones, r]),
                          np.column_stack([ones, z]).T @ np.array(y))[1]
    assert ld.speed == pytest.approx(lam, rel=1e-9)
    with pytest.raises(ModelError, match="needs firms observed at t, t-1, t-1 and t-2; got 2"):
        ESTIMATORS["long-difference"](prepare(*_small({"a": [0.2, 0.5, 0.1, 0.35],
                                                       "b": [0.4, 0.25]})))


def test_difference_for_spans_and_wanted_years() -> None:
    from levgap.models.adjust import difference_for

    ten = np.arange(2000, 2010)
    assert difference_for(ten) == 4 and difference_for(ten, 2) == 2
    assert difference_for(ten, 9) == 7  # at most the span (10 years) - 3
    assert difference_for(np.arange(2000, 2006)) == 3
    assert difference_for(np.array([2003, 2000, 2001])) == 1  # spans four years
    with pytest.raises(ModelError, match="spanning 3\\."):
        difference_for(np.arange(2000, 2003))
    with pytest.raises(ModelError, match="spanning 0\\."):
        difference_for(np.array([], dtype=np.int64))


def test_expected_paths_columns_default_horizon_and_latest_complete_year() -> None:
    # a's latest year has no target and b's none leverage: each path starts a year earlier
    lags = prepare(np.array(["a", "a", "b", "b"]), np.array([2020, 2021, 2020, 2021]),
                   np.array([0.5, 0.4, 0.1, np.nan]), np.array([0.3, np.nan, 0.2, 0.6]))
    p = expected_paths(lags, 0.5)
    assert p.columns.tolist() == ["firm_id", "from_year", "fiscal_year", "years_ahead",
                                  "leverage", "target", "expected_leverage", "gap"]
    assert p["years_ahead"].tolist() == list(range(6)) * 2  # default horizon 5
    assert (p["from_year"] == 2020).all()
    assert p["fiscal_year"].tolist() == list(range(2020, 2026)) * 2
    assert p["leverage"].tolist() == [0.5] * 6 + [0.1] * 6
    assert p["target"].tolist() == [0.3] * 6 + [0.2] * 6
    np.testing.assert_allclose(p["gap"], np.r_[0.2 * 0.5 ** np.arange(6),
                                               -0.1 * 0.5 ** np.arange(6)])


def test_firm_effects_refusal_names_the_gap_as_speed() -> None:
    # each firm's target is its previous leverage plus a constant: the gap never varies
    # within a firm, so the firm effects absorb it; the message names the driver "speed"
    lev = {"a": [0.1, 0.3, 0.2, 0.4], "b": [0.5, 0.2, 0.3, 0.25], "c": [0.3, 0.35, 0.1, 0.2]}
    firm, year, L, _ = _small(lev)
    shift = {"a": 0.05, "b": -0.02, "c": 0.1}
    tgt = np.array([np.nan if y == 2000 else L[i - 1] + shift[f]
                    for i, (f, y) in enumerate(zip(firm, year, strict=True))])
    with pytest.raises(ModelError, match="got speed constant within every firm"):
        ESTIMATORS["firm-effects"](prepare(firm, year, L, tgt))


def test_half_life_at_zero_and_of_a_list_with_a_missing_speed() -> None:
    # no adjustment: infinite at both zeros, not -inf (ln 0.5 / log1p(+0) at -0.0)
    assert half_life(0.0) == np.inf and half_life(-0.0) == np.inf
    np.testing.assert_array_equal(half_life([0.5, None]), [1.0, np.nan])


def test_prepare_reads_missing_values_and_years_given_as_text() -> None:
    lags = prepare(["a", "a", "a"], ["2020", "2021", "2022"], [0.5, None, 0.3],
                   [0.4, 0.2, None])
    assert lags.year.tolist() == [2020, 2021, 2022]
    np.testing.assert_array_equal(lags.leverage, [0.5, np.nan, 0.3])
    np.testing.assert_array_equal(lags.target, [0.4, 0.2, np.nan])
    np.testing.assert_array_equal(lags.shifted(lags.leverage, 2), [np.nan, np.nan, 0.5])
    assert expected_paths(lags, 0.5, 1)["fiscal_year"].tolist() == [2020, 2021]
