"""The assessment of a fit as a whole, against outside references."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest
import statsmodels.api as sm
from scipy import stats
from sklearn.metrics import roc_auc_score

from twofold.core.assessing.assessment import assess
from twofold.core.models.ladder import Ladder
from twofold.core.models.penalised import profile_intervals
from twofold.core.models.study import Study, drop_one_tests

SAMPLES = Path(__file__).resolve().parents[2] / "sample_studies"
PREDICTORS = ["age", "sex", "prior_admissions", "discharge_destination", "lives_alone", "followup_call"]


@pytest.fixture(scope="module")
def readmission():
    st = Study.from_file(SAMPLES / "readmission_synthetic.csv")
    st.set_outcome("readmitted_30d")
    return st


@pytest.fixture(scope="module")
def fitted(readmission):
    fit = readmission.fit(PREDICTORS)
    return fit, assess(readmission, fit, threshold=0.2)


def test_auc_equals_mann_whitney_and_sklearn(fitted):
    # scipy.stats.mannwhitneyu: AUC = U / (n1 n0); scikit-learn roc_auc_score.
    fit, a = fitted
    y, p = fit.design.y, fit.fitted
    u = stats.mannwhitneyu(p[y == 1], p[y == 0]).statistic
    assert a.auc.auc == pytest.approx(u / ((y == 1).sum() * (y == 0).sum()), rel=1e-12)
    assert a.auc.auc == pytest.approx(roc_auc_score(y, p), rel=1e-12)
    lo, hi = a.as_record()["auc_ci"]
    assert 0 < lo < a.auc.auc < hi < 1


def test_apparent_calibration_is_one_and_zero(fitted):
    # A property of the maximum-likelihood score equations with an intercept:
    # on the fitted data the slope is 1 and calibration-in-the-large is 0.
    _, a = fitted
    rec = a.as_record()
    assert rec["calibration_slope"] == pytest.approx(1.0, abs=1e-6)
    assert rec["calibration_intercept"] == pytest.approx(0.0, abs=1e-6)
    assert "by construction" in rec["calibration_note"]


def test_influence_equals_statsmodels_glm(fitted):
    # statsmodels GLM(Binomial).get_influence on the same design is the reference.
    fit, a = fitted
    glm = sm.GLM(fit.design.y, fit.design.X, family=sm.families.Binomial()).fit()
    infl = glm.get_influence()
    cooks = infl.cooks_distance[0]
    top = np.argsort(-cooks)[:10]
    rec = a.as_record()["influential"]
    assert [r["row"] for r in rec] == [int(fit.design.rows[i]) + 1 for i in top]
    assert [r["cooks_distance"] for r in rec] == pytest.approx(cooks[top], rel=1e-6)
    assert [r["leverage"] for r in rec] == pytest.approx(infl.hat_matrix_diag[top], rel=1e-6)


def test_drop_one_equals_statsmodels_refits(readmission, fitted):
    # Likelihood-ratio test of each predictor against statsmodels refits
    # without it on the same rows.
    fit, a = fitted
    X, y = fit.design.X, fit.design.y
    full = sm.Logit(y, X).fit(disp=0)
    for test in a.drop_one:
        keep = [j for j in range(X.shape[1]) if j not in set(fit.term_index[test.column].tolist())]
        reduced = sm.Logit(y, X[:, keep]).fit(disp=0)
        assert test.g == pytest.approx(2 * (full.llf - reduced.llf), rel=1e-7)
        assert test.df == X.shape[1] - len(keep)


def test_hauck_donner_flag_on_the_separating_factor():
    # Hauck & Donner (1977): under (quasi-)separation the Wald statistic
    # collapses while the likelihood-ratio statistic stays large.
    st = Study.from_file(SAMPLES / "wound_infection_synthetic.csv")
    st.set_outcome("infection", "yes")
    fit = st.fit(["age", "wound_class", "diabetes"])
    tests = {t.column: t for t in drop_one_tests(st, fit)}
    assert tests["wound_class"].prefer_lr
    assert tests["wound_class"].g > 20 * tests["wound_class"].wald
    assert not tests["diabetes"].prefer_lr


def test_classification_table_against_a_count(fitted):
    fit, a = fitted
    c = a.as_record()["classification"]
    pred = fit.fitted >= 0.2
    y = fit.design.y == 1
    assert c["sensitivity"] == pytest.approx((pred & y).sum() / y.sum())
    assert c["specificity"] == pytest.approx((~pred & ~y).sum() / (~y).sum())
    assert "clinical choice" in c["note"]


def test_pseudo_r2_against_statsmodels(fitted):
    # statsmodels Logit prsquared (McFadden) and GLM pseudo_rsquared('cs').
    fit, a = fitted
    ref = sm.Logit(fit.design.y, fit.design.X).fit(disp=0)
    glm = sm.GLM(fit.design.y, fit.design.X, family=sm.families.Binomial()).fit()
    rec = a.as_record()
    assert rec["mcfadden_r2"] == pytest.approx(ref.prsquared, rel=1e-8)
    assert rec["cox_snell_r2"] == pytest.approx(glm.pseudo_rsquared(kind="cs"), rel=1e-6)


def test_vif_of_uncorrelated_sample_predictors_is_small(fitted):
    from statsmodels.stats.outliers_influence import variance_inflation_factor

    fit, a = fitted
    rec = {v["column"]: v for v in a.as_record()["vif"]}
    age = fit.term_index["age"][0]
    assert rec["age"]["value"] == pytest.approx(variance_inflation_factor(fit.design.X, age), rel=1e-6)
    assert not any(v["flagged"] for v in rec.values())


def test_profile_interval_endpoints_cut_at_chi_square(readmission):
    # NIST/SEMATECH e-Handbook chi-square table: 3.841 on 1 df at 0.05. At each
    # end of the interval the LR statistic, refitted with statsmodels GLM and
    # the coefficient as an offset, equals that value.
    fit = readmission.fit(["age", "followup_call"])
    iv = profile_intervals(fit)
    X, y = fit.design.X, fit.design.y
    j = fit.names.index("followup_call[yes]")
    for end in iv["followup_call[yes]"]:
        b = np.log(end)
        others = [k for k in range(X.shape[1]) if k != j]
        r = sm.GLM(y, X[:, others], family=sm.families.Binomial(), offset=b * X[:, j]).fit()
        assert 2 * (fit.llf - r.llf) == pytest.approx(3.841, abs=2e-3)


def test_ladder_pairs_auc_by_delong(readmission):
    ladder = Ladder(readmission)
    ladder.add(["age"])
    ladder.add(["age", "prior_admissions"])
    c = ladder.compare(0, 1)
    a0 = roc_auc_score(ladder.rungs[0].fit.design.y, ladder.rungs[0].fit.fitted)
    a1 = roc_auc_score(ladder.rungs[1].fit.design.y, ladder.rungs[1].fit.fitted)
    assert c.auc_test.difference == pytest.approx(a0 - a1, rel=1e-9)
    assert c.auc_test.p_value < 0.05


def test_ladder_tests_each_rung_against_the_one_it_came_from(readmission):
    # After returning to rung 1 and adding from there, the new rung's test is
    # against rung 1, also after a refit on new common rows; a failed fit
    # leaves the ladder as it was.
    from twofold.core.errors import TwofoldError

    ladder = Ladder(readmission)
    ladder.add(["age"])
    ladder.add(["age", "sex", "prior_admissions"])
    ladder.select(0)
    r = ladder.add(["age", "followup_call"])
    assert r.previous == 0 and r.added == ("followup_call",)
    rows_before = ladder.rows.copy()
    with pytest.raises(TwofoldError):
        ladder.add(["age", "admission_id"])
    assert len(ladder) == 3 and np.array_equal(ladder.rows, rows_before)
    ladder.add(["age", "followup_call", "lives_alone"])  # fewer common rows: every rung refitted
    t = ladder.rungs[2].against_previous
    assert t.g == pytest.approx(2 * (ladder.rungs[2].fit.llf - ladder.rungs[0].fit.llf), rel=1e-9)
    assert ladder.nested(1, 2) is None
