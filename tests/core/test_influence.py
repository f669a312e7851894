"""Tests for influence measures and (generalised) variance inflation factors.

References: statsmodels GLM(Binomial).get_influence() on the same fit,
statsmodels' variance_inflation_factor, and statsmodels' canonical
correlation analysis (CanCorr) for the GVIF of multi-column terms.
"""

from __future__ import annotations

import json

import numpy as np
import pytest
import statsmodels.api as sm
from scipy.special import expit
from statsmodels.multivariate.cancorr import CanCorr
from statsmodels.stats.outliers_influence import variance_inflation_factor

from twofold.core.errors import ColumnError, ModelError
from twofold.core.assessing.influence import gvif, influence_measures, vif


def spector():
    """Spector & Mazzeo (1980) teaching-method data shipped with statsmodels."""
    data = sm.datasets.spector.load_pandas()
    X = sm.add_constant(data.exog.to_numpy(dtype=float), prepend=True)
    return X, data.endog.to_numpy(dtype=float)


def simulated(seed=7, n=400):
    rng = np.random.default_rng(seed)
    z = rng.standard_normal((n, 3))
    z[:, 2] = 0.7 * z[:, 0] + 0.3 * rng.standard_normal(n)
    X = np.column_stack([np.ones(n), z])
    y = (rng.random(n) < expit(X @ [-0.4, 0.8, -0.5, 0.3])).astype(float)
    return X, y


def factor_design(reference, seed=31, n=300):
    """A 3-level factor (coded with the given reference level) that depends
    on a continuous covariate, plus that covariate."""
    rng = np.random.default_rng(seed)
    age = rng.standard_normal(n)
    level = np.digitize(age + rng.standard_normal(n) * 0.8, [-0.4, 0.5])  # 0, 1, 2
    dummies = [(level == k).astype(float) for k in range(3) if k != reference]
    return np.column_stack([np.ones(n), *dummies, age])


@pytest.mark.parametrize("data", [spector, simulated])
def test_influence_equals_statsmodels_glm(data):
    X, y = data()
    fit = sm.GLM(y, X, family=sm.families.Binomial()).fit(tol=1e-12)
    ref = fit.get_influence()
    got = influence_measures(X, y, fit.params)
    # statsmodels GLMInfluence on the same fit is the reference.
    assert np.allclose(got.leverage, ref.hat_matrix_diag, rtol=1e-10, atol=1e-14)
    assert np.allclose(got.cooks_distance, ref.cooks_distance[0], rtol=1e-9, atol=1e-15)
    assert np.allclose(got.resid_pearson, fit.resid_pearson, rtol=1e-12, atol=1e-14)
    assert np.allclose(got.resid_deviance, fit.resid_deviance, rtol=1e-12, atol=1e-14)
    assert got.n_params == X.shape[1]
    # The leverages of a full-rank fit sum to the number of coefficients.
    assert got.leverage.sum() == pytest.approx(X.shape[1], rel=1e-10)


def test_influence_uses_the_given_coefficients_without_refitting():
    # Coefficients that are not the maximum-likelihood ones: statsmodels'
    # measures evaluated there (a GLM results object at exactly these values)
    # are the reference, so a silent re-fit would fail this test.
    X, y = spector()
    fit = sm.Logit(y, X).fit(disp=0)
    params = fit.params * 0.8
    got = influence_measures(X, y, params)
    mu = expit(X @ params)
    w = mu * (1 - mu)
    model = sm.GLM(y, X, family=sm.families.Binomial())
    res = sm.GLM(y, X, family=sm.families.Binomial()).fit(start_params=params, maxiter=0)
    assert np.allclose(res.params, params)
    assert np.allclose(got.resid_pearson, res.resid_pearson, rtol=1e-12)
    assert np.allclose(got.resid_deviance, res.resid_deviance, rtol=1e-12)
    # hat diagonal from statsmodels' own pseudo-inverse route at these values
    hat = model.hessian_factor(params)
    wexog = np.sqrt(hat)[:, None] * X
    ref_h = (wexog * np.linalg.pinv(wexog).T).sum(1)
    assert np.allclose(hat, w)
    assert np.allclose(got.leverage, ref_h, rtol=1e-10)


