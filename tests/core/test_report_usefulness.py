"""The report's usefulness sections: decision curve, a saved model on new records, units, subgroups, shrinkage.

Counts pass the small-count suppression as everywhere in a report; the checks here work the hidden counts
out the way a reader could (totals, complements, the ratio with its expected count) and find they cannot.
"""

from __future__ import annotations

import re
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from scipy.special import expit

from twofold.core.analysis import AnalysisSpec, run_analysis
from twofold.core.outputs.privacy import SUPPRESSED
from twofold.core.outputs.report import Figure, Table, build_report
from twofold.core.workspace import Workspace
from twofold.render.report_writer import write_report

ROOT = Path(__file__).resolve().parents[2]
READMIT = ROOT / "sample_studies" / "readmission_synthetic.csv"


@pytest.fixture(scope="module")
def wards(tmp_path_factory):
    """Invented records: four wards of 300 and one of 6 people, with a known risk (seeded)."""
    rng = np.random.default_rng(18)
    n = 1206
    age = rng.normal(65, 12, n).round()
    ward = np.array(["A"] * 300 + ["B"] * 300 + ["C"] * 300 + ["D"] * 300 + ["E"] * 6)
    sex = rng.choice(["F", "M"], n)
    sex[:14] = "X"  # a small group of 14 people
    y = (rng.random(n) < expit(-4 + 0.045 * age)).astype(int)
    path = tmp_path_factory.mktemp("wards") / "wards.csv"
    pd.DataFrame({"age": age, "sex": sex, "ward": ward, "died": y}).to_csv(path, index=False)
    return path


@pytest.fixture(scope="module")
def wards_result(wards):
    return run_analysis(AnalysisSpec(data=str(wards), outcome="died", predictors=["age"], unit_column="ward",
                                     subgroups="sex", net_benefit=[0.05, 0.8, 0.01]))


def _table(rep, first_header):
    return next(b for b in rep.blocks if isinstance(b, Table) and b.headers[0] == first_header)


def test_a_small_unit_is_suppressed_with_a_complement_and_its_ratio_withheld(wards_result):
    rep = build_report(wards_result, suppress_below=10)
    table = _table(rep, "unit")
    rows = {r[0]: r for r in table.rows}
    assert rows["E"][1] == SUPPRESSED and rows["E"][4:6] == [SUPPRESSED, SUPPRESSED]
    # Its people could be worked out from the total less the other wards: another ward's size is hidden too.
    sizes = [r[1] for name, r in rows.items() if name in "ABCD"]
    assert sizes.count(SUPPRESSED) >= 1
    unit = next(u for u in wards_result.record["units"]["units"] if u["unit"] == "E")
    assert f"{unit['ratio']:.3f}" not in rep.text()
    # The overdispersion statistic feeds on every unit's count: withheld.
    assert "statistic" not in " ".join(b.text for b in rep.blocks if hasattr(b, "text") and isinstance(b.text, str)
                                       and "spread between units" in b.text)
    funnel = next(b for b in rep.blocks if isinstance(b, Figure) and b.kind == "funnel")
    assert funnel.data["hidden_units"] >= 1 and len(funnel.data["ratio"]) <= 4


def test_units_table_matches_pandas_for_the_wards_shown(wards_result, wards):
    rep = build_report(wards_result, suppress_below=10)
    rows = {r[0]: r for r in _table(rep, "unit").rows}
    frame = pd.read_csv(wards)
    counts = frame.groupby("ward")["died"].agg(["size", "sum"])
    for name, r in rows.items():
        if name in counts.index and r[2] != SUPPRESSED:
            assert int(r[2].replace(",", "")) == counts.loc[name, "sum"]
        if name in counts.index and r[1] != SUPPRESSED:
            assert int(r[1].replace(",", "")) == counts.loc[name, "size"]


