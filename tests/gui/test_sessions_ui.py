"""Saved analyses, reports, table exports and autosave, driven through the window."""

from __future__ import annotations

import csv
import hashlib
import json
import os
import shutil
import subprocess
import sys

import numpy as np
import pandas as pd
import pytest

from gui_helpers import READMISSION, WAIT_MS, WOUND, choose_outcome, idle, load, new_window, tick
from references import wound_top_influential_rows
from twofold.core.outputs.autosave import autosave_path, lock_path

OUTCOME = "readmitted_30d"
MODEL = ["age", "sex", "discharge_destination", "lives_alone"]


def sha256(path) -> str:
    return hashlib.sha256(open(path, "rb").read()).hexdigest()


class Finished:
    """Collects what the window's file actions report as done."""

    def __init__(self, window):
        self.items = []
        window.sessions.finished.connect(lambda tag, payload: self.items.append((tag, payload)))

    def tags(self):
        return [t for t, _ in self.items]

    def payload(self, tag):
        return [p for t, p in self.items if t == tag][-1]


def wait_for(qtbot, window, finished, tag, count=1):
    qtbot.waitUntil(lambda: idle(window) and (finished.tags().count(tag) >= count or window.message.isVisible()),
                    timeout=WAIT_MS)
    assert finished.tags().count(tag) >= count, window.message.label.text()
    # The assessment follows the results: wait for it too.
    s = window.session
    qtbot.waitUntil(lambda: idle(window) and (s.last_results is None or (
        s.last_assessment is not None and s.last_assessment.rung == s.last_results.rung)), timeout=WAIT_MS)


@pytest.fixture
def data_copy(tmp_path):
    """The readmission sample in a folder of its own (some tests change it)."""
    folder = tmp_path / "data"
    folder.mkdir()
    path = folder / "readmission.csv"
    shutil.copyfile(READMISSION, path)
    return path


@pytest.fixture
def second(qtbot, tmp_path):
    """Another window, as after starting Twofold again."""
    w = new_window(qtbot, tmp_path / "second.ini")
    yield w
    w.session.shutdown()


def _never_asked(monkeypatch):
    import twofold.gui.sessions_ui as sessions_ui

    def fail(*args):
        raise AssertionError(f"nothing should be asked here: {args[1:]}")

    monkeypatch.setattr(sessions_ui, "ask_user", fail)


def _answers(monkeypatch, answer: bool):
    import twofold.gui.sessions_ui as sessions_ui

    asked = []
    monkeypatch.setattr(sessions_ui, "ask_user", lambda parent, title, text: asked.append((title, text)) or answer)
    return asked


def _numbers(window):
    """Everything the results and assessment show, as numbers and as the words on screen."""
    view, a = window.session.last_results, window.session.last_assessment
    lines = [(line.label, dict(line.values), dict(line.texts)) for line in view.lines]
    ladder = [(r.predictors, r.n_params, r.log_likelihood, r.aic, r.g, r.df, r.p_value) for r in view.ladder.rows]
    return {"predictors": tuple(view.predictors), "rung": view.rung, "rows": view.rows_used, "lines": lines,
            "overall": (view.overall.g, view.overall.df, view.overall.p_value, view.overall.text),
            "ladder": ladder, "auc": a.values.get("auc"), "brier": a.values.get("brier"),
            "slope": a.values.get("calibration_slope")}


def _fit_in(qtbot, window, path, rungs):
    load(qtbot, window, path)
    choose_outcome(qtbot, window, OUTCOME)
    for rung in rungs:
        tick(qtbot, window, rung)
    qtbot.waitUntil(lambda: idle(window) and window.session.last_assessment is not None
                    and window.session.last_assessment.rung == window.session.last_results.rung, timeout=WAIT_MS)


# ---- saving and opening ---------------------------------------------------------------


