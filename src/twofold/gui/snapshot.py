"""``twofold snapshot``: build the window, fit a model as a user would, save a picture.

    twofold snapshot DATA --outcome COLUMN [--event VALUE] [--smaller COLUMN ...]
                     --predictor COLUMN ... --out PNG [--size WxH]

The window is built off screen when there is no display.  The smaller
model's predictors are ticked first (when given), then the rest, so the
picture shows the nested test between the two.  A mistake in the input gives
one sentence on standard error and exit code 2.
"""

from __future__ import annotations

import argparse
import os
import re
import sys
from pathlib import Path

EXIT_USAGE = 2
EXIT_INTERNAL = 3
WAIT_MS = 180_000


class _Parser(argparse.ArgumentParser):
    def error(self, message):
        self.exit(EXIT_USAGE, f"twofold: {message} (see 'twofold snapshot --help').\n")


def _parser() -> argparse.ArgumentParser:
    p = _Parser(prog="twofold snapshot",
                description="Fit a model in the window and save a picture of it (PNG).")
    p.add_argument("data", metavar="DATA", help="CSV, TSV or XLSX file (read only, never written)")
    p.add_argument("--outcome", required=True, metavar="COLUMN", help="the yes/no outcome column")
    p.add_argument("--event", metavar="VALUE", help="which outcome value is the event (may be left out for 0/1 "
                                                     "or yes/no)")
    p.add_argument("--predictor", action="extend", nargs="+", required=True, metavar="COLUMN",
                   dest="predictors", help="a predictor column (repeat for more)")
    p.add_argument("--smaller", action="extend", nargs="*", metavar="COLUMN", default=None,
                   help="predictors of a smaller model, ticked first, for the nested test")
    p.add_argument("--sheet", metavar="NAME", help="the sheet of a workbook (default: the first)")
    p.add_argument("--out", required=True, metavar="PNG", help="where to save the picture")
    p.add_argument("--size", default="1600x1000", metavar="WxH", help="window size in pixels (default 1600x1000)")
    return p


def _size(text: str) -> tuple[int, int]:
    m = re.fullmatch(r"\s*(\d{3,5})\s*[xX\u00d7]\s*(\d{3,5})\s*", text)
    if not m:
        raise ValueError(f"--size {text!r} should look like WIDTHxHEIGHT, for example 1600x1000")
    w, h = int(m.group(1)), int(m.group(2))
    if not (400 <= w <= 8000 and 300 <= h <= 8000):
        raise ValueError(f"--size {text} is outside 400x300 to 8000x8000; choose a size in that range")
    return w, h


class _Waiter:
    """Run the event loop until a request completes, recording failures."""

    def __init__(self, session):
        from PySide6.QtCore import QEventLoop

        self.session = session
        self.loop = QEventLoop()
        self.done: set[int] = set()
        self.failure = None
        session.requestFinished.connect(self._finished)
        session.failed.connect(self._failed)

    def _finished(self, job_id: int) -> None:
        self.done.add(job_id)
        if self.loop.isRunning():
            self.loop.quit()

    def _failed(self, failure) -> None:
        self.failure = failure

    def wait(self, job_id: int) -> None:
        from PySide6.QtCore import QTimer

        timer = QTimer()
        timer.setSingleShot(True)
        timer.timeout.connect(self.loop.quit)
        timer.start(WAIT_MS)
        while job_id not in self.done and self.failure is None and timer.isActive():
            self.loop.exec()
        if job_id not in self.done and self.failure is None:
            raise TimeoutError("the window did not finish the fit in time")


