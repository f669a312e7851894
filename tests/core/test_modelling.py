"""Splines, interactions and bootstrap validation against outside references."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm

from twofold.core.errors import ModelError
from twofold.core.data.io import LoadedTable
from twofold.core.models.modelling import (bootstrap_validation, conditional_odds_ratios, effect_curve,
                                    interaction_tests, nonlinearity_tests)
from twofold.core.models.study import Study
from twofold.core.models.terms import KNOT_QUANTILES, rcs_basis

SAMPLES = Path(__file__).resolve().parents[2] / "sample_studies"


def study_of(frame, outcome="y"):
    st = Study(LoadedTable(frame, Path("memory.csv")))
    st.set_outcome(outcome, 1)
    return st


@pytest.mark.parametrize("k", [3, 4, 5])
def test_knots_are_the_stated_quantiles(k):
    # Harrell, Regression Modeling Strategies (2015), sec. 2.4.6; numpy.quantile
    # is the reference for the quantiles themselves.
    st = Study.from_file(SAMPLES / "readmission_synthetic.csv")
    st.set_outcome("readmitted_30d")
    st.set_spline("age", k)
    block = st.block("age")
    assert block.width == k - 1  # the value plus k - 2 non-linear terms
    ages = st.frame["age"].dropna().to_numpy(dtype=float)
    assert block.knots == pytest.approx(np.quantile(ages, KNOT_QUANTILES[k]))


def test_spline_basis_is_linear_beyond_the_outer_knots():
    # Property of a restricted cubic spline (Stone & Koo 1985; Harrell 2015):
    # second differences vanish outside the outer knots.
    knots = np.array([1.0, 3.0, 5.0, 9.0])
    x = np.linspace(9.0, 20.0, 12)
    second = np.diff(rcs_basis(x, knots), n=2, axis=0)
    assert np.allclose(second, 0.0, atol=1e-9)
    x = np.linspace(-5.0, 1.0, 7)
    assert np.allclose(rcs_basis(x, knots)[:, 1:], 0.0)


def test_spline_with_nonlinear_terms_at_zero_is_the_straight_line():
    # statsmodels GLM with the non-linear coefficients held at zero (fit_constrained)
    # is the reference; it must equal Twofold's straight-line fit.
    rng = np.random.default_rng(21)
    x = rng.uniform(0, 10, 800)
    y = (rng.random(800) < 1 / (1 + np.exp(-(-1 + 0.2 * x)))).astype(int)
    st = study_of(pd.DataFrame({"x": x, "y": y}))
    line = st.fit(["x"])
    st.set_spline("x", 4)
    spline = st.fit(["x"])
    X = spline.design.X
    glm = sm.GLM(y, X, family=sm.families.Binomial())
    constrained = glm.fit_constrained("x2 = 0, x3 = 0")
    assert constrained.params[:2] == pytest.approx(line.params, rel=1e-6)
    assert spline.llf >= line.llf


def test_nonlinearity_test_finds_a_u_shape_and_not_a_line():
    # Seeded simulations: a U-shaped risk (true log odds quadratic in x) gives a
    # highly significant test; a straight-line risk (one seed shown) does not.
    rng = np.random.default_rng(5)
    x = rng.uniform(-3, 3, 2000)
    u = (rng.random(2000) < 1 / (1 + np.exp(-(-1.5 + 0.6 * x ** 2)))).astype(int)
    line = (rng.random(2000) < 1 / (1 + np.exp(-(-1.0 + 0.5 * x)))).astype(int)
    for outcome, significant in ((u, True), (line, False)):
        st = study_of(pd.DataFrame({"x": x, "y": outcome}))
        st.set_spline("x", 4)
        fit = st.fit(["x"])
        (test,) = nonlinearity_tests(st, fit)
        assert test.df == 2
        # The same G from statsmodels fits of both models (outside reference).
        ref_line = sm.Logit(outcome, fit.design.X[:, :2]).fit(disp=0)
        ref_spline = sm.Logit(outcome, fit.design.X).fit(disp=0)
        assert test.g == pytest.approx(2 * (ref_spline.llf - ref_line.llf), rel=1e-6)
        assert (test.p_value < 1e-6) if significant else (test.p_value > 0.05)


def test_interaction_equals_statsmodels_with_the_product_column():
    # statsmodels Logit with the product column built by hand is the reference.
    st = Study.from_file(SAMPLES / "readmission_synthetic.csv")
    st.set_outcome("readmitted_30d")
    fit = st.fit(["length_of_stay", "followup_call", "length_of_stay:followup_call"])
    f = st.frame
    call = (f.followup_call == "yes").astype(float)
    X = pd.DataFrame({"const": 1.0, "los": f.length_of_stay.astype(float), "call": call,
                      "los_call": f.length_of_stay * call})
    ref = sm.Logit(f.readmitted_30d, X).fit(disp=0)
    np.testing.assert_allclose(fit.params, ref.params, rtol=1e-6)
    np.testing.assert_allclose(fit.std_errors, ref.bse, rtol=1e-6)
    (t,) = interaction_tests(st, fit)
    small = sm.Logit(f.readmitted_30d, X[["const", "los", "call"]]).fit(disp=0)
    assert t.g == pytest.approx(2 * (ref.llf - small.llf), rel=1e-6)
    assert t.df == 1
    # The odds ratio of length of stay when a call was made: exp(b_los + b_los:call),
    # its interval from the covariance (delta method on the log-odds scale).
    rows = conditional_odds_ratios(fit, "length_of_stay", "followup_call")
    yes = next(r for r in rows if r["at"] == "yes")
    b = ref.params["los"] + ref.params["los_call"]
    v = ref.cov_params()
    se = np.sqrt(v.loc["los", "los"] + v.loc["los_call", "los_call"] + 2 * v.loc["los", "los_call"])
    assert yes["odds_ratio"] == pytest.approx(np.exp(b), rel=1e-6)
    assert yes["or_ci_low"] == pytest.approx(np.exp(b - 1.959964 * se), rel=1e-5)


def test_factor_by_factor_interaction_columns():
    st = Study.from_file(SAMPLES / "readmission_synthetic.csv")
    st.set_outcome("readmitted_30d")
    fit = st.fit(["sex", "discharge_destination", "sex:discharge_destination"])
    assert fit.n_params == 1 + 1 + 3 + 3  # (2-1)(4-1) interaction columns
    # A saturated two-factor model reproduces the observed cell proportions (a
    # property of maximum likelihood with a full set of cell indicators).
    f = st.frame
    observed = f.groupby(["sex", "discharge_destination"])["readmitted_30d"].mean()
    fitted = pd.Series(fit.fitted, index=f.index).groupby([f.sex, f.discharge_destination]).mean()
    np.testing.assert_allclose(fitted.to_numpy(), observed.to_numpy(), rtol=1e-6)


def test_interaction_needs_its_main_effects():
    st = Study.from_file(SAMPLES / "readmission_synthetic.csv")
    st.set_outcome("readmitted_30d")
    with pytest.raises(ModelError, match="needs both"):
        st.fit(["age", "age:sex"])


def test_effect_curve_is_one_at_the_reference():
    st = Study.from_file(SAMPLES / "readmission_synthetic.csv")
    st.set_outcome("readmitted_30d")
    st.set_spline("age", 4)
    fit = st.fit(["age", "sex"])
    curve = effect_curve(fit, "age", reference=60.0)
    i = np.argmin(np.abs(curve["x"] - 60.0))
    assert curve["low"][i] <= curve["odds_ratio"][i] <= curve["high"][i]
    # At exactly the reference the odds ratio is 1 with no width.
    exact = effect_curve(fit, "age", reference=float(curve["x"][10]))
    assert exact["odds_ratio"][10] == pytest.approx(1.0)
    assert exact["high"][10] - exact["low"][10] == pytest.approx(0.0, abs=1e-12)


def test_bootstrap_on_noise_corrects_auc_towards_one_half():
    # Seeded simulation: 12 pure-noise predictors, 150 records. The apparent AUC
    # is inflated by over-fitting; the optimism-corrected one falls toward 0.5
    # (Harrell, Lee & Mark 1996).
    rng = np.random.default_rng(17)
    n = 150
    frame = pd.DataFrame({f"noise{i}": rng.normal(size=n) for i in range(12)})
    frame["y"] = (rng.random(n) < 0.4).astype(int)
    st = study_of(frame)
    fit = st.fit([f"noise{i}" for i in range(12)])
    v = bootstrap_validation(fit, repetitions=100, seed=4)
    assert v.auc_apparent > 0.64
    assert v.auc_corrected < v.auc_apparent - 0.05
    assert abs(v.auc_corrected - 0.5) < abs(v.auc_apparent - 0.5) / 2
    assert v.calibration_slope_corrected < 0.8  # over-fitted: predictions too extreme
    # Same seed, same answer; a different seed, a different one.
    assert bootstrap_validation(fit, repetitions=100, seed=4).auc_corrected == v.auc_corrected
    assert bootstrap_validation(fit, repetitions=100, seed=5).auc_corrected != v.auc_corrected


def test_bootstrap_can_be_cancelled():
    from twofold.core.models.modelling import ValidationCancelled

    st = Study.from_file(SAMPLES / "readmission_synthetic.csv")
    st.set_outcome("readmitted_30d")
    fit = st.fit(["age", "sex"])
    seen = []
    with pytest.raises(ValidationCancelled):
        bootstrap_validation(fit, repetitions=50, seed=1, progress=lambda d, t: seen.append(d),
                             cancelled=lambda: len(seen) >= 5)
    assert len(seen) < 50


def _firth_reference(X, y, iterations=200):
    """Firth's estimate from its modified score X'(y - p + h(1/2 - p)) = 0 (Firth 1993; Heinze & Schemper
    2002, Stat Med 21:2409), by plain Newton-type steps written here from the paper, then FLIC's intercept
    (Puhr et al. 2017, Stat Med 36:2302) by scipy's brentq."""
    from scipy.optimize import brentq
    from scipy.special import expit

    b = np.zeros(X.shape[1])
    for _ in range(iterations):
        p = expit(X @ b)
        w = p * (1 - p)
        info = X.T @ (X * w[:, None])
        inv = np.linalg.inv(info)
        h = np.einsum("ij,jk,ik->i", X * np.sqrt(w)[:, None], inv, X * np.sqrt(w)[:, None])
        step = inv @ (X.T @ (y - p + h * (0.5 - p)))
        step = np.clip(step, -5, 5)
        b = b + step
        if np.max(np.abs(step)) < 1e-10:
            break
    slopes = X[:, 1:] @ b[1:]
    b0 = brentq(lambda c: expit(c + slopes).sum() - y.sum(), -50, 50, xtol=1e-14)
    return np.concatenate([[b0], b[1:]])


