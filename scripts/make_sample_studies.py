"""Write the invented demonstration studies shipped with Twofold.

Everything this script writes is SYNTHETIC: the hospital, the patients and
the admissions are made up.  The outcomes are drawn from logistic models whose
true coefficients are the named constants below (logit scale), so the demo
data have known answers.

Run from the repository root::

    python scripts/make_sample_studies.py            # writes sample_studies/
    python scripts/make_sample_studies.py --out DIR  # writes DIR/

Only numpy and pandas are used.  Every random quantity is derived from
uniform numbers of ``numpy.random.Generator.random`` through explicit inverse
transforms (Box-Muller, inverse cumulative distribution functions), so the
output depends only on the PCG64 bit stream and not on how a numpy release
implements its other samplers.  Each variable gets its own child stream of
one ``SeedSequence``, so changing how one column is drawn leaves the others
unchanged.
"""

from __future__ import annotations

import argparse
from pathlib import Path

import numpy as np
import pandas as pd

# ---------------------------------------------------------------------------
# Stated truth.  Change these and rerun the script to regenerate the files.
# ---------------------------------------------------------------------------

HOSPITAL = "Quillmere Vale General Hospital"

# Ward readmission study -----------------------------------------------------
READMISSION_SEED = 20250117
READMISSION_N = 5000
READMISSION_FIRST_DATE = "2023-01-01"
READMISSION_LAST_DATE = "2024-12-31"

# True coefficients of the logistic model for readmitted_30d (logit scale).
# Reference levels: sex "F", discharge_destination "home", lives_alone "no",
# followup_call "no".  The intercept is the log-odds at age 0 with every other
# predictor at zero or its reference level (not clinically meaningful).
READMIT_INTERCEPT = -3.60
READMIT_AGE_PER_YEAR = 0.020                 # odds ratio about 1.02 per year
READMIT_SEX_M = 0.10
READMIT_LENGTH_OF_STAY_PER_DAY = 0.030
READMIT_PRIOR_ADMISSIONS_PER_ADMISSION = 0.35  # odds ratio about 1.42 each
READMIT_DEST_HOME_WITH_SUPPORT = 0.25
READMIT_DEST_CARE_HOME = 0.55
READMIT_DEST_OTHER_HOSPITAL = 0.40
READMIT_COMORBIDITY_PER_POINT = 0.12
READMIT_LIVES_ALONE_YES = 0.30
READMIT_FOLLOWUP_CALL_YES = -0.45            # protective, odds ratio about 0.64

# Share of cells blanked, completely at random, after the outcome is drawn.
READMIT_MISSING_COMORBIDITY = 0.04
READMIT_MISSING_LIVES_ALONE = 0.03

# Surgical-site infection study ----------------------------------------------
WOUND_SEED = 20250118
WOUND_N = 120
WOUND_FIRST_DATE = "2024-01-08"
WOUND_LAST_DATE = "2024-12-20"
# Fixed numbers of patients per wound class (assigned in random order).
WOUND_CLASS_COUNTS = {"clean": 66, "clean_contaminated": 40, "contaminated": 14}

# True coefficients of the logistic model for infection (logit scale), used
# for wound classes "clean" and "clean_contaminated".  Reference levels:
# diabetes "no", antibiotic_timing "before_incision", wound_class "clean".
# Every "contaminated" wound is infected by construction (a rule, in effect
# an infinite coefficient), which makes wound_class quasi-completely separate
# the outcome.
WOUND_INTERCEPT = -7.00
WOUND_AGE_PER_YEAR = 0.015
WOUND_BMI_PER_UNIT = 0.080
WOUND_DIABETES_YES = 0.90
WOUND_OPERATION_PER_MINUTE = 0.008
WOUND_TIMING_AFTER_INCISION = 0.80
WOUND_TIMING_NONE = 1.30
WOUND_CLASS_CLEAN_CONTAMINATED = 0.90

