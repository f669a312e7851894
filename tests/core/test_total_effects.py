"""Tests of a predictor that is part of an interaction, odds ratios at stated values, and coefficient wording.

A predictor in an interaction is tested with every term that contains it
(its total effect); testing its main effect alone tests its effect where the
other predictor is zero, which moves with that predictor's origin.  The
references are statsmodels fits built from formulas (patsy designs, not
Twofold's), and algebra.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd
import pytest
import statsmodels.formula.api as smf
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st_

from twofold.core.data.io import LoadedTable
from twofold.core.models.modelling import stated_effects
from twofold.core.models.study import Study, drop_one_tests
from twofold.core.outputs.summary import fit_record

Z95 = 1.959963984540054  # scipy.stats.norm.ppf(0.975)


def synthetic(n=900, seed=5):
    """Synthetic ward records of a fictional hospital: age, sex, a lab value, and an outcome."""
    rng = np.random.default_rng(seed)
    age = rng.uniform(20, 90, n)
    sex = rng.choice(["F", "M"], n)
    lab = rng.normal(5, 1.5, n)
    m = (sex == "M").astype(float)
    eta = -4 + 0.04 * age + 0.5 * m - 0.02 * age * m + 0.2 * lab
    y = (rng.random(n) < 1 / (1 + np.exp(-eta))).astype(int)
    return pd.DataFrame({"age": age, "sex": sex, "lab": lab, "y": y})


def study_of(frame):
    st = Study(LoadedTable(frame, Path("memory.csv")))
    st.set_outcome("y", 1)
    st.set_reference("sex", "F")  # as patsy's C(sex) does (first level in sorted order)
    return st


def fitted(frame, predictors):
    st = study_of(frame)
    return st, st.fit(predictors)


def test_total_effect_likelihood_ratio_equals_statsmodels_without_the_predictor_and_its_interaction():
    # Reference: statsmodels formula fits of the full model and of the model without age and age:sex.
    frame = synthetic()
    st, fit = fitted(frame, ["age", "sex", "lab", "age:sex"])
    full = smf.logit("y ~ age * C(sex) + lab", frame).fit(disp=0)
    without_age = smf.logit("y ~ C(sex) + lab", frame).fit(disp=0)
    without_sex = smf.logit("y ~ age + lab", frame).fit(disp=0)
    tests = {t.column: t for t in drop_one_tests(st, fit)}
    assert tests["age"].includes == ("age:sex",)
    assert tests["age"].label == "age, with its interaction with sex"
    assert tests["age"].df == 2
    assert tests["age"].g == pytest.approx(2 * (full.llf - without_age.llf), rel=1e-6)
    assert tests["sex"].g == pytest.approx(2 * (full.llf - without_sex.llf), rel=1e-6)
    # The interaction keeps its own test beside them.
    without_product = smf.logit("y ~ age + C(sex) + lab", frame).fit(disp=0)
    assert tests["age:sex"].g == pytest.approx(2 * (full.llf - without_product.llf), rel=1e-6)
    assert tests["age:sex"].df == 1
    assert tests["lab"].includes == ()


def test_total_effect_wald_equals_statsmodels_joint_wald_test():
    # Reference: statsmodels' wald_test of age and age:sex together on its own formula fit.
    frame = synthetic()
    _, fit = fitted(frame, ["age", "sex", "lab", "age:sex"])
    full = smf.logit("y ~ age * C(sex) + lab", frame).fit(disp=0)
    ref = full.wald_test("age = 0, age:C(sex)[T.M] = 0", scalar=True)
    t = fit.term_tests["age"]
    assert t.df == 2
    assert t.statistic == pytest.approx(float(ref.statistic), rel=1e-6)
    assert t.label == "age, with its interaction with sex"
    record = fit_record(fit, "y", 1)
    shown = next(r for r in record["term_tests"] if r["column"] == "age")
    assert shown["includes"] == ["age:sex"]


@settings(max_examples=12, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(shift=st_.floats(-200, 200), scale=st_.sampled_from([0.001, 0.1, 1.0, 12.0, 1000.0]))
def test_every_test_statistic_is_unchanged_by_shifting_or_rescaling_a_number(shift, scale):
    # Invariance: moving a predictor's origin or unit changes no hypothesis about its total effect,
    # the interaction's own test, the whole-model G, or the tests of the other predictors.
    frame = synthetic(n=400, seed=11)
    moved = frame.assign(age=(frame["age"] + shift) * scale)
    st_a, a = fitted(frame, ["age", "sex", "lab", "age:sex"])
    st_b, b = fitted(moved, ["age", "sex", "lab", "age:sex"])
    assert b.overall.g == pytest.approx(a.overall.g, rel=1e-6)
    for column in ("age", "sex"):
        assert b.term_tests[column].statistic == pytest.approx(a.term_tests[column].statistic, rel=1e-5)
    ta = {t.column: t for t in drop_one_tests(st_a, a)}
    tb = {t.column: t for t in drop_one_tests(st_b, b)}
    for column in ("age", "sex", "lab", "age:sex"):
        assert tb[column].g == pytest.approx(ta[column].g, rel=1e-5, abs=1e-7)
        assert tb[column].wald == pytest.approx(ta[column].wald, rel=1e-5, abs=1e-7)


def test_spline_tests_are_unchanged_by_shifting_the_number():
    # Invariance: knots move with the values, so a curve's tests do not depend on the origin.
    frame = synthetic(n=600, seed=3)
    st_a = study_of(frame)
    st_a.set_spline("age", 4)
    a = st_a.fit(["age", "sex", "lab"])
    st_b = study_of(frame.assign(age=frame["age"] - 1000.0))
    st_b.set_spline("age", 4)
    b = st_b.fit(["age", "sex", "lab"])
    assert b.term_tests["age"].statistic == pytest.approx(a.term_tests["age"].statistic, rel=1e-5)
    ga = {t.column: t.g for t in drop_one_tests(st_a, a)}
    gb = {t.column: t.g for t in drop_one_tests(st_b, b)}
    assert gb["age"] == pytest.approx(ga["age"], rel=1e-5)


def test_odds_ratio_of_sex_at_the_median_age_equals_a_fit_centred_there():
    # Reference: statsmodels fit with age centred at its median: the sex coefficient there is
    # the log odds ratio of M vs F at the median age, with its own Wald interval.
    frame = synthetic()
    _, fit = fitted(frame, ["age", "sex", "age:sex"])
    median = float(np.median(frame["age"]))
    ref = smf.logit("y ~ I(age - m) * C(sex)", frame.assign(m=median)).fit(disp=0)
    b = ref.params["C(sex)[T.M]"]
    se = ref.bse["C(sex)[T.M]"]
    effects = stated_effects(fit)
    at_median = next(e for e in effects if e["column"] == "sex" and "(median)" in e["label"])
    assert at_median["label"].startswith("sex: M vs F, where age is ")
    assert at_median["odds_ratio"] == pytest.approx(np.exp(b), rel=1e-6)
    assert at_median["or_ci_low"] == pytest.approx(np.exp(b - Z95 * se), rel=1e-5)
    assert at_median["or_ci_high"] == pytest.approx(np.exp(b + Z95 * se), rel=1e-5)
    # Age per unit within each sex, both stated.
    per_unit = [e for e in effects if e["column"] == "age"]
    assert {e["label"] for e in per_unit} == {"age (per 1 unit), where sex is F", "age (per 1 unit), where sex is M"}
    men = smf.logit("y ~ age", frame[frame.sex == "M"]).fit(disp=0)
    # A model with the full interaction fits each sex's age slope separately (algebra).
    m_row = next(e for e in per_unit if e["label"].endswith("M"))
    assert m_row["odds_ratio"] == pytest.approx(np.exp(men.params["age"]), rel=1e-5)


def rcs_reference(x, knots):
    """Restricted cubic spline basis written from Harrell, Regression Modeling Strategies (2015), eq. 2.25,
    scaled by (t_k - t_1)^2 as is usual; an independent route to the curve's columns."""
    t = np.asarray(knots, dtype=float)
    k = len(t)
    cols = [x]
    for j in range(k - 2):
        term = (np.maximum(x - t[j], 0) ** 3
                - np.maximum(x - t[k - 2], 0) ** 3 * (t[k - 1] - t[j]) / (t[k - 1] - t[k - 2])
                + np.maximum(x - t[k - 1], 0) ** 3 * (t[k - 2] - t[j]) / (t[k - 1] - t[k - 2]))
        cols.append(term / (t[k - 1] - t[0]) ** 2)
    return np.column_stack(cols)