def test_round_trip_in_the_window_gives_identical_numbers(qtbot, window, second, data_copy, tmp_path,
                                                          monkeypatch):
    _never_asked(monkeypatch)
    _fit_in(qtbot, window, data_copy, [["age"], ["age", "sex"], MODEL])
    window.ladder_pane.show_model(1)  # the chosen model is the second rung, not the last one
    qtbot.waitUntil(lambda: idle(window) and window.session.last_results.rung == 1
                    and window.session.last_assessment.rung == 1, timeout=WAIT_MS)
    before = _numbers(window)
    done = Finished(window)
    window.sessions.save_to(tmp_path / "analysis.json")
    wait_for(qtbot, window, done, "saved")
    saved = json.loads((tmp_path / "analysis.json").read_text(encoding="utf-8"))
    assert saved["format"] == "twofold-session" and saved["chosen"] == 1 and len(saved["ladder"]) == 3

    again = Finished(second)
    second.sessions.open_from(tmp_path / "analysis.json")
    wait_for(qtbot, second, again, "restored")
    after = _numbers(second)
    assert after["predictors"] == before["predictors"] and after["rung"] == before["rung"] == 1
    assert [x[0] for x in after["lines"]] == [x[0] for x in before["lines"]]
    for (_, v1, t1), (_, v2, t2) in zip(before["lines"], after["lines"]):
        assert t2 == t1  # the same words and digits on screen
        assert v2.keys() == v1.keys()
        for k in v1:
            assert v2[k] == pytest.approx(v1[k], rel=1e-9, abs=1e-12, nan_ok=True), k
    assert len(after["ladder"]) == len(before["ladder"]) == 3
    for r1, r2 in zip(before["ladder"], after["ladder"]):
        assert r2[0] == r1[0] and r2[1] == r1[1]
        assert np.allclose([x if x is not None else np.nan for x in r2[2:]],
                           [x if x is not None else np.nan for x in r1[2:]], rtol=1e-9, atol=0, equal_nan=True)
    assert after["overall"][3] == before["overall"][3]
    for k in ("auc", "brier", "slope"):
        assert after[k] == pytest.approx(before[k], rel=1e-9), k
    # The second window shows the data and the ticks as if done by hand.
    assert second.data_pane.study.path == str(data_copy)
    assert set(second.model_pane.ticked_predictors()) == {"age", "sex"}
    assert second.model_pane.outcome == OUTCOME


def test_round_trip_keeps_curves_interactions_and_the_penalised_fit(qtbot, window, second, tmp_path,
                                                                     monkeypatch):
    _never_asked(monkeypatch)
    load(qtbot, window, READMISSION)
    choose_outcome(qtbot, window, OUTCOME)

    def shape(ws):
        ws.set_predictors(("age", "sex"))
        ws.set_spline("age", 4)
        ws.add_interaction("age", "sex")

    window.session.run_modelling(shape)
    qtbot.waitUntil(lambda: idle(window) and window.session.last_results is not None, timeout=WAIT_MS)
    window.session.set_penalised(True)
    qtbot.waitUntil(lambda: idle(window) and window.session.last_results.penalised
                    and getattr(window.session.last_assessment, "penalised", False), timeout=WAIT_MS)
    before = _numbers(window)
    done = Finished(window)
    window.sessions.save_to(tmp_path / "analysis.json")
    wait_for(qtbot, window, done, "saved")
    saved = json.loads((tmp_path / "analysis.json").read_text(encoding="utf-8"))
    assert saved["splines"] == {"age": 4} and saved["firth"] is True and "age:sex" in saved["predictors"]

    again = Finished(second)
    second.sessions.open_from(tmp_path / "analysis.json")
    wait_for(qtbot, second, again, "restored")
    qtbot.waitUntil(lambda: idle(second) and getattr(second.session.last_assessment, "penalised", False),
                    timeout=WAIT_MS)
    after = _numbers(second)
    assert second.session.last_results.penalised
    assert [t for _, _, t in after["lines"]] == [t for _, _, t in before["lines"]]
    for k in ("auc", "brier", "slope"):
        assert after[k] == pytest.approx(before[k], rel=1e-9), k


