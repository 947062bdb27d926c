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


def _hand_built(seed: int, link: str):
    """Rows over LABELS: 3712 has one firm with one row (an own effect: the parent of 3711
    by prefix then has one row), 3790 and 9999 have no rows, firm codes have gaps and
    some firms one row."""
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
    effect = rng.normal(0, 0.3, 10)
    firm_fx = rng.normal(0, 0.2, firm.max() + 1)
    eta = X @ np.array([0.4, -0.3]) + effect[level] + firm_fx[firm] + rng.normal(0, 0.3,
                                                                                 len(level))
    y = eta if link == "identity" else 1 / (1 + np.exp(-eta))
    small = np.isin(np.arange(10), SMALL_CODES)
    members = np.zeros((2, 10), dtype=bool)
    members[0, [2, 3]] = True  # 371x
    members[1] = ~small & (np.arange(10) != 7)
    parent = np.where(small, 0, -1)
    parent[9] = 1
    pooling = Pooling(small, parent, members, np.full(10, np.inf), np.full(10, np.nan))
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