READMISSION_COEFFICIENTS = {
    "intercept": READMIT_INTERCEPT,
    "age": READMIT_AGE_PER_YEAR,
    "sex_M": READMIT_SEX_M,
    "length_of_stay": READMIT_LENGTH_OF_STAY_PER_DAY,
    "prior_admissions": READMIT_PRIOR_ADMISSIONS_PER_ADMISSION,
    "discharge_destination_home_with_support": READMIT_DEST_HOME_WITH_SUPPORT,
    "discharge_destination_care_home": READMIT_DEST_CARE_HOME,
    "discharge_destination_other_hospital": READMIT_DEST_OTHER_HOSPITAL,
    "comorbidity_score": READMIT_COMORBIDITY_PER_POINT,
    "lives_alone_yes": READMIT_LIVES_ALONE_YES,
    "followup_call_yes": READMIT_FOLLOWUP_CALL_YES,
}

WOUND_COEFFICIENTS = {
    "intercept": WOUND_INTERCEPT,
    "age": WOUND_AGE_PER_YEAR,
    "bmi": WOUND_BMI_PER_UNIT,
    "diabetes_yes": WOUND_DIABETES_YES,
    "operation_minutes": WOUND_OPERATION_PER_MINUTE,
    "antibiotic_timing_after_incision": WOUND_TIMING_AFTER_INCISION,
    "antibiotic_timing_none": WOUND_TIMING_NONE,
    "wound_class_clean_contaminated": WOUND_CLASS_CLEAN_CONTAMINATED,
}

READMISSION_FILE = "readmission_synthetic.csv"
WOUND_FILE = "wound_infection_synthetic.csv"
DICTIONARY_FILE = "DATA_DICTIONARY.md"
README_FILE = "README.md"

DESTINATIONS = ("home", "home_with_support", "care_home", "other_hospital")
TIMINGS = ("before_incision", "after_incision", "none")

# Variable names in the order their child streams are spawned.  Append new
# names at the end so existing columns keep their numbers.
_READMISSION_STREAMS = (
    "date", "age", "sex", "length_of_stay", "prior_admissions",
    "discharge_destination", "comorbidity_score", "lives_alone",
    "followup_call", "outcome", "missing_comorbidity", "missing_lives_alone",
)
_WOUND_STREAMS = (
    "date", "age", "bmi", "diabetes", "operation_minutes",
    "antibiotic_timing", "wound_class", "outcome",
)


# ---------------------------------------------------------------------------
# Uniform-based samplers
# ---------------------------------------------------------------------------

def _streams(seed: int, names: tuple[str, ...]) -> dict[str, np.random.Generator]:
    """One independent generator per variable, from one seed.

    Child ``i`` is ``SeedSequence(seed).spawn(len(names))[i]``.
    """
    children = np.random.SeedSequence(seed).spawn(len(names))
    return {name: np.random.Generator(np.random.PCG64(child))
            for name, child in zip(names, children)}


def _uniform_open(rng: np.random.Generator, n: int) -> np.ndarray:
    """Uniform numbers on (0, 1]: ``1 - U`` with ``U`` on [0, 1), safe for log."""
    return 1.0 - rng.random(n)


def _normal(rng: np.random.Generator, n: int) -> np.ndarray:
    """Standard normal numbers by Box-Muller: ``z = sqrt(-2 log U1) cos(2 pi U2)``."""
    u1 = _uniform_open(rng, n)
    u2 = rng.random(n)
    return np.sqrt(-2.0 * np.log(u1)) * np.cos(2.0 * np.pi * u2)


def _expit(eta: np.ndarray) -> np.ndarray:
    """Logistic function ``p = 1 / (1 + exp(-eta))``."""
    return 1.0 / (1.0 + np.exp(-eta))


def _bernoulli(rng: np.random.Generator, p: np.ndarray | float, n: int) -> np.ndarray:
    """Yes/no draws: ``y = 1[U < p]``."""
    return rng.random(n) < p


def _categorical(rng: np.random.Generator, probs: np.ndarray) -> np.ndarray:
    """Level index per row by inverse cumulative probabilities.

    ``k = #{j : U > F_j}`` with ``F_j`` the row's cumulative probabilities.
    """
    cum = np.cumsum(probs, axis=1)
    cum[:, -1] = 1.0  # guard against rounding leaving a gap at the top
    u = rng.random(probs.shape[0])
    return (u[:, None] >= cum).sum(axis=1)