def test_curve_odds_ratios_between_stated_values_equal_statsmodels_contrasts():
    # Reference: statsmodels Logit on the basis built independently above; the odds ratio of the
    # 75th percentile against the median is exp(contrast' b), its interval from statsmodels' t_test.
    frame = synthetic(n=1500, seed=8)
    st = study_of(frame)
    st.set_spline("age", 4)
    fit = st.fit(["age", "lab"])
    knots = st.block("age").knots
    import statsmodels.api as sm

    basis = rcs_reference(frame["age"].to_numpy(), knots)
    X = np.column_stack([np.ones(len(frame)), basis, frame["lab"].to_numpy()])
    ref = sm.Logit(frame["y"].to_numpy(), X).fit(disp=0)
    median = float(np.median(frame["age"]))
    p75 = float(np.percentile(frame["age"], 75))
    row = rcs_reference(np.array([p75]), knots)[0] - rcs_reference(np.array([median]), knots)[0]
    contrast = np.concatenate([[0.0], row, [0.0]])
    t = ref.t_test(contrast)
    est, se = float(np.squeeze(t.effect)), float(np.squeeze(t.sd))
    stated = next(e for e in stated_effects(fit) if "75th percentile" in e["label"])
    assert stated["label"].startswith("age ") and "(median)" in stated["label"]
    assert stated["odds_ratio"] == pytest.approx(np.exp(est), rel=1e-5)
    assert stated["or_ci_high"] == pytest.approx(np.exp(est + Z95 * se), rel=1e-4)


def test_curve_coefficients_carry_no_per_unit_odds_ratio_and_read_in_plain_words():
    frame = synthetic(n=600, seed=4)
    st = study_of(frame)
    st.set_spline("age", 4)
    fit = st.fit(["age", "sex"])
    record = fit_record(fit, "y", 1)
    curve = [t for t in record["terms"] if t["column"] == "age"]
    assert [t["label"] for t in curve] == ["age: curve, slope below the first knot", "age: curve term 1",
                                           "age: curve term 2"]
    assert all(t["odds_ratio"] is None and t["withheld"] == "curve" for t in curve)
    assert all("None" not in t["label"] and "per 1 unit" not in t["label"] for t in curve)
    sex = next(t for t in record["terms"] if t["column"] == "sex")
    assert sex["label"] == "sex: M vs F" and sex["odds_ratio"] is not None
    assert any(e["column"] == "age" for e in record["effects_at_values"])


def test_interaction_coefficients_are_worded_with_both_predictors():
    frame = synthetic()
    _, fit = fitted(frame, ["age", "sex", "age:sex"])
    labels = [r["label"] for r in fit.coefficient_rows[1:]]
    assert labels == ["age (per 1 unit)", "sex: M vs F", "age \u00d7 sex: M vs F (per 1 unit)"]
