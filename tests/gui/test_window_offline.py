"""The window's main paths with the network blocked: none is ever attempted.

A child process runs the window as the application starts it (off screen)
under the network guard of ``tests/robustness/robust_support.py``: socket
functions replaced and a PEP 578 audit hook in place from the first line,
every attempt logged to a file.  A small driver plays the user: it opens the
sample study, chooses the outcome, ticks predictors, waits for the
assessment, saves the analysis and opens it again, writes the report (HTML
and PDF), exports the tables (CSV and XLSX) and works out a risk in the
calculator.  The test then asserts that the guard saw no network attempt and
that files appeared only where the driver asked and in Twofold's own folder.
"""

from __future__ import annotations

import json
import os
import sys
from pathlib import Path

from gui_helpers import READMISSION

sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "robustness"))
from robust_support import STEP_LOOP, changed_files, run_guarded, snapshot  # noqa: E402

DRIVER = r'''
import json, sys, time
from pathlib import Path
from PySide6.QtCore import QTimer

import twofold.gui.sessions_ui as sessions_ui
from twofold.gui.app import launch

out, data = Path({out!r}), {data!r}
sessions_ui.ask_user = lambda parent, title, text: True
app, window = launch([data])
s, files = window.session, window.sessions
done = []
files.finished.connect(lambda tag, payload: done.append(tag))
shown = {{}}


def calculator():
    c = window.open_calculator()
    shown["calculator"] = c
    return True


def fill():
    c = shown["calculator"]
    if c.model is None or set(c.fields) != {{"age", "sex", "discharge_destination"}}:
        return False
    c.set_value("age", 64)
    c.set_value("sex", "F")
    c.set_value("discharge_destination", "home")
    return True


def finish():
    c = shown["calculator"]
    if c.last_prediction is None:
        return False
    print(json.dumps({{"done": done, "probability": c.last_prediction.probability,
                      "auc": s.last_assessment.values.get("auc"), "message": window.message.isVisible()}}),
          flush=True)
    window.close()
    app.quit()
    return True


ticked = ["age", "sex", "discharge_destination"]
steps = [
    lambda: window.data_pane.study is not None and s.core_ready,
    lambda: window.model_pane.choose_outcome("readmitted_30d") or True,
    lambda: window.model_pane.outcome == "readmitted_30d",
    lambda: window.model_pane.set_ticked(ticked) or True,
    lambda: s.last_assessment is not None and s.last_results is not None
    and s.last_assessment.rung == s.last_results.rung,
    lambda: files.save_to(out / "analysis.json") or True,
    lambda: files.report_to(out / "report.html") or True,
    lambda: files.report_to(out / "report.pdf") or True,
    lambda: files.export_to(out / "tables.csv") or True,
    lambda: files.export_to(out / "tables.xlsx") or True,
    lambda: done.count("report") == 2 and done.count("exported") == 2 and "saved" in done,
    lambda: files.open_from(out / "analysis.json") or True,
    lambda: "restored" in done and s.last_assessment is not None,
    calculator,
    fill,
    finish,
]
deadline = time.monotonic() + 240


def stopped():
    if window.message.isVisible():
        print(window.message.label.text(), file=sys.stderr, flush=True)
        return True
    return False
''' + STEP_LOOP


def test_window_main_paths_use_no_network(tmp_path):
    folders = {name: tmp_path / name for name in ("home", "twofold_home", "tmp", "out", "xdg", "cwd")}
    for f in folders.values():
        f.mkdir()
    env = dict(os.environ)
    env.update({"HOME": str(folders["home"]), "TWOFOLD_HOME": str(folders["twofold_home"]),
                "TMPDIR": str(folders["tmp"]), "TEMP": str(folders["tmp"]), "TMP": str(folders["tmp"]),
                "XDG_CONFIG_HOME": str(folders["xdg"] / "config"), "XDG_CACHE_HOME": str(folders["xdg"] / "cache"),
                "XDG_DATA_HOME": str(folders["xdg"] / "data"), "QT_QPA_PLATFORM": "offscreen"})
    env.pop("MPLCONFIGDIR", None)
    before = snapshot(tmp_path)
    run = run_guarded(code=DRIVER.format(out=str(folders["out"]), data=str(READMISSION)), env=env,
                      cwd=folders["cwd"], timeout=300)
    assert run.returncode == 0, run.stdout + run.stderr
    shown = json.loads([line for line in run.stdout.splitlines() if line.startswith("{")][-1])
    assert {"saved", "report", "exported", "restored"} <= set(shown["done"]) and not shown["message"]
    assert 0 < shown["probability"] < 1 and 0.5 < shown["auc"] < 1
    # The guard saw every attempt: none reached for the network, and no program was started apart from
    # fc-list, which matplotlib runs (locally) to list the fonts when it first builds its font cache.
    assert run.network == [], run.network
    assert [p for p in run.processes if "fc-list" not in p["detail"]] == []
    written = sorted(folders["out"].iterdir())
    assert [p.name for p in written] == ["analysis.json", "report.html", "report.pdf", "tables-models.csv",
                                         "tables.csv", "tables.xlsx"]
    # Files appear only where the driver asked and in Twofold's own folder.
    elsewhere = {p for p in changed_files(before, snapshot(tmp_path))
                 if folders["out"] not in p.parents and folders["twofold_home"] not in p.parents}
    assert elsewhere == set()
