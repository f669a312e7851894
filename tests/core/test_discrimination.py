"""Checks of the discrimination measures against outside references.

References used below: scipy.stats.mannwhitneyu, scikit-learn
(roc_auc_score, roc_curve, confusion_matrix, recall_score, precision_score),
and a direct O(n1 * n0) computation of the structural components written
from DeLong, DeLong & Clarke-Pearson (1988, Biometrics 44:837), section 2.
"""

from __future__ import annotations

import json

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy.stats import mannwhitneyu, norm
from sklearn.metrics import (
    confusion_matrix,
    precision_score,
    recall_score,
    roc_auc_score,
    roc_curve,
)

from twofold.core.assessing.discrimination import (
    auc_delong,
    classification_table,
    delong_paired,
    roc_points,
)
from twofold.core.errors import TwofoldError


def _sample(n=300, seed=20240611, ties=True):
    rng = np.random.default_rng(seed)
    x = rng.normal(size=n)
    lp = -0.5 + 1.2 * x
    y = (rng.random(n) < 1.0 / (1.0 + np.exp(-lp))).astype(float)
    score_a = lp + rng.normal(scale=0.8, size=n)
    score_b = 0.6 * lp + rng.normal(scale=1.2, size=n)
    if ties:
        # Coarse rounding creates many tied scores, within and across groups.
        score_a = np.round(score_a, 1)
        score_b = np.round(score_b, 0)
    return y, score_a, score_b


def _slow_components(y, s):
    """DeLong et al. (1988) placements by the definition, O(n1 * n0).

    psi(X, Y) = 1 if X > Y, 1/2 if X = Y, 0 if X < Y, with X an event score and
    Y a non-event score; V10(X_i) = mean_j psi(X_i, Y_j),
    V01(Y_j) = mean_i psi(X_i, Y_j).
    """
    x = s[y == 1]
    yy = s[y == 0]
    psi = (x[:, None] > yy[None, :]) + 0.5 * (x[:, None] == yy[None, :])
    return psi.mean(), psi.mean(axis=1), psi.mean(axis=0)


def _slow_cov(y, scores):
    """DeLong (1988) covariance S = S10 / m + S01 / n of several AUCs."""
    comps = [_slow_components(y, s) for s in scores]
    aucs = np.array([c[0] for c in comps])
    v10 = np.array([c[1] for c in comps])
    v01 = np.array([c[2] for c in comps])
    m, n = v10.shape[1], v01.shape[1]
    d10 = v10 - aucs[:, None]
    d01 = v01 - aucs[:, None]
    s10 = d10 @ d10.T / (m - 1)
    s01 = d01 @ d01.T / (n - 1)
    return aucs, s10 / m + s01 / n


# ---------------------------------------------------------------------------
# AUC
# ---------------------------------------------------------------------------


@pytest.mark.parametrize("ties", [False, True])
def test_auc_equals_mann_whitney_and_sklearn(ties):
    y, s, _ = _sample(ties=ties)
    res = auc_delong(y, s)
    # scipy: U of the first sample = #(event > non-event) + 0.5 #(ties).
    u = mannwhitneyu(s[y == 1], s[y == 0]).statistic
    n1, n0 = int(y.sum()), int((1 - y).sum())
    assert res.auc == pytest.approx(u / (n1 * n0), abs=1e-12)
    # scikit-learn roc_auc_score.
    assert res.auc == pytest.approx(roc_auc_score(y, s), abs=1e-12)
    assert (res.n_events, res.n_nonevents) == (n1, n0)


@settings(max_examples=60, deadline=None)
@given(
    st.lists(
        st.tuples(st.integers(0, 1), st.integers(-3, 3)), min_size=4, max_size=40
    )
)
def test_auc_matches_sklearn_on_arbitrary_tied_data(rows):
    y = np.array([r[0] for r in rows], dtype=float)
    s = np.array([r[1] for r in rows], dtype=float)
    if y.sum() in (0, y.size):
        with pytest.raises(TwofoldError):
            auc_delong(y, s)
        return
    # scikit-learn roc_auc_score is the reference.
    assert auc_delong(y, s).auc == pytest.approx(roc_auc_score(y, s), abs=1e-12)


@pytest.mark.parametrize("ties", [False, True])
def test_delong_se_equals_direct_structural_components(ties):
    y, s, _ = _sample(n=120, seed=7, ties=ties)
    aucs, cov = _slow_cov(y, [s])
    res = auc_delong(y, s)
    assert res.auc == pytest.approx(aucs[0], abs=1e-12)
    assert res.se == pytest.approx(np.sqrt(cov[0, 0]), rel=1e-10)


