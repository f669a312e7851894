"""Tests for Firth's penalised logistic regression and FLIC.

Each check is against something outside the module: closed-form results for
2x2 tables, statsmodels Logit / GLM fits, scipy's general-purpose optimiser
applied to the penalised log-likelihood written out here in full, and the
modified score built with the explicit n x n hat matrix.
"""

from __future__ import annotations

import json

import numpy as np
import pytest
import statsmodels.api as sm
from scipy.optimize import minimize
from scipy.special import expit
from scipy.stats import chi2

from twofold.core.errors import ModelError
from twofold.core.models.firth import firth_fit, firth_lr_test, firth_profile_ci, flic

# ---------------------------------------------------------------------------
# independent, deliberately naive reference computations
# ---------------------------------------------------------------------------


def explicit_penalized_llf(X, y, beta):
    """l(b) + 0.5 log det(X'WX), written out directly (Firth 1993, eq. for the
    Jeffreys-prior penalty)."""
    p = 1.0 / (1.0 + np.exp(-(X @ beta)))
    llf = np.sum(y * np.log(p) + (1 - y) * np.log(1 - p))
    sign, logdet = np.linalg.slogdet(X.T @ np.diag(p * (1 - p)) @ X)
    assert sign > 0
    return llf + 0.5 * logdet


def explicit_modified_score(X, y, beta):
    """U* = X'(y - p + h(0.5 - p)) with h from the full n x n hat matrix
    H = W^(1/2) X (X'WX)^-1 X' W^(1/2) (Heinze & Schemper 2002, Stat Med 21:2409)."""
    p = 1.0 / (1.0 + np.exp(-(X @ beta)))
    W_half = np.diag(np.sqrt(p * (1 - p)))
    H = W_half @ X @ np.linalg.inv(X.T @ W_half @ W_half @ X) @ X.T @ W_half
    h = np.diag(H)
    return X.T @ (y - p + h * (0.5 - p))


def scipy_max_penalized(X, y, fixed=None, start=None):
    """Maximise the explicit penalised log-likelihood with scipy (BFGS),
    optionally with some coefficients held fixed."""
    k = X.shape[1]
    fixed = fixed or {}
    free = [j for j in range(k) if j not in fixed]

    def full(theta):
        b = np.zeros(k)
        for j, v in fixed.items():
            b[j] = v
        b[free] = theta
        return b

    x0 = np.zeros(len(free)) if start is None else np.asarray(start)[free]
    res = minimize(
        lambda t: -explicit_penalized_llf(X, y, full(t)),
        x0,
        method="BFGS",
        options={"gtol": 1e-9, "maxiter": 2000},
    )
    return full(res.x), -res.fun


def table_data(a, b, c, d):
    """Rows for a 2x2 table: x=0 has a events, b non-events; x=1 has c events,
    d non-events."""
    x = np.r_[np.zeros(a + b), np.ones(c + d)]
    y = np.r_[np.ones(a), np.zeros(b), np.ones(c), np.zeros(d)]
    return np.column_stack([np.ones_like(x), x]), y


def small_data(seed=11, n=40):
    rng = np.random.default_rng(seed)
    Z = rng.standard_normal((n, 2))
    g = (rng.random(n) < 0.4).astype(float)
    X = np.column_stack([np.ones(n), Z, g])
    y = (rng.random(n) < expit(X @ [-0.5, 0.8, -0.6, 1.0])).astype(float)
    return X, y


# ---------------------------------------------------------------------------
# tests
# ---------------------------------------------------------------------------


@pytest.mark.parametrize(
    "cells",
    [
        (5, 10, 7, 0),  # zero non-events among the exposed
        (0, 12, 6, 4),  # zero events among the unexposed
        (3, 9, 0, 8),  # zero events among the exposed
    ],
)
def test_two_by_two_table_equals_half_added_to_every_cell(cells):
    # For a binary predictor (a saturated 2x2 model) the Firth estimates are the
    # logits with 0.5 added to every cell (Firth 1993, Biometrika 80:27;
    # Heinze & Schemper 2002, Stat Med 21:2409 -- property recalled from memory,
    # and it follows from the modified score: each covariate pattern then
    # satisfies events + 0.5 = (n_pattern + 1) p).
    a, b, c, d = cells
    X, y = table_data(a, b, c, d)
    res = firth_fit(X, y)
    assert res.converged
    log_or = np.log((c + 0.5) * (b + 0.5) / ((d + 0.5) * (a + 0.5)))
    intercept = np.log((a + 0.5) / (b + 0.5))
    assert res.params[1] == pytest.approx(log_or, abs=1e-9)
    assert res.params[0] == pytest.approx(intercept, abs=1e-9)