def test_changed_data_is_said_and_re_run_on_request(qtbot, window, data_copy, tmp_path, monkeypatch):
    _fit_in(qtbot, window, data_copy, [MODEL])
    done = Finished(window)
    window.sessions.save_to(tmp_path / "analysis.json")
    wait_for(qtbot, window, done, "saved")
    frame = pd.read_csv(READMISSION)
    frame.iloc[:4000].to_csv(data_copy, index=False)  # next month's extract, in the same place

    asked = _answers(monkeypatch, False)
    window.sessions.open_from(tmp_path / "analysis.json")
    wait_for(qtbot, window, done, "not_opened")
    assert len(asked) == 1 and "changed" in asked[0][1] and "5,000 rows" in asked[0][1]
    assert window.session.last_results.rows_read == 5000  # declined: what was shown stays

    asked = _answers(monkeypatch, True)
    window.sessions.open_from(tmp_path / "analysis.json")
    wait_for(qtbot, window, done, "restored")
    assert len(asked) == 1
    view = window.session.last_results
    assert view.rows_read == 4000 and set(view.predictors) == set(MODEL)
    # The re-run refits on the new rows: statsmodels on the same 4,000 rows gives the same log-likelihood.
    import statsmodels.api as sm

    df = frame.iloc[:4000][MODEL + [OUTCOME]].dropna()
    X = pd.get_dummies(df[["age", "sex", "discharge_destination", "lives_alone"]], drop_first=False, dtype=float)
    keep = ["age"] + [c for c in X.columns if c.startswith(("sex_", "discharge_destination_", "lives_alone_"))]
    refs = {"sex_F", "discharge_destination_home", "lives_alone_no"}  # the reference groups shown in the window
    X = sm.add_constant(X[[c for c in keep if c not in refs]])
    res = sm.Logit(df[OUTCOME].astype(float), X).fit(disp=0)
    assert view.log_likelihood == pytest.approx(res.llf, rel=1e-9)


def test_a_missing_column_is_named(qtbot, window, data_copy, tmp_path, monkeypatch):
    _fit_in(qtbot, window, data_copy, [MODEL])
    done = Finished(window)
    window.sessions.save_to(tmp_path / "analysis.json")
    wait_for(qtbot, window, done, "saved")
    pd.read_csv(READMISSION).drop(columns=["lives_alone"]).to_csv(data_copy, index=False)
    _never_asked(monkeypatch)
    window.sessions.open_from(tmp_path / "analysis.json")
    qtbot.waitUntil(lambda: idle(window) and window.message.isVisible(), timeout=WAIT_MS)
    text = window.message.label.text()
    assert "'lives_alone'" in text and "readmission.csv" in text
    assert "Traceback" not in text and "restored" not in done.tags()


def test_a_moved_data_file_can_be_found_again(qtbot, window, data_copy, tmp_path, monkeypatch):
    import twofold.gui.sessions_ui as sessions_ui

    _fit_in(qtbot, window, data_copy, [["age", "sex"]])
    done = Finished(window)
    window.sessions.save_to(tmp_path / "analysis.json")
    wait_for(qtbot, window, done, "saved")
    moved = tmp_path / "elsewhere" / "readmission.csv"
    moved.parent.mkdir()
    shutil.move(str(data_copy), moved)
    asked = _answers(monkeypatch, True)
    monkeypatch.setattr(sessions_ui, "choose_data_file", lambda parent, start: str(moved))
    window.sessions.open_from(tmp_path / "analysis.json")
    wait_for(qtbot, window, done, "restored")
    assert "no longer at" in asked[0][1]
    assert window.data_pane.study.path == str(moved)
    assert set(window.session.last_results.predictors) == {"age", "sex"}


def test_a_hostile_session_file_gives_one_sentence(qtbot, window, tmp_path, monkeypatch):
    _never_asked(monkeypatch)
    bad = tmp_path / "bad.json"
    bad.write_text(json.dumps({"format": "twofold-session", "schema_version": 1, "data": "/etc/passwd"}))
    window.sessions.open_from(bad)
    qtbot.waitUntil(lambda: idle(window) and window.message.isVisible(), timeout=WAIT_MS)
    text = window.message.label.text()
    assert "bad.json" in text and "\n" not in text and "Traceback" not in text


# ---- reports and tables ----------------------------------------------------------------


def test_report_holds_no_identifiers_or_dates(qtbot, window, tmp_path):
    _fit_in(qtbot, window, READMISSION, [["age", "sex"], MODEL])
    done = Finished(window)
    window.sessions.report_to(tmp_path / "report.html")
    wait_for(qtbot, window, done, "report")
    html = (tmp_path / "report.html").read_text(encoding="utf-8")
    frame = pd.read_csv(READMISSION, dtype=str)
    assert "Area under the ROC curve" in html and "licensed clinicians" in html  # a real report
    assert not [i for i in frame["admission_id"] if i in html]
    assert not [d for d in frame["admission_date"].unique() if d in html]
    low = html.lower()
    for banned in ("<script", "http://", "https://", "<link", "url("):
        assert banned not in low, banned
    window.sessions.report_to(tmp_path / "report.pdf")
    wait_for(qtbot, window, done, "report", count=2)
    assert (tmp_path / "report.pdf").read_bytes()[:5] == b"%PDF-"


