"""Decision curves: net benefit of the model, of treating everyone and of treating no one."""

from __future__ import annotations

import numpy as np
import pytest
from scipy.special import expit
from sklearn.metrics import confusion_matrix

from twofold.core.assessing.decision import (
    decision_curve,
    grid_from_setting,
    net_benefit_values,
    parse_range,
    threshold_grid,
    treat_all_values,
)
from twofold.core.errors import ModelError


def nb_by_hand(y, p, t):
    """Vickers & Elkin (2006, Med Decis Making 26:565), eq. for net benefit, counted record by record."""
    tp = sum(1 for yi, pi in zip(y, p) if pi >= t and yi == 1)
    fp = sum(1 for yi, pi in zip(y, p) if pi >= t and yi == 0)
    n = len(y)
    return tp / n - fp / n * t / (1 - t)


Y = [1, 1, 0, 0, 1, 0, 0, 0, 1, 0]
P = [0.9, 0.35, 0.35, 0.2, 0.6, 0.05, 0.3, 0.12, 0.3, 0.5]


def test_net_benefit_matches_the_formula_counted_by_hand():
    # Worked by hand: at t = 0.3, treated = {0.9, .35, .35, .6, .3, .3, .5}: TP 4 (0.9, .35, .6, .3), FP 3;
    # NB = 4/10 - 3/10 * 0.3/0.7 = 0.4 - 0.128571... = 0.271428...
    assert net_benefit_values(Y, P, [0.3])[0] == pytest.approx(0.4 - 0.3 * 0.3 / 0.7, abs=1e-12)
    thresholds = threshold_grid(0.05, 0.95, 0.05)
    got = net_benefit_values(Y, P, thresholds)
    assert got == pytest.approx([nb_by_hand(Y, P, t) for t in thresholds], abs=1e-12)


def test_counts_agree_with_scikit_learn_confusion_matrix():
    rng = np.random.default_rng(18)
    p = np.round(rng.uniform(size=3000), 2)  # many ties, some exactly at a threshold
    y = (rng.uniform(size=3000) < p).astype(int)
    thresholds = threshold_grid(0.01, 0.99, 0.01)
    got = net_benefit_values(y, p, thresholds)
    for t, nb in zip(thresholds, got):
        # scikit-learn's confusion matrix of "treat when risk >= t" (the convention of Vickers & Elkin's
        # decision curves: a risk at the threshold is treated).
        tn, fp, fn, tp = confusion_matrix(y, (p >= t).astype(int), labels=[0, 1]).ravel()
        assert nb == pytest.approx(tp / len(y) - fp / len(y) * t / (1 - t), abs=1e-12)


def test_treat_all_and_the_limits_follow_the_algebra():
    y = np.array(Y)
    prevalence = y.mean()
    # Algebra: treat-all net benefit is prevalence at t -> 0 and crosses 0 exactly at t = prevalence.
    assert treat_all_values(prevalence, [prevalence])[0] == pytest.approx(0.0, abs=1e-15)
    assert treat_all_values(prevalence, [1e-9])[0] == pytest.approx(prevalence, abs=1e-8)
    # Below the smallest risk everyone is treated (model = treat all); above the largest no one is (0).
    curve = decision_curve(y, P, [0.01, 0.95])
    assert curve.model[0] == pytest.approx(curve.treat_all[0], abs=1e-15)
    assert curve.model[1] == 0.0


def test_useful_ranges_and_reading():
    rng = np.random.default_rng(3)
    lp = rng.normal(-1.5, 1.2, size=20000)
    y = (rng.uniform(size=lp.size) < expit(lp)).astype(int)
    curve = decision_curve(y, expit(lp), threshold_grid(0.02, 0.9, 0.01))
    better = curve.model > np.maximum(curve.treat_all, 0)
    ranges = curve.useful_ranges()
    # Each range is a run of thresholds where the model beats both strategies, and nothing else is.
    inside = np.zeros_like(better)
    for a, b in ranges:
        inside |= (curve.thresholds >= a) & (curve.thresholds <= b)
    assert np.array_equal(inside, better)
    assert "does better than treating everyone" in curve.reading()
    # A model of pure noise (risks unrelated to the outcome) is never worth using above treat-all at low t.
    noise = decision_curve(y, np.full(y.size, y.mean()), threshold_grid(0.3, 0.9, 0.1))
    assert noise.useful_ranges() == [] and noise.reading().startswith("At no threshold")


