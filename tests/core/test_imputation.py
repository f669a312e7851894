"""Multiple imputation and pooling checked against outside sources.

Sources: Rubin (1987) and Little & Rubin (2002, Statistical Analysis with
Missing Data, 2nd ed., section 10.2) for Rubin's rules; Barnard & Rubin
(1999, Biometrika 86:948) for the degrees of freedom; statsmodels'
``MICE.combine`` for the pooled estimates, covariance and fraction of
missing information; Li, Raghunathan & Rubin (1991, JASA 86:1065) for D1;
Meng & Rubin (1992, Biometrika 79:103) for D3; Li, Meng, Raghunathan &
Rubin (1991, Statistica Sinica 1:65) for D2.  Each formula is written
again here, independently of the code, from the papers.
"""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from scipy.special import expit

from twofold.core.data.io import LoadedTable
from twofold.core.errors import ColumnError, ModelError
from twofold.core.models.imputation import ImputationCancelled, default_m, impute
from twofold.core.models.pooling import ImputedCopies, barnard_rubin_df, d2, pooled_nested, rubin


def make_study(frame, outcome="y"):
    from twofold.core.models.study import Study

    st = Study(LoadedTable(frame, Path("memory.csv")))
    st.set_outcome(outcome)
    return st


def mar_frame(seed, n=500, mechanism=(-1.5, 1.5, -0.5)):
    """x1 missing at random given the outcome and x2 (missingness depends on y and x2 together)."""
    rng = np.random.default_rng(seed)
    x2 = rng.standard_normal(n)
    x1 = 0.6 * x2 + 0.8 * rng.standard_normal(n)
    y = (rng.random(n) < expit(-1.0 + 1.0 * x1 + 0.5 * x2)).astype(float)
    a, b, c = mechanism
    p_missing = expit(a + b * y * x2 + c * (1 - y) * x2)
    return pd.DataFrame({"y": y, "x1": np.where(rng.random(n) < p_missing, np.nan, x1), "x2": x2})


def mixed_frame(seed=3, n=600):
    rng = np.random.default_rng(seed)
    age = rng.normal(60, 10, n)
    ward = rng.choice(["A", "B", "C"], n, p=[0.5, 0.3, 0.2])
    smoker = np.where(rng.random(n) < expit((age - 60) / 10), "yes", "no")
    lp = -1 + 0.03 * (age - 60) + np.select([ward == "B", ward == "C"], [0.5, 1.0], 0) + 0.6 * (smoker == "yes")
    y = (rng.random(n) < expit(lp)).astype(int)
    frame = pd.DataFrame({"id": [f"P{i:05d}" for i in range(n)], "y": y, "age": age, "ward": ward,
                          "smoker": smoker, "lab": age / 10 + rng.standard_normal(n)})
    for col, share in (("age", 0.1), ("ward", 0.1), ("smoker", 0.15)):
        frame.loc[rng.random(n) < share, col] = np.nan
    return frame


# ---- Rubin's rules ------------------------------------------------------------------------------------------

def test_rubin_rules_and_barnard_rubin_df_by_hand():
    rng = np.random.default_rng(1)
    m, k, nu_com = 7, 3, 120.0
    q = rng.normal(0, 1, (m, k))
    a = rng.normal(0, 0.2, (m, k, k))
    u = np.einsum("mij,mkj->mik", a, a) + 0.05 * np.eye(k)
    pooled = rubin(q, u, nu_com)
    for j in range(k):
        # Rubin (1987) section 3.1; Little & Rubin (2002) eq. 10.2-10.3, written out term by term.
        qbar = sum(q[i, j] for i in range(m)) / m
        ubar = sum(u[i, j, j] for i in range(m)) / m
        b = sum((q[i, j] - qbar) ** 2 for i in range(m)) / (m - 1)
        t = ubar + (1 + 1 / m) * b
        lam = (1 + 1 / m) * b / t
        # Barnard & Rubin (1999) eq. 3-4: nu_obs = (nu_com + 1)/(nu_com + 3) nu_com (1 - lambda).
        nu_old = (m - 1) / lam ** 2
        nu_obs = (nu_com + 1) / (nu_com + 3) * nu_com * (1 - lam)
        nu = 1 / (1 / nu_old + 1 / nu_obs)
        r = (1 + 1 / m) * b / ubar
        assert pooled.estimate[j] == pytest.approx(qbar, rel=1e-12)
        assert pooled.std_errors[j] == pytest.approx(math.sqrt(t), rel=1e-12)
        assert pooled.lam[j] == pytest.approx(lam, rel=1e-12)
        assert pooled.df[j] == pytest.approx(nu, rel=1e-12)
        # Fraction of missing information (van Buuren 2018, eq. 2.24 with the adjusted df).
        assert pooled.fmi[j] == pytest.approx((r + 2 / (nu + 3)) / (r + 1), rel=1e-12)
    # Large complete-data df: Barnard-Rubin tends to Rubin's (m - 1)/lambda^2 (Barnard & Rubin 1999, section 2).
    lam = pooled.lam
    assert barnard_rubin_df(m, lam, 1e12) == pytest.approx((m - 1) / lam ** 2, rel=1e-6)