def _poisson(rng: np.random.Generator, lam: np.ndarray, kmax: int = 40) -> np.ndarray:
    """Poisson counts by inverse cumulative distribution, row by row.

    ``P(K = k) = exp(-lam) lam^k / k!``; counts are limited to ``kmax``.
    """
    k = np.arange(kmax + 1)
    log_fact = np.concatenate([[0.0], np.cumsum(np.log(k[1:]))])
    log_pmf = -lam[:, None] + k[None, :] * np.log(lam[:, None]) - log_fact[None, :]
    cum = np.cumsum(np.exp(log_pmf), axis=1)
    u = rng.random(lam.shape[0])
    return np.minimum((u[:, None] >= cum).sum(axis=1), kmax)


def _geometric(rng: np.random.Generator, p: np.ndarray) -> np.ndarray:
    """Failures before the first success: ``K = floor(log U / log(1 - p))``."""
    u = _uniform_open(rng, p.shape[0])
    return np.floor(np.log(u) / np.log1p(-p)).astype(np.int64)


def _dates(rng: np.random.Generator, n: int, first: str, last: str) -> np.ndarray:
    """Calendar days drawn uniformly between ``first`` and ``last`` inclusive."""
    start = np.datetime64(first, "D")
    span = int((np.datetime64(last, "D") - start).astype(int)) + 1
    offsets = np.floor(rng.random(n) * span).astype(np.int64)
    return start + offsets.astype("timedelta64[D]")


def _yes_no(flag: np.ndarray) -> np.ndarray:
    """Text coding of a boolean: ``"yes"``/``"no"``."""
    return np.where(flag, "yes", "no").astype(object)


# ---------------------------------------------------------------------------
# Studies
# ---------------------------------------------------------------------------

def readmission_linear_predictor(complete: pd.DataFrame) -> np.ndarray:
    """Log-odds of readmission under the stated true model.

    ``eta = b0 + sum_j b_j x_j`` with the coefficients in
    ``READMISSION_COEFFICIENTS`` and reference-level (treatment) coding.
    """
    b = READMISSION_COEFFICIENTS
    dest = complete["discharge_destination"].to_numpy()
    return (
        b["intercept"]
        + b["age"] * complete["age"].to_numpy(float)
        + b["sex_M"] * (complete["sex"].to_numpy() == "M")
        + b["length_of_stay"] * complete["length_of_stay"].to_numpy(float)
        + b["prior_admissions"] * complete["prior_admissions"].to_numpy(float)
        + b["discharge_destination_home_with_support"] * (dest == "home_with_support")
        + b["discharge_destination_care_home"] * (dest == "care_home")
        + b["discharge_destination_other_hospital"] * (dest == "other_hospital")
        + b["comorbidity_score"] * complete["comorbidity_score"].to_numpy(float)
        + b["lives_alone_yes"] * (complete["lives_alone"].to_numpy() == "yes")
        + b["followup_call_yes"] * (complete["followup_call"].to_numpy() == "yes")
    )


