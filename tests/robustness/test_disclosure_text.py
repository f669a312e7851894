"""Reports print no identifier, date or text from data cells, and every count in their warnings is suppressed."""

from __future__ import annotations

import re
import shutil
import subprocess

import numpy as np
import pandas as pd
import pytest

from twofold.core.analysis import AnalysisSpec, run_analysis
from twofold.core.outputs.report import REDACTED, build_report
from twofold.render.report_writer import write_report

TITLE_ID = "MRN-55017"


@pytest.fixture(scope="module")
def messy(tmp_path_factory):
    """A synthetic extract with a title line naming a record, two '#DIV/0!' cells, identifiers and dates
    (80 visit references of five records each: text with too many values to be groups)."""
    rng = np.random.default_rng(3)
    n = 400
    age = rng.normal(60, 10, n).round()
    dates = pd.date_range("2024-01-01", periods=20).strftime("%Y-%m-%d")
    y = (rng.random(n) < 1 / (1 + np.exp(-(-1 + 0.03 * (age - 60))))).astype(int)
    frame = pd.DataFrame({"patient_ref": [f"MRN-{55000 + i}" for i in range(n)], "admitted": np.repeat(dates, n // 20),
                          "visit_ref": [f"V-{k:04d}" for k in np.repeat(np.arange(80), 5)],
                          "ward": rng.choice(["east", "west"], n), "age": age.astype(object), "died": y})
    frame.loc[[3, 9], "age"] = "#DIV/0!"
    path = tmp_path_factory.mktemp("messy") / "messy.csv"
    with open(path, "w", encoding="utf-8") as fh:
        fh.write(f"Extract for patient {TITLE_ID} run 2024-03-01\n")
        frame.to_csv(fh, index=False)
    return path, frame


def _forced(path, column):
    return run_analysis(AnalysisSpec(data=str(path), outcome="died", predictors=["age", "ward", column],
                                     roles={column: "categorical"}))


@pytest.mark.parametrize("column", ["admitted", "visit_ref"])
def test_identifiers_and_dates_forced_into_groups_never_reach_the_report(messy, column, tmp_path):
    path, frame = messy
    result = _forced(path, column)
    # The fit itself used the column as groups: one coefficient per group but the reference (pandas counts them).
    assert result.record["parameters"] >= 1 + 1 + 1 + frame[column].nunique() - 1 - 1
    rep = build_report(result)
    text = rep.text()
    for value in set(frame["patient_ref"]) | set(frame["visit_ref"]) | set(frame["admitted"]) | {TITLE_ID, "2024-03-01"}:
        assert value not in text, value
    assert "look like record identifiers or dates" in text
    # The statement the privacy section makes is therefore true, and is made.
    assert "no identifiers and no dates from the data" in text
    assert REDACTED not in text  # nothing had to be caught afterwards: the groups were never named
    html = write_report(result, tmp_path / "r.html").read_text(encoding="utf-8")
    private = list(frame["admitted"].unique()) + list(frame["visit_ref"].unique()) + [TITLE_ID]
    assert not any(v in html for v in private)
    if shutil.which("pdftotext"):
        pdf = write_report(result, tmp_path / "r.pdf")
        body = subprocess.run(["pdftotext", str(pdf), "-"], capture_output=True, text=True, check=True).stdout
        assert not any(v in body for v in private)


def test_text_from_cells_and_small_counts_stay_out_of_warnings(messy):
    path, _ = messy
    result = run_analysis(AnalysisSpec(data=str(path), outcome="died", predictors=["age", "ward"]))
    # The readers' own messages quote the title line and the error value, and count the two cells.
    said = " ".join(n.message for n in result.fit.notices)
    assert TITLE_ID[:8] in said and "#DIV/0!" in said and "2 cells" in said
    text = build_report(result).text()
    assert TITLE_ID not in text and "#DIV/0!" not in text and "Extract for patient" not in text
    assert "title" in text and "formula error" in text  # what happened is still said, in the report's words
    # Every count of 1 to 10 in a sentence is suppressed (the 2 rows left out for 'age').
    assert not re.search(r"(?<![\w.,-])(?<!to )(?:[1-9]|10) (?:cells|rows|of the)\b", text)
    assert "1 to 10 rows were left out (1 to 10 missing 'age')" in text


def test_the_privacy_statement_is_checked(messy):
    # Text the user typed into the title that happens to be a record's identifier is caught by the final check,
    # and the privacy section then says so, so that its promise stays true.
    path, _ = messy
    result = run_analysis(AnalysisSpec(data=str(path), outcome="died", predictors=["age", "ward"]))
    rep = build_report(result, details={"title": f"Deaths, including {TITLE_ID}", "authors": "", "question": ""})
    assert TITLE_ID not in rep.text() and REDACTED in rep.title
    assert "was replaced by" in rep.text()


def test_large_date_groups_are_numbered_not_named(tmp_path):
    # Four admission dates of 100 records each: no group is small, so the coefficients are shown, by number.
    rng = np.random.default_rng(8)
    dates = np.repeat(["2024-02-01", "2024-02-02", "2024-02-03", "2024-02-04"], 100)
    age = rng.normal(60, 10, 400).round()
    y = (rng.random(400) < 0.35).astype(int)
    path = tmp_path / "dates.csv"
    pd.DataFrame({"admitted": dates, "age": age, "died": y}).to_csv(path, index=False)
    result = run_analysis(
        AnalysisSpec(data=str(path), outcome="died", predictors=["age", "admitted"], roles={"admitted": "categorical"}))
    rep = build_report(result)
    text = rep.text()
    assert not any(d in text for d in set(dates))
    groups = [r[1] for b in rep.blocks if getattr(b, "headers", [None])[:2] == ["predictor", "group"]
              for r in b.rows if r[0] == "admitted"]
    assert groups == [f"group {k} (compared with group 1; groups not named)" for k in (2, 3, 4)]