def test_pooled_fit_matches_statsmodels_mice_combine():
    import statsmodels.api as sm
    from statsmodels.imputation.mice import MICE, MICEData

    st = make_study(mar_frame(5, n=800))
    imp = impute(st, ["x1", "x2"], m=6, seed=11)
    pooled = ImputedCopies(st, imp).fit(["x1", "x2"])
    frames = [imp.frame(st.frame, j) for j in range(imp.m)]
    # statsmodels' own combining (statsmodels.imputation.mice.MICE.combine) on statsmodels fits of our copies.
    mice = MICE("y ~ x1 + x2", sm.Logit, MICEData(frames[0]))
    mice.exog_names, mice.endog_names = ["const", "x1", "x2"], "y"
    mice.results_list = [sm.Logit(f["y"], sm.add_constant(f[["x1", "x2"]])).fit(disp=0) for f in frames]
    ref = mice.combine()
    assert pooled.params == pytest.approx(np.asarray(ref.params), rel=1e-6)
    assert pooled.cov == pytest.approx(np.asarray(ref.cov_params()), rel=1e-5)
    assert pooled.pooled.lam == pytest.approx(np.asarray(ref.frac_miss_info), rel=1e-5)
    assert np.all(pooled.pooled.lam > 0)


# ---- identical copies: the pooled tests reduce to the ordinary ones -----------------------------------------

def test_identical_copies_give_g_over_k_and_wald_over_k_exactly():
    frame = mixed_frame().dropna()
    st = make_study(frame)
    imp = impute(st, ["age", "ward", "smoker"], m=5, seed=1)
    assert imp.cells_imputed == 0
    copies = ImputedCopies(st, imp)
    big, small = copies.fit(["age", "ward", "smoker"]), copies.fit(["age"])
    single_big, single_small = st.fit(["age", "ward", "smoker"]), st.fit(["age"])
    k = single_big.n_params - 1
    assert big.overall.kind == "D3"
    assert big.overall.statistic == pytest.approx(single_big.overall.g / k, rel=1e-9)
    assert big.overall.g == pytest.approx(single_big.overall.g, rel=1e-9)
    nested = pooled_nested(small, big)
    g = 2 * (single_big.llf - single_small.llf)
    assert nested.statistic == pytest.approx(g / nested.df, rel=1e-8)
    wald = single_big.term_tests["ward"]
    assert big.term_tests["ward"].kind == "D1"
    assert big.term_tests["ward"].statistic == pytest.approx(wald.statistic / wald.df, rel=1e-9)
    # No between-copy variance (beyond the round-off of fits started from different points): the chi-square
    # reference, in effect.
    assert big.term_tests["ward"].df_denominator > 1e12
    assert big.term_tests["ward"].p_value == pytest.approx(wald.p_value, rel=1e-9)


# ---- D1, D3 and D2 against the papers' formulas written here ------------------------------------------------

def _copies_by_statsmodels(frames, columns):
    import statsmodels.api as sm

    out = []
    for f in frames:
        X = sm.add_constant(f[columns].to_numpy(dtype=float), has_constant="add")
        model = sm.Logit(f["y"].to_numpy(dtype=float), X)
        out.append((model, model.fit(disp=0)))
    return out


