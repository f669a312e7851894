"""Checks of the synthetic sample studies and the script that makes them.

The studies are invented by ``scripts/make_sample_studies.py`` from stated
true coefficients and fixed seeds.  These tests check that the script is
deterministic, that the committed files are exactly what it writes, that the
files have the shapes and rates the data dictionary promises, that an outside
fitting routine (statsmodels) recovers the stated coefficients, and that the
wound study separates the outcome through exactly one predictor.
"""

from __future__ import annotations

import importlib.util
import re
import subprocess
import sys
import warnings
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

REPO = Path(__file__).resolve().parents[2]
SCRIPT = REPO / "scripts" / "make_sample_studies.py"
SAMPLES = REPO / "sample_studies"

READMISSION_COLUMNS = [
    "admission_id", "admission_date", "age", "sex", "length_of_stay",
    "prior_admissions", "discharge_destination", "comorbidity_score",
    "lives_alone", "followup_call", "readmitted_30d",
]
WOUND_COLUMNS = [
    "patient_ref", "surgery_date", "age", "bmi", "diabetes",
    "operation_minutes", "antibiotic_timing", "wound_class", "infection",
]


@pytest.fixture(scope="module")
def gen():
    """The generating script, imported from its path (it is not part of the package)."""
    spec = importlib.util.spec_from_file_location("make_sample_studies", SCRIPT)
    module = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(module)
    return module


@pytest.fixture(scope="module")
def readmit() -> pd.DataFrame:
    return pd.read_csv(SAMPLES / "readmission_synthetic.csv")


@pytest.fixture(scope="module")
def wound() -> pd.DataFrame:
    return pd.read_csv(SAMPLES / "wound_infection_synthetic.csv")


# ---------------------------------------------------------------------------
# (a) determinism and committed files
# ---------------------------------------------------------------------------

def test_generating_functions_are_deterministic(gen):
    pd.testing.assert_frame_equal(gen.make_readmissions(), gen.make_readmissions())
    pd.testing.assert_frame_equal(gen.make_wound_infection(), gen.make_wound_infection())


def test_seed_is_actually_used(gen):
    # Guards the determinism test: a generator that ignored its seed would pass it.
    a = gen.make_readmissions(seed=1, n=300)
    b = gen.make_readmissions(seed=2, n=300)
    assert not a.equals(b)
    assert not gen.make_wound_infection(seed=1).equals(gen.make_wound_infection(seed=2))


def test_committed_files_equal_fresh_output_of_the_command(tmp_path):
    # Runs the documented command end to end and compares byte for byte.
    result = subprocess.run(
        [sys.executable, str(SCRIPT), "--out", str(tmp_path)],
        cwd=REPO, capture_output=True, text=True, check=False,
    )
    assert result.returncode == 0, result.stderr
    names = ["readmission_synthetic.csv", "wound_infection_synthetic.csv",
             "DATA_DICTIONARY.md", "README.md"]
    for name in names:
        fresh = (tmp_path / name).read_bytes()
        committed = (SAMPLES / name).read_bytes()
        assert fresh == committed, f"{name} differs from a fresh run of the script"


@pytest.mark.parametrize("name, columns", [
    ("readmission_synthetic.csv", READMISSION_COLUMNS),
    ("wound_infection_synthetic.csv", WOUND_COLUMNS),
])
def test_csv_files_are_plain(name, columns):
    raw = (SAMPLES / name).read_bytes()
    text = raw.decode("utf-8")  # raises if not UTF-8
    assert not text.startswith("\ufeff")  # no byte-order mark
    assert "\r" not in text
    lines = text.splitlines()
    assert lines[0].split(",") == columns  # header row, comma-delimited, no index column
    assert not any(line.startswith("#") for line in lines)
    assert all(line.count(",") == len(columns) - 1 for line in lines)
    assert not any('"' in line for line in lines)  # no quoting needed anywhere


# ---------------------------------------------------------------------------
# (b) shapes and rates
# ---------------------------------------------------------------------------

