"""Values that mean missing ("unknown", 999), marked in the window, then saved and re-run.

Reference: statsmodels' Logit on the rows pandas keeps after replacing those values with NaN.
"""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest
import statsmodels.formula.api as smf
from PySide6.QtCore import Qt

from gui_helpers import WAIT_MS, choose_outcome, idle, load, tick


@pytest.fixture
def extract(tmp_path):
    """A synthetic extract of a fictional ward: an outcome with 'unknown', a lab value with 999 for 'not done'."""
    rng = np.random.default_rng(12)
    n = 400
    lab = np.round(rng.normal(5, 1, n), 2)
    risk = 1 / (1 + np.exp(-(-4 + 0.7 * lab)))
    out = np.where(rng.random(n) < risk, "yes", "no").astype(object)
    out[rng.random(n) < 0.1] = "unknown"
    lab_text = lab.astype(str).astype(object)
    lab_text[rng.random(n) < 0.15] = "999"
    path = tmp_path / "ward_extract_synthetic.csv"
    pd.DataFrame({"patient": [f"P{i:04d}" for i in range(n)], "lactate": lab_text, "outcome": out}).to_csv(
        path, index=False)
    return path


def click_column(qtbot, window, name):
    table = window.data_pane.columns
    model = table.model()
    row = next(r for r in range(model.rowCount()) if model.index(r, 0).data() == name)
    rect = table.visualRect(model.index(row, 0))
    qtbot.mouseClick(table.viewport(), Qt.MouseButton.LeftButton, pos=rect.center())
    qtbot.waitUntil(lambda: window.data_pane.selected_column() == name, timeout=WAIT_MS)


def test_marking_values_missing_in_the_window_fits_without_them(qtbot, window, extract, monkeypatch, tmp_path):
    from twofold.gui import panes

    load(qtbot, window, extract)
    answers = iter([["unknown"], ["999"]])
    monkeypatch.setattr(panes, "ask_missing_values", lambda parent, column, current: next(answers))
    for column in ("outcome", "lactate"):
        click_column(qtbot, window, column)
        qtbot.mouseClick(window.data_pane.missing_button, Qt.MouseButton.LeftButton)
        qtbot.waitUntil(lambda: idle(window), timeout=WAIT_MS)
    roles = {c.name: c for c in window.data_pane.columns_model.columns}
    assert roles["lactate"].role == "numeric" and roles["lactate"].missing_values == ("999",)
    assert "Counted as missing: '999'." in window.data_pane.reason.text()
    choose_outcome(qtbot, window, "outcome", "yes")
    view = tick(qtbot, window, ["lactate"])

    frame = pd.read_csv(extract, dtype=str)
    frame = frame[(frame.outcome != "unknown") & (frame.lactate != "999")]
    frame = frame.assign(y=(frame.outcome == "yes").astype(int), lactate=frame.lactate.astype(float))
    ref = smf.logit("y ~ lactate", frame).fit(disp=0)
    assert view.rows_used == len(frame)
    (line,) = [x for x in view.lines if x.kind == "term"]
    assert line.values["estimate"] == pytest.approx(ref.params["lactate"], rel=1e-6)

    # Saved with the analysis, and applied again by rerun (the same digits).
    from twofold.cli import main

    session_path = tmp_path / "analysis.json"
    window.sessions.save_to(session_path)
    qtbot.waitUntil(lambda: session_path.exists() and idle(window), timeout=WAIT_MS)
    saved = json.loads(session_path.read_text())
    assert saved["missing"] == {"outcome": ["unknown"], "lactate": ["999"]}
    out = tmp_path / "rerun.json"
    assert main(["rerun", str(session_path), "--json", str(out)]) == 0
    record = json.loads(out.read_text())
    assert record["rows_used"] == len(frame)
    assert record["values_marked_missing"] == {"outcome": ["unknown"], "lactate": ["999"]}


def test_the_outcome_list_offers_only_columns_that_can_be_outcomes(qtbot, window, extract, monkeypatch):
    from twofold.gui import panes

    load(qtbot, window, extract)
    combo = window.model_pane.outcome_combo
    items = combo.model()

    def entry(name):
        i = combo.findData(name)
        return items.item(i)

    assert not entry("patient").isEnabled() and "an identifier" in entry("patient").text()
    three = entry("outcome")  # yes / no / unknown
    assert not three.isEnabled() and "mark values such as 'unknown' as missing first" in three.text()
    # Once 'unknown' counts as missing, the column is offered.
    monkeypatch.setattr(panes, "ask_missing_values", lambda parent, column, current: ["unknown"])
    click_column(qtbot, window, "outcome")
    qtbot.mouseClick(window.data_pane.missing_button, Qt.MouseButton.LeftButton)
    qtbot.waitUntil(lambda: idle(window) and entry("outcome").isEnabled(), timeout=WAIT_MS)
    assert entry("outcome").text() == "outcome (2 values)"