def test_d3_and_d1_against_meng_rubin_and_li_raghunathan_rubin():
    st = make_study(mar_frame(9, n=600, mechanism=(-1.0, 1.5, -0.5)))
    imp = impute(st, ["x1", "x2"], m=8, seed=4)
    copies = ImputedCopies(st, imp)
    big, small = copies.fit(["x1", "x2"]), copies.fit(["x2"])
    test = pooled_nested(small, big)
    frames = [imp.frame(st.frame, j) for j in range(imp.m)]
    full = _copies_by_statsmodels(frames, ["x1", "x2"])
    red = _copies_by_statsmodels(frames, ["x2"])
    m, k = imp.m, 1
    qf = np.mean([r.params for _, r in full], axis=0)
    qr = np.mean([r.params for _, r in red], axis=0)
    # Meng & Rubin (1992), eqs. 2.5-2.7 (written from the paper, independently of pooling.d3).
    d_bar = np.mean([2 * (rf.llf - rr.llf) for (_, rf), (_, rr) in zip(full, red)])
    d_tilde = np.mean([2 * (mf.loglike(qf) - mr.loglike(qr)) for (mf, _), (mr, _) in zip(full, red)])
    r3 = (m + 1) / (k * (m - 1)) * (d_bar - d_tilde)
    D3 = d_tilde / (k * (1 + r3))
    t = k * (m - 1)
    v = 4 + (t - 4) * (1 + (1 - 2 / t) / r3) ** 2 if t > 4 else t * (1 + 1 / k) * (1 + 1 / r3) ** 2 / 2
    from scipy.stats import f

    assert r3 > 0
    assert test.kind == "D3"
    assert test.statistic == pytest.approx(D3, rel=1e-6)
    assert test.df_denominator == pytest.approx(v, rel=1e-6)
    assert test.p_value == pytest.approx(f.sf(D3, k, v), rel=1e-5)
    # D1 for the two slopes together (Li, Raghunathan & Rubin 1991, eq. 1.11-1.15).
    q = np.array([r.params[1:] for _, r in full])
    u = np.array([r.cov_params()[1:, 1:] for _, r in full])
    qbar, ubar = q.mean(axis=0), u.mean(axis=0)
    b = np.cov(q, rowvar=False)
    kk = 2
    r1 = (1 + 1 / m) * np.trace(b @ np.linalg.inv(ubar)) / kk
    D1 = qbar @ np.linalg.inv(ubar) @ qbar / (kk * (1 + r1))
    from twofold.core.models.pooling import d1

    stat, r, df = d1(big.pooled.estimate[1:], big.pooled.within[1:, 1:], big.pooled.between[1:, 1:], m)
    assert stat == pytest.approx(D1, rel=1e-5)
    tt = kk * (m - 1)
    assert df == pytest.approx(4 + (tt - 4) * (1 + (1 - 2 / tt) / r1) ** 2, rel=1e-5)


def test_d2_against_li_meng_raghunathan_rubin():
    chis = np.array([6.1, 8.4, 4.9, 7.7, 9.3])
    m, k = len(chis), 2
    # Li, Meng, Raghunathan & Rubin (1991), eqs. 2.1-2.2, written out.
    r2 = (1 + 1 / m) * sum((math.sqrt(c) - np.mean(np.sqrt(chis))) ** 2 for c in chis) / (m - 1)
    D2 = (chis.mean() / k - (m + 1) / (m - 1) * r2) / (1 + r2)
    v2 = k ** (-3 / m) * (m - 1) * (1 + 1 / r2) ** 2
    stat, r, df = d2(chis, k)
    assert (stat, r, df) == pytest.approx((D2, r2, v2), rel=1e-12)
    # All copies alike: D2 is the chi-square over k, on the chi-square reference.
    same = d2([5.0] * 4, 2)
    assert same[0] == pytest.approx(2.5) and math.isinf(same[2])


def test_firth_pooling_uses_d2():
    frame = mixed_frame(n=300)
    st = make_study(frame)
    imp = impute(st, ["age", "smoker"], m=4, seed=2)
    copies = ImputedCopies(st, imp)
    big = copies.fit(["age", "smoker"], firth=True)
    assert big.overall.kind == "D2"
    expected = d2([f.overall.g for f in big.fits], big.n_params - 1)
    assert big.overall.statistic == pytest.approx(expected[0])
    assert pooled_nested(copies.fit(["age"], firth=True), big).kind == "D2"


# ---- a simulation with known truth ---------------------------------------------------------------------------