def test_readmission_shape_and_coding(readmit):
    df = readmit
    assert list(df.columns) == READMISSION_COLUMNS
    assert len(df) == 5000
    assert df["admission_id"].is_unique
    assert df["admission_id"].str.fullmatch(r"A\d{6}").all()

    dates = pd.to_datetime(df["admission_date"], format="%Y-%m-%d")
    assert dates.min() >= pd.Timestamp("2023-01-01")
    assert dates.max() <= pd.Timestamp("2024-12-31")
    assert (dates.max() - dates.min()).days >= 700  # about two years covered
    assert dates.is_monotonic_increasing

    assert df["age"].dtype.kind == "i" and df["age"].between(18, 98).all()
    assert set(df["sex"]) == {"F", "M"}
    los = df["length_of_stay"]
    assert los.dtype.kind == "i" and (los >= 1).all()
    assert los.mean() > los.median()  # right-skewed
    prior = df["prior_admissions"]
    assert prior.dtype.kind == "i" and prior.between(0, 12).all()
    assert prior.mean() > prior.median()  # skewed towards zero
    dest = df["discharge_destination"].value_counts()
    assert set(dest.index) == {"home", "home_with_support", "care_home", "other_hospital"}
    assert dest.idxmax() == "home"
    score = df["comorbidity_score"].dropna()
    assert (score == np.round(score)).all() and score.between(0, 10).all()
    assert set(df["lives_alone"].dropna()) == {"yes", "no"}
    assert set(df["followup_call"]) == {"yes", "no"}
    assert set(df["readmitted_30d"]) == {0, 1}


def test_readmission_event_rate_and_missingness(readmit):
    # Bands are the ones stated in the brief and the data dictionary.
    assert 0.15 <= readmit["readmitted_30d"].mean() <= 0.20
    missing = readmit.isna().mean()
    assert 0.03 <= missing["comorbidity_score"] <= 0.05
    assert 0.02 <= missing["lives_alone"] <= 0.04
    others = missing.drop(["comorbidity_score", "lives_alone"])
    assert (others == 0).all(), "only two columns may have missing cells"


def test_missingness_only_blanks_cells(gen):
    # The outcome is drawn from the complete values; blanking must change nothing else.
    full = gen.make_readmissions(with_missing=False)
    holed = gen.make_readmissions()
    assert full.notna().all().all()
    untouched = [c for c in full.columns if c not in ("comorbidity_score", "lives_alone")]
    pd.testing.assert_frame_equal(full[untouched], holed[untouched])
    for col in ("comorbidity_score", "lives_alone"):
        keep = holed[col].notna().to_numpy()
        assert (full[col].to_numpy()[keep] == holed[col].to_numpy()[keep]).all()


def test_missing_cells_not_tied_to_outcome(readmit):
    # Missing completely at random: the outcome rate among blanked rows should
    # sit near the overall rate.  Two-proportion z test, |z| < 3.29 (two-sided
    # 0.1% level, common practice for a fixed-seed sanity check).
    y = readmit["readmitted_30d"].to_numpy(float)
    p = y.mean()
    for col in ("comorbidity_score", "lives_alone"):
        m = readmit[col].isna().to_numpy()
        se = np.sqrt(p * (1 - p) * (1 / m.sum() + 1 / (~m).sum()))
        z = (y[m].mean() - y[~m].mean()) / se
        assert abs(z) < 3.29, (col, z)


def test_wound_shape_and_coding(wound):
    df = wound
    assert list(df.columns) == WOUND_COLUMNS
    assert len(df) == 120
    assert df["patient_ref"].is_unique
    assert df.notna().all().all()
    pd.to_datetime(df["surgery_date"], format="%Y-%m-%d")  # raises if not ISO dates
    assert df["age"].dtype.kind == "i" and df["age"].between(18, 90).all()
    assert (np.round(df["bmi"], 1) == df["bmi"]).all()
    assert df["operation_minutes"].dtype.kind == "i" and (df["operation_minutes"] > 0).all()
    assert set(df["diabetes"]) == {"yes", "no"}
    assert set(df["antibiotic_timing"]) == {"before_incision", "after_incision", "none"}
    assert set(df["wound_class"]) == {"clean", "clean_contaminated", "contaminated"}
    assert set(df["infection"]) == {"yes", "no"}
    assert 0.20 <= (df["infection"] == "yes").mean() <= 0.30


def test_wound_bmi_written_with_one_decimal():
    text = (SAMPLES / "wound_infection_synthetic.csv").read_text(encoding="utf-8")
    bmi = [line.split(",")[3] for line in text.splitlines()[1:]]
    assert all(re.fullmatch(r"\d{2}\.\d", v) for v in bmi)


# ---------------------------------------------------------------------------
# (c) recovery of the stated coefficients by an outside fitting routine
# ---------------------------------------------------------------------------

def _readmission_design(df: pd.DataFrame) -> pd.DataFrame:
    """Treatment-coded design built here, independently of the script's own code."""
    dest = df["discharge_destination"]
    return pd.DataFrame({
        "intercept": 1.0,
        "age": df["age"].astype(float),
        "sex_M": (df["sex"] == "M").astype(float),
        "length_of_stay": df["length_of_stay"].astype(float),
        "prior_admissions": df["prior_admissions"].astype(float),
        "discharge_destination_home_with_support": (dest == "home_with_support").astype(float),
        "discharge_destination_care_home": (dest == "care_home").astype(float),
        "discharge_destination_other_hospital": (dest == "other_hospital").astype(float),
        "comorbidity_score": df["comorbidity_score"].astype(float),
        "lives_alone_yes": (df["lives_alone"] == "yes").astype(float),
        "followup_call_yes": (df["followup_call"] == "yes").astype(float),
    })