def test_ci_is_on_the_logit_scale_and_inside_unit_interval():
    y, s, _ = _sample(n=60, seed=3)
    # A very strong score on a small sample: a Wald interval on the AUC scale
    # would reach past 1; the logit one must not.
    s = s + 3.0 * y
    res = auc_delong(y, s)
    assert res.auc + norm.ppf(0.975) * res.se > 1.0  # the plain Wald limit
    assert 0.0 < res.ci_low < res.auc < res.ci_high < 1.0
    # Interval symmetric on the logit scale with half-width
    # z * se / (auc (1 - auc)) (delta method; z from scipy.stats.norm).
    logit = lambda v: np.log(v / (1 - v))  # noqa: E731
    half = norm.ppf(0.975) * res.se / (res.auc * (1 - res.auc))
    assert logit(res.ci_high) - logit(res.auc) == pytest.approx(half, rel=1e-10)
    assert logit(res.auc) - logit(res.ci_low) == pytest.approx(half, rel=1e-10)
    assert res.ci_method == "logit"
    # A 90% interval lies inside the 95% one.
    res90 = auc_delong(y, s, level=0.90)
    assert res.ci_low < res90.ci_low and res90.ci_high < res.ci_high


@pytest.mark.parametrize("sign, expected", [(1.0, 1.0), (-1.0, 0.0)])
def test_perfect_separation_gives_unavailable_interval(sign, expected):
    y = np.array([0, 0, 0, 1, 1, 1], dtype=float)
    s = sign * np.array([1, 2, 3, 4, 5, 6], dtype=float)
    res = auc_delong(y, s)
    assert res.auc == expected
    assert res.se == 0.0
    assert np.isnan(res.ci_low) and np.isnan(res.ci_high)
    assert res.ci_method == "unavailable"
    assert [n.code for n in res.notices] == ["auc_ci_unavailable"]


def test_single_event_has_no_standard_error():
    y = np.array([0, 0, 0, 1], dtype=float)
    s = np.array([0.1, 0.5, 0.3, 0.4])
    res = auc_delong(y, s)
    # 2 of 3 non-events score below the single event.
    assert res.auc == pytest.approx(roc_auc_score(y, s))
    assert np.isnan(res.se) and res.ci_method == "unavailable"


@pytest.mark.parametrize("y", [np.zeros(5), np.ones(5)])
def test_refuses_when_one_class_is_missing(y):
    with pytest.raises(TwofoldError):
        auc_delong(y, np.arange(5.0))
    with pytest.raises(TwofoldError):
        roc_points(y, np.arange(5.0))


def test_refuses_malformed_input():
    with pytest.raises(TwofoldError):
        auc_delong([0, 1, 2], [0.1, 0.2, 0.3])
    with pytest.raises(TwofoldError):
        auc_delong([0, 1, 1], [0.1, 0.2])
    with pytest.raises(TwofoldError):
        auc_delong([0, 1, 1], [0.1, np.nan, 0.3])


def test_auc_as_dict_is_json_ready():
    y, s, _ = _sample(n=80, seed=11)
    d = auc_delong(y, s).as_dict()
    assert json.loads(json.dumps(d))["auc"] == pytest.approx(roc_auc_score(y, s))


# ---------------------------------------------------------------------------
# paired comparison
# ---------------------------------------------------------------------------


@pytest.mark.parametrize("ties", [False, True])
def test_paired_difference_and_se_equal_direct_computation(ties):
    y, a, b = _sample(n=150, seed=99, ties=ties)
    aucs, cov = _slow_cov(y, [a, b])
    res = delong_paired(y, a, b)
    se = np.sqrt(cov[0, 0] + cov[1, 1] - 2 * cov[0, 1])
    assert res.auc_a == pytest.approx(roc_auc_score(y, a), abs=1e-12)
    assert res.auc_b == pytest.approx(roc_auc_score(y, b), abs=1e-12)
    assert res.difference == pytest.approx(aucs[0] - aucs[1], abs=1e-12)
    assert res.se == pytest.approx(se, rel=1e-10)
    z = (aucs[0] - aucs[1]) / se
    assert res.z == pytest.approx(z, rel=1e-10)
    # Two-sided normal p-value (scipy.stats.norm).
    assert res.p_value == pytest.approx(2 * norm.sf(abs(z)), rel=1e-10)
    assert res.ci_low < res.difference < res.ci_high


def test_paired_is_antisymmetric_and_identical_scores_give_p_one():
    y, a, b = _sample(n=150, seed=5)
    ab = delong_paired(y, a, b)
    ba = delong_paired(y, b, a)
    assert ab.difference == pytest.approx(-ba.difference)
    assert ab.p_value == pytest.approx(ba.p_value)
    # Any increasing transform ranks rows identically: same AUC, zero SE.
    same = delong_paired(y, a, np.exp(a))
    assert same.difference == pytest.approx(0.0, abs=1e-15)
    assert same.z == 0.0 and same.p_value == 1.0