def test_simulation_complete_rows_biased_pooled_not_and_intervals_cover():
    truth = np.array([-1.0, 1.0, 0.5])
    reps = 200
    cc, pooled, covered = [], [], []
    for seed in range(reps):
        st = make_study(mar_frame(seed))
        cc.append(st.fit(["x1", "x2"]).params)
        fit = ImputedCopies(st, impute(st, ["x1", "x2"], m=10, seed=seed)).fit(["x1", "x2"])
        pooled.append(fit.params)
        lo, hi = (np.log(v) for v in fit.odds_ratio_ci)
        covered.append((lo[1:] <= truth[1:]) & (truth[1:] <= hi[1:]))
    cc, pooled, covered = np.array(cc), np.array(pooled), np.array(covered)
    mcse = pooled.std(axis=0) / math.sqrt(reps)
    # Complete rows: x2's coefficient far from 0.5 (missingness depends on the outcome together with x2).
    assert abs(cc[:, 2].mean() - truth[2]) > 0.3
    # Pooled: within 3 Monte Carlo standard errors (plus 0.02 for the imputation model's approximation).
    assert np.all(np.abs(pooled.mean(axis=0) - truth) < 3 * mcse + 0.02)
    # Coverage of the 95% intervals: simulation error sqrt(0.95 x 0.05 / 200) = 1.5%; allow 3 of them (0.905).
    assert np.all(covered.mean(axis=0) > 0.95 - 3 * math.sqrt(0.95 * 0.05 / reps))
    assert np.all(covered.mean(axis=0) < 1.0)


# ---- the imputation itself -----------------------------------------------------------------------------------

def test_methods_seed_and_no_change_to_the_study():
    frame = mixed_frame()
    before = frame.copy()
    st = make_study(frame)
    imp = impute(st, ["age", "ward", "smoker"], m=5, seed=7, auxiliary=["lab"])
    assert imp.methods == {"age": "predictive mean matching", "ward": "multinomial logistic regression",
                           "smoker": "logistic regression"}
    assert "id" not in imp.columns and "y" not in imp.columns
    assert imp.cells_imputed == int(frame[["age", "ward", "smoker"]].isna().sum().sum())
    pd.testing.assert_frame_equal(st.frame, before)
    copy = imp.frame(st.frame, 2)
    assert copy[["age", "ward", "smoker"]].notna().all().all()
    assert set(copy["ward"]) == {"A", "B", "C"} and set(copy["smoker"]) == {"yes", "no"}
    # PMM imputes observed values only (van Buuren 2018, section 3.4).
    assert set(copy.loc[frame["age"].isna(), "age"]) <= set(frame["age"].dropna())
    again = impute(st, ["age", "ward", "smoker"], m=5, seed=7, auxiliary=["lab"])
    assert all(np.array_equal(imp.draws[c], again.draws[c]) for c in imp.draws)
    other = impute(st, ["age", "ward", "smoker"], m=5, seed=8, auxiliary=["lab"])
    assert not np.array_equal(imp.draws["age"], other.draws["age"])


def test_groups_imputed_in_proportion_to_their_predictors():
    # ward depends strongly on lab; the multinomial draw must carry that into the imputed cells.
    rng = np.random.default_rng(0)
    n = 3000
    lab = rng.standard_normal(n)
    p = np.exp(np.column_stack([np.zeros(n), 1.5 * lab, -1.5 * lab]))
    p /= p.sum(axis=1, keepdims=True)
    ward = np.array(["A", "B", "C"])[(rng.random(n)[:, None] > np.cumsum(p, axis=1)).sum(axis=1)]
    y = (rng.random(n) < 0.3).astype(int)
    frame = pd.DataFrame({"y": y, "ward": ward, "lab": lab})
    hidden = rng.random(n) < 0.3
    frame.loc[hidden, "ward"] = np.nan
    st = make_study(frame)
    imp = impute(st, ["ward", "lab"], m=5, seed=1)
    filled = imp.frame(st.frame, 0)["ward"].to_numpy()
    high = hidden & (lab > 1)
    # Among high lab values the true share of B is about 0.9 (expit-like with 1.5 x lab).
    assert np.mean(filled[high] == "B") == pytest.approx(np.mean(ward[high] == "B"), abs=0.08)


