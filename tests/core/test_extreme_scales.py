"""Predictors on extreme scales and columns with a small spread beside a large size.

Outside reference: statsmodels ``Logit`` fitted on the same columns rescaled
to ordinary size by hand (x / factor, or x minus an offset), where its Newton
steps settle; algebra carries its slope back to the original unit.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm

from twofold.core.data.io import LoadedTable
from twofold.core.models.design import aliased_columns
from twofold.core.models.study import Study


def study_of(frame: pd.DataFrame) -> Study:
    st = Study(LoadedTable(frame, Path("memory.csv")))
    st.set_outcome("y")
    return st


def simulated(n=3000, seed=21):
    rng = np.random.default_rng(seed)
    a = rng.normal(size=n)
    b = rng.normal(size=n)
    y = (rng.random(n) < 1 / (1 + np.exp(-(-0.5 + 0.8 * a - 0.6 * b)))).astype(int)
    return a, b, y


@pytest.mark.parametrize("factor", [1e-6, 1e-5, 1e5, 1e6, 1e8])
def test_a_predictor_in_a_tiny_or_huge_unit_gives_the_reference_estimates(factor):
    a, b, y = simulated()
    fit = study_of(pd.DataFrame({"lab": a * factor, "b": b, "y": y})).fit(["lab", "b"])
    ref = sm.Logit(y, sm.add_constant(np.column_stack([a, b]))).fit(disp=0)
    assert fit.converged and not [n for n in fit.notices if n.code == "not_converged"]
    # Per unit of the original column: the reference slope divided by the factor (algebra).
    assert fit.params[1] == pytest.approx(ref.params[1] / factor, rel=1e-6)
    assert fit.std_errors[1] == pytest.approx(ref.bse[1] / factor, rel=1e-6)
    assert fit.params[0] == pytest.approx(ref.params[0], rel=1e-6, abs=1e-9)
    assert fit.z[1] == pytest.approx(ref.tvalues[1], rel=1e-6)
    assert fit.overall.g == pytest.approx(2 * (ref.llf - ref.llnull), rel=1e-6)


def test_a_large_offset_changes_nothing_but_the_intercept():
    a, b, y = simulated(seed=5)
    plain = study_of(pd.DataFrame({"x": a, "b": b, "y": y})).fit(["x", "b"])
    moved = study_of(pd.DataFrame({"x": a + 1e7, "b": b, "y": y})).fit(["x", "b"])
    assert moved.converged
    np.testing.assert_allclose(moved.params[1:], plain.params[1:], rtol=1e-6)
    np.testing.assert_allclose(moved.std_errors[1:], plain.std_errors[1:], rtol=1e-6)
    assert moved.llf == pytest.approx(plain.llf, rel=1e-9)


def test_dates_as_yyyymmdd_and_values_near_a_million_are_not_called_constant():
    rng = np.random.default_rng(3)
    n = 2000
    day = rng.integers(0, 360, n)
    date = 20230101 + (day // 30) * 100 + day % 30  # one year of dates written as yyyymmdd
    level = 1_000_000 + rng.integers(-10, 11, n)
    y = (rng.random(n) < 1 / (1 + np.exp(-(-1 + 0.004 * day + 0.05 * (level - 1e6))))).astype(int)
    fit = study_of(pd.DataFrame({"admitted_on": date, "level": level, "y": y})).fit(["admitted_on", "level"])
    assert not fit.dropped and not [n for n in fit.notices if n.code == "collinear"]
    ref = sm.Logit(y, sm.add_constant(np.column_stack([date - 20230000, level - 1e6]).astype(float))).fit(disp=0)
    np.testing.assert_allclose(fit.params[1:], ref.params[1:], rtol=1e-6)
    np.testing.assert_allclose(fit.std_errors[1:], ref.bse[1:], rtol=1e-6)


def test_the_rank_check_on_large_offsets_agrees_with_numpy_on_centred_columns():
    # numpy.linalg.matrix_rank (SVD) on the centred columns is the reference.
    rng = np.random.default_rng(8)
    n = 400
    u, v = rng.normal(size=n), rng.normal(size=n)
    X = np.column_stack([np.ones(n), 1e6 + u, 5e5 + v, 2e6 + u - v, np.full(n, 1e6), 3e6 + rng.normal(size=n)])
    dropped = aliased_columns(X)
    assert dropped == [3, 4]  # exactly determined by the two before it; constant
    centred = X[:, 1:] - X[:, 1:].mean(axis=0)
    kept = [j - 1 for j in range(1, X.shape[1]) if j not in dropped]
    # The values carry rounding of about 1e-10 at their size, so rank is judged at a relative 1e-6.
    tol = 1e-6 * np.linalg.norm(centred, 2)
    assert np.linalg.matrix_rank(centred[:, kept], tol=tol) == len(kept)
    assert np.linalg.matrix_rank(centred, tol=tol) == len(kept)


@pytest.mark.parametrize("factor", [1e-6, 1e6])
def test_drop_one_likelihood_ratio_tests_hold_in_extreme_units(factor):
    from twofold.core.models.study import drop_one_tests

    a, b, y = simulated()
    st = study_of(pd.DataFrame({"lab": a * factor + (1e7 if factor > 1 else 0.0), "b": b, "y": y}))
    tests = drop_one_tests(st, st.fit(["lab", "b"]))
    # Outside reference: statsmodels fits of the full model and of each model without one predictor,
    # on the columns at ordinary size (a G test does not depend on a predictor's unit or origin).
    full = sm.Logit(y, sm.add_constant(np.column_stack([a, b]))).fit(disp=0)
    without = [sm.Logit(y, sm.add_constant(other)).fit(disp=0) for other in (b, a)]
    assert [t.g for t in tests] == pytest.approx([2 * (full.llf - w.llf) for w in without], rel=1e-7)
    assert all(t.available for t in tests)
