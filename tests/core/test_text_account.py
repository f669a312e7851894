"""The plain-text account prints every result the JSON holds, and words each one as what it is.

References: scipy's
optimiser for the penalised likelihood of the constant-only Firth model
(Firth 1993; Heinze & Schemper 2002), the formulas of Riley et al. (2020, BMJ 368:m441) written here,
and algebra for the Hosmer-Lemeshow expected counts.
"""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from twofold.core.analysis import AnalysisSpec, run_analysis
from twofold.core.outputs.text import describe, fmt_num, fmt_or

SAMPLES = Path(__file__).resolve().parents[2] / "sample_studies"
READMISSION = SAMPLES / "readmission_synthetic.csv"


@pytest.fixture(scope="module")
def full():
    spec = AnalysisSpec(data=READMISSION, outcome="readmitted_30d", event=None,
                        predictors=["age", "sex", "length_of_stay"], splines={"age": 4},
                        interactions=["length_of_stay:sex"], validate=20, seed=1, profile_ci=True, threshold=0.2)
    result = run_analysis(spec, guess_event=True)
    return result.record, describe(result.record)


def test_every_result_of_the_record_is_in_the_text(full):
    record, text = full
    # Curve and interaction tests, each with its reading.
    (curve,) = record["nonlinearity"]
    assert f"G = {fmt_num(curve['g'], 2)} on 2 degrees of freedom" in text
    assert "Is the effect of age curved?" in text
    (cross,) = record["interaction_tests"]
    assert f"G = {fmt_num(cross['g'], 2)} on 1 degree of freedom" in text
    assert "Does the effect of length_of_stay differ with sex?" in text
    # Bootstrap validation, every corrected figure, and how resamples were refitted.
    v = record["validation"]
    for key, digits in (("auc_corrected", 3), ("calibration_slope_corrected", 3), ("brier_corrected", 4),
                        ("cox_snell_r2_corrected", 3)):
        assert fmt_num(v[key], digits) in text
    assert "each resample refitted by maximum likelihood" in text
    assert f"at least {v['sample_size_corrected']['n_minimum']:,} rows are needed" in text
    # Profile intervals beside the Wald ones, with which to report.
    for t in record["terms"]:
        if "or_pl_low" in t:
            assert f"{fmt_or(t['or_pl_low'])} to {fmt_or(t['or_pl_high'])}" in text
    assert "Profile-likelihood intervals" in text
    # Odds ratios at stated values, and total-effect labels of the drop-one tests.
    for e in record["effects_at_values"]:
        assert e["label"] in text
    for t in record["assessment"]["drop_one"]:
        assert t["label"] in text
    # The sample size says which R-squared it used.
    assert "apparent Cox-Snell R-squared of" in text


def test_a_penalised_fit_is_worded_as_penalised_and_gives_no_aic(tmp_path):
    # Firth's constant-only model maximises l(b0) + 0.5 log(n p (1 - p)) (Firth 1993, Biometrika 80:27);
    # scipy's bounded optimiser finds it independently, so G = 2 (pl_full - pl_constant) can be checked.
    from scipy.optimize import minimize_scalar
    from scipy.special import expit

    rng = np.random.default_rng(2)
    n = 60
    frame = pd.DataFrame({"dose": rng.normal(size=n), "arm": rng.choice(["a", "b"], n)})
    frame["y"] = (rng.random(n) < expit(-1 + 1.5 * frame.dose)).astype(int)
    path = tmp_path / "firth_words.csv"
    frame.to_csv(path, index=False)
    record = run_analysis(AnalysisSpec(data=path, outcome="y", event=1, predictors=["dose", "arm"],
                                       firth=True)).record
    y = frame.y.to_numpy(dtype=float)
    # The restricted model keeps the full model's penalty (Heinze & Schemper 2002, Stat Med 21:2409): with every
    # slope at zero all risks equal p, so X'WX = p (1 - p) X'X over the full design (intercept, dose, arm b).
    X = np.column_stack([np.ones(n), frame.dose, (frame.arm == "b").astype(float)])
    logdet = np.linalg.slogdet(X.T @ X)[1]

    def negative_pl(b0):
        p = expit(b0)
        return -(y.sum() * math.log(p) + (n - y.sum()) * math.log(1 - p)
                 + 0.5 * (3 * math.log(p * (1 - p)) + logdet))

    pl0 = -minimize_scalar(negative_pl, bounds=(-10, 10), method="bounded", options={"xatol": 1e-12}).fun
    assert record["overall"]["kind"] == "penalised likelihood-ratio"
    assert record["overall"]["g"] == pytest.approx(2 * (record["penalized_log_likelihood"] - pl0), rel=1e-6)
    assert record["aic"] is None and record["bic"] is None and "not given for a penalised fit" in record["aic_note"]
    text = describe(record)
    assert "Penalised likelihood-ratio (G) test against the constant-only model" in text
    import re

    assert "Log-likelihood" not in text and not re.search(r"AIC -?[0-9]", text)
    assert "not given for a penalised fit" in text


def test_hosmer_lemeshow_says_when_its_expected_counts_are_too_small():
    # Algebra: 60 records in 10 risk groups of 6 cannot expect 5 events and 5 non-events in any group,
    # so every group is below the usual 5 (common practice) and the test is called unreliable.
    from twofold.core.assessing.calibration import hosmer_lemeshow

    rng = np.random.default_rng(5)
    p = rng.uniform(0.05, 0.95, 60)
    y = (rng.random(60) < p).astype(int)
    hl = hosmer_lemeshow(y, p, 10)
    assert hl.groups_used == 10 and hl.small_expected_groups == 10
    assert "unreliable" in hl.note
    big = rng.uniform(0.2, 0.8, 5000)
    ok = hosmer_lemeshow((rng.random(5000) < big).astype(int), big, 10)
    assert ok.small_expected_groups == 0 and "unreliable" not in ok.note


def riley_reference(p, prevalence, r2, s=0.9, delta=0.05, margin=0.05):
    """Riley et al. (2020, BMJ 368:m441), criteria (i)-(iii), written from the paper."""
    n1 = p / ((s - 1) * math.log(1 - r2 / s))
    ln_null = prevalence * math.log(prevalence) + (1 - prevalence) * math.log(1 - prevalence)
    max_r2 = 1 - math.exp(2 * ln_null)
    s2 = r2 / (r2 + delta * max_r2)
    n2 = p / ((s2 - 1) * math.log(1 - r2 / s2))
    n3 = (1.96 / margin) ** 2 * prevalence * (1 - prevalence)
    return math.ceil(max(n1, n2, n3))


def test_sample_size_with_the_corrected_r_squared_follows_riley(full):
    record, _ = full
    v = record["validation"]
    prevalence = record["events"] / record["rows_used"]
    expected = riley_reference(record["parameters"] - 1, prevalence, v["cox_snell_r2_corrected"])
    assert v["sample_size_corrected"]["n_minimum"] == pytest.approx(expected, abs=1)
    # The apparent Cox-Snell R-squared is 1 - exp(2 (lnL0 - lnL) / n), from the record's own likelihoods.
    n = record["rows_used"]
    apparent = 1 - math.exp(2 * (record["null_log_likelihood"] - record["log_likelihood"]) / n)
    assert v["cox_snell_r2_apparent"] == pytest.approx(apparent, rel=1e-9)
    assert v["cox_snell_r2_corrected"] < v["cox_snell_r2_apparent"]