def test_default_m_follows_white_royston_wood():
    # White, Royston & Wood (2011): m at least the percentage of incomplete cases.
    assert default_m(0.0) == 5 and default_m(0.0746) == 8 and default_m(0.37) == 37 and default_m(0.99) == 99 and default_m(1.0) == 100


def test_bad_input_is_refused_by_name():
    frame = mixed_frame()
    frame.loc[frame.index[:400], "lab"] = np.nan
    st = make_study(frame)
    with pytest.raises(ColumnError, match="'lab'.*impute-anyway"):
        impute(st, ["age", "lab"], m=3, seed=1)
    assert impute(st, ["age", "lab"], m=3, seed=1, allow_large=True).methods["lab"] == "predictive mean matching"
    frame2 = mixed_frame()
    frame2["empty"] = np.nan
    frame2["empty"] = frame2["empty"].astype(float)
    st2 = make_study(frame2)
    st2.set_role("empty", "numeric")
    with pytest.raises(ColumnError, match="'empty' is missing in every row"):
        impute(st2, ["age", "empty"], m=3, seed=1)
    with pytest.raises(ColumnError, match="'id'.*identifier"):
        impute(st2, ["age"], m=3, seed=1, auxiliary=["id"])
    with pytest.raises(ColumnError, match="outcome"):
        impute(st2, ["age"], m=3, seed=1, auxiliary=["y"])
    with pytest.raises(ColumnError, match="not a column"):
        impute(st2, ["age"], m=3, seed=1, auxiliary=["nope"])
    with pytest.raises(ModelError, match="from 2 to 100"):
        impute(st2, ["age"], m=1, seed=1)


def test_outcome_never_imputed_and_rows_without_it_left_out():
    frame = mixed_frame()
    frame.loc[frame.index[:25], "y"] = np.nan
    st = make_study(frame)
    imp = impute(st, ["age", "ward"], m=3, seed=1)
    assert len(imp.rows) == len(frame) - 25 and "y" not in imp.cells
    fit = ImputedCopies(st, imp).fit(["age", "ward"])
    assert fit.n_used == len(frame) - 25
    assert fit.account.missing_outcome == 25


def test_failed_imputation_model_names_the_column():
    # 'grade' is decided exactly by 'score': its logistic imputation model separates.
    rng = np.random.default_rng(2)
    n = 200
    score = rng.standard_normal(n)
    frame = pd.DataFrame({"y": (rng.random(n) < 0.4).astype(int), "score": score,
                          "grade": np.where(score > 0, "high", "low")})
    frame.loc[frame.index[:30], "grade"] = np.nan
    st = make_study(frame)
    with pytest.raises(ModelError, match="'grade'"):
        impute(st, ["score", "grade"], m=3, seed=1)


def test_progress_and_cancel():
    st = make_study(mixed_frame())
    seen = []
    impute(st, ["age", "ward", "smoker"], m=2, seed=1, progress=lambda f: seen.append(f))
    assert seen[-1] == pytest.approx(1.0) and seen == sorted(seen)
    with pytest.raises(ImputationCancelled):
        impute(st, ["age", "ward", "smoker"], m=2, seed=1, progress=lambda f: f < 0.3)


def test_curve_knots_fixed_across_copies():
    st = make_study(mixed_frame())
    st.set_spline("age", 4)
    imp = impute(st, ["age", "ward"], m=3, seed=1)
    fit = ImputedCopies(st, imp).fit(["age", "ward"])
    knots = {f.design.blocks[0].knots for f in fit.fits}
    assert knots == {st.block("age").knots}


def test_pooled_auc_and_calibration_slope_against_sklearn_and_statsmodels():
    import statsmodels.api as sm
    from scipy.special import logit
    from sklearn.metrics import roc_auc_score

    from twofold.core.models.pooling import pooled_assessment

    st = make_study(mixed_frame(n=800))
    imp = impute(st, ["age", "ward", "smoker"], m=4, seed=3)
    fit = ImputedCopies(st, imp).fit(["age", "ward", "smoker"])
    a = pooled_assessment(fit)
    aucs, slopes = [], []
    for f in fit.fits:
        lp = f.used_X @ fit.params
        aucs.append(roc_auc_score(f.design.y, lp))  # scikit-learn's AUC of each copy under the pooled model
        slopes.append(sm.Logit(f.design.y, sm.add_constant(lp)).fit(disp=0).params[1])
    # Pooled on the logit scale, then back (Rubin's rules: the point estimate is the mean).
    assert a["auc"] == pytest.approx(float(expit(np.mean(logit(aucs)))), rel=1e-9)
    assert a["calibration_slope"] == pytest.approx(float(np.mean(slopes)), rel=1e-6)
    lo, hi = a["auc_ci"]
    assert lo < a["auc"] < hi


