"""Separation, non-convergence, collinearity, few events and dropped rows."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm

from twofold.core.errors import ModelError, SeparationWarning
from twofold.core.data.io import LoadedTable
from twofold.core.models.study import Study

SAMPLES = Path(__file__).resolve().parents[2] / "sample_studies"


def study_of(frame, outcome="y", event=1):
    st = Study(LoadedTable(frame, Path("memory.csv")))
    st.set_outcome(outcome, event)
    return st


def codes(fit):
    return [n.code for n in fit.notices]


def test_quasi_complete_separation_in_wound_study_is_named():
    # Every contaminated wound was infected (an empty cell); statsmodels passes
    # such fits without an error, so Twofold checks the cells itself.
    st = Study.from_file(SAMPLES / "wound_infection_synthetic.csv")
    st.set_outcome("infection", "yes")
    cross = pd.crosstab(st.frame["wound_class"], st.frame["infection"])
    assert (cross == 0).any(axis=None)  # pandas crosstab: the empty cell is real
    fit = st.fit(["age", "wound_class"])
    sep = [n for n in fit.notices if n.code == "separation"]
    assert sep and sep[0].subjects == ("wound_class",)
    assert sep[0].category is SeparationWarning


def test_complete_separation_by_a_number():
    x = np.arange(40, dtype=float)
    frame = pd.DataFrame({"x": x, "z": np.sin(x), "y": (x >= 20).astype(int)})
    fit = study_of(frame).fit(["x", "z"])
    sep = [n for n in fit.notices if n.code == "separation"]
    assert sep and "x" in sep[0].subjects
    assert "not_converged" in codes(fit)
    # statsmodels (outside reference) confirms the data are separated: its own
    # fit predicts every record exactly and does not converge.
    import warnings

    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        ref = sm.Logit(frame["y"], sm.add_constant(frame[["x", "z"]])).fit(disp=0, maxiter=50)
    assert np.allclose(ref.predict(), frame["y"], atol=1e-6)
    assert not ref.mle_retvals["converged"]


def test_ordinary_data_raise_no_separation():
    rng = np.random.default_rng(3)
    x = rng.normal(size=400)
    y = (rng.random(400) < 1 / (1 + np.exp(-(0.3 + 1.2 * x)))).astype(int)
    fit = study_of(pd.DataFrame({"x": x, "y": y})).fit(["x"])
    assert codes(fit) == []
    assert fit.converged


def test_duplicate_and_constant_columns_are_dropped_and_named():
    rng = np.random.default_rng(5)
    n = 300
    a = rng.normal(size=n)
    frame = pd.DataFrame({"a": a, "a_twice": 2 * a, "b": rng.normal(size=n),
                          "y": (rng.random(n) < 0.4).astype(int)})
    st = study_of(frame)
    fit = st.fit(["a", "a_twice", "b"])
    assert fit.dropped == ("a_twice",)
    note = next(n for n in fit.notices if n.code == "collinear")
    assert note.subjects == ("a_twice",)
    # The remaining fit equals statsmodels without the aliased column.
    ref = sm.Logit(frame["y"], sm.add_constant(frame[["a", "b"]])).fit(disp=0)
    np.testing.assert_allclose(fit.params, ref.params, rtol=1e-7)
    # Constant on the rows used: role inference already excludes a constant
    # column, so force it in as numeric and it is dropped at fit time.
    frame["flat"] = 7.0
    st = study_of(frame)
    st.set_role("flat", "numeric")
    fit = st.fit(["a", "flat"])
    assert fit.dropped == ("flat",)


def test_few_events_per_parameter_warns_but_fits():
    # Peduzzi et al. (1996): fewer than 10 events per parameter is a warning
    # (a rule of thumb), never a refusal.
    rng = np.random.default_rng(8)
    n = 120
    frame = pd.DataFrame({f"x{i}": rng.normal(size=n) for i in range(6)})
    frame["y"] = (rng.random(n) < 0.25).astype(int)
    fit = study_of(frame).fit([f"x{i}" for i in range(6)])
    assert fit.events_per_parameter == pytest.approx(min(fit.events, n - fit.events) / 6)
    assert fit.events_per_parameter < 10
    assert "few_events" in codes(fit)


def test_factor_levels_count_as_parameters_for_events_per_parameter():
    rng = np.random.default_rng(9)
    n = 200
    frame = pd.DataFrame({"g": rng.choice(list("abcd"), size=n), "y": (rng.random(n) < 0.5).astype(int)})
    fit = study_of(frame).fit(["g"])
    assert fit.n_params == 4  # intercept + 3 indicators for a 4-level factor
    assert fit.overall.df == 3


def test_rows_dropped_for_missing_predictors_are_counted():
    st = Study.from_file(SAMPLES / "readmission_synthetic.csv")
    st.set_outcome("readmitted_30d")
    fit = st.fit(["age", "comorbidity_score", "lives_alone"])
    miss = st.frame[["comorbidity_score", "lives_alone"]].isna()
    assert fit.account.missing_by_column == {
        "age": 0, "comorbidity_score": int(miss["comorbidity_score"].sum()),
        "lives_alone": int(miss["lives_alone"].sum())}
    assert fit.n_used == int((~miss.any(axis=1)).sum())
    note = next(n for n in fit.notices if n.code == "rows_dropped")
    assert set(note.subjects) == {"comorbidity_score", "lives_alone"}


def test_not_nested_is_refused():
    st = Study.from_file(SAMPLES / "readmission_synthetic.csv")
    st.set_outcome("readmitted_30d")
    with pytest.raises(ModelError, match="not nested"):
        st.compare(["age", "sex"], ["age", "followup_call"])


def test_no_events_in_rows_is_refused():
    frame = pd.DataFrame({"x": [1.0, 2.0, np.nan, 4.0], "y": [0, 0, 1, 0]})
    st = study_of(frame)
    with pytest.raises(ModelError, match="no events"):
        st.fit(["x"])


def test_warm_start_reaches_the_same_fit():
    st = Study.from_file(SAMPLES / "readmission_synthetic.csv")
    st.set_outcome("readmitted_30d")
    big = st.fit(["age", "length_of_stay", "prior_admissions", "discharge_destination"])
    small_cold = st.fit(["age", "prior_admissions"])
    small_warm = st.fit(["age", "prior_admissions"], start=big)
    np.testing.assert_allclose(small_warm.params, small_cold.params, rtol=1e-7)
    assert small_warm.iterations <= small_cold.iterations + 1


def test_separation_is_worded_from_what_twofold_found_not_from_a_library_warning():
    # Albert & Anderson (1984, Biometrika 71:1): complete separation means some b puts every event above
    # every non-event; quasi-complete means ties at the boundary. Built here by construction.
    x = np.arange(30.0)
    complete = study_of(pd.DataFrame({"x": x, "y": (x >= 15).astype(int)})).fit(["x"])
    (sep,) = [n for n in complete.notices if n.code == "separation"]
    assert "separates the outcome completely" in sep.message
    # One tie at the boundary (x = 15 has an event and a non-event): quasi-complete.
    tied = pd.DataFrame({"x": np.append(x, 15.0), "y": np.append((x >= 15).astype(int), 0)})
    quasi = study_of(tied).fit(["x"])
    (sep,) = [n for n in quasi.notices if n.code == "separation"]
    assert "almost completely" in sep.message


def test_a_fit_that_does_not_settle_shows_no_odds_ratios():
    # Under complete separation the maximum-likelihood estimate does not exist (Albert & Anderson 1984),
    # so whatever Newton stopped at is not a result: no odds ratio, interval or stated effect is given,
    # in the record, the text account or the window's lines.
    from twofold.core.models.modelling import stated_effects
    from twofold.core.outputs.summary import fit_record
    from twofold.core.outputs.text import describe

    rng = np.random.default_rng(4)
    x = np.arange(40.0)
    frame = pd.DataFrame({"x": x, "z": rng.normal(size=40), "y": (x >= 20).astype(int)})
    fit = study_of(frame).fit(["x", "z"])
    assert not fit.converged
    record = fit_record(fit, "y", 1)
    assert all(t["odds_ratio"] is None and t["or_ci_low"] is None and t["withheld"] == "not settled"
               for t in record["terms"])
    assert stated_effects(fit) == []
    text = describe(record)
    assert "not shown" in text and "the fit did not settle" in text
    # An ordinary fit keeps its odds ratios (statsmodels' exp(params) is the reference).
    ok = study_of(frame.assign(y=(rng.random(40) < 0.5).astype(int))).fit(["x", "z"])
    ref = sm.Logit(ok.design.y, sm.add_constant(frame[["x", "z"]].to_numpy())).fit(disp=0)
    assert [r["odds_ratio"] for r in ok.coefficient_rows[1:]] == pytest.approx(np.exp(ref.params[1:]), rel=1e-6)
