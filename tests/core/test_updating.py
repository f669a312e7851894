"""Adapting a saved model to a new extract: the closed testing procedure on seeded data with a known truth."""

from __future__ import annotations

import numpy as np
import pytest
import statsmodels.api as sm
from scipy.special import expit
from scipy.stats import chi2

from twofold.core.errors import ModelError
from twofold.core.models.updating import adapt_model
from twofold.core.outputs.predict import EncodedTerm, FrozenModel, predict

B = np.array([-1.0, 0.8, -0.5, 0.4])


def saved_model() -> FrozenModel:
    terms = tuple(EncodedTerm(c, "numeric", low=-10.0, high=10.0) for c in ("x1", "x2", "x3"))
    cov = np.diag([0.01, 0.002, 0.002, 0.002])
    return FrozenModel("y", 1, "maximum likelihood", ("intercept", "x1", "x2", "x3"), B.copy(), cov, terms)


def new_rows(seed: int, truth: np.ndarray, n: int = 5000):
    rng = np.random.default_rng(seed)
    X = np.column_stack([np.ones(n), rng.normal(size=(n, 3))])
    y = (rng.uniform(size=n) < expit(X @ truth)).astype(float)
    return X, y


def glm(y, X, offset=None):
    """statsmodels' binomial GLM (IRLS), a different fitting path from the Logit used by the core."""
    return sm.GLM(y, X, family=sm.families.Binomial(), offset=offset).fit()


# Truths (Vergouwe et al. 2017, Stat Med 36:4529, simulation design): the same model; its intercept shifted;
# every coefficient shrunk (a slope change); one coefficient changed.
SCENARIOS = [
    ("none", B),
    ("intercept", B + np.array([0.6, 0, 0, 0])),
    ("intercept_and_slope", np.array([-0.6, 0.8 * 0.5, -0.5 * 0.5, 0.4 * 0.5])),
    ("refit", np.array([-1.0, 0.8, -0.5, -0.3])),
]


@pytest.mark.parametrize("expected, truth", SCENARIOS)
def test_the_closed_test_picks_the_change_that_was_made(expected, truth):
    X, y = new_rows(2017, truth)
    got = adapt_model(saved_model(), X, y)
    assert got.chosen == expected
    # Likelihood-ratio statistics from statsmodels' GLM fits of the same four models.
    lp = X @ B
    ll = {"none": float(np.sum(y * lp - np.logaddexp(0, lp))),  # the saved model: no estimation (algebra)
          "intercept": glm(y, np.ones((len(y), 1)), offset=lp).llf,
          "intercept_and_slope": glm(y, np.column_stack([np.ones(len(y)), lp])).llf,
          "refit": glm(y, X).llf}
    for test in got.tests:
        g = 2 * (ll["refit"] - ll[test.against])
        assert test.g == pytest.approx(g, rel=1e-6, abs=1e-6)
        assert test.df == 4 - ("none", "intercept", "intercept_and_slope").index(test.against)
        assert test.p_value == pytest.approx(chi2.sf(g, test.df), rel=1e-5, abs=1e-12)
    # The sequence stops at the first test that is not significant (or runs to the end for a refit).
    assert [t.p_value < 0.05 for t in got.tests] == [True] * (len(got.tests) - 1) + [expected == "refit"]


def test_adapted_coefficients_are_those_of_the_chosen_model():
    for expected, truth in SCENARIOS[1:]:
        X, y = new_rows(2017, truth)
        got = adapt_model(saved_model(), X, y)
        lp = X @ B
        if expected == "intercept":
            a = glm(y, np.ones((len(y), 1)), offset=lp).params[0]
            want = B + np.array([a, 0, 0, 0])
        elif expected == "intercept_and_slope":
            a, s = glm(y, np.column_stack([np.ones(len(y)), lp])).params
            want = s * B + np.array([a, 0, 0, 0])
        else:
            want = glm(y, X).params
        assert got.model.coefficients == pytest.approx(want, abs=1e-6)
        assert got.model.names == saved_model().names and "new extract" in got.model.method


def test_new_intercept_adds_its_variance_to_a_prediction():
    X, y = new_rows(2017, SCENARIOS[1][1])
    got = adapt_model(saved_model(), X, y)
    lp = X @ B
    var_a = glm(y, np.ones((len(y), 1)), offset=lp).cov_params()[0, 0]
    x = np.array([1.0, 0.5, -1.0, 2.0])
    pred = predict(got.model, {"x1": 0.5, "x2": -1.0, "x3": 2.0})
    # Delta method with the saved coefficients held fixed while the intercept is re-estimated (algebra):
    # var(x'b + a) = x'Vx + var(a).
    assert pred.se ** 2 == pytest.approx(x @ saved_model().covariance @ x + var_a, rel=1e-6)
    assert pred.probability == pytest.approx(expit(x @ got.model.coefficients), rel=1e-12)


def test_a_column_never_seen_in_the_extract_is_named():
    X, y = new_rows(3, B)
    X[:, 2] = 0.0  # as an indicator of a group that does not occur in the new extract
    with pytest.raises(ModelError, match="x2 is 0 in every row of later.csv"):
        adapt_model(saved_model(), X, y, source="later.csv")