def test_subgroups_follow_the_reports_own_limit(wards_result):
    # A group of 14 people shows figures at a limit of 10 (when its events and non-events allow) but never at 20.
    high = build_report(wards_result, suppress_below=20)
    x = next(r for r in _table(high, "group").rows if r[0] == "X")
    assert x[1] == SUPPRESSED and x[2] == "not shown"
    # Three groups with the rows used printed: one hidden size needs a second one hidden.
    assert [r[1] for r in _table(high, "group").rows].count(SUPPRESSED) >= 2


def test_decision_table_and_curve_leave_out_thresholds_with_few_people_treated(wards_result):
    rep = build_report(wards_result, suppress_below=10)
    fit = wards_result.fit
    y, p = fit.design.y, fit.fitted
    figure = next(b for b in rep.blocks if isinstance(b, Figure) and b.kind == "decision")
    for t in figure.data["thresholds"]:
        treated = p >= t
        for count in (treated.sum(), (treated & (y == 1)).sum(), (treated & (y == 0)).sum()):
            assert not 1 <= count <= 10
    # Net benefit by hand (Vickers & Elkin 2006) at the 10% row of the table.
    row = next(r for r in _table(rep, "threshold risk").rows if r[0] == "10%")
    treated = p >= 0.1
    nb = (treated & (y == 1)).sum() / len(y) - (treated & (y == 0)).sum() / len(y) * 0.1 / 0.9
    assert row[1] == f"{nb:.4f}"
    hidden = [t for t in np.round(np.arange(0.05, 0.8001, 0.01), 12) if t not in figure.data["thresholds"]]
    assert hidden, "some high thresholds treat 1 to 10 people in this cohort"


def test_frozen_report_shows_the_calibration_band_and_observed_over_expected(tmp_path):
    from twofold.cli import main

    session = tmp_path / "s.json"
    assert main(["fit", str(READMIT), "--outcome", "readmitted_30d", "--predictor", "age", "prior_admissions",
                 "--session-out", str(session)]) == 0
    from twofold.core.outputs.predict import evaluate_frozen
    from twofold.core.outputs.session import frozen_from_session, load_session

    result = evaluate_frozen(frozen_from_session(load_session(session)), READMIT)
    rep = build_report(result)
    kinds = [b.kind for b in rep.blocks if isinstance(b, Figure)]
    assert "calibration_band" in kinds
    oe = result.record["assessment"]["observed_expected"]
    assert f"Observed over expected events {oe['ratio']:.3f}" in rep.text()
    html = write_report(result, tmp_path / "frozen.html")
    assert html.read_text().count("data:image/png;base64") == len(kinds)


def test_shrunk_model_is_described_and_its_figures_written(tmp_path):
    result = run_analysis(AnalysisSpec(data=str(READMIT), outcome="readmitted_30d",
                                       predictors=["age", "prior_admissions", "comorbidity_score"], validate=20,
                                       seed=4, shrink=True))
    rep = build_report(result)
    sh = result.record["shrinkage"]
    if sh["factor"] is None:
        assert sh["reading"] in rep.text()
    else:
        assert "The shrunk model (for predictions)" in rep.text()
        table = _table(rep, "coefficient")
        assert [r[0] for r in table.rows] == [e["name"] for e in sh["coefficients"]]


def test_workspace_report_has_every_usefulness_section_in_pdf_and_html(tmp_path):
    ws = Workspace()
    ws.open(READMIT)
    ws.set_outcome("readmitted_30d")
    ws.set_predictors(["age"])
    ws.set_predictors(["age", "prior_admissions"])
    ws.set_usefulness(net_benefit=[0.05, 0.5, 0.05], compare_with=0, unit_column="discharge_destination",
                      subgroups="sex")
    result = ws.result()
    rep = build_report(result, suppress_below=ws.report_options["suppress_up_to"])
    text = rep.text()
    for heading in ("decision curve", "Performance within groups", "Units compared by their case mix"):
        assert heading in text
    assert "the model of age" in text
    pdf = write_report(result, tmp_path / "r.pdf")
    html = write_report(result, tmp_path / "r.html")
    assert pdf.stat().st_size > 0 and "Funnel plot" in html.read_text()