def _performance_reference(y, lp):
    """AUC by scikit-learn, calibration slope by statsmodels, Brier by its definition."""
    from scipy.special import expit
    from sklearn.metrics import roc_auc_score

    slope = sm.Logit(y, sm.add_constant(lp)).fit(disp=0).params[1]
    return roc_auc_score(y, lp), slope, float(np.mean((expit(lp) - y) ** 2))


def test_bootstrap_of_a_firth_model_refits_each_resample_by_firth_with_corrected_intercept():
    # Independent route: the same resamples (numpy SeedSequence spawned as documented), each refitted by the
    # Firth + FLIC written in this test from the papers, performance by scikit-learn and statsmodels.
    rng = np.random.default_rng(9)
    n = 90
    frame = pd.DataFrame({"a": rng.normal(size=n), "b": rng.normal(size=n)})
    frame["y"] = (rng.random(n) < 1 / (1 + np.exp(-(-1 + 1.2 * frame.a)))).astype(int)
    st = study_of(frame)
    fit = st.fit(["a", "b"], firth=True)
    v = bootstrap_validation(fit, repetitions=15, seed=3, workers=1)
    assert v.method.startswith("Firth")
    X = np.column_stack([np.ones(n), frame.a, frame.b])
    y = frame.y.to_numpy(dtype=float)
    app = _performance_reference(y, X @ _firth_reference(X, y))
    optimism = []
    for child in np.random.SeedSequence(3).spawn(15):
        idx = np.random.default_rng(child).integers(0, n, size=n)
        b = _firth_reference(X[idx], y[idx])
        boot = _performance_reference(y[idx], X[idx] @ b)
        test = _performance_reference(y, X @ b)
        optimism.append(np.subtract(boot, test))
    opt = np.mean(optimism, axis=0)
    assert v.auc_apparent == pytest.approx(app[0], rel=1e-9)
    assert v.brier_apparent == pytest.approx(app[2], rel=1e-7)  # the FLIC risks, not the plain Firth intercept
    assert v.auc_corrected == pytest.approx(app[0] - opt[0], rel=1e-7)
    assert v.calibration_slope_corrected == pytest.approx(app[1] - opt[1], rel=1e-5)
    assert v.brier_corrected == pytest.approx(app[2] - opt[2], rel=1e-6)
