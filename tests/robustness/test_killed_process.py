"""Nothing lost: a real window process killed with SIGKILL, then started again, offers its work back.

The window is started as the application starts it (:func:`twofold.gui.app.launch`,
off screen, with ``TWOFOLD_HOME`` in a temporary folder) by a small driver that
plays the user: it opens a sample study, chooses the outcome and ticks
predictors.  Once the autosave holds the last model the process is killed
(no chance to clean up), and a second process is started the same way.  Its
driver answers the recovery question with yes and reports what the window
then shows.
"""

from __future__ import annotations

import json
import os
import signal
import subprocess
import sys
import time
from pathlib import Path

import pytest

from robust_support import STEP_LOOP
from twofold.core.outputs.session import load_session

REPO = Path(__file__).resolve().parents[2]
READMISSION = REPO / "sample_studies" / "readmission_synthetic.csv"
STAGES = [["age"], ["age", "sex"], ["age", "sex", "lives_alone"]]
WAIT_S = 180

if not hasattr(signal, "SIGKILL"):
    pytest.skip("SIGKILL is a POSIX signal", allow_module_level=True)

DRIVER = r'''
import json, sys, time
from PySide6.QtCore import QTimer

import twofold.gui.sessions_ui as sessions_ui
from twofold.gui.app import install_exception_hooks, launch

phase, data, stages = sys.argv[1], sys.argv[2], json.loads(sys.argv[3])
asked = []


def answer(parent, title, text):
    asked.append(text)
    return True


sessions_ui.ask_user = answer  # the user says yes to every question
install_exception_hooks()
app, window = launch([data] if phase == "work" else [])
s = window.session
steps = []  # each returns True once done; actions act and return True, checks wait for the window
if phase == "work":
    steps.append(lambda: window.data_pane.study is not None and s.core_ready)
    steps.append(lambda: window.model_pane.choose_outcome("readmitted_30d") or True)
    steps.append(lambda: window.model_pane.outcome == "readmitted_30d")
    for names in stages:
        steps.append(lambda names=names: window.model_pane.set_ticked(names) or True)
        steps.append(lambda names=names: s.last_results is not None and set(s.last_results.predictors) == set(names))
    steps.append(lambda: print("ticked", flush=True) or True)  # then wait to be killed
else:
    steps.append(lambda: s.last_results is not None and s.last_assessment is not None
                 and window.sessions.last_autosave is not None)

    def report():
        view = s.last_results
        print(json.dumps({"asked": asked, "offered": str(window.sessions.restore_offered),
                          "predictors": list(view.predictors), "source": window.data_pane.study.path,
                          "autosave": load(window.sessions.last_autosave)}), flush=True)
        window.close()
        app.quit()
        return True

    def load(path):
        with open(path, encoding="utf-8") as fh:
            return json.load(fh)

    steps.append(report)
deadline = time.monotonic() + 170


def stopped():
    return False
''' + STEP_LOOP


def _env(home: Path) -> dict:
    env = dict(os.environ)
    env.update({"QT_QPA_PLATFORM": "offscreen", "TWOFOLD_HOME": str(home)})
    return env


def _start(phase: str, home: Path, out: Path) -> subprocess.Popen:
    return subprocess.Popen([sys.executable, "-c", DRIVER, phase, str(READMISSION), json.dumps(STAGES)],
                            env=_env(home), stdout=open(out, "w"), stderr=subprocess.STDOUT, cwd=home)


def _wait_for(condition, proc: subprocess.Popen, what: str, out: Path) -> None:
    deadline = time.monotonic() + WAIT_S
    while not condition():
        if proc.poll() is not None:
            raise AssertionError(f"the window process ended before {what}:\n{out.read_text()}")
        if time.monotonic() > deadline:
            proc.kill()
            raise AssertionError(f"gave up waiting for {what}:\n{out.read_text()}")
        time.sleep(0.1)


def _autosave_holds(path: Path, predictors) -> bool:
    try:
        return load_session(path)["predictors"] == predictors
    except Exception:  # not there yet, or being replaced
        return False


def test_killed_window_offers_its_work_back(tmp_path):
    home = tmp_path / "home"
    home.mkdir()
    first_out = tmp_path / "first.txt"
    first = _start("work", home, first_out)
    def autosave():  # named by the process id and the process's own random token
        return next((home / "autosave").glob(f"session-{first.pid}-*.json"), home / "absent.json")

    try:
        _wait_for(lambda: _autosave_holds(autosave(), STAGES[-1]), first, "the autosave of the last model", first_out)
    finally:
        first.send_signal(signal.SIGKILL)  # no clean-up of any kind
        first.wait(30)
    assert first.returncode == -signal.SIGKILL
    left_path = autosave()
    left = load_session(left_path)
    assert len(left["ladder"]) == len(STAGES)
    lock = left_path.name.replace("session-", "running-").replace(".json", ".lock")
    assert (home / "autosave" / lock).exists()  # it never closed cleanly

    second_out = tmp_path / "second.txt"
    second = _start("recover", home, second_out)
    try:
        second.wait(WAIT_S)
    finally:
        if second.poll() is None:
            second.kill()
            second.wait(30)
    text = second_out.read_text()
    assert second.returncode == 0, text
    shown = json.loads([line for line in text.splitlines() if line.startswith("{")][-1])
    assert len(shown["asked"]) == 1 and "did not close normally" in shown["asked"][0]
    assert shown["offered"] == str(left_path)
    assert set(shown["predictors"]) == set(STAGES[-1]) and shown["source"] == str(READMISSION)
    # The same model: the restored window's own autosave holds the killed one's ladder and numbers.
    again = shown["autosave"]
    assert again["ladder"] == left["ladder"] and again["chosen"] == left["chosen"]
    assert again["data_sha256"] == left["data_sha256"]
    assert again["model"]["names"] == left["model"]["names"]
    assert again["model"]["coefficients"] == pytest.approx(left["model"]["coefficients"], rel=1e-9)
    flat = lambda m: [v for row in m["model"]["covariance"] for v in row]  # noqa: E731
    assert flat(again) == pytest.approx(flat(left), rel=1e-9)
    # The killed process's files were taken over, and the clean close removed the new ones.
    assert list((home / "autosave").iterdir()) == []
