"""How long a tick takes to show in the window, paced like a user and in a burst, and whether the window stalls.

    python benchmarks/tick_latency.py [--rows N] [--ticks K] [--launch] [--app FOLDER] [--data-dir DIR]

Drives the real window off screen (``ask_before_leaving`` off, its own
settings file) on synthetic data: a seeded CSV of N rows (default 20,000) with
ten predictors (numbers, a four-group factor, two-valued text, one number with
about 3% missing), written once to --data-dir and reused.  The window opens it
as a user would and the outcome is chosen; the time to do so is ``load_ms``.

A tick is made as a user makes it: the predictor's row is selected in the
predictor list and the space bar is pressed on it (QTest.keyClick).  Each tick
is one request (``session.newest_request`` right after the key press) and one
step of the model ladder.  Times run from just before the key press to:

* tests shown: ``results_pane.shown`` for that request (``session.last_results_id``
  equal to it, and the view's predictors those ticked);
* assessment shown: ``session.assessmentChanged`` with ``last_assessment_id``
  equal to that request and to ``last_results_id``.

If a newer tick came before a tick's own results (or assessment) were shown,
they never will be: the newer tick supersedes them.  Such a tick is counted
(``tests_superseded``, ``assessment_abandoned``) and its time is taken to the
first results (or assessment) shown for a newer request, which includes its
change: the time the user waited to see it.  No tick is left out of the
percentiles, so abandoned assessments cannot make them look better.

Phases, in order:

1. paced ticks: K ticks (default 12), each due 400 ms after the previous one
   was due (not after its result), ticking the ten predictors one by one and
   unticking them in reverse when K exceeds ten; then the window is left to
   show the last tick's tests and assessment.  Gives tests_ms_p50/p95 and
   assessment_ms_p50/p95.
2. burst: five ticks 60 ms apart (within 300 ms) on sex, lives_alone,
   systolic_bp, creatinine and haemoglobin; ``burst_last_ms`` is from the last
   tick of the burst to its tests shown (``burst_assessment_ms`` to its
   assessment).
3. single ticks: the same five predictors toggled back one at a time, each
   with the window otherwise idle (the previous tick's tests AND assessment
   shown, no request pending, then 300 ms idle); ``single_ms_p50`` is the
   median tick-to-tests-shown, ``single_assessment_ms_p50`` the median
   tick-to-assessment-shown.

A 10 ms precise timer on the GUI thread records the longest gap between its
firings: the longest time the window did not answer.  ``max_stall_ms`` is the
longest over the paced ticks and the burst (each also given alone, as is the
stall while opening the file and during the single ticks).  Waiting is done
by running the event loop idle (woken by the window's signals, a 50 ms
fallback timer, or a precise timer for the next tick's due time); it never
spins.

The launch time is measured in a fresh process (median of three): from
starting Python to the window's first paint, and whether pandas and
statsmodels were loaded by then (they should not be).  ``--launch --app
FOLDER`` measures the application folder's ``twofold`` instead (built by
``scripts/build_app.py``; ``TWOFOLD_LAUNCH_PROBE=1`` makes its first paint
print the same line), from starting the program to that paint.

The last line printed is one JSON object with rows, ticks, tests_ms_p50,
tests_ms_p95, tests_superseded, assessment_ms_p50, assessment_ms_p95,
assessment_abandoned, assessment_own_ms_p50 (over the ticks whose own
assessment was shown only), burst_last_ms, burst_assessment_ms, single_ms_p50,
single_assessment_ms_p50, max_stall_ms (with stall_paced_ms,
stall_burst_ms, single_max_stall_ms, load_max_stall_ms), load_ms, launch_ms
and a few more, with ``anomalies``: anything odd seen (a tick's results
showing other predictors than those ticked, the ladder not growing by one step
per tick, a burst that could not be made within 300 ms), also printed on lines
starting "odd:".  The lines before it give each tick's times.  With --launch,
only the launch is measured.
"""

from __future__ import annotations

import argparse
import json
import math
import os
import subprocess
import sys
import tempfile
import time
from dataclasses import dataclass
from pathlib import Path

os.environ.setdefault("QT_QPA_PLATFORM", "offscreen")