def make_readmissions(seed: int = READMISSION_SEED, n: int = READMISSION_N,
                      with_missing: bool = True) -> pd.DataFrame:
    """Invent the ward readmission extract.

    Parameters
    ----------
    seed : int
        Seed of the ``SeedSequence`` from which every column's stream is spawned.
    n : int
        Number of admissions.
    with_missing : bool
        If False, return the complete values the outcome was drawn from.

    Returns
    -------
    pandas.DataFrame
        One row per admission, in date order, with the columns described in
        the data dictionary.  ``readmitted_30d`` is drawn as
        ``1[U < 1 / (1 + exp(-eta))]`` with ``eta`` from
        :func:`readmission_linear_predictor`.
    """
    rs = _streams(seed, _READMISSION_STREAMS)

    dates = np.sort(_dates(rs["date"], n, READMISSION_FIRST_DATE, READMISSION_LAST_DATE))
    age = np.clip(np.rint(63.0 + 16.0 * _normal(rs["age"], n)), 18, 98).astype(np.int64)
    age_c = (age - 63.0) / 10.0  # per decade from 63, for the covariate models
    male = _bernoulli(rs["sex"], 0.47, n)

    # Right-skewed stay, a little longer in older patients.
    los_raw = np.exp(0.95 + 0.08 * age_c + 0.75 * _normal(rs["length_of_stay"], n))
    length_of_stay = np.minimum(1 + np.floor(los_raw), 90).astype(np.int64)

    comorbidity = np.minimum(
        _poisson(rs["comorbidity_score"], 1.7 * np.exp(0.25 * age_c)), 10)

    # Skewed count of earlier admissions, more common with more comorbidity.
    mean_prior = 0.45 * np.exp(0.18 * comorbidity)
    prior = np.minimum(_geometric(rs["prior_admissions"], 1.0 / (1.0 + mean_prior)), 12)

    # Destination shifts away from home with age (multinomial logit scores).
    scores = np.column_stack([
        np.zeros(n),
        -1.5 + 0.35 * age_c,
        -2.6 + 0.70 * age_c,
        -2.4 + 0.10 * age_c,
    ])
    probs = np.exp(scores)
    probs /= probs.sum(axis=1, keepdims=True)
    destination = np.asarray(DESTINATIONS, dtype=object)[
        _categorical(rs["discharge_destination"], probs)]

    lives_alone = _bernoulli(rs["lives_alone"], _expit(-1.0 + 0.20 * age_c), n)
    followup = _bernoulli(rs["followup_call"], 0.40, n)

    df = pd.DataFrame({
        "admission_id": [f"A{i:06d}" for i in range(1, n + 1)],
        "admission_date": pd.Series(dates).dt.strftime("%Y-%m-%d"),
        "age": age,
        "sex": np.where(male, "M", "F").astype(object),
        "length_of_stay": length_of_stay,
        "prior_admissions": prior,
        "discharge_destination": destination,
        "comorbidity_score": comorbidity.astype(np.int64),
        "lives_alone": _yes_no(lives_alone),
        "followup_call": _yes_no(followup),
    })
    eta = readmission_linear_predictor(df)
    df["readmitted_30d"] = _bernoulli(rs["outcome"], _expit(eta), n).astype(np.int64)

    if with_missing:
        drop_c = rs["missing_comorbidity"].random(n) < READMIT_MISSING_COMORBIDITY
        drop_l = rs["missing_lives_alone"].random(n) < READMIT_MISSING_LIVES_ALONE
        df["comorbidity_score"] = df["comorbidity_score"].astype("Int64").mask(drop_c)
        df["lives_alone"] = df["lives_alone"].mask(drop_l)
    return df


def wound_linear_predictor(data: pd.DataFrame) -> np.ndarray:
    """Log-odds of infection for non-contaminated wounds under the stated model.

    ``eta = b0 + sum_j b_j x_j`` with the coefficients in ``WOUND_COEFFICIENTS``.
    """
    b = WOUND_COEFFICIENTS
    timing = data["antibiotic_timing"].to_numpy()
    return (
        b["intercept"]
        + b["age"] * data["age"].to_numpy(float)
        + b["bmi"] * data["bmi"].to_numpy(float)
        + b["diabetes_yes"] * (data["diabetes"].to_numpy() == "yes")
        + b["operation_minutes"] * data["operation_minutes"].to_numpy(float)
        + b["antibiotic_timing_after_incision"] * (timing == "after_incision")
        + b["antibiotic_timing_none"] * (timing == "none")
        + b["wound_class_clean_contaminated"]
        * (data["wound_class"].to_numpy() == "clean_contaminated")
    )


