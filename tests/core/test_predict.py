"""Predicted risk for one described patient, against a hand computation and statsmodels."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm
from scipy.special import expit

from twofold.core.analysis import AnalysisSpec, run_analysis
from twofold.core.errors import ModelError, TwofoldError
from twofold.core.outputs.predict import FrozenModel, design_matrix, frozen_model, predict

ROOT = Path(__file__).resolve().parents[2]
READMIT = ROOT / "sample_studies" / "readmission_synthetic.csv"
PREDICTORS = ["age", "discharge_destination", "lives_alone"]
Z = 1.959963984540054  # two-sided 95% normal quantile (NIST/SEMATECH table: 1.960)


@pytest.fixture(scope="module")
def fitted():
    res = run_analysis(AnalysisSpec(data=str(READMIT), outcome="readmitted_30d", predictors=PREDICTORS))
    model = frozen_model(res.fit, res.study.outcome, res.study.event)
    # Round trip through the session layout, as the command line uses it.
    return res, FrozenModel.from_dict(model.as_dict())


@pytest.fixture(scope="module")
def reference():
    """statsmodels Logit on the complete rows with indicator columns made by pandas."""
    frame = pd.read_csv(READMIT)[PREDICTORS + ["readmitted_30d"]].dropna()
    X = pd.DataFrame({"const": 1.0, "age": frame.age})
    for lvl in ("home_with_support", "care_home", "other_hospital"):
        X[lvl] = (frame.discharge_destination == lvl).astype(float)
    X["alone"] = (frame.lives_alone == "yes").astype(float)
    return frame, X, sm.Logit(frame.readmitted_30d, X).fit(disp=0)


def test_matches_hand_computation_and_statsmodels(fitted, reference):
    _, model = fitted
    frame, X, ref = reference
    values = {"age": "72", "discharge_destination": "care_home", "lives_alone": "yes"}
    got = predict(model, values)
    # Hand computation with numpy from the saved coefficients and covariance.
    x = np.array([1.0, 72.0, 0.0, 1.0, 0.0, 1.0])
    b, V = model.coefficients, model.covariance
    eta = x @ b
    se = np.sqrt(x @ V @ x)
    assert got.probability == pytest.approx(1 / (1 + np.exp(-eta)), rel=1e-12)
    assert got.se == pytest.approx(se, rel=1e-12)
    assert (got.ci_low, got.ci_high) == pytest.approx((expit(eta - Z * se), expit(eta + Z * se)), rel=1e-12)
    # Outside reference: statsmodels' get_prediction on the same design.  Its interval is the
    # link-scale interval transformed back, expit(xb -/+ 1.96 se), which is checked first.
    frame_x = pd.DataFrame([x], columns=X.columns)
    sf = ref.get_prediction(frame_x).summary_frame()
    sm_eta = float(x @ ref.params.to_numpy())
    sm_se = float(np.sqrt(x @ ref.cov_params().to_numpy() @ x))
    assert sf["ci_lower"].iloc[0] == pytest.approx(expit(sm_eta - Z * sm_se), rel=1e-6)
    assert sf["ci_upper"].iloc[0] == pytest.approx(expit(sm_eta + Z * sm_se), rel=1e-6)
    assert got.probability == pytest.approx(sf["predicted"].iloc[0], rel=1e-7)
    assert got.ci_low == pytest.approx(sf["ci_lower"].iloc[0], rel=1e-6)
    assert got.ci_high == pytest.approx(sf["ci_upper"].iloc[0], rel=1e-6)


def test_reference_levels_give_zeros(fitted, reference):
    _, model = fitted
    _, _, ref = reference
    got = predict(model, {"age": 50, "discharge_destination": "home", "lives_alone": "no"})
    # Reference groups: only the intercept and age count (statsmodels' coefficients).
    assert got.probability == pytest.approx(expit(ref.params["const"] + 50 * ref.params["age"]), rel=1e-7)


def test_level_matching_is_forgiving_about_case_and_spaces(fitted):
    _, model = fitted
    a = predict(model, {"age": 60, "discharge_destination": "care_home", "lives_alone": "yes"})
    b = predict(model, {"age": " 60 ", "discharge_destination": "CARE_HOME", "lives_alone": " Yes "})
    assert a == b


@pytest.mark.parametrize("values, fragment", [
    ({"age": 60, "discharge_destination": "home"}, "No value was given for 'lives_alone'"),
    ({"age": 60, "discharge_destination": "moon", "lives_alone": "no"}, "'moon' is not a group"),
    ({"age": "sixty", "discharge_destination": "home", "lives_alone": "no"}, "is not a number"),
    ({"age": 60, "discharge_destination": "home", "lives_alone": "no", "sex": "F"}, "'sex' is not a predictor"),
    ({"age": "nan", "discharge_destination": "home", "lives_alone": "no"}, "not a finite number"),
])
def test_refusals(fitted, values, fragment):
    _, model = fitted
    with pytest.raises(ModelError) as info:
        predict(model, values)
    assert fragment in str(info.value)


def test_extrapolation_is_refused_with_the_range(fitted, reference):
    _, model = fitted
    frame, _, _ = reference
    lo, hi = frame.age.min(), frame.age.max()  # range of the rows used, by pandas
    with pytest.raises(ModelError) as info:
        predict(model, {"age": hi + 1, "discharge_destination": "home", "lives_alone": "no"})
    assert f"({lo:g} to {hi:g})" in str(info.value)
    predict(model, {"age": hi, "discharge_destination": "home", "lives_alone": "no"})  # the edge itself is fine


def test_design_matrix_on_the_same_rows(fitted, reference):
    res, model = fitted
    frame, X, _ = reference
    full = pd.read_csv(READMIT)
    got, missing = design_matrix(model, full)
    assert np.array_equal(np.flatnonzero(~missing), frame.index.to_numpy())
    np.testing.assert_array_equal(got[~missing], X.to_numpy())


def test_design_matrix_refuses_unseen_group_and_text(fitted):
    _, model = fitted
    frame = pd.read_csv(READMIT).head(50).copy()
    frame.loc[3, "discharge_destination"] = "hospice"
    with pytest.raises(TwofoldError, match="never saw"):
        design_matrix(model, frame)
    frame = pd.read_csv(READMIT).head(50).astype({"age": object})
    frame.loc[3, "age"] = "old"
    with pytest.raises(TwofoldError, match="holds text"):
        design_matrix(model, frame)


def test_spline_and_interaction_terms_match_the_fit():
    # A saved spline-and-interaction model must rebuild the fit's own design exactly; the fit's design is
    # checked elsewhere against Harrell's basis, so here the outside check is statsmodels' prediction.
    res = run_analysis(AnalysisSpec(data=str(READMIT), outcome="readmitted_30d",
                                    predictors=["age", "sex"], splines={"age": 4}, interactions=["age:sex"]))
    model = FrozenModel.from_dict(frozen_model(res.fit, res.study.outcome, res.study.event).as_dict())
    X, missing = design_matrix(model, pd.read_csv(READMIT))
    np.testing.assert_allclose(X[~missing], res.fit.design.X[:, res.fit.kept], rtol=0, atol=1e-12)
    ref = sm.Logit(res.fit.design.y, res.fit.design.X[:, res.fit.kept]).fit(disp=0)
    row = X[10:11]
    sf = ref.get_prediction(row).summary_frame()
    got = predict(model, {"age": pd.read_csv(READMIT).age[10], "sex": pd.read_csv(READMIT).sex[10]})
    assert got.probability == pytest.approx(sf["predicted"].iloc[0], rel=1e-6)
    assert got.ci_low == pytest.approx(sf["ci_lower"].iloc[0], rel=1e-5)
