"""Start the window: ``twofold`` or ``twofold DATA``.

Only PySide6 and the standard library are imported at module level, so the
window is on screen well within a second; pandas, the core and statsmodels are
imported by the worker thread once the window shows.
"""

from __future__ import annotations

import os
import sys
import threading

EXIT_USAGE = 2


def _report_unexpected(exc_type, exc, tb) -> None:
    """Log an uncaught exception and say so in a message box; never crash."""
    from twofold.gui.worker import log_exception, where_logged

    if exc is None:
        exc = exc_type()
    exc.__traceback__ = tb
    path = log_exception(exc)
    from PySide6.QtWidgets import QApplication

    app = QApplication.instance()
    window = getattr(app, "twofold_window", None) if app is not None else None
    message = f"{exc_type.__name__}: {exc}"
    if window is not None:
        # Qt objects belong to the GUI thread: hand the message over if needed.
        from PySide6.QtCore import QTimer

        if threading.current_thread() is threading.main_thread():
            window.show_unexpected(message, path)
        else:
            QTimer.singleShot(0, window, lambda: window.show_unexpected(message, path))
    else:
        print(f"twofold: an unexpected problem occurred ({message}). {where_logged(path)}", file=sys.stderr)


def install_exception_hooks() -> None:
    sys.excepthook = _report_unexpected
    threading.excepthook = lambda args: _report_unexpected(args.exc_type, args.exc_value, args.exc_traceback)


def launch(argv: list[str] | None = None):
    """Create the application and show the window; returns (app, window).

    ``argv`` may hold one data file to open.  Autosave is on, and a
    recovery is offered when the last run did not close cleanly.
    """
    from PySide6.QtWidgets import QApplication

    from twofold.gui.window import MainWindow, default_size

    argv = list(argv or [])
    app = QApplication.instance() or QApplication([sys.argv[0] if sys.argv else "twofold"])
    app.setApplicationName("Twofold")
    app.setOrganizationName("Twofold")
    # No display name: on Linux Qt would add " - Twofold" to every title, which already starts with Twofold.
    window = MainWindow()
    app.twofold_window = window
    default_size(window)
    window.show()
    # Autosave after every new result, into Twofold's own folder; if an earlier Twofold was
    # killed or crashed, offer what it was working on once the window is up.
    window.sessions.enable_autosave()
    window.sessions.offer_restore_later()
    if argv:
        window.open_path(argv[0])
    return app, window


def main(argv: list[str] | None = None) -> int:
    """Open the window (optionally on the data file in ``argv``) and run until it closes."""
    argv = list(sys.argv[1:] if argv is None else argv)
    if len(argv) > 1 or (argv and argv[0].startswith("-")):
        print("twofold: give at most one data file, for example 'twofold study.csv' "
              "(see 'twofold --help').", file=sys.stderr)
        return EXIT_USAGE
    from twofold.gui.window import has_display

    if not has_display() and not os.environ.get("QT_QPA_PLATFORM"):
        print("twofold: no screen is available here, so the window cannot open; 'twofold fit' works without "
              "one, and 'twofold snapshot' saves a picture of the window.", file=sys.stderr)
        return 3
    install_exception_hooks()
    app, window = launch(argv)
    return int(app.exec())


if __name__ == "__main__":
    sys.exit(main())
