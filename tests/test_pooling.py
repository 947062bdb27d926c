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
    for s in np.flatnonzero(fit.pooled.small):
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
