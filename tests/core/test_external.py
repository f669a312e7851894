"""A saved model on new records: O/E, the integrated calibration index, the validation sample size."""

from __future__ import annotations

import math

import numpy as np
import pytest
import statsmodels.api as sm
from scipy.special import expit, logit
from scipy.stats import norm
from statsmodels.nonparametric.smoothers_lowess import lowess

from twofold.core.assessing.calibration import smoothed_calibration
from twofold.core.assessing.external import (
    calibration_index,
    n_for_c_statistic,
    n_for_calibration_slope,
    n_for_observed_expected,
    observed_expected,
    validation_sample_size,
)


def test_observed_expected_follows_the_formula():
    y = np.array([1, 0, 0, 1, 0, 0, 0, 1, 0, 0])
    p = np.array([0.2, 0.1, 0.3, 0.4, 0.1, 0.2, 0.1, 0.5, 0.3, 0.2])
    oe = observed_expected(y, p)
    # By hand: O = 3, E = 2.4, O/E = 1.25; SE(ln O/E) = sqrt((1 - 0.3) / (10 * 0.3)) (Riley et al. 2024, BMJ
    # 384:e074821; the binomial variance of ln O by the delta method).
    se = math.sqrt(0.7 / 3.0)
    assert (oe["observed"], oe["expected"]) == (3, pytest.approx(2.4))
    assert oe["ratio"] == pytest.approx(1.25)
    assert oe["ci_low"] == pytest.approx(1.25 * math.exp(-1.96 * se))
    assert oe["ci_high"] == pytest.approx(1.25 * math.exp(1.96 * se))


def test_observed_expected_interval_covers_the_truth_at_least_95_percent():
    # Seeded simulation: risks that are right (true O/E = 1); the interval should hold 1 in at least about 95% of
    # extracts.  Slightly more (algebra): the binomial variance n phi (1 - phi) of one common event proportion is
    # at least the variance sum p (1 - p) of records with differing risks, so the interval errs on the wide side.
    rng = np.random.default_rng(18)
    hits = 0
    reps = 2000
    for _ in range(reps):
        p = expit(rng.normal(-1.5, 1.0, size=800))
        y = (rng.uniform(size=p.size) < p).astype(int)
        oe = observed_expected(y, p)
        hits += oe["ci_low"] <= 1 <= oe["ci_high"]
    assert 0.94 <= hits / reps <= 0.985


def test_ici_e50_e90_match_a_direct_lowess_on_every_record():
    # Austin & Steyerberg (2019, Stat Med 38:4051): ICI = mean |p - loess(y ~ p)(p)|, E50 its median, E90 its
    # 90th centile; here the smoother is statsmodels' lowess with the curve's own settings, on all 3,000 records.
    rng = np.random.default_rng(5)
    p = expit(rng.normal(-1, 1.2, size=3000))
    y = (rng.uniform(size=p.size) < expit(logit(p) * 0.7 + 0.3)).astype(int)
    order = np.argsort(p)
    xs = p[order]
    fitted = lowess(y[order], xs, frac=2 / 3, it=0, delta=0.01 * (xs[-1] - xs[0]), is_sorted=True,
                    return_sorted=False)
    gap = np.abs(xs - fitted)
    got = calibration_index(p, smoothed_calibration(y, p))
    assert got["ici"] == pytest.approx(gap.mean(), abs=1e-12)
    assert got["e50"] == pytest.approx(np.median(gap), abs=1e-12)
    assert got["e90"] == pytest.approx(np.quantile(gap, 0.9), abs=1e-12)


def test_ici_recovers_a_known_miscalibration():
    # Risks whose true logit is half a unit lower: the true calibration curve is known, so the ICI should be close
    # to the mean of |p - expit(logit(p) - 0.5)| (the definition with the true curve in place of the smoothed).
    rng = np.random.default_rng(9)
    p = expit(rng.normal(-1, 1, size=100_000))
    truth = expit(logit(p) - 0.5)
    y = (rng.uniform(size=p.size) < truth).astype(int)
    got = calibration_index(p, smoothed_calibration(y, p))
    assert got["ici"] == pytest.approx(np.mean(np.abs(p - truth)), abs=0.005)
    assert got["e90"] > got["e50"] > 0
    # Right risks: what remains is the smoother's noise (its curve is drawn through 5,000 of the records).
    well = calibration_index(p, smoothed_calibration((rng.uniform(size=p.size) < p).astype(int), p))
    assert well["ici"] < 0.25 * got["ici"]


def test_no_curve_gives_no_index():
    assert calibration_index(np.array([0.2, 0.3]), None) == {"ici": None, "e50": None, "e90": None}