def make_wound_infection(seed: int = WOUND_SEED) -> pd.DataFrame:
    """Invent the small surgical-site infection study.

    Parameters
    ----------
    seed : int
        Seed of the ``SeedSequence`` from which every column's stream is spawned.

    Returns
    -------
    pandas.DataFrame
        One row per patient, in date order.  ``infection`` is "yes" for every
        contaminated wound and otherwise drawn as ``1[U < 1 / (1 + exp(-eta))]``
        with ``eta`` from :func:`wound_linear_predictor`.
    """
    n = sum(WOUND_CLASS_COUNTS.values())
    rs = _streams(seed, _WOUND_STREAMS)

    dates = np.sort(_dates(rs["date"], n, WOUND_FIRST_DATE, WOUND_LAST_DATE))
    age = np.clip(np.rint(58.0 + 14.0 * _normal(rs["age"], n)), 18, 90).astype(np.int64)
    bmi = np.round(np.clip(28.0 + 5.0 * _normal(rs["bmi"], n), 17.0, 48.0), 1)
    diabetes = _bernoulli(rs["diabetes"], _expit(-1.6 + 0.12 * (bmi - 28.0)), n)
    minutes = np.clip(
        np.rint(np.exp(np.log(105.0) + 0.40 * _normal(rs["operation_minutes"], n))),
        25, 360).astype(np.int64)
    timing = np.asarray(TIMINGS, dtype=object)[
        _categorical(rs["antibiotic_timing"], np.tile([0.70, 0.18, 0.12], (n, 1)))]
    # Exact class counts, shuffled: order of a uniform sample is a random permutation.
    classes = np.repeat(np.asarray(list(WOUND_CLASS_COUNTS), dtype=object),
                        list(WOUND_CLASS_COUNTS.values()))
    wound_class = classes[np.argsort(rs["wound_class"].random(n), kind="stable")]

    df = pd.DataFrame({
        "patient_ref": [f"SSI-{i:03d}" for i in range(1, n + 1)],
        "surgery_date": pd.Series(dates).dt.strftime("%Y-%m-%d"),
        "age": age,
        "bmi": bmi,
        "diabetes": _yes_no(diabetes),
        "operation_minutes": minutes,
        "antibiotic_timing": timing,
        "wound_class": wound_class,
    })
    drawn = _bernoulli(rs["outcome"], _expit(wound_linear_predictor(df)), n)
    df["infection"] = _yes_no(drawn | (wound_class == "contaminated"))
    return df


# ---------------------------------------------------------------------------
# Writing
# ---------------------------------------------------------------------------

def csv_text(df: pd.DataFrame) -> str:
    """Plain CSV text: header row, commas, ``\\n`` line ends, no index, blanks for missing."""
    return df.to_csv(index=False, lineterminator="\n")


def _coef_table(coefs: dict[str, float], labels: dict[str, str]) -> str:
    lines = ["| Term | Meaning | True coefficient (log-odds) | Odds ratio |",
             "|---|---|---|---|"]
    for key, value in coefs.items():
        ratio = "" if key == "intercept" else f"{np.exp(value):.3f}"
        lines.append(f"| `{key}` | {labels[key]} | {value:.3f} | {ratio} |")
    return "\n".join(lines)


