"""How long from ticking a predictor to seeing its results, and whether the window ever stalls.

    python benchmarks/tick_latency.py [--rows N] [--ticks K] [--launch]

Drives the real window off screen on synthetic data (seeded): it writes a CSV
of N rows with ten predictors (numbers, a four-group factor, two-valued text,
one number with about 3% missing), opens it through the window as a user
would, chooses the outcome, then ticks predictors one at a time (and unticks
them again when K exceeds ten), timing each tick until the results pane shows
the new model.  A 10 ms timer on the GUI thread records the longest gap
between its firings: the longest time the window did not answer.

The launch time is measured in a fresh process: from starting Python to the
window's first paint, and whether pandas and statsmodels were loaded by then
(they should not be).

The last line printed is one JSON object with rows, ticks,
tick_to_results_ms_p50, tick_to_results_ms_p95, max_stall_ms (during the
ticks), plus load_ms, load_max_stall_ms and launch_ms.
"""

from __future__ import annotations

import argparse
import json
import os
import subprocess
import sys
import tempfile
import time
from pathlib import Path

os.environ.setdefault("QT_QPA_PLATFORM", "offscreen")

PREDICTORS = ["age", "length_of_stay", "ward", "prior_admissions", "frailty_score", "sex", "lives_alone",
              "systolic_bp", "creatinine", "haemoglobin"]
SEED = 20240611

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


def measure_launch(repeats: int = 3) -> dict:
    """Median time from starting the process to the first paint of the window."""
    times, last = [], {}
    env = dict(os.environ, QT_QPA_PLATFORM="offscreen")
    env.setdefault("TWOFOLD_HOME", tempfile.mkdtemp(prefix="twofold-bench-home-"))
    for _ in range(repeats):
        start = time.time()
        out = subprocess.run([sys.executable, "-c", _LAUNCH_CHILD], capture_output=True, text=True, env=env,
                             timeout=60)
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


def idle(ms: int) -> None:
    from PySide6.QtCore import QEventLoop, QTimer

    loop = QEventLoop()
    QTimer.singleShot(ms, loop.quit)
    loop.exec()


def percentile(values, q: float) -> float:
    import numpy as np

    return float(np.percentile(np.asarray(values, dtype=float), q))


def run(rows: int, ticks: int, folder: Path) -> dict:
    from PySide6.QtWidgets import QApplication
    from PySide6.QtCore import QSettings

    from twofold.gui.window import MainWindow, balance

    path = synthetic_csv(rows, folder)
    app = QApplication.instance() or QApplication(["twofold-bench"])
    settings = QSettings(str(folder / "bench-settings.ini"), QSettings.Format.IniFormat)
    window = MainWindow(settings=settings, remember=False)
    window.resize(1600, 1000)
    balance(window)
    window.show()
    wait_until(app, lambda: window.session.core_ready, 60, [window.session.coreReady])

    stall = StallMeter()
    loaded = []
    window.session.studyLoaded.connect(loaded.append)
    stall.start()
    t0 = time.perf_counter()
    window.open_path(path)
    wait_until(app, lambda: bool(loaded), 600, [window.session.studyLoaded])
    job = window.model_pane.choose_outcome("readmitted")
    wait_until(app, lambda: not window.session.busy, 600, [window.session.busyChanged])
    load_ms = (time.perf_counter() - t0) * 1000
    load_stall = stall.stop()
    if window.message.isVisible():
        raise RuntimeError(window.message.text())
    del job

    shown = []
    window.results_pane.shown.connect(lambda v: shown.append((time.perf_counter(), v)))
    plan = []
    for k in range(ticks):
        cycle = k % (2 * len(PREDICTORS))
        plan.append(PREDICTORS[cycle] if cycle < len(PREDICTORS) else PREDICTORS[2 * len(PREDICTORS) - 1 - cycle])
    latencies = []
    stall.start()
    for name in plan:
        expected = set(window.model_pane.ticked_predictors()) ^ {name}
        start = time.perf_counter()
        window.model_pane.toggle(name)
        wait_until(app, lambda: shown and shown[-1][1] is not None and set(shown[-1][1].predictors) == expected
                   and shown[-1][0] >= start, 600, [window.results_pane.shown])
        latencies.append((shown[-1][0] - start) * 1000)
        idle(50)  # a moment between ticks, as between a user's clicks
    max_stall = stall.stop()
    if window.message.isVisible():
        raise RuntimeError(window.message.text())
    window.close()
    app.processEvents()
    return {"rows": rows, "ticks": ticks,
            "tick_to_results_ms_p50": round(percentile(latencies, 50), 1),
            "tick_to_results_ms_p95": round(percentile(latencies, 95), 1),
            "max_stall_ms": round(max_stall, 1),
            "load_ms": round(load_ms, 1), "load_max_stall_ms": round(load_stall, 1),
            "tick_ms": [round(x, 1) for x in latencies]}


def main(argv=None) -> int:
    p = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    p.add_argument("--rows", type=int, default=20_000)
    p.add_argument("--ticks", type=int, default=12)
    p.add_argument("--launch", action="store_true", help="measure the launch time only")
    p.add_argument("--data-dir", default=tempfile.gettempdir(), help="where the synthetic CSV is kept")
    args = p.parse_args(argv)
    os.environ.setdefault("TWOFOLD_HOME", tempfile.mkdtemp(prefix="twofold-bench-home-"))
    launch = measure_launch()
    print(f"launch: first paint {launch['launch_ms']} ms after start (runs {launch['launch_runs_ms']}); "
          f"pandas loaded then: {launch['pandas_loaded_at_first_paint']}, "
          f"statsmodels loaded then: {launch['statsmodels_loaded_at_first_paint']}")
    if args.launch:
        print(json.dumps({"launch_ms": launch["launch_ms"]}))
        return 0
    result = run(args.rows, args.ticks, Path(args.data_dir))
    print("per tick (ms):", result.pop("tick_ms"))
    result["launch_ms"] = launch["launch_ms"]
    print(json.dumps(result))
    return 0


if __name__ == "__main__":
    sys.exit(main())