def test_close_to_maximum_likelihood_for_large_samples():
    # Firth's correction is O(1/n): on data without separation it must agree
    # with the ordinary fit (statsmodels Logit) to within a few units of 1/n.
    rng = np.random.default_rng(2024)
    n = 20_000
    X = np.column_stack([np.ones(n), rng.standard_normal((n, 3))])
    y = (rng.random(n) < expit(X @ [-1.0, 0.5, -0.3, 0.2])).astype(float)
    ml = sm.Logit(y, X).fit(disp=0)
    res = firth_fit(X, y)
    assert res.converged
    assert np.max(np.abs(res.params - ml.params)) < 20.0 / n
    # The covariance is the inverse information, so the standard errors agree
    # with the maximum-likelihood ones to the same order.
    assert np.allclose(res.bse, ml.bse, rtol=1e-3)


def test_modified_score_is_zero_with_explicit_hat_matrix():
    X, y = small_data()
    res = firth_fit(X, y, tol=1e-12)
    assert res.converged
    score = explicit_modified_score(X, y, res.params)
    assert np.max(np.abs(score)) < 1e-8
    # Reported penalised log-likelihood and covariance match direct formulas.
    assert res.penalized_llf == pytest.approx(explicit_penalized_llf(X, y, res.params), abs=1e-10)
    p = expit(X @ res.params)
    info = X.T @ (X * (p * (1 - p))[:, None])
    assert np.allclose(res.cov_params, np.linalg.inv(info), rtol=1e-10, atol=1e-14)
    assert np.allclose(res.bse, np.sqrt(np.diag(np.linalg.inv(info))), rtol=1e-10)


def test_agrees_with_scipy_maximisation_of_penalized_likelihood():
    X, y = small_data(seed=5, n=60)
    res = firth_fit(X, y)
    b_ref, pl_ref = scipy_max_penalized(X, y)
    assert np.allclose(res.params, b_ref, atol=1e-5)
    assert res.penalized_llf == pytest.approx(pl_ref, abs=1e-8)
    assert res.penalized_llf >= pl_ref - 1e-10


def test_complete_separation_gives_finite_estimates():
    # Ordinary maximum likelihood has no finite solution here (every x > 0 is
    # an event); Firth's estimate is finite and solves the modified score.
    x = np.array([-2.0, -1.5, -1.0, -0.7, -0.2, 0.3, 0.6, 1.1, 1.4, 2.0])
    y = (x > 0).astype(float)
    X = np.column_stack([np.ones_like(x), x])
    res = firth_fit(X, y, tol=1e-12)
    assert res.converged
    assert np.all(np.isfinite(res.params)) and np.all(np.isfinite(res.bse))
    assert np.max(np.abs(explicit_modified_score(X, y, res.params))) < 1e-8
    b_ref, _ = scipy_max_penalized(X, y)
    assert np.allclose(res.params, b_ref, atol=1e-4)


def test_bad_starting_values_still_converge():
    X, y = small_data(seed=3)
    ref = firth_fit(X, y)
    far = firth_fit(X, y, start=[8.0, -9.0, 7.0, -6.0])
    assert far.converged
    assert np.allclose(far.params, ref.params, atol=1e-7)


def test_fixed_coefficient_keeps_full_penalty():
    X, y = small_data(seed=8)
    res = firth_fit(X, y, fixed={2: 0.25}, tol=1e-12)
    assert res.converged
    assert res.params[2] == 0.25
    assert res.bse[2] == 0.0 and res.fixed == (2,)
    # Free coefficients solve the modified score of the full design.
    score = explicit_modified_score(X, y, res.params)
    assert np.max(np.abs(np.delete(score, 2))) < 1e-8
    # And they maximise the explicit penalised likelihood with b_2 = 0.25.
    b_ref, pl_ref = scipy_max_penalized(X, y, fixed={2: 0.25})
    assert np.allclose(res.params, b_ref, atol=1e-5)
    assert res.penalized_llf == pytest.approx(pl_ref, abs=1e-8)


def test_offset_enters_linear_predictor():
    X, y = small_data(seed=4)
    off = np.linspace(-0.5, 0.5, X.shape[0])
    res = firth_fit(X, y, offset=off, tol=1e-12)
    p = expit(X @ res.params + off)
    W_half = np.diag(np.sqrt(p * (1 - p)))
    H = W_half @ X @ np.linalg.inv(X.T @ W_half @ W_half @ X) @ X.T @ W_half
    score = X.T @ (y - p + np.diag(H) * (0.5 - p))
    assert np.max(np.abs(score)) < 1e-8


def test_penalized_lr_test_recomputed():
    X, y = small_data(seed=21, n=50)
    test = firth_lr_test(X, y, [2, 3])
    full = firth_fit(X, y)
    restricted = firth_fit(X, y, fixed={2: 0.0, 3: 0.0})
    # 2 * (difference of penalised log-likelihoods), each recomputed from
    # the explicit formula with the full design's penalty
    # (Heinze & Schemper 2002).
    expected = 2.0 * (
        explicit_penalized_llf(X, y, full.params) - explicit_penalized_llf(X, y, restricted.params)
    )
    assert test.statistic >= 0.0
    assert test.statistic == pytest.approx(expected, abs=1e-8)
    assert test.df == 2 and test.dropped == (2, 3)
    assert test.p_value == pytest.approx(chi2.sf(expected, 2), rel=1e-7)
    # The restricted maximum itself is checked against scipy.
    _, pl_ref = scipy_max_penalized(X, y, fixed={2: 0.0, 3: 0.0})
    assert test.penalized_llf_restricted == pytest.approx(pl_ref, abs=1e-8)


