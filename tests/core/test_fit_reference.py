"""The fit and its tests against outside references.

Sources are named beside each check.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm
from scipy import stats

from twofold.core.models.design import aliased_columns
from twofold.core.models.fit import chi2_sf, wald_p
from twofold.core.data.io import LoadedTable
from twofold.core.models.study import Study

from pathlib import Path

SAMPLES = Path(__file__).resolve().parents[2] / "sample_studies"


def study_of(frame: pd.DataFrame) -> Study:
    return Study(LoadedTable(frame, Path("memory.csv")))


@pytest.fixture(scope="module")
def spector():
    # Spector & Mazzeo (1980) data as shipped in statsmodels.datasets.
    data = sm.datasets.spector.load_pandas().data
    st = study_of(data.copy())
    st.set_outcome("GRADE")
    return st, data


def test_spector_matches_greene(spector):
    # Published logit estimates, Greene, Econometric Analysis (Table of the
    # Spector-Mazzeo grade example): constant -13.021, GPA 2.826, TUCE 0.095,
    # PSI 2.379; log-likelihood -12.890.
    st, _ = spector
    fit = st.fit(["GPA", "TUCE", "PSI"])
    assert fit.params == pytest.approx([-13.021, 2.826, 0.095, 2.379], abs=6e-4)
    assert fit.llf == pytest.approx(-12.890, abs=6e-4)
    assert fit.converged


def test_spector_every_figure_equals_statsmodels(spector):
    # statsmodels Logit on the same design matrix is the reference library.
    st, data = spector
    fit = st.fit(["GPA", "TUCE", "PSI"])
    X = sm.add_constant(data[["GPA", "TUCE", "PSI"]])
    ref = sm.Logit(data["GRADE"], X).fit(disp=0)
    np.testing.assert_allclose(fit.params, ref.params, rtol=1e-7)
    np.testing.assert_allclose(fit.std_errors, ref.bse, rtol=1e-6)
    np.testing.assert_allclose(fit.z, ref.tvalues, rtol=1e-6)
    np.testing.assert_allclose(fit.p_values, ref.pvalues, rtol=1e-5)
    assert fit.null_llf == pytest.approx(ref.llnull, rel=1e-10)
    assert fit.overall.g == pytest.approx(ref.llr, rel=1e-8)
    assert fit.overall.p_value == pytest.approx(ref.llr_pvalue, rel=1e-6)
    assert fit.overall.df == ref.df_model
    assert fit.aic == pytest.approx(ref.aic, rel=1e-10)
    assert fit.bic == pytest.approx(ref.bic, rel=1e-10)
    assert fit.mcfadden_r2 == pytest.approx(ref.prsquared, rel=1e-8)
    ci = np.exp(ref.conf_int(alpha=0.05).to_numpy())
    lo, hi = fit.odds_ratio_ci
    np.testing.assert_allclose(lo, ci[:, 0], rtol=1e-6)
    np.testing.assert_allclose(hi, ci[:, 1], rtol=1e-6)


@pytest.mark.parametrize("critical, df", [(3.841, 1), (5.991, 2), (7.815, 3)])
def test_chi_square_critical_values(critical, df):
    # NIST/SEMATECH e-Handbook of Statistical Methods, table of upper critical
    # values of the chi-square distribution at 0.05: a G equal to it has p = 0.05.
    assert chi2_sf(critical, df) == pytest.approx(0.05, abs=2e-4)


def test_normal_critical_value():
    # NIST/SEMATECH e-Handbook normal table: z = 1.960 is the two-sided 5% point.
    assert float(wald_p(1.960)) == pytest.approx(0.05, abs=1e-4)
    assert float(wald_p(-1.960)) == pytest.approx(0.05, abs=1e-4)


def _sm_design(frame, columns, refs):
    """The same design built independently with pandas get_dummies."""
    parts = [pd.Series(1.0, index=frame.index, name="const")]
    for c in columns:
        if c in refs:
            dummies = pd.get_dummies(frame[c], dtype=float)
            dummies = dummies.drop(columns=[refs[c]])
            parts.append(dummies.rename(columns=lambda lvl, c=c: f"{c}[{lvl}]"))
        else:
            parts.append(frame[c].astype(float))
    return pd.concat(parts, axis=1)


@pytest.fixture(scope="module")
def readmission():
    st = Study.from_file(SAMPLES / "readmission_synthetic.csv")
    st.set_outcome("readmitted_30d")
    return st


PREDICTORS = ["age", "sex", "length_of_stay", "prior_admissions", "discharge_destination",
              "comorbidity_score", "lives_alone", "followup_call"]


def test_readmission_equals_statsmodels(readmission):
    # statsmodels Logit on an independently built design (pandas get_dummies,
    # complete cases by dropna) is the reference.
    fit = readmission.fit(PREDICTORS)
    frame = readmission.frame[PREDICTORS + ["readmitted_30d"]].dropna()
    refs = {"sex": "F", "discharge_destination": "home", "lives_alone": "no", "followup_call": "no"}
    X = _sm_design(frame, PREDICTORS, refs)
    ref = sm.Logit(frame["readmitted_30d"].astype(float), X).fit(disp=0)
    assert fit.n_used == len(frame)
    ours = dict(zip(fit.names, fit.params))
    assert len(ours) == len(ref.params)
    for name, value in ref.params.items():
        key = "intercept" if name == "const" else name
        assert ours[key] == pytest.approx(value, rel=1e-6, abs=1e-9)
    assert fit.llf == pytest.approx(ref.llf, rel=1e-10)
    # G is the drop in deviance from the constant-only model.
    assert fit.overall.g == pytest.approx(fit.null_deviance - fit.deviance, rel=1e-12)
    assert fit.overall.g == pytest.approx(ref.llr, rel=1e-8)


def test_joint_factor_test_equals_statsmodels_wald_test(readmission):
    # statsmodels' wald_test on the same fit is the reference for the joint test.
    fit = readmission.fit(PREDICTORS)
    frame = readmission.frame[PREDICTORS + ["readmitted_30d"]].dropna()
    refs = {"sex": "F", "discharge_destination": "home", "lives_alone": "no", "followup_call": "no"}
    X = _sm_design(frame, PREDICTORS, refs)
    ref = sm.Logit(frame["readmitted_30d"].astype(float), X).fit(disp=0)
    levels = [f"discharge_destination[{lvl}]" for lvl in ("home_with_support", "care_home", "other_hospital")]
    restriction = np.zeros((3, X.shape[1]))
    for i, name in enumerate(levels):
        restriction[i, list(X.columns).index(name)] = 1.0
    wt = ref.wald_test(restriction, scalar=True)
    ours = fit.term_tests["discharge_destination"]
    assert ours.df == 3
    assert ours.statistic == pytest.approx(float(wt.statistic), rel=1e-6)
    assert ours.p_value == pytest.approx(float(wt.pvalue), rel=1e-5)


def test_nested_g_is_difference_of_deviances(readmission):
    # G = 2 (lnL_large - lnL_small) = deviance_small - deviance_large; checked
    # against statsmodels fits of both models on the rows complete for the larger.
    small, large, test = readmission.compare(["age", "sex"], ["age", "sex", "comorbidity_score", "discharge_destination"])
    assert np.array_equal(small.design.rows, large.design.rows)
    assert test.df == 4  # one numeric + a 4-level factor counting 3
    assert test.g == pytest.approx(small.deviance - large.deviance, rel=1e-12)
    frame = readmission.frame[["age", "sex", "comorbidity_score", "discharge_destination", "readmitted_30d"]].dropna()
    refs = {"sex": "F", "discharge_destination": "home"}
    y = frame["readmitted_30d"].astype(float)
    r_small = sm.Logit(y, _sm_design(frame, ["age", "sex"], refs)).fit(disp=0)
    r_large = sm.Logit(y, _sm_design(frame, ["age", "sex", "comorbidity_score", "discharge_destination"], refs)).fit(disp=0)
    g_ref = 2 * (r_large.llf - r_small.llf)
    assert test.g == pytest.approx(g_ref, rel=1e-8)
    assert test.p_value == pytest.approx(stats.chi2.sf(g_ref, 4), rel=1e-6)


def test_wound_study_equals_statsmodels_where_it_converges():
    # statsmodels on the same design matrix, on the predictors that do not separate.
    st = Study.from_file(SAMPLES / "wound_infection_synthetic.csv")
    st.set_outcome("infection", "yes")
    fit = st.fit(["age", "bmi", "diabetes", "operation_minutes"])
    X = fit.design.X
    ref = sm.Logit(fit.design.y, X).fit(disp=0)
    np.testing.assert_allclose(fit.params, ref.params, rtol=1e-6)
    np.testing.assert_allclose(fit.std_errors, ref.bse, rtol=1e-6)
    assert not [n for n in fit.notices if n.code == "separation"]


def test_rank_check_agrees_with_numpy_rank():
    # numpy.linalg.matrix_rank (SVD) is the reference for aliasing.
    rng = np.random.default_rng(11)
    n = 500
    a = rng.normal(size=n)
    b = rng.normal(size=n)
    X = np.column_stack([np.ones(n), a, b, a + 2 * b, np.full(n, 3.0), rng.normal(size=n)])
    dropped = aliased_columns(X)
    assert dropped == [3, 4]
    kept = [j for j in range(X.shape[1]) if j not in dropped]
    assert np.linalg.matrix_rank(X[:, kept]) == len(kept) == np.linalg.matrix_rank(X)
