"""The report's missing-data section for an analysis with multiple imputation."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd

from twofold.core.analysis import AnalysisSpec, run_analysis
from twofold.core.outputs.report import Table, build_report

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
