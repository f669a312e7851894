"""Firth fits with spline and interaction terms: the penalised tests behind them.

The reference for every penalised likelihood-ratio statistic is computed
here from scratch: the design columns are built with plain numpy (the
restricted cubic spline written out from Harrell, Regression Modeling
Strategies, 2nd ed., 2015, sec. 2.4.5, without its scaling, which changes no
likelihood), the penalised log-likelihood l(b) + 0.5 log det(X'WX) is
written out in full, and the restricted maximum (tested coefficients held at
zero under the full model's penalty, Heinze & Schemper 2002, Stat Med
21:2409) is found with scipy's general-purpose BFGS optimiser.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from scipy.optimize import minimize
from scipy.special import expit
from scipy.stats import chi2

from twofold.core.analysis import AnalysisSpec, run_analysis
from twofold.core.models.modelling import interaction_tests, nonlinearity_tests
from twofold.core.models.study import Study, drop_one_tests


def penalized_llf(X, y, beta):
    """l(b) + 0.5 log det(X'WX) (Firth 1993, Biometrika 80:27), written out directly."""
    eta = X @ beta
    llf = -np.sum(y * np.logaddexp(0.0, -eta) + (1 - y) * np.logaddexp(0.0, eta))
    p = expit(eta)
    sign, logdet = np.linalg.slogdet(X.T @ np.diag(p * (1 - p)) @ X)
    return llf + 0.5 * logdet if sign > 0 else -np.inf


def scipy_max(X, y, zero=()):
    """max pl(b) over b with the coefficients ``zero`` held at 0 (scipy BFGS)."""
    # Columns divided by their spread so BFGS is well conditioned; scaling a
    # column shifts log det(X'WX) by a constant, so no statistic changes.
    X = X / np.r_[1.0, X[:, 1:].std(axis=0)]
    k = X.shape[1]
    free = [j for j in range(k) if j not in set(zero)]

    def full(theta):
        b = np.zeros(k)
        b[free] = theta
        return b

    res = minimize(lambda t: -penalized_llf(X, y, full(t)), np.zeros(len(free)), method="BFGS",
                   options={"gtol": 1e-10, "maxiter": 5000})
    return -res.fun


def penalized_g(X, y, zero):
    """2 (pl_full - pl_restricted) from two scipy maximisations."""
    return 2.0 * (scipy_max(X, y) - scipy_max(X, y, zero))


def rcs_columns(x, knots):
    """Harrell's restricted cubic spline terms (unscaled), one per inner knot but the last two."""
    t = np.asarray(knots, dtype=float)
    k = len(t)

    def pos3(v):
        return np.where(v > 0, v, 0.0) ** 3

    return np.column_stack([
        pos3(x - t[j]) - pos3(x - t[k - 2]) * (t[k - 1] - t[j]) / (t[k - 1] - t[k - 2])
        + pos3(x - t[k - 1]) * (t[k - 2] - t[j]) / (t[k - 1] - t[k - 2])
        for j in range(k - 2)
    ])


@pytest.fixture(scope="module")
def small_file(tmp_path_factory):
    """A seeded synthetic file: a curved age effect and a two-group factor, 90 rows."""
    rng = np.random.default_rng(4021)
    n = 90
    age = np.round(rng.uniform(20, 90, n))
    group = rng.choice(["north", "south"], n)
    lp = -1.0 + 0.0009 * (age - 55) ** 2 + 0.6 * (group == "south") - 0.02 * (age - 55) * (group == "south")
    y = (rng.random(n) < expit(lp)).astype(int)
    path = tmp_path_factory.mktemp("firth_terms") / "synthetic.csv"
    pd.DataFrame({"age": age, "group": group, "event": y}).to_csv(path, index=False)
    return path, age, (group == "south").astype(float), y.astype(float)


def _study(path):
    st = Study.from_file(path)
    st.set_outcome("event")
    return st


def test_spline_nonlinearity_and_drop_one_match_scipy(small_file):
    path, age, south, y = small_file
    st = _study(path)
    st.set_spline("age", 4)
    fit = st.fit(["age", "group"], firth=True)
    # Knots at Harrell's 4-knot quantiles (numpy.quantile as the reference).
    knots = np.quantile(age, [0.05, 0.35, 0.65, 0.95])
    X = np.column_stack([np.ones_like(age), age, rcs_columns(age, knots), south])
    assert fit.n_params == X.shape[1] == 5

    (nl,) = nonlinearity_tests(st, fit)
    assert nl.df == 2
    expected = penalized_g(X, y, zero=(2, 3))
    assert nl.g == pytest.approx(expected, abs=1e-6)
    assert nl.p_value == pytest.approx(chi2.sf(expected, 2), rel=1e-5)

    tests = {t.column: t for t in drop_one_tests(st, fit)}
    assert tests["age"].df == 3
    assert tests["age"].g == pytest.approx(penalized_g(X, y, zero=(1, 2, 3)), abs=1e-6)
    assert tests["group"].df == 1
    assert tests["group"].g == pytest.approx(penalized_g(X, y, zero=(4,)), abs=1e-6)


def test_interaction_test_and_drop_one_match_scipy(small_file):
    path, age, south, y = small_file
    st = _study(path)
    fit = st.fit(["age", "group", "age:group"], firth=True)
    X = np.column_stack([np.ones_like(age), age, south, age * south])
    (it,) = interaction_tests(st, fit)
    assert it.df == 1
    assert it.g == pytest.approx(penalized_g(X, y, zero=(3,)), abs=1e-6)
    tests = {t.column: t for t in drop_one_tests(st, fit)}
    assert tests["age:group"].g == pytest.approx(it.g, abs=1e-9)


def test_whole_analysis_with_firth_spline_and_interaction_runs(small_file):
    # The command-line path that used to stop with "No columns were given to test".
    path, age, south, y = small_file
    spec = AnalysisSpec(data=str(path), outcome="event", predictors=["age", "group"], firth=True,
                        splines={"age": 3}, interactions=["age:group"])
    rec = run_analysis(spec).record
    (nl,) = rec["nonlinearity"]
    knots = np.quantile(age, [0.10, 0.50, 0.90])
    X = np.column_stack([np.ones_like(age), age, rcs_columns(age, knots), south, age * south])
    assert nl["df"] == 1
    assert nl["g"] == pytest.approx(penalized_g(X, y, zero=(2,)), abs=1e-6)
    (it,) = rec["interaction_tests"]
    assert it["g"] == pytest.approx(penalized_g(X, y, zero=(4,)), abs=1e-6)
    assert {d["column"] for d in rec["assessment"]["drop_one"]} == {"age", "group", "age:group"}
    # The penalised fit's slope on its own rows is not 1 (the penalty shrinks the estimates), so the
    # note beside it must not claim "1 by construction"; FLIC keeps calibration-in-the-large at 0
    # (Puhr et al. 2017, Stat Med 36:2302).
    from twofold.core.assessing.assessment import PENALISED_CALIBRATION_NOTE

    assert rec["assessment"]["calibration_note"] == PENALISED_CALIBRATION_NOTE
    assert rec["assessment"]["calibration_intercept"] == pytest.approx(0.0, abs=1e-6)


def test_factor_interaction_with_a_zero_cell_adds_half_to_every_cell(tmp_path):
    # Two binary factors and their interaction make a saturated model of four
    # cells; Jeffreys' prior (Firth's penalty, Firth 1993) is then the product
    # of Beta(1/2, 1/2) priors on the cell risks, so each cell's fitted log
    # odds is log((events + 0.5) / (non-events + 0.5)) and the interaction is
    # the difference of the two 0.5-added log odds ratios -- also with a zero
    # cell, where maximum likelihood runs off to infinity.
    cells = {("no", "no"): (4, 11), ("no", "yes"): (7, 6), ("yes", "no"): (9, 5), ("yes", "yes"): (8, 0)}
    rows = ["a,b,event"]
    for (a, b), (ev, non) in cells.items():
        rows += [f"{a},{b},1"] * ev + [f"{a},{b},0"] * non
    path = tmp_path / "cells.csv"
    path.write_text("\n".join(rows) + "\n")
    st = _study(path)
    fit = st.fit(["a", "b", "a:b"], firth=True)

    def logit(a, b):
        ev, non = cells[(a, b)]
        return np.log((ev + 0.5) / (non + 0.5))

    expected = (logit("yes", "yes") - logit("yes", "no")) - (logit("no", "yes") - logit("no", "no"))
    inter = fit.names.index("a:b[yes:yes]")
    assert fit.params[inter] == pytest.approx(expected, abs=1e-7)
    assert fit.params[0] == pytest.approx(logit("no", "no"), abs=1e-7)
    # The penalised test of the interaction, against scipy on the same four columns.
    a = np.array([r.split(",")[0] == "yes" for r in rows[1:]], dtype=float)
    b = np.array([r.split(",")[1] == "yes" for r in rows[1:]], dtype=float)
    y = np.array([float(r.split(",")[2]) for r in rows[1:]])
    X = np.column_stack([np.ones_like(a), a, b, a * b])
    (it,) = interaction_tests(st, fit)
    assert it.g == pytest.approx(penalized_g(X, y, zero=(3,)), abs=1e-6)
