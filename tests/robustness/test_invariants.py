"""Properties every fit must have, checked on generated data with hypothesis.

Each example draws a seed and a size; the data come from numpy's default_rng
with that seed, from a known logistic model.  Hypothesis runs derandomized, so
every run checks the same examples.  The properties are consequences of the
likelihood itself (Hosmer, Lemeshow & Sturdivant, Applied Logistic
Regression, 3rd ed., 2013, ch. 1-3, from memory):

* the likelihood is a product over rows, so row order changes nothing;
* swapping which value is the event turns p into 1 - p, which negates the
  logit, so every coefficient changes sign and every odds ratio inverts;
* multiplying a predictor by c divides its coefficient and standard error by
  c, and leaves z (up to sign), p and G unchanged;
* G = 2 (lnL_larger - lnL_smaller) >= 0 for nested models fitted on the same
  rows, and equals the difference of the two deviances;
* duplicating every row doubles the log-likelihood, so G doubles.

The fits are also compared with statsmodels' ``Logit`` where that is cheap.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm
from hypothesis import HealthCheck, assume, given, settings
from hypothesis import strategies as st

from twofold.core.data.io import LoadedTable
from twofold.core.models.study import Study

SETTINGS = settings(max_examples=20, deadline=None, derandomize=True,
                    suppress_health_check=[HealthCheck.too_slow])


def make_frame(seed: int, n: int) -> pd.DataFrame:
    """Two numeric predictors (one with gaps), a three-group factor, a yes/no outcome."""
    rng = np.random.default_rng(seed)
    age = rng.normal(60, 12, n)
    dose = rng.gamma(2.0, 3.0, n)
    ward = rng.choice(["A", "B", "C"], n)
    eta = -0.5 + 0.04 * (age - 60) + 0.1 * (dose - 6) + np.where(ward == "B", 0.6, 0.0)
    y = rng.uniform(size=n) < 1 / (1 + np.exp(-eta))
    dose[rng.uniform(size=n) < 0.08] = np.nan
    return pd.DataFrame({"age": age, "dose": dose, "ward": ward, "died": np.where(y, "yes", "no")})


def study_of(frame: pd.DataFrame, event="yes") -> Study:
    st_ = Study(LoadedTable(frame.reset_index(drop=True), Path("m.csv")))
    st_.set_outcome("died", event)
    return st_


def clean_fit(study: Study, predictors):
    fit = study.fit(predictors)
    assume(fit.converged and not any(n.code in ("separation", "collinear") for n in fit.notices))
    return fit


data = st.tuples(st.integers(0, 2**31 - 1), st.integers(60, 160))
PREDICTORS = ["age", "dose", "ward"]


@SETTINGS
@given(data)
def test_row_order_changes_nothing(args):
    seed, n = args
    frame = make_frame(seed, n)
    fit = clean_fit(study_of(frame), PREDICTORS)
    shuffled = frame.iloc[np.random.default_rng(seed + 1).permutation(n)]
    st2 = study_of(shuffled)
    fit2 = st2.fit(PREDICTORS)
    assert fit2.names == fit.names  # the same reference level, whatever the order
    np.testing.assert_allclose(fit2.params, fit.params, rtol=1e-7, atol=1e-10)
    np.testing.assert_allclose(fit2.std_errors, fit.std_errors, rtol=1e-7)
    np.testing.assert_allclose(fit2.p_values, fit.p_values, rtol=1e-6, atol=1e-14)
    assert fit2.llf == pytest.approx(fit.llf, rel=1e-10)
    assert fit2.overall.g == pytest.approx(fit.overall.g, rel=1e-8)
    assert st2.columns["ward"].levels == study_of(frame).columns["ward"].levels


@SETTINGS
@given(data)
def test_swapping_the_event_flips_signs_and_inverts_odds_ratios(args):
    seed, n = args
    frame = make_frame(seed, n)
    yes = clean_fit(study_of(frame, "yes"), PREDICTORS)
    no = study_of(frame, "no").fit(PREDICTORS)
    np.testing.assert_allclose(no.params, -yes.params, rtol=1e-7, atol=1e-10)
    np.testing.assert_allclose(no.odds_ratios, 1 / yes.odds_ratios, rtol=1e-7)
    np.testing.assert_allclose(no.z, -yes.z, rtol=1e-7, atol=1e-10)
    np.testing.assert_allclose(no.p_values, yes.p_values, rtol=1e-6, atol=1e-14)
    lo, hi = yes.odds_ratio_ci
    lo2, hi2 = no.odds_ratio_ci
    np.testing.assert_allclose(lo2, 1 / hi, rtol=1e-7)
    np.testing.assert_allclose(hi2, 1 / lo, rtol=1e-7)
    assert no.overall.g == pytest.approx(yes.overall.g, rel=1e-8)


@SETTINGS
@given(data, st.sampled_from([-7.0, 0.001, 0.45, 12.0, 2500.0]))
def test_rescaling_a_predictor_rescales_its_coefficient_only(args, c):
    seed, n = args
    frame = make_frame(seed, n)
    base = clean_fit(study_of(frame), PREDICTORS)
    scaled = study_of(frame.assign(dose=frame["dose"] * c)).fit(PREDICTORS)
    j = base.names.index("dose")
    others = [i for i in range(len(base.names)) if i != j]
    assert scaled.params[j] == pytest.approx(base.params[j] / c, rel=1e-6)
    assert scaled.std_errors[j] == pytest.approx(base.std_errors[j] / abs(c), rel=1e-6)
    assert scaled.z[j] == pytest.approx(np.sign(c) * base.z[j], rel=1e-6)
    np.testing.assert_allclose(scaled.params[others], base.params[others], rtol=1e-6, atol=1e-9)
    np.testing.assert_allclose(scaled.p_values, base.p_values, rtol=1e-5, atol=1e-12)
    assert scaled.overall.g == pytest.approx(base.overall.g, rel=1e-8)
    small_a, large_a, test_a = study_of(frame).compare(["age"], PREDICTORS)
    small_b, large_b, test_b = study_of(frame.assign(dose=frame["dose"] * c)).compare(["age"], PREDICTORS)
    assert test_b.g == pytest.approx(test_a.g, rel=1e-8)


@SETTINGS
@given(data)
def test_nested_g_is_non_negative_and_the_difference_of_deviances(args):
    seed, n = args
    frame = make_frame(seed, n)
    st_ = study_of(frame)
    clean_fit(st_, PREDICTORS)
    for smaller in (["age"], ["ward"], ["age", "dose"], []):
        small, large, test = st_.compare(smaller, PREDICTORS)
        assert test.g >= 0
        assert small.n_used == large.n_used  # both on the rows complete for the larger model
        assert test.g == pytest.approx(small.deviance - large.deviance, rel=1e-9, abs=1e-9)
        assert test.df == large.n_params - small.n_params
    fit = st_.fit(PREDICTORS)
    assert fit.overall.g >= 0
    # Outside reference: statsmodels on the same complete rows and design.
    rows = frame.dropna()
    X = pd.DataFrame({"const": 1.0, "age": rows.age, "dose": rows.dose})
    for level in fit.design.blocks[2].levels:
        X[level] = (rows.ward == level).astype(float)
    ref = sm.Logit((rows.died == "yes").astype(float), X).fit(disp=0)
    assert fit.llf == pytest.approx(ref.llf, rel=1e-9)
    assert fit.overall.g == pytest.approx(ref.llr, rel=1e-7)
    np.testing.assert_allclose(fit.params, ref.params.to_numpy(), rtol=1e-6, atol=1e-9)


@SETTINGS
@given(data)
def test_duplicating_the_data_doubles_g(args):
    seed, n = args
    frame = make_frame(seed, n)
    once = study_of(frame)
    twice = study_of(pd.concat([frame, frame], ignore_index=True))
    fit1 = clean_fit(once, PREDICTORS)
    fit2 = twice.fit(PREDICTORS)
    np.testing.assert_allclose(fit2.params, fit1.params, rtol=1e-7, atol=1e-10)
    assert fit2.llf == pytest.approx(2 * fit1.llf, rel=1e-10)
    assert fit2.overall.g == pytest.approx(2 * fit1.overall.g, rel=1e-8)
    np.testing.assert_allclose(fit2.std_errors, fit1.std_errors / np.sqrt(2), rtol=1e-7)
    t1 = once.compare(["age"], PREDICTORS)[2]
    t2 = twice.compare(["age"], PREDICTORS)[2]
    assert t2.g == pytest.approx(2 * t1.g, rel=1e-8)


def test_tied_levels_give_the_same_reference_in_any_row_order():
    """Levels with equal counts are ordered by value, so the default reference does not follow the rows."""
    rng = np.random.default_rng(3)
    frame = pd.DataFrame({"ward": ["north", "south", "east"] * 40, "died": rng.choice(["yes", "no"], 120)})
    frame.loc[frame.index[:9], "ward"] = "west"  # 37 rows each of east, north and south remain
    references = set()
    for k in range(6):
        order = np.random.default_rng(k).permutation(len(frame))
        st_ = study_of(frame.iloc[order])
        references.add(st_.reference("ward"))
        assert st_.columns["ward"].levels[:3] == ("east", "north", "south")
    assert len(references) == 1


def test_describing_a_freshly_read_column_equals_describing_a_copy(tmp_path):
    """The distinct values kept from reading give the same description as a fresh pass over the cells."""
    from twofold.core.data.io import read_table
    from twofold.core.data.roles import describe_columns

    rng = np.random.default_rng(11)
    n = 30_000
    frame = pd.DataFrame({
        "ward": rng.choice(["a", "b", "c", " d", "NA"], n),          # parsed as categories, stripped
        "answer": rng.choice(["Yes", "yes", "no", "No"], n),          # case variants merged
        "date": rng.choice([f"2024-01-{d:02d}" for d in range(1, 29)], n),
        "code": np.char.add("X", rng.integers(0, 10 * n, n).astype(str)),  # mostly distinct
        "mixed": np.where(rng.uniform(size=n) < 0.01, "unknown", rng.integers(0, 300, n).astype(str)),
        "y": rng.integers(0, 2, n),
    })
    path = tmp_path / "f.csv"
    frame.to_csv(path, index=False)
    table = read_table(path)
    fresh = describe_columns(table.frame.copy(deep=True))  # new arrays: nothing kept applies
    kept = describe_columns(table.frame)
    assert kept == fresh
    assert kept["ward"].levels and set(kept["ward"].levels) == {"a", "b", "c", "d"}
    assert kept["mixed"].n_levels == len(set(frame["mixed"]))