def test_lr_test_nonnegative_for_irrelevant_predictor():
    rng = np.random.default_rng(77)
    n = 80
    X = np.column_stack([np.ones(n), rng.standard_normal(n), rng.standard_normal(n)])
    y = (rng.random(n) < expit(0.3 + 0.9 * X[:, 1])).astype(float)
    test = firth_lr_test(X, y, [2])
    assert test.statistic >= 0.0
    assert 0.0 <= test.p_value <= 1.0
    json.dumps(test.as_dict(), allow_nan=False)


def test_profile_interval_endpoints_hit_the_chi_square_cutoff():
    X, y = small_data(seed=13, n=45)
    _, pl_max = scipy_max_penalized(X, y)
    cutoff = 3.841  # chi-square 0.95 quantile, 1 df (NIST/SEMATECH e-Handbook table)
    assert chi2.ppf(0.95, 1) == pytest.approx(cutoff, abs=5e-4)
    for column in (1, 3):
        ci = firth_profile_ci(X, y, column)
        assert ci.lower < ci.estimate < ci.upper
        assert not (ci.lower_infinite or ci.upper_infinite)
        assert ci.cutoff == pytest.approx(chi2.ppf(0.95, 1))
        for end in (ci.lower, ci.upper):
            _, pl_end = scipy_max_penalized(X, y, fixed={column: end})
            assert 2.0 * (pl_max - pl_end) == pytest.approx(chi2.ppf(0.95, 1), abs=1e-5)
            assert 2.0 * (pl_max - pl_end) == pytest.approx(cutoff, abs=5e-4)


def test_profile_interval_finite_under_separation():
    # Zero cell: maximum likelihood gives no finite upper limit, the penalised
    # profile does (Heinze & Schemper 2002).
    X, y = table_data(5, 10, 7, 0)
    ci = firth_profile_ci(X, y, 1)
    assert np.isfinite(ci.lower) and np.isfinite(ci.upper)
    assert ci.lower < ci.estimate < ci.upper
    _, pl_max = scipy_max_penalized(X, y)
    for end in (ci.lower, ci.upper):
        _, pl_end = scipy_max_penalized(X, y, fixed={1: end})
        assert 2.0 * (pl_max - pl_end) == pytest.approx(chi2.ppf(0.95, 1), abs=1e-5)
    json.dumps(ci.as_dict(), allow_nan=False)


def test_flic_mean_risk_equals_event_rate():
    rng = np.random.default_rng(99)
    n = 120
    X = np.column_stack([np.ones(n), rng.standard_normal((n, 2))])
    y = (rng.random(n) < expit(X @ [-2.0, 1.0, -0.5])).astype(float)
    res = flic(X, y)
    # Puhr et al. 2017 (Stat Med 36:2302): predicted risks average to the
    # observed event rate; the slopes are Firth's.
    assert res.predicted.mean() == pytest.approx(y.mean(), abs=1e-12)
    firth = firth_fit(X, y)
    assert np.allclose(res.params[1:], firth.params[1:], atol=1e-12)
    # Plain Firth predictions are pulled towards 0.5, so they do not average
    # to the event rate.
    assert abs(expit(X @ firth.params).mean() - y.mean()) > 1e-4
    # The intercept equals a statsmodels intercept-only GLM with the Firth
    # linear predictor as offset.
    glm = sm.GLM(
        y, np.ones((n, 1)), family=sm.families.Binomial(), offset=X[:, 1:] @ firth.params[1:]
    ).fit(tol=1e-12)
    assert res.params[0] == pytest.approx(glm.params[0], abs=1e-8)
    assert np.allclose(res.predicted, glm.fittedvalues, atol=1e-10)
    json.dumps(res.as_dict(), allow_nan=False)


def test_user_errors_are_model_errors():
    X, y = small_data()
    with pytest.raises(ModelError):
        firth_fit(X, np.where(y == 1, 2.0, 0.0))
    with pytest.raises(ModelError):
        firth_fit(np.column_stack([X, X[:, 1]]), y)  # duplicated column
    with pytest.raises(ModelError):
        firth_fit(X, y, fixed={9: 0.0})
    with pytest.raises(ModelError):
        firth_lr_test(X, y, [])
    with pytest.raises(ModelError):
        flic(X, np.zeros_like(y))
    with pytest.raises(ModelError):
        flic(X[:, 1:], y)  # no intercept first


def test_result_is_json_ready_and_read_only():
    X, y = small_data()
    res = firth_fit(X, y)
    json.dumps(res.as_dict(), allow_nan=False)
    with pytest.raises(ValueError):
        res.params[0] = 1.0