def test_report_and_tables_hold_the_fit_on_screen(qtbot, window, tmp_path):
    """An earlier model of the ladder is shown on the ladder's common rows; report and tables say the same."""
    import statsmodels.api as sm

    _fit_in(qtbot, window, READMISSION, [["age", "lives_alone"], ["age"]])
    view = window.session.last_results
    assert view.rows_used == 4834  # lives_alone is missing in 166 rows: the common rows of the ladder
    done = Finished(window)
    window.sessions.export_to(tmp_path / "tables.csv")
    window.sessions.report_to(tmp_path / "report.html")
    wait_for(qtbot, window, done, "report")
    assert "exported" in done.tags()
    with open(tmp_path / "tables.csv", encoding="utf-8-sig", newline="") as fh:
        rows = list(csv.DictReader(fh))
    # Outside reference: statsmodels on the rows complete for age and lives_alone.
    df = pd.read_csv(READMISSION)[["age", "lives_alone", OUTCOME]].dropna()
    res = sm.Logit(df[OUTCOME].astype(float), sm.add_constant(df[["age"]].astype(float))).fit(disp=0)
    age = [r for r in rows if r["predictor"] == "age"][0]
    assert float(age["coefficient (log odds)"]) == pytest.approx(res.params["age"], rel=1e-7)
    assert float(age["standard error"]) == pytest.approx(res.bse["age"], rel=1e-6)
    assert "4,834" in (tmp_path / "report.html").read_text(encoding="utf-8")


@pytest.fixture
def formula_data(tmp_path):
    """Synthetic records whose group names look like spreadsheet formulas."""
    rng = np.random.default_rng(515)
    n = 600
    ward = rng.choice(["=1+2", "@SUM(A1:A3)", "+east", "-west"], n)
    age = np.round(rng.uniform(30, 90, n))
    eta = -4 + 0.04 * age + np.where(ward == "+east", 0.6, 0.0)
    died = (rng.uniform(size=n) < 1 / (1 + np.exp(-eta))).astype(int)
    path = tmp_path / "wards.csv"
    pd.DataFrame({"age": age, "ward": ward, "died": died}).to_csv(path, index=False)
    return path


def test_export_neutralises_formula_looking_text(qtbot, window, formula_data, tmp_path):
    load(qtbot, window, formula_data)
    choose_outcome(qtbot, window, "died")
    tick(qtbot, window, ["age"])
    tick(qtbot, window, ["age", "ward"])
    done = Finished(window)
    window.sessions.export_to(tmp_path / "tables.csv")
    wait_for(qtbot, window, done, "exported")
    assert done.payload("exported") == [str(tmp_path / "tables.csv"), str(tmp_path / "tables-models.csv")]
    with open(tmp_path / "tables.csv", encoding="utf-8-sig", newline="") as fh:
        rows = list(csv.reader(fh))
    # OWASP guidance on CSV injection: text cells starting with =, +, - or @ get a leading quote.
    text_cells = [c for r in rows[1:] for c in r[:3] if c]
    assert {"'=1+2", "'@SUM(A1:A3)", "'+east", "'-west"} & set(text_cells)
    assert not [c for c in text_cells if c[:1] in "=+-@"]
    # Numbers stay numbers (a negative coefficient is not quoted).
    coefficients = [float(r[8]) for r in rows[1:]]
    assert any(c < 0 for c in coefficients)
    models = list(csv.reader(open(tmp_path / "tables-models.csv", encoding="utf-8-sig", newline="")))
    assert len(models) == 3

    from openpyxl import load_workbook

    window.sessions.export_to(tmp_path / "tables.xlsx")
    wait_for(qtbot, window, done, "exported", count=2)
    book = load_workbook(tmp_path / "tables.xlsx")
    assert book.sheetnames == ["coefficients", "models"]
    cells = [c for row in book["coefficients"].iter_rows(min_row=2) for c in row]
    texts = [c.value for c in cells if isinstance(c.value, str)]
    assert not [t for t in texts if t[:1] in "=+-@"]
    assert any(t.startswith("'") for t in texts)
    assert not [c for c in cells if c.data_type == "f"]  # no formula cell at all
    assert any(isinstance(c.value, float) and c.value < 0 for c in cells)


