"""The Fit result: effects of pooled and unseen levels, prediction, tables, JSON form.

A fit written by hand, so that every effect has a value the test can compute by hand.
"""

from __future__ import annotations

import json

import numpy as np
import pytest
from scipy import special

from levgap.errors import ModelError
from levgap.models.result import Fit, PooledLevels, expit, inference_table

NAN = np.nan


def _fit(link: str = "identity", pooled: bool = True, vcov: bool = True) -> Fit:
    # industry levels 0..5: 0-2 own effects (3 never seen: NaN), 4 and 5 small;
    # 4 pooled toward {0, 1} with an own deviation, 5 toward {0, 1, 2} without one
    alpha = np.array([0.0, 0.3, -0.6, NAN, NAN, NAN])
    rows = np.array([10.0, 30.0, 20.0, 0.0, 4.0, 0.0])
    years = np.array([NAN, 0.0, 0.1, NAN, 0.4])  # codes 1, 2, 4 seen
    pool = PooledLevels(
        small=np.array([False, False, False, False, True, True]),
        parent=np.array([-1, -1, -1, -1, 0, 1]),
        members=np.array([[True, True, False, False, False, False],
                          [True, True, True, False, False, False]]),
        deviation=np.array([NAN, NAN, NAN, NAN, 0.05, NAN]),
        weight=np.array([NAN, NAN, NAN, NAN, 0.4, NAN]))
    return Fit(model="m", link=link, names=("const", "a", "b"),
               coef=np.array([0.2, 1.5, -0.5]),
               vcov=np.diag([0.04, 0.09, 0.25]) if vcov else None,
               effects=(alpha, years), effect_weights=(rows, np.array([0, 5, 5, 0, 5.0])),
               pooled=pool if pooled else None, n_obs=64, n_params=9, n_clusters=(12,),
               df_inference=11, r2=0.5, deviance=1.0, cov_type="cluster")


def test_effects_of_own_pooled_and_unseen_levels() -> None:
    fit = _fit()
    mean = (0.3 * 30 - 0.6 * 20) / 60  # row-weighted over the levels with own effects
    parent0 = 0.3 * 30 / 40
    parent1 = mean
    np.testing.assert_allclose(fit.parent_effects(), [parent0, parent1])
    got = fit.effect_of(0, np.array([0, 1, 2, 3, 4, 5, 6, -1]))
    np.testing.assert_allclose(got, [0.0, 0.3, -0.6, mean, parent0 + 0.05, parent1, mean,
                                     mean])
    # years: an unseen code takes the nearest earlier seen year, else the first one
    np.testing.assert_allclose(fit.effect_of(1, np.array([0, 1, 2, 3, 4, 7])),
                               [0.0, 0.0, 0.1, 0.1, 0.4, 0.4])
    np.testing.assert_array_equal(fit.unseen(0, np.array([0, 2, 3, 4, 5, 9, -1])),
                                  [False, False, True, False, True, True, True])
    np.testing.assert_array_equal(fit.unseen(1, np.array([0, 1, 4, 5])),
                                  [True, False, False, True])
    plain = _fit(pooled=False)
    np.testing.assert_allclose(plain.effect_of(0, np.array([4, 5])), [mean, mean])
    assert len(plain.parent_effects()) == 0
    np.testing.assert_array_equal(plain.unseen(0, np.array([1, 4])), [False, True])


def test_a_parent_without_rows_in_the_fit_takes_the_mean_effect() -> None:
    fit = _fit()
    p = fit.pooled
    members = p.members.copy()
    members[0] = [False, False, False, True, False, False]  # level 3: no rows
    other = Fit(**{**{f: getattr(fit, f) for f in fit.__slots__},
                   "pooled": PooledLevels(p.small, p.parent, members, p.deviation, p.weight)})
    mean = (0.3 * 30 - 0.6 * 20) / 60
    assert other.parent_effects()[0] == pytest.approx(mean)


def test_offset_predict_and_contributions() -> None:
    X = np.array([[1.0, 2.0], [0.0, -1.0], [3.0, 0.5]])
    codes = [np.array([1, 4, 3]), np.array([2, 4, 0])]
    for link, h in (("identity", lambda e: e), ("logit", special.expit)):
        fit = _fit(link)
        off = 0.2 + fit.effect_of(0, codes[0]) + fit.effect_of(1, codes[1])
        np.testing.assert_allclose(fit.offset(codes), off)
        np.testing.assert_allclose(fit.predict(X, codes), h(off + X @ [1.5, -0.5]))
        np.testing.assert_allclose(fit.predict(X), h(0.2 + X @ [1.5, -0.5]))
        eta = np.array([-2.0, 0.5])
        np.testing.assert_array_equal(fit.inverse_link(eta), h(eta))
        peer = np.zeros_like(X)
        c, peer_target, method = fit.contributions(X, peer, off)
        np.testing.assert_allclose(peer_target, h(off))
        np.testing.assert_allclose(c.sum(axis=1), h(off + X @ [1.5, -0.5]) - h(off),
                                   atol=1e-14)
        assert method == "shapley"
        if link == "identity":
            np.testing.assert_allclose(c, X * [1.5, -0.5])
    assert len(_fit().offset([])) == 0