def test_identical_copies_pool_to_the_single_fits_assessment():
    from twofold.core.assessing.discrimination import auc_delong
    from twofold.core.models.pooling import pooled_assessment

    st = make_study(mixed_frame().dropna())
    fit = ImputedCopies(st, impute(st, ["age", "ward"], m=3, seed=1)).fit(["age", "ward"])
    single = st.fit(["age", "ward"])
    a = pooled_assessment(fit)
    ref = auc_delong(single.design.y, single.fitted)
    assert a["auc"] == pytest.approx(ref.auc, rel=1e-12)
    assert a["auc_se"] == pytest.approx(ref.se, rel=1e-9)
    # With no between-copy variance the interval is DeLong's on the logit scale, with t on the complete-data
    # Barnard-Rubin df (nearly normal here).
    assert a["auc_ci"] == pytest.approx([ref.ci_low, ref.ci_high], rel=2e-3)


def test_pooled_curves_are_those_of_the_averaged_linear_predictor():
    """The pooled ROC curve and risk groups: scikit-learn's ROC and pandas' deciles of the risks made by averaging,
    over statsmodels' fits of each copy, the linear predictors under the mean of the copies' estimates."""
    from sklearn.metrics import roc_auc_score, roc_curve

    from twofold.core.models.pooling import pooled_curves

    frame = mar_frame(5, n=900)
    st = make_study(frame)
    imp = impute(st, ["x1", "x2"], m=5, seed=2)
    fit = ImputedCopies(st, imp).fit(["x1", "x2"])
    frames = [imp.frame(frame, j).iloc[imp.rows] for j in range(imp.m)]
    fits = _copies_by_statsmodels(frames, ["x1", "x2"])
    q = np.mean([r.params for _, r in fits], axis=0)  # Rubin's rules: the pooled estimate is the mean
    p = expit(np.mean([model.exog @ q for model, _ in fits], axis=0))
    y = frames[0]["y"].to_numpy(dtype=float)
    curves = pooled_curves(fit)
    assert curves.auc == pytest.approx(roc_auc_score(y, p), rel=1e-9)
    fpr, tpr, _ = roc_curve(y, p, drop_intermediate=False)
    # Every point of scikit-learn's curve lies on ours (ours may start at (0, 0) and step the same way).
    ours = sorted(zip(np.round(curves.roc.fpr, 12), np.round(curves.roc.tpr, 12)))
    assert set(zip(np.round(fpr, 12), np.round(tpr, 12))) <= set(ours) | {(0.0, 0.0)}
    # Ten groups of about equal size by predicted risk (no ties among these risks): pandas' deciles.
    deciles = pd.qcut(p, 10, labels=False)
    observed = pd.Series(y).groupby(deciles).mean().to_numpy()
    mean_p = pd.Series(p).groupby(deciles).mean().to_numpy()
    assert curves.groups.observed == pytest.approx(observed, abs=1e-12)
    assert curves.groups.mean_predicted == pytest.approx(mean_p, rel=1e-9)
    # Invariance: the pooled predictions do not depend on the order of the copies.
    shuffled = ImputedCopies(st, imp)
    shuffled.studies = shuffled.studies[::-1]
    assert pooled_curves(shuffled.fit(["x1", "x2"])).auc == pytest.approx(curves.auc, rel=1e-9)


def test_likelihoods_at_pooled_estimates_equal_statsmodels_on_each_whole_copy():
    """The D3 likelihoods sum the rows never imputed once; statsmodels' Logit.loglike of each whole copy agrees,
    for a model with a curve, groups and an interaction (whose design rows could differ between copies)."""
    import statsmodels.api as sm

    st = make_study(mixed_frame(n=700))
    st.set_spline("age", 4)
    copies = ImputedCopies(st, impute(st, ["age", "ward", "smoker", "lab"], m=4, seed=8))
    fit = copies.fit(["age", "ward", "smoker", "lab", "smoker:lab"])
    same, differ = fit.imputed_rows
    assert len(same) and len(differ)  # both kinds of rows are present, so the shortcut is exercised
    params = fit.params + 0.05  # any coefficients, not only the pooled ones
    expected = [sm.Logit(f.design.y, f.used_X).loglike(params) for f in fit.fits]
    assert fit.log_likelihoods_at(params) == pytest.approx(expected, rel=1e-12)