def dictionary_text(readmit: pd.DataFrame, wound: pd.DataFrame) -> str:
    """Markdown data dictionary, with realised summaries of the generated frames."""
    n_r = len(readmit)
    rate_r = readmit["readmitted_30d"].mean()
    miss_c = readmit["comorbidity_score"].isna().mean()
    miss_l = readmit["lives_alone"].isna().mean()
    dest_share = readmit["discharge_destination"].value_counts(normalize=True)
    n_w = len(wound)
    rate_w = (wound["infection"] == "yes").mean()
    tab = pd.crosstab(wound["wound_class"], wound["infection"])
    tab_lines = ["| wound_class | infection = no | infection = yes |", "|---|---|---|"]
    for level in WOUND_CLASS_COUNTS:
        tab_lines.append(f"| {level} | {tab.loc[level, 'no']} | {tab.loc[level, 'yes']} |")

    r_labels = {
        "intercept": "log-odds at age 0, female, all other predictors zero or at reference",
        "age": "per year of age",
        "sex_M": "male versus female",
        "length_of_stay": "per day in hospital",
        "prior_admissions": "per earlier admission in the last year",
        "discharge_destination_home_with_support": "home with support versus home",
        "discharge_destination_care_home": "care home versus home",
        "discharge_destination_other_hospital": "other hospital versus home",
        "comorbidity_score": "per point of comorbidity score",
        "lives_alone_yes": "lives alone versus not",
        "followup_call_yes": "follow-up call versus none",
    }
    w_labels = {
        "intercept": "log-odds at age 0, body-mass index 0, no diabetes, 0 minutes, "
                     "antibiotic before incision, clean wound",
        "age": "per year of age",
        "bmi": "per kg/m\u00b2 of body-mass index",
        "diabetes_yes": "diabetes versus none",
        "operation_minutes": "per minute of operating time",
        "antibiotic_timing_after_incision": "antibiotic after incision versus before",
        "antibiotic_timing_none": "no antibiotic versus before incision",
        "wound_class_clean_contaminated": "clean-contaminated versus clean wound",
    }

    return f"""# Data dictionary: Twofold sample studies

**Both files are SYNTHETIC.** They were invented by
`scripts/make_sample_studies.py` for demonstrating and testing Twofold.
No real patients, staff, admissions or operations are described.
"{HOSPITAL}" is a fictional hospital in a fictional town.

Regenerate both files (and this dictionary) from the repository root with:

```
python scripts/make_sample_studies.py
```

(`--out DIR` writes to another folder.) The output is identical on every run.
Every random number is derived from uniform numbers of numpy's PCG64 generator
through explicit transforms, and each column has its own child stream of one
`numpy.random.SeedSequence(seed)`.

Both files are plain CSV: UTF-8, comma-separated, one header row, no index
column, no comment lines. A missing value is an empty cell.

## 1. `{READMISSION_FILE}`: 30-day readmission after a ward stay

A made-up extract of {n_r:,} adult ward admissions at {HOSPITAL}, admitted between
{READMISSION_FIRST_DATE} and {READMISSION_LAST_DATE}. One row per admission, in date order.

- Seed: `{READMISSION_SEED}`
- Rows: {n_r:,}
- Readmitted within 30 days: {rate_r:.1%} of admissions
- Missing cells: `comorbidity_score` {miss_c:.1%}, `lives_alone` {miss_l:.1%}, no other column

| Column | Meaning | Units / coding | Missing |
|---|---|---|---|
| `admission_id` | Admission identifier, unique | text `A` + 6 digits, e.g. `A000123`, numbered in date order | never |
| `admission_date` | Day of admission | ISO date `YYYY-MM-DD`, {READMISSION_FIRST_DATE} to {READMISSION_LAST_DATE} | never |
| `age` | Age at admission | whole years, 18 to 98 | never |
| `sex` | Recorded sex | text `F` or `M` | never |
| `length_of_stay` | Length of the index stay | whole days, at least 1, right-skewed | never |
| `prior_admissions` | Admissions in the year before this one | count, 0 to 12, skewed to 0 | never |
| `discharge_destination` | Where the patient went at discharge | text: `home`, `home_with_support`, `care_home`, `other_hospital` | never |
| `comorbidity_score` | Comorbidity score (a made-up index in the style of a weighted comorbidity count) | whole points, 0 to 10 | about {READMIT_MISSING_COMORBIDITY:.0%} of cells, completely at random |
| `lives_alone` | Patient lives alone | text `yes` or `no` | about {READMIT_MISSING_LIVES_ALONE:.0%} of cells, completely at random |
| `followup_call` | Nurse follow-up telephone call after discharge | text `yes` or `no` | never |
| `readmitted_30d` | Outcome: readmitted within 30 days of discharge | 1 = yes, 0 = no | never |

Destination shares: {", ".join(f"{k} {dest_share.get(k, 0):.1%}" for k in DESTINATIONS)}.

### How the outcome was made

Predictors were drawn first (age from a normal distribution rounded and kept
within 18 to 98; stay from a log-normal distribution; comorbidity from a Poisson
distribution rising with age; prior admissions from a geometric distribution
rising with comorbidity; destination from a multinomial model moving away from
home with age; living alone slightly more likely with age; follow-up calls for
40% of patients at random). Then, on the complete values,

    readmitted_30d = 1 with probability 1 / (1 + exp(-eta)),
    eta = intercept + sum of coefficient x predictor (table below).

Only afterwards were cells of `comorbidity_score` and `lives_alone` blanked,
each cell independently with the stated probability, whatever its value or the
outcome (missing completely at random). A complete-case fit is therefore
unbiased for the coefficients below, only less precise.

Predictors enter as they are stored: `age`, `length_of_stay`,
`prior_admissions` and `comorbidity_score` as straight-line numbers; the text
columns with reference levels `sex` = `F`, `discharge_destination` = `home`,
`lives_alone` = `no`, `followup_call` = `no`.

{_coef_table(READMISSION_COEFFICIENTS, r_labels)}

## 2. `{WOUND_FILE}`: surgical-site infection

A made-up study of {n_w} patients operated on at {HOSPITAL} between
{WOUND_FIRST_DATE} and {WOUND_LAST_DATE}. One row per patient, in date order.
No missing values.

- Seed: `{WOUND_SEED}`
- Rows: {n_w}
- Infection: {rate_w:.1%} of patients

| Column | Meaning | Units / coding | Missing |
|---|---|---|---|
| `patient_ref` | Patient reference, unique | text `SSI-` + 3 digits | never |
| `surgery_date` | Day of the operation | ISO date `YYYY-MM-DD` | never |
| `age` | Age at operation | whole years, 18 to 90 | never |
| `bmi` | Body-mass index | kg/m\u00b2, one decimal, 17.0 to 48.0 | never |
| `diabetes` | Known diabetes | text `yes` or `no` | never |
| `operation_minutes` | Operating time, knife to skin closure | whole minutes, 25 to 360 | never |
| `antibiotic_timing` | Prophylactic antibiotic | text: `before_incision`, `after_incision`, `none` | never |
| `wound_class` | Surgical wound class | text: `clean`, `clean_contaminated`, `contaminated` | never |
| `infection` | Outcome: surgical-site infection within 30 days | text `yes` or `no` | never |

### Deliberate separation

**`wound_class` separates the outcome quasi-completely: every patient with a
`contaminated` wound has `infection` = `yes`.** The table of wound class against
infection has an empty cell, so the maximum-likelihood estimate of the
`contaminated` coefficient does not exist (it runs off towards infinity). This is
on purpose, to show how Twofold reports separation. No other single predictor
separates the outcome.

{chr(10).join(tab_lines)}

### How the outcome was made

Wound classes were given to exactly {", ".join(f"{v} {k}" for k, v in WOUND_CLASS_COUNTS.items())}
patients in random order. Diabetes is more likely with higher body-mass index;
operating time is log-normal; antibiotic timing is before incision for about 70%,
after incision for about 18% and absent for about 12% of patients. For
`contaminated` wounds, `infection` = `yes` by rule. For the other wounds,

    infection = yes with probability 1 / (1 + exp(-eta)),
    eta = intercept + sum of coefficient x predictor (table below),

with reference levels `diabetes` = `no`, `antibiotic_timing` = `before_incision`,
`wound_class` = `clean`. With only {n_w} patients these coefficients are
recovered only roughly.

{_coef_table(WOUND_COEFFICIENTS, w_labels)}
| `wound_class_contaminated` | contaminated versus clean wound | infinite (infection by rule) | |
"""