def test_refuses_to_write_onto_the_data_file(qtbot, window, tmp_path):
    data = tmp_path / "extract-models.csv"
    shutil.copyfile(READMISSION, data)
    link = tmp_path / "link.csv"
    link.symlink_to(data)
    _fit_in(qtbot, window, data, [["age", "sex"]])
    before = sha256(data)
    done = Finished(window)
    # The data file by name and through a link, and a CSV export whose ladder file would be the data file.
    attempts = [(window.sessions.save_to, data), (window.sessions.report_to, data), (window.sessions.export_to, data),
                (window.sessions.export_to, link), (window.sessions.export_to, tmp_path / "extract.csv")]
    assert window.sessions.ladder_csv(tmp_path / "extract.csv") == data
    for attempt, target in attempts:
        window.message.hide()
        assert attempt(target) is None
        assert window.message.isVisible() and "never writes to the data" in window.message.label.text()
    qtbot.waitUntil(lambda: idle(window), timeout=WAIT_MS)
    assert sha256(data) == before and done.tags() == [] and not (tmp_path / "extract.csv").exists()


# ---- autosave and recovery ---------------------------------------------------------------


def test_autosave_written_after_a_tick_and_removed_on_a_clean_close(qtbot, window, home):
    from twofold.core.outputs.session import load_session

    assert window.sessions.enable_autosave()
    done = Finished(window)
    _fit_in(qtbot, window, READMISSION, [["age"]])
    qtbot.waitUntil(lambda: "autosaved" in done.tags(), timeout=WAIT_MS)
    path = autosave_path()
    assert path.parent == home / "autosave" and path.name.startswith(f"session-{os.getpid()}-")
    assert done.payload("autosaved") == str(path) and path.exists()
    assert load_session(path)["predictors"] == ["age"]
    assert lock_path().exists()
    tick(qtbot, window, ["age", "sex"])
    qtbot.waitUntil(lambda: idle(window) and load_session(path)["predictors"] == ["age", "sex"], timeout=WAIT_MS)
    assert len(load_session(path)["ladder"]) == 2
    window.close()
    assert not path.exists() and not list((home / "autosave").glob("*"))


def _dead_pid() -> int:
    proc = subprocess.Popen([sys.executable, "-c", "pass"])
    proc.wait()
    return proc.pid


def _leave_an_unclean_autosave(qtbot, window, home, rungs):
    """Work in the window with autosave on, then leave its files as a killed process would (another pid)."""
    done = Finished(window)
    window.sessions.enable_autosave()
    _fit_in(qtbot, window, READMISSION, rungs)
    qtbot.waitUntil(lambda: idle(window) and done.tags().count("autosaved") >= len(rungs), timeout=WAIT_MS)
    pid = _dead_pid()
    folder = home / "autosave"
    os.replace(autosave_path(), folder / f"session-{pid}.json")
    os.replace(lock_path(), folder / f"running-{pid}.lock")
    return folder / f"session-{pid}.json", _numbers(window)


def test_restore_offered_after_an_unclean_exit(qtbot, window, second, home, monkeypatch):
    left, before = _leave_an_unclean_autosave(qtbot, window, home, [["age"], ["age", "lives_alone"]])
    asked = _answers(monkeypatch, True)
    done = Finished(second)
    assert second.sessions.offer_restore() == left
    assert len(asked) == 1 and "did not close normally" in asked[0][1]
    wait_for(qtbot, second, done, "restored")
    after = _numbers(second)
    assert after["predictors"] == before["predictors"] == ("age", "lives_alone")
    assert [t for _, _, t in after["lines"]] == [t for _, _, t in before["lines"]]
    assert not left.exists() and not left.with_name(left.name.replace("session-", "running-")
                                                      .replace(".json", ".lock")).exists()


def test_declined_restore_is_not_offered_again(qtbot, window, second, home, monkeypatch):
    left, _ = _leave_an_unclean_autosave(qtbot, window, home, [["age"]])
    asked = _answers(monkeypatch, False)
    assert second.sessions.offer_restore() == left
    qtbot.waitUntil(lambda: idle(second), timeout=WAIT_MS)
    assert len(asked) == 1 and not left.exists() and second.data_pane.study is None
    assert second.sessions.offer_restore() is None