PREDICTORS = ["age", "length_of_stay", "ward", "prior_admissions", "frailty_score", "sex", "lives_alone",
              "systolic_bp", "creatinine", "haemoglobin"]
SEED = 20240611
PACE_MS = 400            # a user's ticks: one every 400 ms, from the previous tick
BURST_PREDICTORS = ["sex", "lives_alone", "systolic_bp", "creatinine", "haemoglobin"]
BURST_GAP_MS = 60        # five ticks within 300 ms
SINGLE_REST_MS = 300     # idle before each single tick, once everything of the previous one is shown
WAIT_S = 600             # give up (and say so) if the window has not answered by then

_LAUNCH_CHILD = r"""
import json, sys, time
import twofold.cli  # the console script's module, as 'twofold' runs it
from PySide6.QtCore import QEvent, QObject, QTimer
from PySide6.QtWidgets import QApplication
app = QApplication(["twofold"])
class FirstPaint(QObject):
    done = False
    def eventFilter(self, obj, event):
        if event.type() == QEvent.Type.Paint and not self.done:
            self.done = True
            print(json.dumps({"painted": time.time(), "pandas": "pandas" in sys.modules,
                              "numpy": "numpy" in sys.modules,
                              "statsmodels": "statsmodels" in sys.modules}), flush=True)
            QTimer.singleShot(0, app.quit)
        return False
probe = FirstPaint()
app.installEventFilter(probe)
from twofold.gui.app import launch
launch([])
app.exec()
"""


