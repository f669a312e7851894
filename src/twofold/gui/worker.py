"""One worker thread that runs every call into the core, in order.

The core keeps caches (encoded columns, rank checks) that are not meant to be
shared between threads, so a single thread touches it.  Jobs run in the order
they were submitted, except that a job with a ``coalesce`` key replaces any
job with the same key still waiting: when the user ticks quickly only the
latest fit request runs.  Every job carries an increasing id so the GUI can
discard results of a request that a newer one has superseded.

A job's follow-up (the slower extras) starts only once the window has shown
the job's result, or after :attr:`CoreWorker.SHOW_WAIT_S` at most: work begun
meanwhile would hold the interpreter lock while the window lays the result
out and paints it, and on two cores that doubled the time the window did not
answer.
"""

from __future__ import annotations

import threading
import traceback
from collections import deque
from dataclasses import dataclass, field

from PySide6.QtCore import QThread, Signal


@dataclass
class Job:
    """A call to run on the worker thread.

    ``fn`` returns a dict of outputs; ``on_error`` (optional) is called on the
    worker thread after a failure and returns outputs to send along with it.
    """

    id: int
    kind: str
    fn: object
    coalesce: str | None = None
    clears_queue: bool = False
    on_error: object = None
    #: Optional follow-up run after the main result has been sent (same id,
    #: kind ``then_kind``): slower extras such as the model assessment, so the
    #: main result is never held back by them.  It returns outputs, or None to
    #: send nothing (e.g. when a newer request has made it pointless).
    then: object = None
    then_kind: str = "followup"


@dataclass
class JobResult:
    id: int
    kind: str
    outputs: dict = field(default_factory=dict)
    error: str | None = None
    unexpected: bool = False
    log_path: str = ""
    error_type: str = ""
    followup: bool = False


def log_exception(exc: BaseException | None = None) -> str | None:
    """Append the current traceback to the log file and return its path (None when it cannot be written).

    The log lives only in Twofold's own folder, never in a shared one such as the temporary folder.
    """
    import datetime

    try:
        from twofold.paths import log_dir

        path = log_dir() / "twofold-error.log"
        with open(path, "a", encoding="utf-8") as fh:
            fh.write(f"--- {datetime.datetime.now().isoformat(timespec='seconds')}\n")
            if exc is not None:
                traceback.print_exception(type(exc), exc, exc.__traceback__, file=fh)
            else:
                traceback.print_exc(file=fh)
    except OSError:
        return None
    return str(path)


def where_logged(log_path: str | None) -> str:
    """The sentence saying where the details of an unexpected problem are."""
    if not log_path:
        return ("The details could not be kept, because Twofold's own folder cannot be written; "
                "please report the message above.")
    return f"The details were written to {log_path}; please send that file with a report."


class CoreWorker(QThread):
    """The single thread that calls the core.  ``jobDone`` is delivered on the GUI thread."""

    jobDone = Signal(object)

    #: Longest wait for the window to show a result before its follow-up starts anyway.
    SHOW_WAIT_S = 0.25

    def __init__(self, parent=None):
        super().__init__(parent)
        self._shown = threading.Condition()
        self._shown_id = 0
        self._cond = threading.Condition()
        self._queue: deque[Job] = deque()
        self._stop = False
        self.running_id: int | None = None

    def submit(self, job: Job) -> list[int]:
        """Queue a job; returns the ids of waiting jobs it replaced (they will never run)."""
        with self._cond:
            dropped = []
            if job.clears_queue:
                dropped = [j.id for j in self._queue]
                self._queue.clear()
            elif job.coalesce is not None:
                keep = deque()
                for j in self._queue:
                    (dropped.append(j.id) if j.coalesce == job.coalesce else keep.append(j))
                self._queue = keep
            self._queue.append(job)
            self._cond.notify()
        return dropped

    def pending(self) -> int:
        with self._cond:
            return len(self._queue) + (self.running_id is not None)

    def result_shown(self, job_id: int) -> None:
        """The window has shown (laid out and painted) the result of ``job_id``: its follow-up may start."""
        with self._shown:
            self._shown_id = max(self._shown_id, job_id)
            self._shown.notify_all()

    def stop(self, wait_ms: int = 5000) -> None:
        self.result_shown(1 << 62)
        with self._cond:
            self._stop = True
            self._queue.clear()
            self._cond.notify()
        self.wait(wait_ms)

    def run(self) -> None:  # noqa: D401 - QThread entry point
        from twofold.core.errors import TwofoldError

        while True:
            with self._cond:
                while not self._queue and not self._stop:
                    self._cond.wait()
                if self._stop:
                    return
                job = self._queue.popleft()
                self.running_id = job.id
            result = JobResult(job.id, job.kind)
            try:
                result.outputs = job.fn() or {}
            except TwofoldError as exc:
                result.error = str(exc)
                result.error_type = type(exc).__name__
                result.outputs = self._after_error(job)
            except Exception as exc:  # never let the thread die: log, report, carry on
                result.error = f"{type(exc).__name__}: {exc}"
                result.unexpected = True
                result.log_path = log_exception(exc)
                result.outputs = self._after_error(job)
            finally:
                if job.then is None:
                    with self._cond:
                        self.running_id = None
            self.jobDone.emit(result)
            if job.then is not None:
                with self._shown:
                    self._shown.wait_for(lambda: self._shown_id >= job.id, self.SHOW_WAIT_S)
                self._run_followup(job, TwofoldError)

    def _run_followup(self, job: Job, user_error) -> None:
        """Run a job's follow-up and send its outputs as a second result with the same id."""
        result = JobResult(job.id, job.then_kind, followup=True)
        try:
            outputs = job.then()
            if outputs is None:
                return
            result.outputs = outputs
        except user_error as exc:
            result.error = str(exc)
            result.error_type = type(exc).__name__
        except Exception as exc:  # never let the thread die: log, report, carry on
            result.error = f"{type(exc).__name__}: {exc}"
            result.unexpected = True
            result.log_path = log_exception(exc)
        finally:
            with self._cond:
                self.running_id = None
        self.jobDone.emit(result)

    @staticmethod
    def _after_error(job: Job) -> dict:
        if job.on_error is None:
            return {}
        try:
            return job.on_error() or {}
        except Exception as exc:
            log_exception(exc)
            return {}