def test_standard_errors_and_table() -> None:
    fit = _fit()
    np.testing.assert_allclose(fit.std_error, [0.2, 0.3, 0.5])
    t = fit.tidy()
    np.testing.assert_allclose(t["t_stat"], [1.0, 5.0, -1.0])
    assert list(t["term"]) == ["const", "a", "b"]
    # Student's t with 11 degrees of freedom, from scipy.stats (an independent route)
    from scipy import stats

    np.testing.assert_allclose(t["p_value"], 2 * stats.t.sf([1.0, 5.0, 1.0], 11), rtol=1e-12)
    q = stats.t.ppf(0.975, 11)
    np.testing.assert_allclose(t["ci_low"], fit.coef - q * fit.std_error, rtol=1e-12)
    np.testing.assert_allclose(t["ci_high"], fit.coef + q * fit.std_error, rtol=1e-12)
    with pytest.raises(ModelError, match="standard errors were not computed"):
        _ = _fit(vcov=False).std_error


def test_fit_survives_its_json_form() -> None:
    fit = _fit("logit")
    d = json.loads(json.dumps(fit.to_dict(), allow_nan=False))  # NaN written as null
    assert d["effects"][0][3] is None and d["pooled"]["deviation"][4] == 0.05
    back = Fit.from_dict(d)
    assert (back.model, back.link, back.names, back.n_obs) == ("m", "logit",
                                                               ("const", "a", "b"), 64)
    assert back.vcov is None and back.cov_type == "none"
    np.testing.assert_array_equal(back.coef, fit.coef)
    for a, b in zip(back.effects + back.effect_weights, fit.effects + fit.effect_weights,
                    strict=True):
        np.testing.assert_array_equal(a, b)
        assert a.dtype == float
    for name in ("small", "parent", "members", "deviation", "weight"):
        np.testing.assert_array_equal(getattr(back.pooled, name), getattr(fit.pooled, name))
        assert getattr(back.pooled, name).dtype == getattr(fit.pooled, name).dtype, name
    codes = [np.array([0, 1, 2, 3, 4, 5]), np.array([1, 2, 4, 0, 3, 9])]
    X = np.linspace(-1, 1, 12).reshape(6, 2)
    np.testing.assert_array_equal(back.predict(X, codes), fit.predict(X, codes))
    plain = Fit.from_dict(_fit(pooled=False).to_dict())
    assert plain.pooled is None and "pooled" not in _fit(pooled=False).to_dict()
    ints = Fit.from_dict({**d, "coef": [1, 2, 3]})
    assert ints.coef.dtype == float


def test_expit_of_scalars_and_arrays_without_overflow_warnings() -> None:
    assert expit(0.0) == 0.5 and np.ndim(expit(0.0)) == 0
    assert expit(2.0) == pytest.approx(1 / (1 + np.exp(-2.0)), rel=1e-15)
    assert expit(-3) == pytest.approx(1 / (1 + np.exp(3.0)), rel=1e-15)
    assert expit(-800.0) == 0.0 and expit(800.0) == 1.0  # exp overflows quietly
    eta = np.array([-800.0, -2.0, 0.0, 2.0, 800.0])
    np.testing.assert_allclose(expit(eta), special.expit(eta), rtol=1e-15, atol=0)
    np.testing.assert_allclose(expit([[1, -1]]), special.expit([[1.0, -1.0]]), rtol=1e-15)


def test_inference_table_uses_student_t_down_to_one_degree_of_freedom() -> None:
    # scipy.special.stdtr/stdtrit are Student's t distribution function and its inverse
    coef, se = np.array([1.0, -2.0, 0.5]), np.array([0.5, 1.0, 0.25])
    for df in (1, 3, [1.0, 2.0, 40.0]):
        out = inference_table(["a", "b", "c"], coef, se, df)  # default: 95% intervals
        t = coef / se
        dfs = np.broadcast_to(np.asarray(df, dtype=float), t.shape)
        np.testing.assert_allclose(out["p_value"], 2 * special.stdtr(dfs, -np.abs(t)),
                                   rtol=1e-14)
        q = special.stdtrit(dfs, 0.975)
        np.testing.assert_allclose(out["ci_low"], coef - q * se, rtol=1e-14)
        np.testing.assert_allclose(out["ci_high"], coef + q * se, rtol=1e-14)
        assert list(out["term"]) == ["a", "b", "c"]
    # one degree of freedom is Cauchy: P(|t| > 2) = 1 - 2 atan(2) / pi
    one = inference_table(["a"], np.array([1.0]), np.array([0.5]), 1)
    assert one["p_value"][0] == pytest.approx(1 - 2 * np.arctan(2.0) / np.pi, rel=1e-12)
    blank = inference_table(["a"], np.array([1.0]), np.array([0.5]), 0.5)
    assert np.isnan(blank["p_value"][0]) and np.isnan(blank["ci_low"][0])


def test_a_zero_standard_error_gives_t_without_warnings() -> None:
    out = inference_table(["a", "b"], np.array([1.0, 0.0]), np.array([0.0, 0.0]), 10)
    assert out["t_stat"][0] == np.inf and np.isnan(out["t_stat"][1])
