"""The report's missing-data section for an analysis with multiple imputation."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from twofold.core.analysis import AnalysisSpec, run_analysis
from twofold.core.outputs.report import Table, build_report
from twofold.core.outputs.text import fmt_p

READMIT = Path(__file__).resolve().parents[2] / "sample_studies" / "readmission_synthetic.csv"


def imputed_report(path, threshold, predictors=("age", "comorbidity_score", "lives_alone"), **spec):
    result = run_analysis(AnalysisSpec(data=str(path), outcome="readmitted_30d", predictors=list(predictors),
                                       impute=3, seed=1, **spec))
    return result, build_report(result, suppress_below=threshold)


def tables(rep):
    return [b for b in rep.blocks if isinstance(b, Table)]


def test_pattern_counts_agree_with_pandas_when_nothing_is_small():
    result, rep = imputed_report(READMIT, 0)
    text = rep.text()
    assert "Missing values and multiple imputation" in text and "pooled over 3 imputed copies" in text
    pattern = next(t for t in tables(rep) if t.headers[-1] == "rows")
    frame = pd.read_csv(READMIT)
    cols = ["age", "comorbidity_score", "lives_alone"]
    # Outside count: pandas groups the rows by which columns are missing.
    expected = frame[cols].isna().value_counts().to_dict()
    shown = {tuple(c == "missing" for c in row[:-1]): int(row[-1].replace(",", "")) for row in pattern.rows}
    assert shown == {tuple(k): v for k, v in expected.items()}
    assert "Meng XL, Rubin DB" in text and "complete-case analysis" not in text
    comparison = next(t for t in tables(rep) if t.headers[0] == "coefficient")
    assert "4,627 complete rows only" in comparison.headers[2]


def test_small_pattern_and_small_incomplete_count_are_not_printed(tmp_path):
    _, rep = imputed_report(READMIT, 10)
    # 10 rows miss both columns (383 values in 373 rows): that pattern is small, so no pattern table.
    assert not any(t.headers[-1] == "rows" for t in tables(rep))
    assert "pattern of missing values (which columns are missing together) is not shown" in rep.text()
    frame = pd.read_csv(READMIT).head(800)
    frame["comorbidity_score"] = frame["comorbidity_score"].fillna(1)
    frame["lives_alone"] = frame["lives_alone"].fillna("no")
    frame.loc[frame.index[:4], "comorbidity_score"] = np.nan
    path = tmp_path / "few.csv"
    frame.to_csv(path, index=False)
    result, rep = imputed_report(path, 10)
    text = rep.text()
    complete = int(frame[["age", "comorbidity_score", "lives_alone"]].notna().all(axis=1).sum())
    assert f"{complete:,}" not in text  # with the 800 rows used it would give away the 4 incomplete ones
    assert "Not described" in text


def test_warnings_say_what_imputation_leaves_out(tmp_path):
    frame = pd.read_csv(READMIT)
    frame.loc[frame.index[:31], "readmitted_30d"] = np.nan
    path = tmp_path / "some_without_outcome.csv"
    frame.to_csv(path, index=False)
    result, rep = imputed_report(path, 10, splines={"age": 3})
    text = rep.text()
    assert "31 rows were left out (31 with no outcome); an outcome is never imputed." in text
    assert "complete rows only." not in text.split("The records")[0]
    assert "pulled towards none" in text  # the imputation model has no curves (White, Royston & Wood 2011)


def test_report_draws_the_pooled_predictions_roc_and_calibration_as_the_window_does():
    from sklearn.metrics import roc_auc_score

    from twofold.core.models.pooling import POOLED_CURVES_NOTE
    from twofold.core.outputs.report import Figure

    result, rep = imputed_report(READMIT, 0)
    figures = {b.kind: b for b in rep.blocks if isinstance(b, Figure)}
    roc, cal = figures["roc"], figures["calibration"]
    assert roc.data["label"] == cal.data["label"] == "pooled predictions"
    assert "ROC curve of the pooled predictions" in roc.caption and cal.caption.startswith("Of the pooled predictions")
    assert POOLED_CURVES_NOTE in rep.text()
    # The area drawn is scikit-learn's area of the pooled fit's risks (the copies' linear predictors averaged).
    # Records with the same values get risks that differ only by rounding (their linear predictors are averages of
    # sums taken in other orders), so they are tied at 12 digits before scikit-learn ranks them.
    fit = result.fit
    assert roc.data["auc"] == pytest.approx(roc_auc_score(fit.design.y, np.round(fit.fitted, 12)), rel=1e-9)


def test_models_tried_in_a_report_of_an_imputed_analysis_are_pooled_as_the_ladder_lists_them():
    import statsmodels.api as sm
    from scipy.stats import f

    from twofold.core.workspace import Workspace

    ws = Workspace()
    ws.open(READMIT)
    ws.set_outcome("readmitted_30d")
    ws.set_predictors(["age"])
    ws.set_predictors(["age", "comorbidity_score"])
    ws.set_imputation(3, seed=5)
    result = ws.result(with_assessment=False)
    rep = build_report(result, ladder=ws.ladder, suppress_below=10)
    table = next(t for t in tables(rep) if t.headers[-1] == "pooled test against that model")
    assert "No AIC or BIC is given" in table.caption and "AIC" not in table.headers
    # D3 written from Meng & Rubin (1992) with the Li, Raghunathan & Rubin (1991) denominator, over statsmodels'
    # own fits of the workspace's imputed copies (an independent route to the pooled test the row prints).
    copies = ws.imputed_copies()
    frames = [s.frame.iloc[copies.rows] for s in copies.studies]
    y = frames[0]["readmitted_30d"].to_numpy(float)
    small = [sm.Logit(y, sm.add_constant(fr[["age"]].astype(float))).fit(disp=0, tol=1e-12) for fr in frames]
    large = [sm.Logit(y, sm.add_constant(fr[["age", "comorbidity_score"]].astype(float))).fit(disp=0, tol=1e-12)
             for fr in frames]
    m, k = 3, 1
    qs = np.mean([r.params for r in small], axis=0)
    ql = np.mean([r.params for r in large], axis=0)
    d_bar = np.mean([2 * (a.llf - b.llf) for a, b in zip(large, small)])
    d_tilde = np.mean([2 * (a.model.loglike(ql) - b.model.loglike(qs)) for a, b in zip(large, small)])
    r3 = max((m + 1) / (k * (m - 1)) * (d_bar - d_tilde), 0.0)
    t = k * (m - 1)
    v = t * (1 + 1 / k) * (1 + 1 / r3) ** 2 / 2  # t = 2, not above 4
    stat = d_tilde / (k * (1 + r3))
    row = table.rows[1]
    assert row[0] == "2 (chosen)" and row[1] == "age, comorbidity_score"
    assert f"F = {stat:.2f} on 1 and" in row[-1] and "(D3)" in row[-1]
    assert f"p-value {fmt_p(float(f.sf(stat, k, v)))}" in row[-1]
