"""The application folder's entry point: the ``twofold`` command, frozen by PyInstaller.

``twofold.cli.main`` calls ``multiprocessing.freeze_support()`` first, so
when the window starts its assessment process (a copy of this executable,
started by ``multiprocessing`` in "spawn" mode) that copy runs the
assessment and nothing else.

``TWOFOLD_LAUNCH_PROBE=1`` is for ``benchmarks/tick_latency.py --app``:
the window prints one JSON line with the time of its first paint and closes.
It writes no file.
"""

import os
import sys


def _streams_for_a_windowed_executable() -> None:
    """A Windows executable built without a console has no standard streams; give it harmless ones."""
    for name in ("stdout", "stderr"):
        if getattr(sys, name) is None:
            setattr(sys, name, open(os.devnull, "w", encoding="utf-8"))


def _launch_probe() -> None:
    """Print the time of the window's first paint, then quit (launch benchmark only)."""
    import json
    import time

    from PySide6.QtCore import QEvent, QObject, QTimer
    from PySide6.QtWidgets import QApplication

    app = QApplication.instance() or QApplication(["twofold"])

    class FirstPaint(QObject):
        done = False

        def eventFilter(self, obj, event):  # noqa: N802 (Qt's name)
            if event.type() == QEvent.Type.Paint and not self.done:
                self.done = True
                print(json.dumps({"painted": time.time(), "pandas": "pandas" in sys.modules,
                                  "statsmodels": "statsmodels" in sys.modules}), flush=True)
                QTimer.singleShot(0, app.quit)
            return False

    app.twofold_probe = FirstPaint()
    app.installEventFilter(app.twofold_probe)


if __name__ == "__main__":
    _streams_for_a_windowed_executable()
    if os.environ.get("TWOFOLD_LAUNCH_PROBE") == "1" and len(sys.argv) == 1:
        _launch_probe()
    from twofold.cli import main

    sys.exit(main())
