"""Checks of the calibration measures against outside references.

References used below: scikit-learn brier_score_loss; statsmodels Logit and
GLM results (score equations, prsquared, pseudo_rsquared); pandas.qcut for
the risk groups; scipy.stats.chi2; statsmodels lowess; the Wilson (1927,
J Am Stat Assoc 22:209) score interval formula; Tjur (2009, Am Stat 63:366)
identity between his D and two residual-based R-squared measures; the
statsmodels ``spector`` data set.
"""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm
from scipy.stats import chi2, norm
from sklearn.metrics import brier_score_loss
from statsmodels.nonparametric.smoothers_lowess import lowess

from twofold.core.assessing.calibration import (
    brier,
    calibration_groups,
    calibration_slope_intercept,
    hosmer_lemeshow,
    pseudo_r2,
    scaled_brier,
    smoothed_calibration,
)
from twofold.core.errors import TwofoldError


def _fitted(n=800, seed=314):
    """Simulated data with a statsmodels Logit (with intercept) fitted to it."""
    rng = np.random.default_rng(seed)
    x = rng.normal(size=(n, 3))
    eta = -1.0 + x @ np.array([0.8, -0.5, 0.3])
    y = (rng.random(n) < 1.0 / (1.0 + np.exp(-eta))).astype(float)
    X = sm.add_constant(x)
    res = sm.Logit(y, X).fit(disp=0)
    lp = X @ res.params
    p = 1.0 / (1.0 + np.exp(-lp))
    return y, p, lp, res


# ---------------------------------------------------------------------------
# Brier
# ---------------------------------------------------------------------------


def test_brier_equals_sklearn():
    y, p, _, _ = _fitted()
    # scikit-learn brier_score_loss.
    assert brier(y, p) == pytest.approx(brier_score_loss(y, p), rel=1e-12)


def test_scaled_brier_uses_brier_of_the_prevalence_prediction():
    y, p, _, _ = _fitted()
    # Brier_max is the Brier score of predicting mean(y) for everyone
    # (Van Calster et al. 2016), here computed by scikit-learn.
    b_max = brier_score_loss(y, np.full(y.size, y.mean()))
    expected = 1.0 - brier_score_loss(y, p) / b_max
    assert scaled_brier(y, p) == pytest.approx(expected, rel=1e-12)
    assert scaled_brier(y, np.full(y.size, y.mean())) == pytest.approx(0.0, abs=1e-12)
    with pytest.raises(TwofoldError):
        scaled_brier(np.zeros(4), np.full(4, 0.2))


def test_brier_refuses_probabilities_outside_unit_interval():
    with pytest.raises(TwofoldError):
        brier([0, 1], [-0.1, 0.5])


# ---------------------------------------------------------------------------
# calibration slope and calibration-in-the-large
# ---------------------------------------------------------------------------


def test_slope_one_and_intercept_zero_on_the_fitted_data():
    # Score equations of the statsmodels Logit fit with intercept:
    # X'(y - p) = 0 implies slope 1 and calibration-in-the-large 0.
    y, p, lp, _ = _fitted()
    res = calibration_slope_intercept(y, lp)
    assert res.slope == pytest.approx(1.0, abs=1e-6)
    assert res.intercept == pytest.approx(0.0, abs=1e-6)
    assert res.slope_ci_low < 1.0 < res.slope_ci_high
    assert res.intercept_ci_low < 0.0 < res.intercept_ci_high
    assert res.notices == ()
    # With lp as offset, the Fisher information of the intercept at 0 is
    # sum p (1 - p) (binomial likelihood), so its SE is 1 / sqrt of that.
    assert res.intercept_se == pytest.approx(1.0 / np.sqrt(np.sum(p * (1 - p))), rel=1e-5)
    # Wald interval from the normal quantile (scipy.stats.norm).
    z = norm.ppf(0.975)
    assert res.slope_ci_high - res.slope == pytest.approx(z * res.slope_se, rel=1e-8)


def test_slope_of_doubled_linear_predictor_is_one_half():
    # Predictions twice as extreme on the logit scale: the refitted slope is
    # exactly 1/2 (same likelihood, reparametrised), its SE half as large.
    y, _, lp, _ = _fitted()
    base = calibration_slope_intercept(y, lp)
    res = calibration_slope_intercept(y, 2.0 * lp)
    assert res.slope == pytest.approx(0.5, abs=1e-6)
    assert res.slope_se == pytest.approx(base.slope_se / 2.0, rel=1e-5)
    # Most linear predictors are negative here (events are the minority), so
    # doubling them pushes most risks down: risks are then too low on average
    # and calibration-in-the-large is clearly positive.
    assert np.mean(lp) < 0
    assert res.intercept > 0.1


