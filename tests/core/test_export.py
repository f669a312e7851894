"""Coefficient and ladder tables as CSV and XLSX: plain headers, numbers as numbers, no formulas."""

from __future__ import annotations

import csv
from pathlib import Path

import numpy as np
import openpyxl
import pandas as pd
import pytest
import statsmodels.api as sm

from twofold.core.analysis import AnalysisSpec, run_analysis
from twofold.core.errors import TwofoldError
from twofold.core.outputs.export import ABOUT_HEADERS, COEFFICIENT_HEADERS, export_coefficients, export_ladder, neutralise
from twofold.core.outputs.session import ladder_from_lists

ROOT = Path(__file__).resolve().parents[2]
READMIT = ROOT / "sample_studies" / "readmission_synthetic.csv"
# The brief's example holds "http://x"; its colon would be read as an interaction A:B by Study.column,
# so the same formula without a colon is used.
HOSTILE_COLUMN = '=HYPERLINK("x.example","y")'
HOSTILE_LEVELS = ["=cmd|' /C calc'!A0", "+1", "-2", "@SUM(A1)", "=1+1", "plain"]  # leading tabs are stripped on reading


@pytest.fixture(scope="module")
def hostile(tmp_path_factory):
    """A small made-up study whose column and level names look like spreadsheet formulas."""
    rng = np.random.default_rng(20240611)
    n = 600
    x = rng.normal(50, 10, n)
    grp = rng.choice(HOSTILE_LEVELS, n)
    eta = -4 + 0.06 * x + np.where(grp == "plain", 0.0, 0.4)
    y = (rng.random(n) < 1 / (1 + np.exp(-eta))).astype(int)
    path = tmp_path_factory.mktemp("hostile") / "hostile.csv"
    pd.DataFrame({HOSTILE_COLUMN: x, "grp": grp, "y": y}).to_csv(path, index=False)
    res = run_analysis(AnalysisSpec(data=str(path), outcome="y", predictors=[HOSTILE_COLUMN, "grp"],
                                    references={"grp": "plain"}))
    return path, res


def test_neutralise_rules():
    # OWASP CSV-injection guidance: prefix text beginning with = + - @ tab or carriage return.
    for text in ("=1+1", "+1", "-2", "@A1", "\tx", "\rx", "  =x"):
        assert neutralise(text) == "'" + text
    assert neutralise("plain") == "plain" and neutralise("a=b") == "a=b"


def test_csv_reads_back_with_numbers_and_no_formulas(hostile, tmp_path):
    _, res = hostile
    out = export_coefficients(res, tmp_path / "table.csv")
    raw = out.read_text(encoding="utf-8-sig")
    rows = list(csv.reader(raw.splitlines()))
    assert rows[0] == COEFFICIENT_HEADERS + ABOUT_HEADERS
    # Every row says what it describes: the outcome, the event and how the model was fitted.
    assert {tuple(r[-3:]) for r in rows[1:]} == {(res.record["outcome"], str(res.record["event"]),
                                                  res.record["method"])}
    body = rows[1:]
    assert body[0][0] == "'" + HOSTILE_COLUMN
    groups = {r[1] for r in body if r[0] == "grp"}
    assert groups == {"'" + g if g[0] in "=+-@\t" else g for g in HOSTILE_LEVELS if g != "plain"}
    assert all(r[2] == "plain" for r in body if r[0] == "grp")
    for r in body:
        for cell in r[2:]:
            assert not cell or cell[0] not in "=+@\t\r" or cell.startswith("'")
    # Numbers are unquoted numbers that parse back exactly.
    coef = [float(r[8]) for r in body]
    for r in body:
        assert f'"{r[8]}"' not in raw
    assert np.allclose(coef, [t["estimate"] for t in res.record["terms"]] + [res.record["intercept"]["estimate"]],
                       rtol=0, atol=0)
    # A negative coefficient stays a (negative) number, not neutralised text.
    assert any(c < 0 for c in coef) and all("'" not in r[8] for r in body)


def test_xlsx_reads_back_with_numeric_cells(hostile, tmp_path):
    path, res = hostile
    out = export_coefficients(res, tmp_path / "table.xlsx")
    ws = openpyxl.load_workbook(out).active
    cells = list(ws.iter_rows())
    assert [c.value for c in cells[0]] == COEFFICIENT_HEADERS + ABOUT_HEADERS
    assert not any(c.data_type == "f" for row in cells for c in row)  # nothing is a formula
    assert cells[1][0].value == "'" + HOSTILE_COLUMN and cells[1][0].data_type == "s"
    # Outside reference: statsmodels Logit with the same coding.
    frame = pd.read_csv(path)
    X = pd.DataFrame({"const": 1.0, "x": frame[HOSTILE_COLUMN]})
    levels = [t["level"] for t in res.record["terms"] if t["column"] == "grp"]
    for lvl in levels:
        X[lvl] = (frame.grp == lvl).astype(float)
    ref = sm.Logit(frame.y, X).fit(disp=0)
    expected = list(ref.params[1:]) + [ref.params["const"]]
    got = [row[8].value for row in cells[1:]]
    assert all(row[8].data_type == "n" for row in cells[1:])
    np.testing.assert_allclose(got, expected, rtol=1e-7)
    np.testing.assert_allclose([row[9].value for row in cells[1:]], list(ref.bse[1:]) + [ref.bse["const"]], rtol=1e-6)
    assert [row[1].value for row in cells[2:-1]] == [("'" + g if g[0] in "=+-@\t" else g) for g in levels]
    assert any(isinstance(row[8].value, float) and row[8].value < 0 for row in cells[1:])


def test_ladder_table(tmp_path):
    res = run_analysis(AnalysisSpec(data=str(READMIT), outcome="readmitted_30d", predictors=["age", "sex"]))
    ladder = ladder_from_lists(res.study, [["age"], ["age", "sex"]], ["age", "sex"])
    out = export_ladder(ladder, tmp_path / "ladder.xlsx")
    ws = openpyxl.load_workbook(out).active
    rows = [[c.value for c in r] for r in ws.iter_rows()]
    assert rows[0][:3] == ["model", "predictors", "chosen"]
    assert rows[2][2] == "yes" and rows[1][2] in ("", None)
    # Outside reference: statsmodels' AIC of the same two models on the same rows.
    frame = pd.read_csv(READMIT)
    X = pd.DataFrame({"const": 1.0, "age": frame.age, "M": (frame.sex == "M").astype(float)})
    aic = [sm.Logit(frame.readmitted_30d, X[cols]).fit(disp=0).aic for cols in (["const", "age"], ["const", "age", "M"])]
    np.testing.assert_allclose([rows[1][6], rows[2][6]], aic, rtol=1e-9)
    assert rows[2][10] == pytest.approx(2 * (sm.Logit(frame.readmitted_30d, X).fit(disp=0).llf
                                             - sm.Logit(frame.readmitted_30d, X[["const", "age"]]).fit(disp=0).llf),
                                        rel=1e-7)
    csv_out = export_ladder(ladder, tmp_path / "ladder.csv")
    assert list(csv.reader(csv_out.read_text(encoding="utf-8-sig").splitlines()))[1][1] == "age"


def test_refusals(hostile, tmp_path):
    path, res = hostile
    with pytest.raises(TwofoldError, match=r"\.csv or \.xlsx"):
        export_coefficients(res, tmp_path / "table.ods")
    before = path.read_bytes()
    with pytest.raises(TwofoldError, match="data file itself"):
        export_coefficients(res, path)
    assert path.read_bytes() == before