def test_most_influential_order():
    X, y = simulated()
    fit = sm.GLM(y, X, family=sm.families.Binomial()).fit()
    ref = fit.get_influence().cooks_distance[0]
    got = influence_measures(X, y, fit.params)
    top = got.most_influential(5)
    assert list(top) == list(np.argsort(ref)[::-1][:5])
    assert np.all(np.diff(ref[top]) <= 0)
    assert len(got.most_influential(10_000)) == X.shape[0]
    with pytest.raises(ModelError):
        got.most_influential(-1)
    json.dumps(got.as_dict(), allow_nan=False)


def test_vif_equals_statsmodels():
    X, y = simulated()
    names = ["intercept", "a", "b", "c"]
    table = vif(X, names)
    assert [r.name for r in table.records] == ["a", "b", "c"]
    for rec in table.records:
        ref = variance_inflation_factor(X, rec.column)  # statsmodels, design with intercept
        assert rec.vif == pytest.approx(ref, rel=1e-10)
    json.dumps(table.as_dict(), allow_nan=False)


def test_vif_flags_values_above_ten():
    # VIF > 10 is the usual warning level (common practice).
    rng = np.random.default_rng(5)
    n = 500
    a = rng.standard_normal(n)
    b = a + 0.05 * rng.standard_normal(n)  # nearly a copy of a
    c = rng.standard_normal(n)
    X = np.column_stack([np.ones(n), a, b, c])
    table = vif(X, ["intercept", "a", "b", "c"])
    flags = {r.name: r.flagged for r in table.records}
    assert flags == {"a": True, "b": True, "c": False}
    for rec in table.records:
        assert rec.vif == pytest.approx(variance_inflation_factor(X, rec.column), rel=1e-9)
        assert rec.flagged == (variance_inflation_factor(X, rec.column) > 10)
    assert [r.name for r in table.flagged] == ["a", "b"]


def test_gvif_of_single_column_equals_vif():
    X, _ = simulated()
    names = ["intercept", "a", "b", "c"]
    v = {r.column: r.vif for r in vif(X, names).records}
    g = gvif(X, {"a": [1], "b": [2], "c": [3]})
    for rec in g.records:
        assert rec.df == 1
        assert rec.gvif == pytest.approx(v[rec.columns[0]], rel=1e-12)
        assert rec.gvif == pytest.approx(variance_inflation_factor(X, rec.columns[0]), rel=1e-10)
        assert rec.gvif_adjusted == pytest.approx(np.sqrt(rec.gvif), rel=1e-12)


def test_gvif_invariant_to_reference_level():
    # Fox & Monette (1992, JASA 87:178): the GVIF of a term does not depend on
    # how its columns are coded, e.g. on the reference level of a factor.
    values = []
    for ref_level in (0, 1, 2):
        X = factor_design(ref_level)
        g = gvif(X, {"group": [1, 2], "age": [3]})
        values.append([(r.gvif, r.gvif_adjusted) for r in g.records])
    values = np.array(values)
    assert np.allclose(values, values[0], rtol=1e-10)
    # The factor really is correlated with age, so the check is not trivial.
    assert values[0, 0, 0] > 1.2


def test_gvif_equals_canonical_correlation_form():
    # GVIF = 1 / prod(1 - rho_i^2) over the canonical correlations between the
    # term's columns and the other predictors (Fox & Monette 1992); the
    # correlations come from statsmodels' CanCorr.
    X = factor_design(0)
    g = gvif(X, {"group": [1, 2]}).records[0]
    rho = CanCorr(X[:, [1, 2]], X[:, [3]]).cancorr
    assert g.gvif == pytest.approx(1.0 / np.prod(1.0 - rho**2), rel=1e-10)
    assert g.gvif_adjusted == pytest.approx(g.gvif ** (1 / 4), rel=1e-12)


def test_collinearity_user_errors():
    X, _ = simulated()
    with pytest.raises(ModelError):
        vif(X, ["intercept", "a"])  # too few names
    with pytest.raises(ModelError):
        gvif(X, {"bad": [0]})  # the intercept is not a term column
    with pytest.raises(ModelError):
        vif(X[:, 1:], ["a", "b", "c"])  # no intercept first
    constant = X.copy()
    constant[:, 2] = 3.0
    with pytest.raises(ColumnError):
        vif(constant, ["intercept", "a", "b", "c"])