def test_calibration_in_the_large_detects_a_shift():
    # Shifting every linear predictor down by 0.7 is undone exactly by an
    # intercept of 0.7 on the fitted data (score equation of the intercept).
    y, _, lp, _ = _fitted()
    res = calibration_slope_intercept(y, lp - 0.7)
    assert res.intercept == pytest.approx(0.7, abs=1e-6)
    assert res.slope == pytest.approx(1.0, abs=1e-6)
    assert json.loads(json.dumps(res.as_dict()))["slope"] == pytest.approx(1.0, abs=1e-6)


def test_separation_is_returned_as_a_notice():
    y = np.array([0, 0, 0, 0, 1, 1, 1, 1], dtype=float)
    lp = np.array([-4, -3, -2, -1, 1, 2, 3, 4], dtype=float)
    res = calibration_slope_intercept(y, lp)
    assert "separation" in [n.code for n in res.notices]


# ---------------------------------------------------------------------------
# Hosmer-Lemeshow and grouped calibration
# ---------------------------------------------------------------------------


def _hl_by_hand(y, p, g):
    """Hosmer & Lemeshow (1980) C statistic with pandas.qcut deciles."""
    groups = pd.qcut(p, g, duplicates="drop")
    df = pd.DataFrame({"y": y, "p": p, "g": groups})
    t = df.groupby("g", observed=True).agg(n=("y", "size"), o=("y", "sum"), e=("p", "sum"))
    t = t[t["n"] > 0]
    pbar = t["e"] / t["n"]
    stat = float((((t["o"] - t["e"]) ** 2) / (t["n"] * pbar * (1 - pbar))).sum())
    k = len(t)
    return stat, k, chi2.sf(stat, k - 2), t


@pytest.mark.parametrize("rounding", [None, 2, 1])
def test_hosmer_lemeshow_equals_hand_computation(rounding):
    y, p, _, _ = _fitted()
    if rounding is not None:
        # Tied risks make repeated decile cut points, merged as in pandas.qcut.
        p = np.round(p, rounding)
        p = np.clip(p, 0.01, 0.99)
    stat, k, pval, table = _hl_by_hand(y, p, 10)
    res = hosmer_lemeshow(y, p)
    assert res.groups_used == k
    assert res.df == k - 2
    assert res.statistic == pytest.approx(stat, rel=1e-10)
    assert res.p_value == pytest.approx(pval, rel=1e-10)
    np.testing.assert_array_equal(res.n, table["n"].to_numpy())
    np.testing.assert_allclose(res.observed_events, table["o"].to_numpy())
    np.testing.assert_allclose(res.expected_events, table["e"].to_numpy())
    if rounding == 1:
        assert res.groups_used < 10
    assert json.loads(json.dumps(res.as_dict()))["groups_used"] == k


def test_hosmer_lemeshow_drops_empty_groups_and_refuses_too_few():
    # Six rows, ten groups: interpolated cut points leave some groups empty.
    y = np.array([0, 1, 0, 1, 0, 1], dtype=float)
    p = np.array([0.1, 0.2, 0.3, 0.4, 0.5, 0.6])
    res = hosmer_lemeshow(y, p)
    assert np.all(res.n > 0)
    assert res.n.sum() == 6
    assert res.groups_used == len(pd.qcut(p, 10, duplicates="drop").unique())
    with pytest.raises(TwofoldError):
        hosmer_lemeshow(y, np.full(6, 0.5))
    with pytest.raises(TwofoldError):
        hosmer_lemeshow(y, p, groups=2)


def test_hosmer_lemeshow_small_for_well_calibrated_data():
    # Outcomes drawn from the stated risks: C follows roughly a chi-square
    # on 8 df, so a very large value would signal a bug (seeded, fixed data).
    rng = np.random.default_rng(42)
    p = rng.uniform(0.05, 0.95, size=5000)
    y = (rng.random(5000) < p).astype(float)
    res = hosmer_lemeshow(y, p)
    assert res.groups_used == 10
    assert res.p_value > 0.01


def test_calibration_groups_match_qcut_and_wilson_formula():
    y, p, _, _ = _fitted()
    res = calibration_groups(y, p, groups=10)
    _, k, _, table = _hl_by_hand(y, p, 10)
    assert res.groups_used == k
    n = table["n"].to_numpy().astype(float)
    o = table["o"].to_numpy()
    np.testing.assert_array_equal(res.n, n)
    np.testing.assert_allclose(res.mean_predicted, table["e"].to_numpy() / n)
    np.testing.assert_allclose(res.observed, o / n)
    # Wilson (1927) score interval written out:
    # (ph + z^2/2n -/+ z sqrt(ph(1-ph)/n + z^2/4n^2)) / (1 + z^2/n).
    z = norm.ppf(0.975)
    ph = o / n
    centre = ph + z**2 / (2 * n)
    half = z * np.sqrt(ph * (1 - ph) / n + z**2 / (4 * n**2))
    np.testing.assert_allclose(res.ci_low, (centre - half) / (1 + z**2 / n), rtol=1e-10)
    np.testing.assert_allclose(res.ci_high, (centre + half) / (1 + z**2 / n), rtol=1e-10)
    assert json.loads(json.dumps(res.as_dict()))["groups_used"] == k