def test_a_running_twofold_is_not_offered_for_restore(qtbot, window, second, monkeypatch):
    """Another window that is still open (this very process) is never taken for a crashed one."""
    done = Finished(window)
    window.sessions.enable_autosave()
    _fit_in(qtbot, window, READMISSION, [["age"]])
    qtbot.waitUntil(lambda: "autosaved" in done.tags(), timeout=WAIT_MS)
    _never_asked(monkeypatch)
    assert second.sessions.offer_restore() is None


# ---- the ladder's rows in a re-run, and the report's options -------------------------------------------


def _records_table(html: str) -> list:
    """The rows of the report's table of where the records went, as shown."""
    import re

    table = next(t for t in re.findall(r"<table>.*?</table>", html, re.S) if "Rows read from the file" in t)
    return [re.sub(r"<[^>]+>", "|", r) for r in re.findall(r"<tr>(.*?)</tr>", table, re.S)]


def test_rerun_of_a_window_session_gives_the_fit_on_screen(qtbot, window, data_copy, tmp_path, capsys):
    """A model shown on the ladder's common rows is re-run by ``twofold rerun`` on those same rows."""
    import statsmodels.api as sm

    from twofold import commands as outputs

    # lives_alone (missing in some rows) was tried, then unticked: age alone is shown on the ladder's rows.
    _fit_in(qtbot, window, data_copy, [["age", "lives_alone"], ["age"]])
    view = window.session.last_results
    frame = pd.read_csv(READMISSION)
    rows = frame[["age", "lives_alone", OUTCOME]].dropna()
    # Outside reference: statsmodels Logit on the rows pandas finds complete in age and lives_alone.
    ref = sm.Logit(rows[OUTCOME].astype(float), sm.add_constant(rows[["age"]].astype(float))).fit(disp=0)
    assert view.rows_used == len(rows) < len(frame)
    done = Finished(window)
    window.sessions.save_to(tmp_path / "analysis.json")
    window.sessions.report_to(tmp_path / "window.html")
    wait_for(qtbot, window, done, "report")
    assert "saved" in done.tags()
    saved = json.loads((tmp_path / "analysis.json").read_text(encoding="utf-8"))
    assert saved["predictors"] == ["age"] and saved["rows_complete_in"] == ["age", "lives_alone"]

    code = outputs.run_rerun([str(tmp_path / "analysis.json"), "--json", "-", "--report", str(tmp_path / "cli.html")])
    out = capsys.readouterr()
    assert code == 0, out.err
    rec = json.loads(out.out)
    shown = {line.name: line.values for line in view.lines if line.kind in ("term", "intercept")}
    assert rec["rows_used"] == view.rows_used == len(rows)
    assert rec["log_likelihood"] == pytest.approx(view.log_likelihood, rel=1e-9)
    assert rec["log_likelihood"] == pytest.approx(ref.llf, rel=1e-9)
    age = rec["terms"][0]
    for got, name, key in ((age, "age", "age"), (rec["intercept"], "intercept", "const")):
        assert got["estimate"] == pytest.approx(shown[name]["estimate"], rel=1e-7)
        assert got["std_error"] == pytest.approx(shown[name]["std_error"], rel=1e-6)
        assert got["estimate"] == pytest.approx(ref.params[key], rel=1e-7)
        assert got["std_error"] == pytest.approx(ref.bse[key], rel=1e-6)
    # Where the rows went, as the window's report and the re-run's report say it (pandas counts the missing).
    assert rec["missing_by_column"] == {"age": 0, "lives_alone": int(frame.lives_alone.isna().sum())}
    assert _records_table((tmp_path / "window.html").read_text(encoding="utf-8")) == \
        _records_table((tmp_path / "cli.html").read_text(encoding="utf-8"))
    # A session without the field (as saved before it) refits on the rows complete for age alone.
    saved.pop("rows_complete_in")
    (tmp_path / "old.json").write_text(json.dumps(saved), encoding="utf-8")
    assert outputs.run_rerun([str(tmp_path / "old.json"), "--json", "-"]) == 0
    assert json.loads(capsys.readouterr().out)["rows_used"] == int(frame[["age", OUTCOME]].notna().all(axis=1).sum())


WOUND_MODEL = ["age", "bmi", "diabetes"]