def measure_launch(repeats: int = 3, app: Path | None = None) -> dict:
    """Median time from starting the process to the first paint of the window (of the folder ``app``, if given)."""
    times, last = [], {}
    env = dict(os.environ, QT_QPA_PLATFORM="offscreen")
    env.setdefault("TWOFOLD_HOME", tempfile.mkdtemp(prefix="twofold-bench-home-"))
    command = [sys.executable, "-c", _LAUNCH_CHILD]
    if app is not None:
        command = [str(app / "twofold")]
        env["TWOFOLD_LAUNCH_PROBE"] = "1"
    for _ in range(repeats):
        start = time.time()
        out = subprocess.run(command, capture_output=True, text=True, env=env, timeout=60, check=False)
        line = [ln for ln in out.stdout.splitlines() if ln.startswith("{")]
        if not line:
            raise RuntimeError(f"the launch probe printed nothing: {out.stderr.strip()[-500:]}")
        last = json.loads(line[-1])
        times.append((last["painted"] - start) * 1000)
    times.sort()
    return {"launch_ms": round(times[len(times) // 2], 1), "launch_runs_ms": [round(t, 1) for t in times],
            "pandas_loaded_at_first_paint": last["pandas"],
            "statsmodels_loaded_at_first_paint": last["statsmodels"]}


def synthetic_csv(rows: int, folder: Path) -> Path:
    """A seeded synthetic study of ``rows`` admissions, written once and reused."""
    path = folder / f"twofold_bench_{rows}_{SEED}.csv"
    if path.exists():
        return path
    import numpy as np
    import pandas as pd

    rng = np.random.default_rng(SEED)
    n = rows
    age = rng.integers(18, 96, n)
    los = np.round(rng.lognormal(1.2, 0.6, n), 1)
    ward = rng.choice(["medical", "surgical", "elderly_care", "orthopaedic"], n, p=[0.4, 0.3, 0.2, 0.1])
    prior = rng.poisson(0.8, n)
    frailty = rng.integers(0, 9, n).astype(float)
    frailty[rng.random(n) < 0.03] = np.nan
    sex = rng.choice(["F", "M"], n)
    alone = rng.choice(["no", "yes"], n, p=[0.7, 0.3])
    sbp = np.round(rng.normal(130, 18, n))
    creat = np.round(rng.lognormal(4.4, 0.3, n))
    hb = np.round(rng.normal(125, 15, n))
    eta = (-4.0 + 0.02 * age + 0.08 * los + 0.3 * prior + 0.12 * np.nan_to_num(frailty)
           + 0.4 * (ward == "elderly_care") + 0.2 * (alone == "yes") + 0.002 * (creat - 80))
    y = (rng.random(n) < 1 / (1 + np.exp(-eta))).astype(int)
    frame = pd.DataFrame({"admission_id": [f"B{i:07d}" for i in range(n)], "age": age, "length_of_stay": los,
                          "ward": ward, "prior_admissions": prior, "frailty_score": frailty, "sex": sex,
                          "lives_alone": alone, "systolic_bp": sbp, "creatinine": creat, "haemoglobin": hb,
                          "readmitted": y})
    tmp = path.with_suffix(".part")
    frame.to_csv(tmp, index=False)
    tmp.replace(path)
    return path


class StallMeter:
    """A 10 ms timer on the GUI thread; the longest gap between firings is the longest stall."""

    def __init__(self):
        from PySide6.QtCore import Qt, QTimer

        self.timer = QTimer()
        self.timer.setTimerType(Qt.TimerType.PreciseTimer)
        self.timer.setInterval(10)
        self.timer.timeout.connect(self._tick)
        self.last = None
        self.worst = 0.0

    def _tick(self):
        now = time.perf_counter()
        if self.last is not None:
            self.worst = max(self.worst, now - self.last)
        self.last = now

    def start(self):
        self.last = time.perf_counter()
        self.worst = 0.0
        self.timer.start()

    def stop(self) -> float:
        self._tick()
        self.timer.stop()
        return self.worst * 1000


def wait_until(app, condition, timeout_s: float, signals=()) -> None:
    """Run the real event loop (idle, as in use) until ``condition`` holds.

    The loop wakes on the given signals, and on a coarse 50 ms timer as a
    fallback; it never spins, so it competes with the worker thread no more
    than a user's idle window does.
    """
    from PySide6.QtCore import QEventLoop, QTimer

    deadline = time.perf_counter() + timeout_s
    loop = QEventLoop()
    check = QTimer()
    check.setInterval(50)
    check.timeout.connect(loop.quit)
    for sig in signals:
        sig.connect(loop.quit)
    check.start()
    try:
        while not condition():
            if time.perf_counter() > deadline:
                raise TimeoutError("the window did not answer in time")
            loop.exec()
    finally:
        check.stop()
        for sig in signals:
            sig.disconnect(loop.quit)


def sleep_until(deadline: float) -> None:
    """Run the event loop idle until ``time.perf_counter()`` reaches ``deadline`` (a precise timer; no spinning)."""
    from PySide6.QtCore import QEventLoop, Qt, QTimer

    remaining_ms = (deadline - time.perf_counter()) * 1000
    if remaining_ms <= 0:
        return
    loop = QEventLoop()
    timer = QTimer()
    timer.setSingleShot(True)
    timer.setTimerType(Qt.TimerType.PreciseTimer)
    timer.timeout.connect(loop.quit)
    timer.start(math.ceil(remaining_ms))
    loop.exec()


def idle(ms: int) -> None:
    sleep_until(time.perf_counter() + ms / 1000)


def percentile(values, q: float) -> float:
    import numpy as np

    return float(np.percentile(np.asarray(values, dtype=float), q))


class Recorder:
    """When the window showed results and assessments, and for which request.

    Connected after the window's own slots, so each time is taken once the
    window has shown what the signal carries.
    """

    def __init__(self, window):
        self.session = window.session
        self.results = []       # (time, last_results_id, predictors or None, rungs or None)
        self.assessments = []   # (time, last_assessment_id, last_results_id)
        self.failures = []
        window.results_pane.shown.connect(self._shown)
        window.session.assessmentChanged.connect(self._assessed)
        window.session.failed.connect(self.failures.append)

    def _shown(self, view) -> None:
        self.results.append((time.perf_counter(), self.session.last_results_id,
                             None if view is None else tuple(view.predictors),
                             None if view is None else view.n_rungs))

    def _assessed(self, view) -> None:
        if view is not None:
            s = self.session
            self.assessments.append((time.perf_counter(), s.last_assessment_id, s.last_results_id))

    def check(self) -> None:
        if self.failures:
            f = self.failures[0]
            raise RuntimeError(f"the window reported a failure in {f.kind!r} ({f.error_type or 'error'}"
                               f"{', unexpected' if f.unexpected else ''}): {f.message}"
                               + (f" [log: {f.log_path}]" if f.log_path else ""))


@dataclass
class Tick:
    name: str
    request: int
    at: float            # perf_counter just before the key press
    predictors: tuple    # ticked right after it
    late_ms: float = 0.0  # how long after its due time the tick could be made
    tests_ms: float | None = None
    superseded: bool = False        # its own results were never shown (a newer tick came first)
    assessment_ms: float | None = None
    abandoned: bool = False         # its own assessment was never shown (a newer tick came first)


def press_space_on(window, name: str) -> Tick:
    """Select the predictor's row and press the space bar on it, as a user ticks it."""
    from PySide6.QtCore import Qt
    from PySide6.QtTest import QTest

    pane, session = window.model_pane, window.session
    lst = pane.list
    row = next((i for i in range(lst.count()) if lst.item(i).data(Qt.ItemDataRole.UserRole) == name), None)
    if row is None:
        raise RuntimeError(f"the predictor list has no row for {name!r}")
    if not lst.hasFocus():
        lst.setFocus(Qt.FocusReason.TabFocusReason)
    lst.setCurrentRow(row)
    before, before_id = set(pane.ticked_predictors()), session.newest_request
    at = time.perf_counter()
    QTest.keyClick(lst, Qt.Key.Key_Space)
    request = session.newest_request
    after = set(pane.ticked_predictors())
    if after != before ^ {name}:
        raise RuntimeError(f"space on {name!r} left the ticks at {sorted(after)} (were {sorted(before)})")
    if request == before_id:
        raise RuntimeError(f"space on {name!r} changed the ticks but made no request")
    return Tick(name, request, at, tuple(sorted(after)))


def settle(app, window, rec: Recorder, request: int) -> None:
    """Wait (idle) until the tests and the assessment of ``request`` are shown and nothing is pending."""
    s = window.session

    def done():
        rec.check()
        return not s.busy and s.last_results_id == request and s.last_assessment_id == request

    try:
        wait_until(app, done, WAIT_S, [s.resultsChanged, s.assessmentChanged, s.busyChanged, s.failed])
    except TimeoutError:
        raise TimeoutError(f"request {request} not shown after {WAIT_S} s: newest_request={s.newest_request}, "
                           f"last_results_id={s.last_results_id}, last_assessment_id={s.last_assessment_id}, "
                           f"busy={s.busy}") from None


def score(ticks, rec: Recorder, anomalies: list) -> None:
    """Each tick's time to its tests and to its assessment, from what the recorder saw."""
    for t in ticks:
        own = [r for r in rec.results if r[1] == t.request and r[0] >= t.at]
        if own:
            if own[0][2] is None or set(own[0][2]) != set(t.predictors):
                anomalies.append(f"request {t.request} ({t.name}) showed predictors {own[0][2]}, "
                                 f"ticked were {t.predictors}")
            t.tests_ms = (own[0][0] - t.at) * 1000
        else:
            later = [r for r in rec.results if r[1] > t.request and r[0] >= t.at]
            if not later:
                raise RuntimeError(f"the tests of tick {t.name!r} (request {t.request}) were never shown, "
                                   "nor any newer ones")
            t.tests_ms, t.superseded = (later[0][0] - t.at) * 1000, True
        own = [a for a in rec.assessments if a[1] == t.request and a[2] == t.request and a[0] >= t.at]
        if own:
            t.assessment_ms = (own[0][0] - t.at) * 1000
        else:
            later = [a for a in rec.assessments if a[1] > t.request and a[1] == a[2] and a[0] >= t.at]
            if not later:
                raise RuntimeError(f"the assessment of tick {t.name!r} (request {t.request}) was never shown, "
                                   "nor any newer one")
            t.assessment_ms, t.abandoned = (later[0][0] - t.at) * 1000, True


def rungs_now(window):
    view = window.session.last_results
    return view.n_rungs if view is not None else None


def check_message(window, where: str) -> None:
    if window.message.isVisible():
        raise RuntimeError(f"the window shows a message {where}: {window.message.text()}")


def run(rows: int, ticks: int, folder: Path) -> dict:
    from PySide6.QtCore import QSettings
    from PySide6.QtWidgets import QApplication

    from twofold.gui.window import MainWindow, balance

    path = synthetic_csv(rows, folder)
    app = QApplication.instance() or QApplication(["twofold-bench"])
    settings = QSettings(str(folder / "bench-settings.ini"), QSettings.Format.IniFormat)
    window = MainWindow(settings=settings, remember=False)
    window.ask_before_leaving = False
    window.resize(1600, 1000)
    balance(window)
    window.show()
    window.activateWindow()
    s = window.session
    wait_until(app, lambda: s.core_ready, 60, [s.coreReady])

    # ---- open the file and choose the outcome ------------------------------------
    stall = StallMeter()
    loaded = []
    s.studyLoaded.connect(loaded.append)
    stall.start()
    t0 = time.perf_counter()
    window.open_path(path)
    wait_until(app, lambda: bool(loaded), WAIT_S, [s.studyLoaded])
    window.model_pane.choose_outcome("readmitted")
    wait_until(app, lambda: not s.busy, WAIT_S, [s.busyChanged])
    load_ms = (time.perf_counter() - t0) * 1000
    load_stall = stall.stop()
    check_message(window, "after opening the file")
    rec = Recorder(window)
    anomalies: list[str] = []
    idle(SINGLE_REST_MS)

    # ---- 1. paced ticks ------------------------------------------------------------
    plan = []
    for k in range(ticks):
        cycle = k % (2 * len(PREDICTORS))
        plan.append(PREDICTORS[cycle] if cycle < len(PREDICTORS) else PREDICTORS[2 * len(PREDICTORS) - 1 - cycle])
    rungs_before = rungs_now(window)
    paced = []
    stall.start()
    first_due = time.perf_counter() + 0.05
    for k, name in enumerate(plan):
        due = first_due + k * PACE_MS / 1000
        sleep_until(due)
        tick = press_space_on(window, name)
        tick.late_ms = max(0.0, (tick.at - due) * 1000)
        paced.append(tick)
    settle(app, window, rec, paced[-1].request)
    stall_paced = stall.stop()
    check_message(window, "after the paced ticks")
    score(paced, rec, anomalies)
    rungs_after_paced = rungs_now(window)
    if rungs_before is not None and rungs_after_paced is not None and rungs_after_paced - rungs_before != len(paced):
        anomalies.append(f"the ladder grew by {rungs_after_paced - rungs_before} steps over {len(paced)} paced ticks")

    # ---- 2. burst ------------------------------------------------------------------
    idle(SINGLE_REST_MS)
    burst = []
    stall.start()
    first_due = time.perf_counter() + 0.05
    for i, name in enumerate(BURST_PREDICTORS):
        due = first_due + i * BURST_GAP_MS / 1000
        sleep_until(due)
        tick = press_space_on(window, name)
        tick.late_ms = max(0.0, (tick.at - due) * 1000)
        burst.append(tick)
    settle(app, window, rec, burst[-1].request)
    stall_burst = stall.stop()
    check_message(window, "after the burst")
    score(burst, rec, anomalies)
    span_ms = (burst[-1].at - burst[0].at) * 1000
    if span_ms > 300:
        anomalies.append(f"the burst's five ticks took {span_ms:.0f} ms, not 300 ms at most: the window was too "
                         "busy to take them on time")
    if burst[-1].superseded:
        anomalies.append("the last tick of the burst had its results replaced though no newer tick was made")
    rungs_after_burst = rungs_now(window)
    if rungs_after_paced is not None and rungs_after_burst is not None \
            and rungs_after_burst - rungs_after_paced != len(burst):
        anomalies.append(f"the ladder grew by {rungs_after_burst - rungs_after_paced} steps over "
                         f"{len(burst)} burst ticks")

    # ---- 3. single ticks, the window otherwise idle ----------------------------------
    singles = []
    stall.start()
    for name in reversed(BURST_PREDICTORS):
        idle(SINGLE_REST_MS)
        tick = press_space_on(window, name)
        settle(app, window, rec, tick.request)
        singles.append(tick)
    single_stall = stall.stop()
    check_message(window, "after the single ticks")
    score(singles, rec, anomalies)
    if any(t.superseded or t.abandoned for t in singles):
        anomalies.append("a single tick's own results or assessment were not shown")

    window.close()
    app.processEvents()

    def r1(x):
        return round(x, 1)

    tests = [t.tests_ms for t in paced]
    assess = [t.assessment_ms for t in paced]
    own = [t.assessment_ms for t in paced if not t.abandoned]  # optimistic: the abandoned ones were slower
    return {
        "rows": rows, "ticks": len(paced), "pace_ms": PACE_MS,
        "tests_ms_p50": r1(percentile(tests, 50)), "tests_ms_p95": r1(percentile(tests, 95)),
        "tests_superseded": sum(t.superseded for t in paced),
        "assessment_ms_p50": r1(percentile(assess, 50)), "assessment_ms_p95": r1(percentile(assess, 95)),
        "assessment_abandoned": sum(t.abandoned for t in paced),
        "assessment_own_ms_p50": r1(percentile(own, 50)) if own else None,
        "burst_last_ms": r1(burst[-1].tests_ms), "burst_assessment_ms": r1(burst[-1].assessment_ms),
        "burst_span_ms": r1((burst[-1].at - burst[0].at) * 1000),
        "burst_results_shown": sum(not t.superseded for t in burst),
        "single_ms_p50": r1(percentile([t.tests_ms for t in singles], 50)),
        "single_assessment_ms_p50": r1(percentile([t.assessment_ms for t in singles], 50)),
        "max_stall_ms": r1(max(stall_paced, stall_burst)),
        "stall_paced_ms": r1(stall_paced), "stall_burst_ms": r1(stall_burst),
        "single_max_stall_ms": r1(single_stall),
        "tick_late_ms_max": r1(max(t.late_ms for t in paced + burst)),
        "load_ms": r1(load_ms), "load_max_stall_ms": r1(load_stall),
        "anomalies": anomalies,
        "_paced": paced, "_burst": burst, "_singles": singles,
    }


def describe(label: str, ticks) -> str:
    parts = []
    for t in ticks:
        tests = f"{t.tests_ms:.0f}{'*' if t.superseded else ''}"
        assess = f"{t.assessment_ms:.0f}{'*' if t.abandoned else ''}"
        late = f" late {t.late_ms:.0f}" if t.late_ms >= 5 else ""
        parts.append(f"{t.name} {tests}/{assess}{late}")
    return f"{label} (tests/assessment ms; * = superseded by a newer tick, timed to the newer one): " + "; ".join(parts)


def main(argv=None) -> int:
    p = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    p.add_argument("--rows", type=int, default=20_000)
    p.add_argument("--ticks", type=int, default=12, help="paced ticks (default 12)")
    p.add_argument("--launch", action="store_true", help="measure the launch time only")
    p.add_argument("--app", type=Path, metavar="FOLDER", help="with --launch: the application folder's twofold")
    p.add_argument("--data-dir", default=tempfile.gettempdir(), help="where the synthetic CSV is kept")
    args = p.parse_args(argv)
    if args.ticks < 1:
        p.error("--ticks must be at least 1")
    os.environ.setdefault("TWOFOLD_HOME", tempfile.mkdtemp(prefix="twofold-bench-home-"))
    launch = measure_launch(5 if args.app else 3, args.app)
    print(f"launch: first paint {launch['launch_ms']} ms after start (runs {launch['launch_runs_ms']}); "
          f"pandas loaded then: {launch['pandas_loaded_at_first_paint']}, "
          f"statsmodels loaded then: {launch['statsmodels_loaded_at_first_paint']}")
    if args.launch:
        print(json.dumps({"launch_ms": launch["launch_ms"]}))
        return 0
    result = run(args.rows, args.ticks, Path(args.data_dir))
    print(describe("paced ticks", result.pop("_paced")))
    print(describe("burst", result.pop("_burst")))
    print(describe("single ticks", result.pop("_singles")))
    for note in result["anomalies"]:
        print("odd:", note)
    result["launch_ms"] = launch["launch_ms"]
    result["pandas_loaded_at_first_paint"] = launch["pandas_loaded_at_first_paint"]
    result["statsmodels_loaded_at_first_paint"] = launch["statsmodels_loaded_at_first_paint"]
    print(json.dumps(result))
    return 0


if __name__ == "__main__":
    sys.exit(main())
