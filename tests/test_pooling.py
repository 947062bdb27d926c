"""Small industries pooled toward their parent by empirical Bayes, not copied."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from _synthetic import panel

from levgap.config import ModelSpec
from levgap.features import build_features
from levgap.models import MODELS
from levgap.models.design import Pooling
from levgap.models.linear import fit_linear
from levgap.models.pooling import Components, estimate_components, hard, penalised
from levgap.pipeline import analyze

SMALL = (("5001", 1, 0.10), ("5012", 2, -0.08), ("5023", 3, 0.10), ("5034", 4, -0.10),
         ("5045", 2, 0.08), ("5056", 3, -0.06), ("5067", 4, 0.07), ("5078", 1, -0.09))


def test_weights_follow_the_variance_components() -> None:
    c = Components(tau2=0.002, firm2=0.001, resid2=0.004, info=1.0)
    w = c.weight(np.array([10.0, 20.0, 40.0]), np.array([1.0, 2.0, 4.0]))
    np.testing.assert_allclose(w, 0.002 / (0.002 + 0.001 / np.array([1, 2, 4])
                                           + 0.004 / np.array([10, 20, 40])))
    assert (np.diff(w) > 0).all() and (w > 0).all() and (w < 1).all()


def test_penalty_keeps_the_weight_of_own_information() -> None:
    small = np.array([False, True, True])
    structure = Pooling(small, np.array([-1, 0, 0]), np.array([[True, False, False]]),
                        np.full(3, np.inf), np.full(3, np.nan))
    c = Components(tau2=0.002, firm2=0.001, resid2=0.004, info=0.2)
    level = np.array([0] * 50 + [1] * 10 + [2] * 30)
    firm = np.r_[np.repeat(np.arange(10), 5), np.repeat([10], 10), np.repeat([11, 12, 13], 10)]
    p = penalised(structure, c, level, firm)
    # ridge weight n h / (n h + lambda) equals the empirical-Bayes weight
    for g, n, m in ((1, 10, 1), (2, 30, 3)):
        w = c.weight(np.array([float(n)]), np.array([float(m)]))[0]
        assert p.weight[g] == pytest.approx(w)
        assert n * c.info / (n * c.info + p.penalty[g]) == pytest.approx(w)
    assert np.isinf(p.penalty[0])


@pytest.mark.parametrize("model", ["fractional", "linear"])
def test_planted_small_industries_beat_both_extremes(model: str) -> None:
    errors = {"shrink": [], "parent": [], "own": []}
    specs = {
        "shrink": ModelSpec(measures=("book",), model=model),
        "parent": ModelSpec(measures=("book",), model=model, pooling="parent"),
        "own": ModelSpec(measures=("book",), model=model, min_industry_firms=1),
    }
    for seed in (1, 2, 3):
        p = panel(seed, industries=10, small=SMALL)
        truth = p.set_index(["firm_id", "fiscal_year"])["true_target"]
        data = p.drop(columns=["true_target", "spread"])
        for name, spec in specs.items():
            t = analyze(data, spec=spec).targets.set_index(["firm_id", "fiscal_year"])
            small = t["industry"].isin([s[0] for s in SMALL])
            errors[name].append(float((t["target"] - truth.reindex(t.index))[small].abs()
                                      .mean()))
    shrink, parent, own = (np.mean(errors[k]) for k in ("shrink", "parent", "own"))
    assert shrink <= 0.5 * parent, errors  # the acceptance: at most half of hard borrowing
    assert shrink < own, errors


def test_a_single_firm_industry_uses_its_parent_in_the_cross_fit() -> None:
    p = panel(4, industries=8, small=(("5001", 1, 0.05), ("5012", 3, 0.05)))
    r = analyze(p.drop(columns=["true_target", "spread"]), spec=ModelSpec(measures=("book",)))
    t = r.targets
    lone = t[t["industry"] == "5001"]
    assert lone["flags"].str.contains("industry_effect_from_parent").all()
    trio = t[t["industry"] == "5012"]
    assert not trio["flags"].str.contains("industry_effect_from_parent").any()
    pooled = {x["industry"]: x for x in r.manifest["pooled_industries"]}
    assert pooled["5001"]["parent"] == "industries with code prefix 500"
    assert 0.0 < pooled["5012"]["weight"]["book"] < 1.0


def _components_by_hand(fit, y, fitted, level, firm, labels) -> dict[str, float]:
    """The method-of-moments components of the module docstring, with pandas and loops."""
    d = pd.DataFrame({"r": y - fitted, "level": level, "firm": firm})
    by_firm = d.groupby("firm")
    within = d["r"] - by_firm["r"].transform("mean")
    resid2 = float((within**2).sum()) / (len(d) - d["firm"].nunique())
    firms = by_firm.agg(mean=("r", "mean"), rows=("r", "size"), level=("level", "first"))
    dev = firms["mean"] - firms.groupby("level")["mean"].transform("mean")
    firm_dof = len(firms) - firms["level"].nunique()
    firm2 = max(float((dev**2).sum()) / firm_dof - float((resid2 / firms["rows"]).mean()), 0.0)
    info = 1.0 if fit.link == "identity" else float(np.mean(fitted * (1 - fitted)))
    rows = d.groupby("level").size()
    n_firms = d.groupby("level")["firm"].nunique()
    alpha = fit.effects[0]
    own = [g for g in range(len(alpha)) if not np.isnan(alpha[g])]
    dev2, noise = [], []
    scale = 1.0 if fit.link == "identity" else info
    for g in own:
        code = str(labels[g])
        others = [h for h in own if h != g]
        for cut in range(len(code) - 1, 0, -1):
            hit = [h for h in others if str(labels[h]).startswith(code[:cut])]
            if hit:
                others = hit
                break
        w = np.array([rows.get(h, 0) for h in others], dtype=float)
        parent = float(alpha[others] @ w / w.sum())
        dev2.append((scale * (alpha[g] - parent)) ** 2)
        noise.append(firm2 / n_firms[g] + resid2 / rows[g])
    for s in np.flatnonzero(fit.pooled.small) if fit.pooled is not None else []:
        if rows.get(s, 0) > 0:
            dev2.append(float(d.loc[d["level"] == s, "r"].mean()) ** 2)
            noise.append(firm2 / n_firms[s] + resid2 / rows[s])
    tau2 = max(float(np.mean(dev2) - np.mean(noise)), 0.01 * (firm2 + resid2))
    return {"tau2": tau2, "firm2": firm2, "resid2": resid2, "info": info}


@pytest.mark.parametrize("model", ["linear", "fractional"])
def test_variance_components_equal_their_definition(model: str) -> None:
    p = panel(6, industries=7, small=SMALL[:5])
    p = p.drop(columns=["true_target", "spread"])
    feats = build_features(p, ModelSpec(measures=("book",)))
    f = feats.frame
    level = feats.levels.codes
    firm = pd.factorize(f["firm_id"])[0]
    year = pd.factorize(f["fiscal_year"], sort=True)[0]
    y = f["book"].to_numpy()
    X = f[list(feats.drivers)].to_numpy()
    fit = MODELS[model](y, X, effects=[level, year], pooling=hard(feats.levels.structure()),
                        n_levels=[len(feats.levels.labels), year.max() + 1], cov=False)
    fitted = fit.predict(X, [level, year])
    got = estimate_components(fit, y, fitted, level, firm, feats.levels.labels)
    ref = _components_by_hand(fit, y, fitted, level, firm, feats.levels.labels)
    for name, value in ref.items():
        assert getattr(got, name) == pytest.approx(value, rel=1e-10), name
    assert got.tau2 > 0.01 * (got.firm2 + got.resid2)  # the moment, not the floor
    assert got.as_dict() == {k: getattr(got, k) for k in ("tau2", "firm2", "resid2", "info")}


def test_tau2_is_floored_and_levels_without_rows_borrow_outright() -> None:
    c = Components(tau2=0.0, firm2=0.001, resid2=0.004, info=1.0)
    np.testing.assert_array_equal(c.weight(np.array([0.0, 5.0]), np.array([0.0, 1.0])),
                                  [0.0, 0.0])
    small = np.array([False, True, True])
    structure = Pooling(small, np.array([-1, 0, 0]), np.array([[True, False, False]]),
                        np.full(3, np.inf), np.full(3, np.nan))
    c = Components(tau2=0.002, firm2=0.001, resid2=0.004, info=1.0)
    p = penalised(structure, c, np.array([0, 0, 0, 1]), np.array([0, 1, 2, 3]))
    assert np.isinf(p.penalty[2]) and np.isnan(p.weight[2])  # level 2 has no rows here
    assert np.isfinite(p.penalty[1]) and np.isnan(p.weight[0])
    h = hard(p)
    assert np.isinf(h.penalty).all() and np.isnan(h.weight).all() and h.small is p.small
    # residuals without any between-level spread: tau2 falls to its floor
    rng = np.random.default_rng(3)
    level = np.repeat(np.arange(4), 60)
    firm = np.repeat(np.arange(40), 6)
    y = rng.normal(0, 0.1, 240)
    fit = fit_linear(y, rng.normal(size=(240, 1)), effects=[level], cov=False)
    fitted = fit.predict(rng.normal(size=(240, 1)) * 0, [level])
    comp = estimate_components(fit, y, fitted, level, firm, ["10", "11", "12", "13"])
    assert comp.tau2 == pytest.approx(0.01 * (comp.firm2 + comp.resid2))


LABELS = ["2834", "2836", "3711", "3712", "3714", "3715", "3720", "3790", "8062", "9999"]
SMALL_CODES = [4, 5, 9]  # 3714 (one row), 3715 and 9999 (no rows) borrow


def _hand_built(seed: int, link: str, spread: float = 0.3, firm_sd: float = 0.2,
                noise: float = 0.3, penalty: float = np.inf):
    """Rows over LABELS: 3712 has one firm with one row (an own effect: the parent of 3711
    by prefix then has one row), 3790 and 9999 have no rows, firm codes have gaps and
    some firms one row. ``spread``, ``firm_sd`` and ``noise`` are the standard deviations of
    industry effects, firm effects and the rest; ``penalty`` is the small levels' (inf: they
    borrow outright)."""
    rng = np.random.default_rng(seed)
    level, firm, year = [], [], []
    f = 0
    for g, n_firms in ((0, 6), (1, 5), (2, 7), (3, 1), (4, 1), (5, 3), (6, 6), (8, 5)):
        for _ in range(n_firms):
            years = 1 if g in (3, 4) or f % 5 == 0 else int(rng.integers(2, 6))
            level += [g] * years
            firm += [2 * f] * years  # codes with gaps
            year += list(range(years))
            f += 1
    level, firm, year = (np.array(a) for a in (level, firm, year))
    X = rng.normal(size=(len(level), 2))
    effect = rng.normal(0, spread, 10)
    firm_fx = rng.normal(0, firm_sd, firm.max() + 1)
    eta = X @ np.array([0.4, -0.3]) + effect[level] + firm_fx[firm] + rng.normal(0, noise,
                                                                                 len(level))
    y = eta if link == "identity" else 1 / (1 + np.exp(-eta))
    small = np.isin(np.arange(10), SMALL_CODES)
    members = np.zeros((2, 10), dtype=bool)
    members[0, [2, 3]] = True  # 371x
    members[1] = ~small & (np.arange(10) != 7)
    parent = np.where(small, 0, -1)
    parent[9] = 1
    pooling = Pooling(small, parent, members, np.where(small, penalty, np.inf),
                      np.full(10, np.nan))
    model = "linear" if link == "identity" else "fractional"
    fit = MODELS[model](y, X, effects=[level, year], pooling=pooling, n_levels=[10, 5],
                        cov=False)
    return fit, y, fit.predict(X, [level, year]), level, firm


@pytest.mark.parametrize("link", ["identity", "logit"])
def test_components_with_gaps_one_row_firms_and_prefix_parents(link: str) -> None:
    fit, y, fitted, level, firm = _hand_built(4, link)
    assert np.isnan(fit.effects[0][[4, 5, 7, 9]]).all() and not np.isnan(fit.effects[0][3])
    got = estimate_components(fit, y, fitted, level, firm, LABELS)
    ref = _components_by_hand(fit, y, fitted, level, firm, LABELS)
    for name, value in ref.items():
        assert getattr(got, name) == pytest.approx(value, rel=1e-10), name


def test_components_of_a_cross_section_and_without_enough_levels() -> None:
    # every firm one row but one firm with two: one within-firm degree of freedom; one
    # level with two firms: one between-firm degree of freedom
    rng = np.random.default_rng(5)
    level = np.array([0, 0, 1, 2, 3, 3, 4])
    firm = np.array([0, 0, 1, 2, 3, 4, 5])
    X = rng.normal(size=(7, 1))
    y = rng.normal(size=7)
    fit = fit_linear(y, X, effects=[level], cov=False)
    fitted = fit.predict(X, [level]) + rng.normal(0, 0.1, 7)  # residuals to measure
    got = estimate_components(fit, y, fitted, level, firm, ["1", "2", "3", "4", "5"])
    r = y - fitted
    resid2 = (r[0] - r[:2].mean()) ** 2 * 2 / 1
    assert got.resid2 == pytest.approx(resid2, rel=1e-12)
    means = np.array([r[:2].mean(), r[2], r[3], r[4], r[5], r[6]])
    dev = means[[3, 4]] - means[[3, 4]].mean()
    firm2 = max(float(dev @ dev) / 1 - np.mean(resid2 / np.array([2, 1, 1, 1, 1, 1])), 0.0)
    assert got.firm2 == pytest.approx(firm2, rel=1e-12, abs=1e-15)
    # three levels with effects: the fewest that give a between-level moment
    three = np.array([0, 0, 1, 1, 2, 2, 2])
    fit3 = fit_linear(y, X, effects=[three], cov=False)
    fitted3 = fit3.predict(X, [three]) + rng.normal(0, 0.1, 7)
    got3 = estimate_components(fit3, y, fitted3, three, firm, ["10", "11", "12"])
    ref3 = _components_by_hand(fit3, y, fitted3, three, firm, ["10", "11", "12"])
    assert got3.tau2 == pytest.approx(ref3["tau2"], rel=1e-10)
    assert got3.tau2 > 0.01 * (got3.firm2 + got3.resid2)
    # two levels with effects and no small level: no moment for tau2, only its floor
    two = fit_linear(y, X, effects=[np.array([0, 0, 0, 1, 1, 1, 1])], cov=False)
    comp = estimate_components(two, y, two.predict(X, [np.array([0, 0, 0, 1, 1, 1, 1])]),
                               np.array([0, 0, 0, 1, 1, 1, 1]), firm, ["1", "2"])
    assert comp.tau2 == pytest.approx(0.01 * (comp.firm2 + comp.resid2))


def test_penalised_counts_rows_and_firms_of_each_level() -> None:
    rng = np.random.default_rng(6)
    L = 12
    level = rng.integers(0, L - 1, 500)  # the last level has no rows
    firm = rng.integers(0, 90, 500) * 3
    small = np.zeros(L, dtype=bool)
    small[[1, 4, 7, 11]] = True
    structure = Pooling(small, np.where(small, 0, -1), (~small)[None, :], np.full(L, np.inf),
                        np.full(L, np.nan))
    c = Components(tau2=0.002, firm2=0.001, resid2=0.004, info=0.3)
    p = penalised(structure, c, level, firm)
    rows = np.bincount(level, minlength=L).astype(float)
    firms = np.array([len(np.unique(firm[level == g])) for g in range(L)], dtype=float)
    with np.errstate(divide="ignore", invalid="ignore"):
        w = c.tau2 / (c.tau2 + c.firm2 / firms + c.resid2 / rows)
    for g in range(L):
        if small[g] and rows[g] > 0:
            assert p.weight[g] == pytest.approx(w[g], rel=1e-12)
            assert p.penalty[g] == pytest.approx(rows[g] * 0.3 * (1 - w[g]) / w[g], rel=1e-12)
        else:
            assert np.isinf(p.penalty[g]) and np.isnan(p.weight[g])
    one = penalised(structure, c, np.array([0, 1]), np.array([0, 1]))  # one row in level 1
    assert np.isfinite(one.penalty[1]) and 0 < one.weight[1] < 1
    empty = penalised(structure, c, np.array([], dtype=int), np.array([], dtype=int))
    assert np.isinf(empty.penalty).all() and np.isnan(empty.weight).all()
    # industries that do not differ (tau2 0): every small level borrows outright; a level
    # without rows has weight 0 whatever the components; no warning either way
    flat = penalised(structure, Components(tau2=0.0, firm2=0.001, resid2=0.004, info=1.0),
                     level, firm)
    assert np.isinf(flat.penalty).all()
    no_firm_spread = Components(tau2=0.002, firm2=0.0, resid2=0.004, info=1.0)
    np.testing.assert_array_equal(no_firm_spread.weight(np.array([0.0]), np.array([0.0])),
                                  [0.0])


@pytest.mark.parametrize("link", ["identity", "logit"])
def test_components_are_moments_not_the_floor_with_prefix_parents(link: str) -> None:
    # Industries far apart and firms spread within them: tau2 and firm2 are moments, so the
    # parent groups by prefix (3711's is 3712 alone, one row), the firm counts and the
    # levels without rows (3790, 9999) all enter the result.
    fit, y, fitted, level, firm = _hand_built(4, link, spread=1.0, firm_sd=0.5, noise=0.1)
    got = estimate_components(fit, y, fitted, level, firm, LABELS)
    ref = _components_by_hand(fit, y, fitted, level, firm, LABELS)
    assert got.tau2 > 0.01 * (got.firm2 + got.resid2) and got.firm2 > 0
    for name, value in ref.items():
        assert getattr(got, name) == pytest.approx(value, rel=1e-10), name
    # firm codes are labels: numbered the other way round (codes below their level's now),
    # the components are the same
    again = estimate_components(fit, y, fitted, level, firm.max() - firm, LABELS)
    for name, value in ref.items():
        assert getattr(again, name) == pytest.approx(value, rel=1e-10), name
    # the parent groups matter: the same fit labelled without a shared prefix differs
    flat = estimate_components(fit, y, fitted, level, firm, [str(i) for i in range(10)])
    assert flat.tau2 != pytest.approx(got.tau2, rel=1e-6)


def test_firm_spread_with_one_between_firm_degree_of_freedom() -> None:
    # Three firms in two levels: one degree of freedom for firm means around their level's.
    level = np.array([0, 0, 0, 0, 1, 1, 1])
    firm = np.array([0, 0, 1, 1, 2, 2, 2])
    r = np.array([1.1, 0.9, -0.8, -1.2, 0.1, -0.1, 0.0])
    X = np.array([[0.3], [-0.2], [0.5], [0.1], [-0.4], [0.2], [0.6]])
    fit = fit_linear(r, X, effects=[level], cov=False)
    got = estimate_components(fit, r, np.zeros(7), level, firm, ["1", "2"])
    within = r - np.array([1.0, 1.0, -1.0, -1.0, 0.0, 0.0, 0.0])
    resid2 = float(within @ within) / (7 - 3)
    firm2 = (1.0**2 + 1.0**2 + 0.0) / 1 - np.mean(resid2 / np.array([2, 2, 3]))
    assert got.resid2 == pytest.approx(resid2, rel=1e-12)
    assert got.firm2 == pytest.approx(firm2, rel=1e-12) and firm2 > 0


@pytest.mark.parametrize("link", ["identity", "logit"])
def test_a_penalised_fit_solves_each_small_levels_score_equation(link: str) -> None:
    # The penalised (quasi-)likelihood's first-order condition for a small level's own
    # deviation u_s: the sum of its rows' residuals y - mu equals lambda_s u_s (the module
    # docstrings of pooling.py and fractional.py).
    fit, y, fitted, level, firm = _hand_built(7, link, spread=1.0, penalty=4.0)
    p = fit.pooled
    assert p is not None
    for s in (4, 5):  # 3714 (one row) and 3715: deviations of their own, shrunk
        u = p.deviation[s]
        assert np.isfinite(u) and u != 0
        assert float((y - fitted)[level == s].sum()) == pytest.approx(4.0 * u, rel=1e-8)
    assert np.isnan(p.deviation[9])  # 9999 has no rows: no deviation


def test_parent_members_are_those_sharing_the_longest_leading_part() -> None:
    from levgap.models.pooling import _parent_members

    names = ["2011", "20110", "2012", "2099", "2511", "3011", "x1"]
    # "201" is the longest part shared (not the code itself, though "20110" starts with it)
    np.testing.assert_array_equal(_parent_members("2011", names, exclude=0), [1, 2])
    # only "20" is shared: the two-digit group, not "2511" of the one-digit group
    np.testing.assert_array_equal(_parent_members("2099", names, exclude=3), [0, 1, 2])
    # only "2" is shared
    np.testing.assert_array_equal(_parent_members("2511", names, exclude=4), [0, 1, 2, 3])
    # nothing shared, or a code that is not numeric: every other level
    np.testing.assert_array_equal(_parent_members("3011", names, exclude=5), [0, 1, 2, 3, 4, 6])
    np.testing.assert_array_equal(_parent_members("x1", names, exclude=6), [0, 1, 2, 3, 4, 5])
    assert _parent_members("2011", names, exclude=0).dtype.kind == "i"