# ---------------------------------------------------------------------------
# ROC points
# ---------------------------------------------------------------------------


@pytest.mark.parametrize("ties", [False, True])
def test_roc_points_equal_sklearn_roc_curve(ties):
    y, s, _ = _sample(ties=ties)
    ours = roc_points(y, s)
    # scikit-learn roc_curve without dropping collinear points.
    fpr, tpr, thr = roc_curve(y, s, drop_intermediate=False)
    ours_set = set(zip(ours.fpr.round(12), ours.tpr.round(12)))
    assert ours_set == set(zip(fpr.round(12), tpr.round(12)))
    np.testing.assert_allclose(ours.fpr, fpr, atol=1e-12)
    np.testing.assert_allclose(ours.tpr, tpr, atol=1e-12)
    np.testing.assert_array_equal(ours.thresholds[1:], thr[1:])
    assert ours.thresholds[0] == np.inf
    # The default (thinned) curve of scikit-learn is a subset of ours.
    fpr_d, tpr_d, _ = roc_curve(y, s)
    assert set(zip(fpr_d.round(12), tpr_d.round(12))) <= ours_set
    assert (ours.fpr[0], ours.tpr[0]) == (0.0, 0.0)
    assert (ours.fpr[-1], ours.tpr[-1]) == (1.0, 1.0)
    # The trapezoid area under these points is the AUC (Mann-Whitney).
    assert np.trapezoid(ours.tpr, ours.fpr) == pytest.approx(roc_auc_score(y, s))


def test_roc_arrays_are_read_only():
    y, s, _ = _sample(n=40, seed=1)
    curve = roc_points(y, s)
    with pytest.raises(ValueError):
        curve.fpr[0] = 0.5


# ---------------------------------------------------------------------------
# classification table
# ---------------------------------------------------------------------------


@pytest.mark.parametrize("threshold", [0.1, 0.3, 0.5, 0.8])
def test_classification_table_against_sklearn(threshold):
    y, s, _ = _sample(n=400, seed=21, ties=False)
    p = 1.0 / (1.0 + np.exp(-s))
    p[:5] = threshold  # rows exactly at the threshold count as predicted events
    res = classification_table(y, p, threshold)
    pred = (p >= threshold).astype(int)
    # scikit-learn confusion_matrix: rows observed, columns predicted.
    (tn, fp), (fn, tp) = confusion_matrix(y.astype(int), pred, labels=[0, 1])
    assert (res.true_negatives, res.false_positives) == (tn, fp)
    assert (res.false_negatives, res.true_positives) == (fn, tp)
    assert res.sensitivity == pytest.approx(recall_score(y, pred))
    assert res.specificity == pytest.approx(recall_score(y, pred, pos_label=0))
    assert res.positive_predictive_value == pytest.approx(precision_score(y, pred))
    assert res.negative_predictive_value == pytest.approx(
        precision_score(y, pred, pos_label=0)
    )


def test_classification_table_undefined_ratios_are_nan():
    y = np.array([0, 1, 0, 1], dtype=float)
    p = np.array([0.2, 0.3, 0.4, 0.1])
    res = classification_table(y, p, 0.9)  # nobody predicted an event
    assert res.true_positives == res.false_positives == 0
    assert np.isnan(res.positive_predictive_value)
    assert res.sensitivity == 0.0 and res.specificity == 1.0
    assert json.loads(json.dumps(res.as_dict()))["true_negatives"] == 2
    with pytest.raises(TwofoldError):
        classification_table(y, p, 1.5)
    with pytest.raises(TwofoldError):
        classification_table(y, p * 3, 0.5)


def test_last_digit_noise_does_not_split_ties():
    # Records with the same predictor values share one risk; a matrix product can leave them a unit in
    # the last place apart.  Reference: scikit-learn's roc_auc_score on the exactly tied scores.
    rng = np.random.default_rng(11)
    y = rng.integers(0, 2, 400).astype(float)
    base = rng.choice([0.1, 0.25, 0.4], 400)
    noisy = base * (1.0 + rng.choice([-1.0, 0.0, 1.0], 400) * np.finfo(float).eps)
    assert len(np.unique(noisy)) > 3  # the noise really splits them
    assert auc_delong(y, noisy).auc == pytest.approx(roc_auc_score(y, base), abs=1e-15)
    assert len(roc_points(y, noisy).fpr) == 3 + 1