def run_snapshot(argv: list[str]) -> int:
    """``twofold snapshot``: returns the exit code."""
    args = _parser().parse_args(argv)
    try:
        width, height = _size(args.size)
    except ValueError as exc:
        print(f"twofold: {exc}.", file=sys.stderr)
        return EXIT_USAGE
    out = Path(args.out)
    data = Path(args.data)
    if out.suffix.lower() != ".png":
        print(f"twofold: --out {out} should end in .png; the picture is saved as PNG.", file=sys.stderr)
        return EXIT_USAGE
    if not out.parent.exists():
        print(f"twofold: the folder {out.parent} does not exist; create it or choose another place for --out.",
              file=sys.stderr)
        return EXIT_USAGE
    try:
        if out.exists() and data.exists() and os.path.samefile(out, data):
            print(f"twofold: --out {out} is the data file itself; Twofold never writes to the data, "
                  "so choose another file name.", file=sys.stderr)
            return EXIT_USAGE
    except OSError:
        pass

    from twofold.gui.window import has_display

    if not has_display():
        os.environ.setdefault("QT_QPA_PLATFORM", "offscreen")
    from PySide6.QtCore import qInstallMessageHandler
    from PySide6.QtWidgets import QApplication

    from twofold.gui.window import MainWindow, balance

    # Qt's own chatter (the off-screen platform notes) is not for the user.
    previous_handler = qInstallMessageHandler(lambda *a: None)

    app = QApplication.instance() or QApplication(["twofold"])
    window = MainWindow(remember=False)
    window.ask_before_leaving = False  # an offscreen picture: nobody to ask
    try:
        window.resize(width, height)
        balance(window)
        window.show()
        waiter = _Waiter(window.session)
        predictors = list(dict.fromkeys(args.predictors))
        stages = []
        if args.smaller:
            smaller = list(dict.fromkeys(args.smaller))
            extra = [p for p in smaller if p not in predictors]
            if extra:
                print(f"twofold: --smaller names {', '.join(extra)}, which {'is' if len(extra) == 1 else 'are'} "
                      "not among the --predictor columns; the smaller model must be part of the larger one.",
                      file=sys.stderr)
                return EXIT_USAGE
            stages.append(smaller)
            predictors = smaller + [p for p in predictors if p not in smaller]
        stages.append(predictors)
        steps = [lambda: window.session.open_file(str(data), args.sheet),
                 lambda: window.model_pane.choose_outcome(args.outcome, args.event)]
        steps += [lambda names=names: window.session.set_predictors(names) for names in stages]
        for step in steps:
            waiter.wait(step())
            if waiter.failure is not None:
                message = waiter.failure.message
                if waiter.failure.unexpected:
                    from twofold.gui.worker import where_logged

                    print(f"twofold: an unexpected problem stopped the snapshot ({message}). "
                          f"{where_logged(waiter.failure.log_path)}", file=sys.stderr)
                    return EXIT_INTERNAL
                print(f"twofold: {message}", file=sys.stderr)
                return EXIT_USAGE
            pending = window.model_pane.outcome_view
            if pending is not None and pending.needs_event:
                shown = " or ".join(repr(v) for v in pending.level_labels)
                print(f"twofold: say which value of the outcome '{pending.outcome}' is the event with --event: "
                      f"it is one of {shown}.", file=sys.stderr)
                return EXIT_USAGE
        if window.model_pane.outcome is None or window.results_pane.view is None:
            print("twofold: no results to show; check --outcome and --predictor.", file=sys.stderr)
            return EXIT_USAGE
        # The assessment follows the results as a second message: wait for it (briefly).
        import time

        newest = window.session.newest_request
        deadline = time.monotonic() + WAIT_MS / 1000
        while window.session.last_assessment_id < newest and time.monotonic() < deadline:
            app.processEvents()
            time.sleep(0.01)
        # Let layouts settle before the picture.
        for _ in range(5):
            app.processEvents()
        if not window.grab().save(str(out), "PNG"):
            print(f"twofold: could not write {out}; choose a folder you can write to.", file=sys.stderr)
            return EXIT_USAGE
        return 0
    except TimeoutError as exc:
        print(f"twofold: {exc}.", file=sys.stderr)
        return EXIT_INTERNAL
    finally:
        window.close()
        window.deleteLater()
        app.processEvents()
        qInstallMessageHandler(previous_handler)