def test_copies_fitted_on_two_threads_agree_with_one_at_a_time(monkeypatch):
    """The same pooled fit whichever way the copies are fitted (invariance); and a copy's separation, which
    statsmodels says by a warning, still reaches its fit when the copies are fitted on two threads."""
    from twofold.core.models import pooling

    st = make_study(mixed_frame(n=900))
    imp = impute(st, ["age", "ward", "smoker"], m=6, seed=4)
    monkeypatch.setattr(pooling, "TWO_THREADS_FROM", 10 ** 9)
    one = ImputedCopies(st, imp).fit(["age", "ward", "smoker"])
    monkeypatch.setattr(pooling, "TWO_THREADS_FROM", 1)
    two = ImputedCopies(st, imp).fit(["age", "ward", "smoker"])
    assert two.params == pytest.approx(one.params, rel=1e-7, abs=1e-9)
    assert two.cov == pytest.approx(one.cov, rel=1e-6, abs=1e-12)
    assert two.overall.statistic == pytest.approx(one.overall.statistic, rel=1e-7)
    # x separates the outcome completely in every copy (statsmodels warns of perfect separation).
    rng = np.random.default_rng(2)
    x = rng.standard_normal(300)
    frame = pd.DataFrame({"y": (x > 0).astype(float), "x": x, "z": np.where(rng.random(300) < 0.2, np.nan,
                                                                            rng.standard_normal(300))})
    st = make_study(frame)
    results = {}
    for limit in (10 ** 9, 1):
        monkeypatch.setattr(pooling, "TWO_THREADS_FROM", limit)
        fit = ImputedCopies(st, impute(st, ["x", "z"], m=4, seed=1)).fit(["x", "z"])
        results[limit] = [n.code for n in fit.notices]
    assert "separation" in results[1]
    assert results[1] == results[10 ** 9]


def test_pooled_hosmer_lemeshow_is_d2_of_the_copies_statistics():
    from scipy.stats import chi2, f

    from twofold.core.assessing.calibration import hosmer_lemeshow
    from twofold.core.models.pooling import pooled_hosmer_lemeshow

    rng = np.random.default_rng(7)
    n = 2000
    y = (rng.random(n) < 0.3).astype(float)
    base = np.clip(0.3 + 0.2 * (y - 0.3) + rng.normal(0, 0.1, n), 0.01, 0.99)
    # Identical copies: D2 is the ordinary statistic on its chi-square (Li, Meng, Raghunathan & Rubin 1991: r2 = 0).
    one = hosmer_lemeshow(y, base)
    same = pooled_hosmer_lemeshow([(y, base)] * 4)
    assert same["statistic"] == pytest.approx(one.statistic, rel=1e-12) and same["df"] == one.df
    assert same["p_value"] == pytest.approx(chi2.sf(one.statistic, one.df), rel=1e-9)
    assert same["kind"] == "D2" and same["df_denominator"] is None
    # Copies that differ: D2 written here from the paper over the copies' own statistics.
    copies = [(y, np.clip(base + rng.normal(0, 0.02, n), 0.01, 0.99)) for _ in range(5)]
    d = np.array([hosmer_lemeshow(yy, pp).statistic for yy, pp in copies])
    k, m = one.df, 5
    r2 = (1 + 1 / m) * np.var(np.sqrt(d), ddof=1)
    d2 = (d.mean() / k - (m + 1) / (m - 1) * r2) / (1 + r2)
    v = k ** (-3 / m) * (m - 1) * (1 + 1 / r2) ** 2
    pooled = pooled_hosmer_lemeshow(copies)
    assert pooled["statistic"] == pytest.approx(max(d2, 0) * k, rel=1e-10)
    assert pooled["df_denominator"] == pytest.approx(v, rel=1e-10)
    assert pooled["p_value"] == pytest.approx(f.sf(max(d2, 0), k, v), rel=1e-9)
