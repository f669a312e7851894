""""What does this mean?" is reachable from each result by keyboard (F1 on it) and by its link.

The texts are checked against their promise: each topic says what the figure is, how to read it, what counts
as enough (with a source or "common practice") and what not to conclude.
"""

from __future__ import annotations

import pytest
from PySide6.QtCore import Qt

from gui_helpers import READMISSION, WAIT_MS, choose_outcome, load, tick
from twofold.core.outputs.explain import TOPICS


def test_every_topic_says_what_how_enough_and_what_not():
    keys = {t.key for t in TOPICS}
    assert {"overall", "nested", "wald", "odds_ratio", "auc", "calibration", "hosmer_lemeshow",
            "events_per_coefficient", "sample_size", "cooks_distance", "variance_inflation", "firth", "spline",
            "bootstrap"} <= keys
    for t in TOPICS:
        assert all(len(part) > 40 for part in (t.what, t.read, t.enough, t.not_conclude)), t.key
        # "Enough" either cites a source (a year) or says it is common practice, or says there is no threshold.
        assert any(w in t.enough.lower() for w in ("common practice", "19", "20", "no size", "no fixed", "usual")), t.key


@pytest.fixture
def shown(qtbot, window):
    load(qtbot, window, READMISSION)
    choose_outcome(qtbot, window, "readmitted_30d")
    tick(qtbot, window, ["age", "sex", "discharge_destination"])
    s = window.session
    qtbot.waitUntil(lambda: not s.busy and s.last_assessment_id == s.newest_request, timeout=WAIT_MS)
    return window


@pytest.mark.parametrize("where, topic", [
    (lambda w: w.results_pane.table, "odds_ratio"),
    (lambda w: w.results_pane.overall, "overall"),
    (lambda w: w.results_pane.previous, "nested"),
    (lambda w: w.results_pane.assessment_box.auc, "auc"),
    (lambda w: w.results_pane.assessment_box.hosmer, "hosmer_lemeshow"),
    (lambda w: w.results_pane.assessment_box.sample, "sample_size"),
    (lambda w: w.results_pane.assessment_box.influential, "cooks_distance"),
])
def test_f1_on_a_result_explains_that_result(qtbot, shown, where, topic):
    widget = where(shown)
    widget.setFocus(Qt.FocusReason.TabFocusReason)
    qtbot.waitUntil(lambda: widget.hasFocus(), timeout=WAIT_MS)
    qtbot.keyClick(widget, Qt.Key.Key_F1)
    qtbot.waitUntil(lambda: shown.help_dialog is not None and shown.help_dialog.isVisible(), timeout=WAIT_MS)
    dialog = shown.help_dialog
    assert dialog.topic == topic
    text = dialog.text.toPlainText()
    assert "What it is." in text and "What not to conclude." in text
    dialog.close()


def test_the_link_beside_a_result_names_its_topic(shown):
    assert 'href="help:overall"' in shown.results_pane.overall.text()
    assert 'href="help:auc"' in shown.results_pane.assessment_box.auc.text()
    shown.results_pane.overall.linkActivated.emit("help:overall")  # what the label sends when the link is clicked
    assert shown.help_dialog.isVisible() and shown.help_dialog.topic == "overall"