README_TEXT = f"""# Sample studies

The files in this folder are SYNTHETIC: invented by `scripts/make_sample_studies.py`
for "{HOSPITAL}", a fictional hospital; they describe no real patients.
See `DATA_DICTIONARY.md` for every column, the true coefficients, the seeds and the command that regenerates them.
"""


def write_all(out_dir: str | Path = "sample_studies") -> list[Path]:
    """Generate both studies and write the CSV files, the dictionary and the README.

    Parameters
    ----------
    out_dir : str or Path
        Folder to write into; created if absent.

    Returns
    -------
    list of Path
        The files written.
    """
    out = Path(out_dir)
    out.mkdir(parents=True, exist_ok=True)
    readmit = make_readmissions()
    wound = make_wound_infection()
    contents = {
        READMISSION_FILE: csv_text(readmit),
        WOUND_FILE: csv_text(wound),
        DICTIONARY_FILE: dictionary_text(readmit, wound),
        README_FILE: README_TEXT,
    }
    written = []
    for name, text in contents.items():
        path = out / name
        path.write_bytes(text.encode("utf-8"))  # bytes: no platform newline rewriting
        written.append(path)
    return written


def main(argv: list[str] | None = None) -> int:
    """Command-line entry: ``python scripts/make_sample_studies.py [--out DIR]``."""
    parser = argparse.ArgumentParser(description="Write Twofold's synthetic sample studies.")
    parser.add_argument("--out", default="sample_studies",
                        help="folder to write into (default: sample_studies)")
    args = parser.parse_args(argv)
    for path in write_all(args.out):
        print(path)
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
