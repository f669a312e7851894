"""A workbook of several sheets: the window asks which one, preselecting the first that looks like a table.

The workbook is generated here with openpyxl (a notes sheet first, the synthetic records second); the sizes
offered are checked against what openpyxl itself reports, and the rows read against pandas.
"""

from __future__ import annotations

import json

import pandas as pd

from gui_helpers import READMISSION, WAIT_MS, choose_outcome, idle, tick


def make_workbook(path):
    frame = pd.read_csv(READMISSION).head(300)
    with pd.ExcelWriter(path, engine="openpyxl") as writer:
        pd.DataFrame({"About this file": ["Synthetic extract", "Quillmere Vale General Hospital", "Do not share"]}) \
            .to_excel(writer, sheet_name="Notes", index=False, header=False)
        frame.to_excel(writer, sheet_name="Admissions", index=False)
    return frame


def test_the_window_asks_which_sheet_and_the_choice_is_saved(qtbot, window, tmp_path, monkeypatch):
    from twofold.gui import window as window_module

    path = tmp_path / "extract_synthetic.xlsx"
    frame = make_workbook(path)
    asked = {}

    def choose(parent, file_name, sheets, preselected):
        asked.update(file_name=file_name, sheets=[s.describe() for s in sheets], preselected=preselected)
        return sheets[preselected].name  # the user accepts what is offered

    monkeypatch.setattr(window_module, "choose_sheet", choose)
    window.open_path(path)
    qtbot.waitUntil(lambda: idle(window) and window.data_pane.study is not None, timeout=WAIT_MS)
    assert asked["file_name"] == "extract_synthetic.xlsx"
    assert asked["sheets"] == ["Notes: 3 rows, 1 column", f"Admissions: {len(frame) + 1:,} rows, "
                               f"{frame.shape[1]} columns"]
    assert asked["preselected"] == 1
    assert window.data_pane.study.n_rows == len(frame)

    choose_outcome(qtbot, window, "readmitted_30d")
    tick(qtbot, window, ["age"])
    session_path = tmp_path / "analysis.json"
    window.sessions.save_to(session_path)
    qtbot.waitUntil(lambda: session_path.exists() and idle(window), timeout=WAIT_MS)
    assert json.loads(session_path.read_text())["sheet"] == "Admissions"


def test_cancelling_the_sheet_question_opens_nothing(qtbot, window, tmp_path, monkeypatch):
    from twofold.gui import window as window_module

    path = tmp_path / "extract_synthetic.xlsx"
    make_workbook(path)
    monkeypatch.setattr(window_module, "choose_sheet", lambda *a: None)
    assert window.open_path(path) is None
    assert window.data_pane.study is None