def test_sample_size_matches_the_worked_example_of_riley_et_al():
    # Reference figures from the tests that Riley et al. published with their method's code: event proportion 0.018,
    # C-statistic 0.8, linear predictor ~ Normal(-5, 2.5); an O/E interval of width 1 needs 905 (searched there in
    # steps of 0.0001 of the SE, so one more or less here), a C-statistic interval of width 0.1 needs 4,252, and a
    # calibration-slope interval of width 0.2 about 4,500 (from 1,000 simulated linear predictors there, hence
    # the loose tolerance).
    assert abs(n_for_observed_expected(0.018, 1.0) - 905) <= 1
    assert n_for_c_statistic(0.8, 0.018, 0.1) == 4252
    m = 200_000
    lp = -5 + 2.5 * norm.ppf((np.arange(m) + 0.5) / m)  # the normal distribution at evenly spaced quantiles
    assert n_for_calibration_slope(lp, 0.2) == pytest.approx(4501, rel=0.03)
    size = validation_sample_size(0.018, 0.8, lp, 5000)
    assert size.n_required == max(size.n_observed_expected, size.n_calibration_slope, size.n_c_statistic)
    assert size.met is (5000 >= size.n_required)


def test_slope_criterion_gives_the_interval_width_asked_for():
    # At the rows the criterion asks for, a calibrated model's slope interval from statsmodels' logistic fit
    # of y on lp should be about 0.2 wide.
    rng = np.random.default_rng(21)
    lp_dist = rng.normal(-1.5, 0.8, size=200_000)
    n = n_for_calibration_slope(lp_dist, 0.2)
    widths = []
    for _ in range(20):
        lp = rng.normal(-1.5, 0.8, size=n)
        y = (rng.uniform(size=n) < expit(lp)).astype(int)
        ci = sm.Logit(y, sm.add_constant(lp)).fit(disp=0).conf_int()[1]
        widths.append(ci[1] - ci[0])
    assert np.mean(widths) == pytest.approx(0.2, rel=0.05)


def test_same_risk_everywhere_has_no_slope_criterion():
    assert n_for_calibration_slope(np.full(100, -1.0), 0.2) is None
    assert n_for_c_statistic(1.0, 0.2, 0.1) is None


def _rcs_by_hand(x, t):
    """Harrell's restricted cubic spline basis written out here (Harrell 2015, eq. 2.25), unscaled."""
    k = len(t)
    cols = [x]
    for j in range(k - 2):
        cols.append(np.maximum(x - t[j], 0) ** 3
                    - np.maximum(x - t[k - 2], 0) ** 3 * (t[k - 1] - t[j]) / (t[k - 1] - t[k - 2])
                    + np.maximum(x - t[k - 1], 0) ** 3 * (t[k - 2] - t[j]) / (t[k - 1] - t[k - 2]))
    return np.column_stack([np.ones_like(x)] + cols)


def test_calibration_band_matches_a_hand_written_newton_fit_with_its_delta_method_band():
    from twofold.core.assessing.external import calibration_band

    rng = np.random.default_rng(11)
    lp = rng.normal(-1.2, 1.1, 4000)
    y = (rng.random(4000) < expit(0.2 + 0.8 * lp)).astype(float)  # miscalibrated on purpose
    p = expit(lp)
    band = calibration_band(y, p)
    # Independent route: the basis by hand (unscaled, so the coefficients differ but the curve may not), knots at
    # Harrell's 5/35/65/95% quantiles, Newton-Raphson written here, V = (X'WX)^-1, band expit(eta -/+ 1.96 se).
    x = logit(p)
    t = np.quantile(x, [0.05, 0.35, 0.65, 0.95])
    B = _rcs_by_hand(x, t)
    b = np.zeros(B.shape[1])
    for _ in range(50):
        q = expit(B @ b)
        b += np.linalg.solve((B * (q * (1 - q))[:, None]).T @ B, B.T @ (y - q))
    q = expit(B @ b)
    V = np.linalg.inv((B * (q * (1 - q))[:, None]).T @ B)
    at = _rcs_by_hand(logit(band.risk), t)
    eta = at @ b
    se = np.sqrt(np.einsum("ij,jk,ik->i", at, V, at))
    assert band.knots == 4
    assert band.observed == pytest.approx(expit(eta), rel=1e-6)
    assert band.low == pytest.approx(expit(eta - 1.96 * se), rel=1e-6)
    assert band.high == pytest.approx(expit(eta + 1.96 * se), rel=1e-6)
    assert band.risk[0] == pytest.approx(np.quantile(p, 0.01)) and band.risk[-1] == pytest.approx(np.quantile(p, 0.99))


def test_calibration_band_holds_the_diagonal_for_a_calibrated_model_about_95_percent_of_the_time():
    # Seeded simulation: risks that are right; at the median risk the pointwise 95% band should hold the truth in
    # about 95% of extracts (between 90% and 99% of 200 here).
    from twofold.core.assessing.external import calibration_band

    rng = np.random.default_rng(2)
    hits = 0
    for _ in range(200):
        p = expit(rng.normal(-1.0, 1.0, 800))
        y = (rng.random(800) < p).astype(float)
        band = calibration_band(y, p, points=3)
        mid = 1
        hits += band.low[mid] <= band.risk[mid] <= band.high[mid]
    assert 180 <= hits <= 198


def test_calibration_band_is_none_without_both_outcomes():
    from twofold.core.assessing.external import calibration_band

    assert calibration_band(np.zeros(100), np.full(100, 0.2)) is None