def test_report_options_are_asked_used_and_saved(qtbot, window, second, home, tmp_path, monkeypatch):
    import re

    import twofold.gui.sessions_ui as sessions_ui
    from twofold.core.outputs.session import load_session

    # The dialog: the limit and the tick start from what it is given, and it says why row numbers matter.
    dialog = sessions_ui.ReportOptionsDialog(window, 10, False)
    qtbot.addWidget(dialog)
    assert dialog.limit.value() == 10 and not dialog.records.isChecked()
    assert dialog.limit.minimum() == 1
    words = " ".join(label.text() for label in dialog.findChildren(sessions_ui.QLabel))
    assert "point back to patients" in words
    dialog.limit.setValue(3)
    dialog.records.setChecked(True)
    qtbot.keyClicks(dialog.texts["title"], "Wound infections")
    qtbot.keyClicks(dialog.texts["question"], "Who gets one?")
    assert dialog.values() == {"suppress_up_to": 3, "list_records": True, "title": "Wound infections", "authors": "",
                               "question": "Who gets one?"}

    assert window.sessions.enable_autosave()
    load(qtbot, window, WOUND)
    choose_outcome(qtbot, window, "infection", "yes")
    tick(qtbot, window, WOUND_MODEL)
    qtbot.waitUntil(lambda: idle(window) and window.session.last_assessment is not None, timeout=WAIT_MS)
    asked, files = [], []
    answer = {"suppress_up_to": 3, "list_records": True, "title": "Wound infections after surgery",
              "authors": "B. Osei", "question": "Which patients get a wound infection?"}
    monkeypatch.setattr(sessions_ui, "choose_report_options", lambda parent, current: asked.append(dict(current))
                        or answer)
    monkeypatch.setattr(sessions_ui.QFileDialog, "getSaveFileName",
                        staticmethod(lambda *a: files.append(a) or (str(tmp_path / "report"), "Web page (*.html)")))
    done = Finished(window)
    window.sessions.report_dialog()
    wait_for(qtbot, window, done, "report")
    assert asked == [{"suppress_up_to": 10, "list_records": False, "title": "", "authors": "",
                      "question": ""}]  # the defaults, before any choice
    html = (tmp_path / "report.html").read_text(encoding="utf-8")
    assert "<h1>Wound infections after surgery</h1>" in html and "Authors: B. Osei" in html
    assert "The question this analysis answers: Which patients get a wound infection?" in html
    # Outside reference: pandas crosstab of diabetes by infection; 10 of the 21 with diabetes were infected,
    # a count the default limit hides and a limit of 3 shows.
    tab = pd.crosstab(pd.read_csv(WOUND).diabetes, pd.read_csv(WOUND).infection)
    assert int(tab.loc["yes", "yes"]) == 10
    assert (f'<td>yes</td><td class="r">{tab.loc["yes", "yes"]}</td><td class="r">{tab.loc["yes", "no"]}</td>'
            in html)
    assert "Counts of 1 to 3 people are shown as" in html
    table = next(t for t in re.findall(r"<table>.*?</table>", html, re.S) if "row of the data file" in t)
    assert [int(r) for r in re.findall(r"<tr><td>(\d+)</td>", table)] == wound_top_influential_rows()[0]
    # Kept with the analysis: in the autosave at once, and in a saved session.
    autosaved = autosave_path()
    qtbot.waitUntil(lambda: idle(window) and load_session(autosaved)["report"] == answer, timeout=WAIT_MS)
    window.sessions.save_to(tmp_path / "wound.json")
    wait_for(qtbot, window, done, "saved")
    assert json.loads((tmp_path / "wound.json").read_text(encoding="utf-8"))["report"] == answer

    # Another window that opens the session starts the dialog from the saved values; cancelling writes nothing.
    again = Finished(second)
    second.sessions.open_from(tmp_path / "wound.json")
    wait_for(qtbot, second, again, "restored")
    assert second.sessions.report_options == answer
    asked.clear()
    files.clear()
    monkeypatch.setattr(sessions_ui, "choose_report_options", lambda parent, current: asked.append(dict(current)))
    second.sessions.report_dialog()
    assert asked == [answer] and files == []
    # Without options the report keeps the default limit and lists no records.
    window.sessions.report_options = {"suppress_up_to": 10, "list_records": False}
    window.sessions.report_to(tmp_path / "plain.html")
    wait_for(qtbot, window, done, "report", count=2)
    plain = (tmp_path / "plain.html").read_text(encoding="utf-8")
    assert '<td>yes</td><td class="r">suppressed</td>' in plain and "row of the data file" not in plain