@pytest.fixture(scope="module")
def readmission_fit(readmit):
    import statsmodels.api as sm

    complete = readmit.dropna()
    X = _readmission_design(complete)
    fit = sm.Logit(complete["readmitted_30d"].astype(float), X).fit(disp=0)
    assert fit.mle_retvals["converged"]
    return fit


def test_stated_coefficients_recovered_within_three_se(gen, readmission_fit):
    # Statistical check on a seeded simulation, not an identity: statsmodels
    # Logit (outside reference) fitted to the complete cases with the true
    # design should land within 3 standard errors of each stated value.  With
    # 11 terms a correct generator fails this for a given seed with chance
    # about 11 x 0.27% = 3%; this seed passes.  A wrong sign or a dropped term
    # would miss by many standard errors (e.g. the follow-up call by about 10).
    truth = pd.Series(gen.READMISSION_COEFFICIENTS)
    est, se = readmission_fit.params, readmission_fit.bse
    assert list(est.index) == list(truth.index)
    z = (est - truth) / se
    assert (z.abs() < 3).all(), z.round(2).to_dict()


def test_stated_coefficients_jointly_consistent(gen, readmission_fit):
    # Joint Wald test of estimate = truth using statsmodels' covariance:
    # W = d' V^-1 d ~ chi-square(11) under a correct generator; require p > 0.001.
    from scipy import stats

    truth = pd.Series(gen.READMISSION_COEFFICIENTS)
    d = (readmission_fit.params - truth).to_numpy()
    V = readmission_fit.cov_params().to_numpy()
    W = float(d @ np.linalg.solve(V, d))
    assert stats.chi2.sf(W, df=len(d)) > 0.001


def test_dictionary_states_truth_seed_and_command(gen):
    text = (SAMPLES / "DATA_DICTIONARY.md").read_text(encoding="utf-8")
    assert "SYNTHETIC" in text and gen.HOSPITAL in text
    assert "python scripts/make_sample_studies.py" in text
    assert f"`{gen.READMISSION_SEED}`" in text and f"`{gen.WOUND_SEED}`" in text
    for coefs in (gen.READMISSION_COEFFICIENTS, gen.WOUND_COEFFICIENTS):
        for key, value in coefs.items():
            assert f"| `{key}` |" in text and f"| {value:.3f} |" in text, key
    for column in READMISSION_COLUMNS + WOUND_COLUMNS:
        assert f"| `{column}` |" in text, column
    readme = (SAMPLES / "README.md").read_text(encoding="utf-8")
    assert "SYNTHETIC" in readme and "DATA_DICTIONARY.md" in readme


# ---------------------------------------------------------------------------
# (d) separation in the wound study
# ---------------------------------------------------------------------------

def test_wound_class_has_an_empty_cell(wound):
    tab = pd.crosstab(wound["wound_class"], wound["infection"])
    assert tab.loc["contaminated", "no"] == 0
    assert tab.loc["contaminated", "yes"] > 0
    others = tab.drop(index="contaminated")
    assert (others > 0).all().all()  # the only empty cell


def test_no_other_predictor_separates(wound):
    y = wound["infection"] == "yes"
    for col in ("diabetes", "antibiotic_timing"):
        tab = pd.crosstab(wound[col], wound["infection"])
        assert (tab > 0).all().all(), col
    for col in ("age", "bmi", "operation_minutes"):
        x = wound[col]
        # Overlapping ranges: no cut point puts all infections on one side.
        assert x[y].min() < x[~y].max() and x[~y].min() < x[y].max(), col


def test_outside_fit_shows_the_separation(wound):
    # statsmodels Logit (outside reference) on wound class alone: with an empty
    # cell the likelihood keeps rising as the contaminated coefficient grows,
    # so Newton steps run it far out with a huge standard error.
    import statsmodels.api as sm

    X = pd.DataFrame({
        "intercept": 1.0,
        "clean_contaminated": (wound["wound_class"] == "clean_contaminated").astype(float),
        "contaminated": (wound["wound_class"] == "contaminated").astype(float),
    })
    y = (wound["infection"] == "yes").astype(float)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # statsmodels' own convergence warnings
        fit = sm.Logit(y, X).fit(disp=0, maxiter=100)
    assert fit.params["contaminated"] > 10
    assert fit.bse["contaminated"] > 100
    assert abs(fit.params["clean_contaminated"]) < 5  # the other level stays finite