# ---------------------------------------------------------------------------
# smoothed calibration
# ---------------------------------------------------------------------------


def test_smoothed_calibration_equals_statsmodels_lowess_on_small_data():
    y, p, _, _ = _fitted()
    res = smoothed_calibration(y, p, frac=0.5)
    order = np.argsort(p, kind="stable")
    # statsmodels lowess with no robustness iterations, as for a 0/1 outcome.
    ref = lowess(y[order], p[order], frac=0.5, it=0,
                 delta=0.01 * (p.max() - p.min()), return_sorted=True)
    np.testing.assert_allclose(res.predicted, ref[:, 0])
    np.testing.assert_allclose(res.observed, ref[:, 1], atol=1e-12)
    assert res.n_used == res.n_total == y.size
    # 800 rows with about a quarter events: fewer than 200 of one kind.
    assert res.n_events == int(y.sum())
    assert res.unreliable is (min(res.n_events, res.n_nonevents) < 200)


def test_smoothed_calibration_large_data_is_subsampled_and_near_diagonal():
    rng = np.random.default_rng(2024)
    n = 60_000
    p = rng.beta(2, 3, size=n)
    y = (rng.random(n) < p).astype(float)  # well calibrated by construction
    res = smoothed_calibration(y, p)
    assert res.n_used <= 5000 and res.n_total == n
    assert not res.unreliable
    assert np.all(np.diff(res.predicted) >= 0)
    # Same result on a second call (deterministic subsample).
    again = smoothed_calibration(y, p)
    np.testing.assert_array_equal(res.observed, again.observed)
    # Away from the sparse tails the curve stays close to the diagonal.
    middle = (res.predicted > 0.1) & (res.predicted < 0.8)
    assert np.max(np.abs(res.observed[middle] - res.predicted[middle])) < 0.05


def test_smoothed_calibration_flags_few_events():
    rng = np.random.default_rng(8)
    p = rng.uniform(0.01, 0.2, size=1500)
    y = (rng.random(1500) < p).astype(float)
    assert y.sum() < 200
    assert smoothed_calibration(y, p).unreliable
    with pytest.raises(TwofoldError):
        smoothed_calibration(y, p, frac=0.0)


# ---------------------------------------------------------------------------
# pseudo R-squared
# ---------------------------------------------------------------------------


def test_pseudo_r2_on_spector_against_statsmodels():
    data = sm.datasets.spector.load_pandas()
    y = data.endog.to_numpy(dtype=float)
    X = sm.add_constant(data.exog)
    res = sm.Logit(y, X).fit(disp=0)
    p = res.predict(X).to_numpy()
    ours = pseudo_r2(res.llf, res.llnull, int(res.nobs), y, p)
    # statsmodels Logit prsquared is McFadden's; 0.3740 is also the value
    # shown in the statsmodels documentation for this model (value from memory).
    assert ours.mcfadden == pytest.approx(res.prsquared, rel=1e-10)
    assert ours.mcfadden == pytest.approx(0.3740, abs=5e-5)
    # statsmodels GLM pseudo_rsquared(kind="cs") is Cox-Snell.
    glm = sm.GLM(y, X, family=sm.families.Binomial()).fit()
    assert ours.cox_snell == pytest.approx(glm.pseudo_rsquared(kind="cs"), rel=1e-8)
    # Nagelkerke: Cox-Snell over its maximum, the maximum written through the
    # observed event share phi: 1 - exp(2 (phi ln phi + (1-phi) ln(1-phi))).
    phi = y.mean()
    max_cs = 1 - np.exp(2 * (phi * np.log(phi) + (1 - phi) * np.log(1 - phi)))
    assert ours.nagelkerke == pytest.approx(glm.pseudo_rsquared(kind="cs") / max_cs, rel=1e-8)
    # Tjur (2009): for a logistic fit with intercept his D equals the mean of
    # R2_model = sum (p - ybar)^2 / SST and R2_res = 1 - sum (y - p)^2 / SST.
    sst = np.sum((y - phi) ** 2)
    r2_mod = np.sum((p - phi) ** 2) / sst
    r2_res = 1 - np.sum((y - p) ** 2) / sst
    assert ours.tjur == pytest.approx((r2_mod + r2_res) / 2, rel=1e-6)
    assert json.loads(json.dumps(ours.as_dict()))["tjur"] == pytest.approx(ours.tjur)


def test_pseudo_r2_refuses_bad_likelihoods():
    y = np.array([0, 1, 0, 1], dtype=float)
    p = np.array([0.2, 0.7, 0.4, 0.6])
    with pytest.raises(TwofoldError):
        pseudo_r2(-1.0, 0.0, 4, y, p)
    with pytest.raises(TwofoldError):
        pseudo_r2(-1.0, -2.0, 0, y, p)
