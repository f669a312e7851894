"""Tests for profile-likelihood confidence intervals of maximum-likelihood fits.

The endpoints are checked by re-fitting, with statsmodels GLM (binomial
family, the fixed coefficient entered as an offset), the model at each
reported end and confirming that the likelihood-ratio statistic there equals
the chi-square cut-off.  statsmodels has no profile-likelihood interval for
logistic models of its own, so there is no direct comparison of endpoints.
"""

from __future__ import annotations

import json
import math

import numpy as np
import pytest
import statsmodels.api as sm
from scipy.special import expit
from scipy.stats import bernoulli, chi2

from twofold.core.errors import ModelError
from twofold.core.models.profile import profile_all, profile_likelihood_ci

CHI2_95_1DF = 3.841  # chi-square upper 5% point, 1 df (NIST/SEMATECH e-Handbook table)
CHI2_90_1DF = 2.706  # chi-square upper 10% point, 1 df (NIST/SEMATECH e-Handbook table)


def spector():
    """Spector & Mazzeo (1980) teaching-method data shipped with statsmodels."""
    data = sm.datasets.spector.load_pandas()
    X = sm.add_constant(data.exog.to_numpy(dtype=float), prepend=True)
    y = data.endog.to_numpy(dtype=float)
    return X, y


def lr_at(X, y, column, b, llf_hat):
    """2 * (llf_hat - llf with coefficient `column` fixed at b), the others
    re-fitted by statsmodels GLM with offset b * x_column."""
    others = np.delete(X, column, axis=1)
    fit = sm.GLM(y, others, family=sm.families.Binomial(), offset=b * X[:, column]).fit(
        tol=1e-12, maxiter=200
    )
    return 2.0 * (llf_hat - fit.llf)


def test_cutoff_matches_published_table():
    assert chi2.ppf(0.95, 1) == pytest.approx(CHI2_95_1DF, abs=5e-4)
    assert chi2.ppf(0.90, 1) == pytest.approx(CHI2_90_1DF, abs=5e-4)


def test_spector_endpoints_reach_the_cutoff():
    X, y = spector()
    fit = sm.Logit(y, X).fit(disp=0)
    for column in range(X.shape[1]):
        ci = profile_likelihood_ci(X, y, column, fit.params, fit.llf)
        assert ci.lower < fit.params[column] < ci.upper
        assert not (ci.lower_infinite or ci.upper_infinite)
        assert ci.converged and ci.notices == ()
        for end in (ci.lower, ci.upper):
            stat = lr_at(X, y, column, end, fit.llf)
            assert stat == pytest.approx(chi2.ppf(0.95, 1), abs=1e-6)
            assert stat == pytest.approx(CHI2_95_1DF, abs=5e-4)


def test_spector_interval_is_near_wald_but_not_symmetric():
    # With 32 rows the profile interval is close to, but not the same as, the
    # Wald interval from statsmodels (the profile is not symmetric).
    X, y = spector()
    fit = sm.Logit(y, X).fit(disp=0)
    wald = fit.conf_int(0.05)
    ci = profile_likelihood_ci(X, y, 3, fit.params, fit.llf)  # PSI, the teaching method
    width = wald[3, 1] - wald[3, 0]
    assert abs(ci.lower - wald[3, 0]) < 0.25 * width
    assert abs(ci.upper - wald[3, 1]) < 0.25 * width
    assert not math.isclose(ci.upper - fit.params[3], fit.params[3] - ci.lower, rel_tol=1e-3)


def test_other_level():
    X, y = spector()
    fit = sm.Logit(y, X).fit(disp=0)
    ci = profile_likelihood_ci(X, y, 1, fit.params, fit.llf, level=0.90)
    assert ci.cutoff == pytest.approx(CHI2_90_1DF, abs=5e-4)
    for end in (ci.lower, ci.upper):
        assert lr_at(X, y, 1, end, fit.llf) == pytest.approx(chi2.ppf(0.90, 1), abs=1e-6)
    wide = profile_likelihood_ci(X, y, 1, fit.params, fit.llf, level=0.95)
    assert wide.lower < ci.lower and ci.upper < wide.upper


def test_quasi_separation_gives_infinite_upper_end():
    # Every exposed person has the event, the unexposed are mixed: the
    # maximum-likelihood log odds ratio is +infinity and so is the upper end.
    x = np.r_[np.zeros(10), np.ones(8)]
    y = np.r_[np.ones(4), np.zeros(6), np.ones(8)]
    X = np.column_stack([np.ones_like(x), x])
    # Supremum of the log-likelihood in closed form: the unexposed group at
    # its observed proportion 4/10, the exposed group contributing log(1) = 0.
    llf_sup = 4 * math.log(0.4) + 6 * math.log(0.6)
    glm = sm.GLM(y, X, family=sm.families.Binomial()).fit()
    assert glm.llf == pytest.approx(llf_sup, abs=1e-6)
    ci = profile_likelihood_ci(X, y, 1, glm.params, llf_sup, name="exposed")
    assert ci.upper_infinite and ci.upper == math.inf
    assert not ci.lower_infinite and math.isfinite(ci.lower)
    assert lr_at(X, y, 1, ci.lower, llf_sup) == pytest.approx(chi2.ppf(0.95, 1), abs=1e-6)
    assert [n.code for n in ci.notices] == ["separation"]
    assert ci.notices[0].subjects == ("exposed",)
    d = ci.as_dict()
    assert d["upper"] is None and d["upper_infinite"] is True
    json.dumps(d, allow_nan=False)


def test_intercept_only_model():
    rng = np.random.default_rng(3)
    y = (rng.random(50) < 0.3).astype(float)
    X = np.ones((50, 1))
    b_hat = math.log(y.mean() / (1 - y.mean()))
    llf_hat = bernoulli.logpmf(y, y.mean()).sum()
    ci = profile_likelihood_ci(X, y, 0, [b_hat], llf_hat)
    for end in (ci.lower, ci.upper):
        # Log-likelihood from scipy's Bernoulli distribution at p = expit(end).
        stat = 2.0 * (llf_hat - bernoulli.logpmf(y, expit(end)).sum())
        assert stat == pytest.approx(chi2.ppf(0.95, 1), abs=1e-6)


def test_profile_all_matches_single_calls():
    X, y = spector()
    fit = sm.Logit(y, X).fit(disp=0)
    table = profile_all(X, y, fit.params, fit.llf, columns=[1, 3])
    assert len(table) == 2
    for ci, column in zip(table, [1, 3]):
        one = profile_likelihood_ci(X, y, column, fit.params, fit.llf)
        assert ci.column == column
        assert ci.lower == pytest.approx(one.lower, abs=1e-9)
        assert ci.upper == pytest.approx(one.upper, abs=1e-9)
    everything = profile_all(X, y, fit.params, fit.llf)
    assert [c.column for c in everything] == [0, 1, 2, 3]
    json.dumps(everything.as_dict(), allow_nan=False)


def test_user_errors():
    X, y = spector()
    fit = sm.Logit(y, X).fit(disp=0)
    with pytest.raises(ModelError):
        profile_likelihood_ci(X, y, 7, fit.params, fit.llf)
    with pytest.raises(ModelError):
        profile_likelihood_ci(X, y, 1, fit.params[:2], fit.llf)
    with pytest.raises(ModelError):
        profile_likelihood_ci(X, y, 1, fit.params, fit.llf, level=1.5)
    with pytest.raises(ModelError):
        # A log-likelihood far above what the model can reach.
        profile_likelihood_ci(X, y, 1, fit.params, fit.llf + 50.0)
