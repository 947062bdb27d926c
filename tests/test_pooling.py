"""Small industries pooled toward their parent by empirical Bayes, not copied."""

from __future__ import annotations

import numpy as np
import pytest
from _synthetic import panel

from levgap.config import ModelSpec
from levgap.models.pooling import Components, penalised
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
    from levgap.models.design import Pooling

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
