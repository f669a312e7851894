"""Performance within groups: AUC and calibration per group, with small groups suppressed."""

from __future__ import annotations

import numpy as np
import pytest
import statsmodels.api as sm
from scipy.special import expit
from sklearn.metrics import roc_auc_score

from twofold.core.assessing.subgroups import subgroup_performance
from twofold.core.errors import TwofoldError


def data(seed=12, n=3000):
    rng = np.random.default_rng(seed)
    site = rng.choice(["north", "south", "east"], size=n, p=[0.5, 0.4, 0.1]).astype(object)
    lp = rng.normal(-1.2, 1.0, size=n)
    # South's risks are truly higher than the model says (a calibration-in-the-large of about 0.5 there).
    truth = lp + np.where(site == "south", 0.5, 0.0)
    y = (rng.uniform(size=n) < expit(truth)).astype(int)
    return site, y, lp


def test_each_group_matches_scikit_learn_and_statsmodels():
    site, y, lp = data()
    got = {g["group"]: g for g in subgroup_performance(site, y, expit(lp), lp, "site")}
    assert list(got) == ["east", "north", "south"]
    for name, g in got.items():
        m = site == name
        assert g["rows"] == m.sum()
        assert g["auc"] == pytest.approx(roc_auc_score(y[m], lp[m]), abs=1e-10)  # scikit-learn's AUC
        # Calibration-in-the-large: intercept with lp as offset; slope: coefficient of lp (statsmodels GLM fits;
        # Van Calster et al. 2016, J Clin Epidemiol 74:167).
        large = sm.GLM(y[m], np.ones((m.sum(), 1)), family=sm.families.Binomial(), offset=lp[m]).fit()
        slope = sm.GLM(y[m], sm.add_constant(lp[m]), family=sm.families.Binomial()).fit()
        assert g["calibration_intercept"] == pytest.approx(large.params[0], abs=1e-6)
        assert g["calibration_intercept_ci"] == pytest.approx(list(large.conf_int()[0]), abs=1e-5)
        assert g["calibration_slope"] == pytest.approx(slope.params[1], abs=1e-6)
        assert g["calibration_slope_ci"] == pytest.approx(list(slope.conf_int()[1]), abs=1e-5)
    assert got["south"]["calibration_intercept_ci"][0] > 0  # the shift built in is found
    assert got["north"]["calibration_intercept_ci"][0] < 0 < got["north"]["calibration_intercept_ci"][1]


def test_small_groups_show_no_figures():
    site, y, lp = data()
    site = site.copy()
    site[:7] = "tiny"  # 7 rows: within the default limit of 1 to 10
    few = np.flatnonzero((site == "east") & (y == 1))
    site[few[10:]] = "north"  # east keeps exactly 10 events
    got = {g["group"]: g for g in subgroup_performance(site, y, expit(lp), lp, "site")}
    assert got["tiny"]["rows"] is None and got["tiny"]["suppressed"] and got["tiny"]["auc"] is None
    assert got["east"]["suppressed"] and got["east"]["rows"] is not None and got["east"]["auc"] is None
    assert not got["north"]["suppressed"] and got["north"]["auc"] is not None


def test_unusable_group_columns_are_refused():
    y = np.array([0, 1] * 100)
    lp = np.zeros(200)
    with pytest.raises(TwofoldError, match="empty"):
        subgroup_performance([None] * 200, y, expit(lp), lp, "site")
    with pytest.raises(TwofoldError, match="different values"):
        subgroup_performance(np.arange(200), y, expit(lp), lp, "admission_id")