def test_threshold_grid_includes_both_ends_as_written():
    grid = threshold_grid(0.05, 0.5, 0.01)
    assert len(grid) == 46 and grid[0] == 0.05 and grid[-1] == 0.5 and 0.1 in grid and 0.29 in grid
    assert parse_range("0.05:0.5:0.01") == (0.05, 0.5, 0.01)
    assert list(grid_from_setting([0.1, 0.1, 0.05])) == [0.1]


@pytest.mark.parametrize("text, fragment", [
    ("0.5:0.1:0.01", "above the highest"),
    ("0:0.5:0.1", "between 0 and 1"),
    ("0.1:1:0.1", "between 0 and 1"),
    ("0.1:0.5:0", "above 0"),
    ("0.1:0.5", "three numbers"),
    ("a:b:c", "not a number"),
    ("0.1:0.5:nan", "ordinary numbers"),
    ("0.0001:0.9999:0.00001", "more than"),
    ("0.1:0.5:5e-324", "more than"),
])
def test_bad_ranges_are_refused_in_one_sentence(text, fragment):
    with pytest.raises(ModelError) as err:
        parse_range(text)
    assert fragment in str(err.value) and str(err.value).count(". ") == 0


@pytest.mark.parametrize("setting", ["0.1:0.5:0.1", [0.1, 0.5], [0.1, "x", 0.1], [True, 0.5, 0.1], None])
def test_a_bad_saved_setting_is_refused(setting):
    with pytest.raises(ModelError):
        grid_from_setting(setting)


def test_bootstrap_net_benefit_optimism_matches_statsmodels_refits():
    """The corrected curve from the bootstrap's own resamples, redone here with statsmodels and counted by hand."""
    import pandas as pd
    import statsmodels.api as sm

    from pathlib import Path

    from twofold.core.data.io import LoadedTable
    from twofold.core.models.modelling import bootstrap_validation
    from twofold.core.models.study import Study

    rng = np.random.default_rng(7)
    n = 400
    x1, x2 = rng.normal(size=n), rng.normal(size=n)
    y = (rng.uniform(size=n) < expit(-1 + 0.8 * x1 - 0.5 * x2)).astype(int)
    study = Study(LoadedTable(pd.DataFrame({"y": y, "x1": x1, "x2": x2}), Path("memory.csv")))
    study.set_outcome("y", 1)
    fit = study.fit(["x1", "x2"])
    thresholds = threshold_grid(0.1, 0.6, 0.1)
    plain = bootstrap_validation(fit, 30, seed=11, workers=1)
    with_nb = bootstrap_validation(fit, 30, seed=11, workers=1, thresholds=thresholds)
    # The existing figures do not change when the net benefit is added.
    for key, value in plain.as_dict().items():
        assert with_nb.as_dict()[key] == value, key
    # The same resamples (one seed sequence, a child per resample), refitted by statsmodels.
    X = sm.add_constant(np.column_stack([x1, x2]))
    diffs = []
    for child in np.random.SeedSequence(11).spawn(30):
        idx = np.random.default_rng(child).integers(0, n, size=n)
        b = sm.Logit(y[idx], X[idx]).fit(disp=0).params
        boot = [nb_by_hand(y[idx], expit(X[idx] @ b), t) for t in thresholds]
        test = [nb_by_hand(y, expit(X @ b), t) for t in thresholds]
        diffs.append(np.subtract(boot, test))
    assert with_nb.net_benefit_optimism == pytest.approx(np.mean(diffs, axis=0), abs=1e-9)
    assert with_nb.net_benefit_thresholds == tuple(thresholds)
