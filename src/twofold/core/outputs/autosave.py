"""The autosave: the running session kept on disk, and its recovery after a crash.

Each Twofold process keeps its session in ``autosave/session-<pid>-<token>.json``
under the application folder, next to a lock file
``running-<pid>-<token>.lock`` that marks it as running.  The token is drawn
at random once per process, and the lock records when the process started
(as the system counts it, where it can be read), so a new process that
happens to get the process id of a crashed one neither overwrites its
autosave (another token) nor takes it for a live one (another start time).
A clean exit removes both files; an autosave whose process is gone without
a clean exit can be recovered.  Files named ``session-<pid>.json`` by earlier
versions are still recognised.
"""

from __future__ import annotations

import datetime as _dt
import json
import os
import re
import secrets
import sys
from pathlib import Path

from twofold.core.outputs.session import validate_session
from twofold.core.outputs.storage import atomic_write_text

#: This process's token, drawn once (a forked child draws its own: see :func:`_token`).
_TOKEN: dict = {}

_NAME = re.compile(r"(session|running)-(\d+)(?:-([0-9a-f]{8,32}))?\.(json|lock)")


def _token() -> str:
    pid = os.getpid()
    if pid not in _TOKEN:
        _TOKEN.clear()
        _TOKEN[pid] = secrets.token_hex(8)
    return _TOKEN[pid]


def _autosave_dir() -> Path:
    from twofold.paths import app_dir

    folder = app_dir() / "autosave"
    folder.mkdir(parents=True, exist_ok=True)
    return folder


def _stem(pid: int | None, token: str | None) -> str:
    if pid is None:
        return f"{os.getpid()}-{_token()}"
    return f"{int(pid)}-{token}" if token else str(int(pid))


def autosave_path(pid: int | None = None, token: str | None = None) -> Path:
    """Where this process (or process ``pid``, with its ``token`` if it had one) keeps its autosaved session."""
    return _autosave_dir() / f"session-{_stem(pid, token)}.json"


def lock_path(pid: int | None = None, token: str | None = None) -> Path:
    """The lock file marking this process (or process ``pid``) as running."""
    return _autosave_dir() / f"running-{_stem(pid, token)}.lock"


def process_started(pid: int) -> str | None:
    """When process ``pid`` started, as an opaque text the system gives; None when it cannot be read.

    Linux: the start time in clock ticks after boot (/proc/PID/stat, field
    22); Windows: the process creation time.  Elsewhere None, and a process
    is then judged by its id alone.
    """
    if sys.platform.startswith("linux"):
        try:
            with open(f"/proc/{int(pid)}/stat", encoding="ascii", errors="replace") as fh:
                stat = fh.read()
            # The command name (field 2) is in parentheses and may hold spaces: count fields after it.
            return stat[stat.rindex(")") + 2:].split()[19]
        except (OSError, ValueError, IndexError):
            return None
    if sys.platform.startswith("win"):
        try:
            import ctypes

            kernel32 = ctypes.windll.kernel32  # type: ignore[attr-defined]
            handle = kernel32.OpenProcess(0x1000, False, int(pid))  # PROCESS_QUERY_LIMITED_INFORMATION
            if not handle:
                return None
            try:
                times = [ctypes.c_ulonglong() for _ in range(4)]
                if not kernel32.GetProcessTimes(handle, *(ctypes.byref(t) for t in times)):
                    return None
                return str(times[0].value)
            finally:
                kernel32.CloseHandle(handle)
        except (OSError, AttributeError, ValueError):
            return None
    return None


def start_autosave() -> Path:
    """Mark this process as running (a small lock file with its pid and start time); call once at start."""
    lock = lock_path()
    atomic_write_text(lock, json.dumps({
        "pid": os.getpid(), "process_started": process_started(os.getpid()),
        "started": _dt.datetime.now(_dt.timezone.utc).replace(microsecond=0).isoformat()}) + "\n", private=True)
    return lock


def autosave(session: dict) -> Path:
    """Save the session to this process's autosave file (atomically), marking the process as running."""
    if not lock_path().exists():
        start_autosave()
    path = autosave_path()
    validate_session(session)
    atomic_write_text(path, json.dumps(session, indent=1, ensure_ascii=False, allow_nan=False) + "\n", private=True)
    return path


def clean_exit() -> None:
    """On a clean exit: remove this process's autosave and its lock."""
    for p in (autosave_path(), lock_path()):
        try:
            p.unlink()
        except FileNotFoundError:
            pass


def _pid_alive(pid: int) -> bool:
    """Whether a process with this id is running (never sends it a signal that acts)."""
    if pid <= 0:
        return False
    if sys.platform.startswith("win"):
        import ctypes

        kernel32 = ctypes.windll.kernel32  # type: ignore[attr-defined]
        handle = kernel32.OpenProcess(0x1000, False, pid)  # PROCESS_QUERY_LIMITED_INFORMATION
        if not handle:
            return False
        try:
            code = ctypes.c_ulong()
            ok = kernel32.GetExitCodeProcess(handle, ctypes.byref(code))
            return bool(ok) and code.value == 259  # STILL_ACTIVE
        finally:
            kernel32.CloseHandle(handle)
    try:
        os.kill(pid, 0)  # signal 0: existence check only
    except ProcessLookupError:
        return False
    except PermissionError:
        return True
    return True


def _still_running(lock: Path, pid: int) -> bool:
    """Whether the process that wrote ``lock`` runs: its id is alive and, where known, started when it did."""
    if not lock.exists() or not _pid_alive(pid):
        return False
    try:
        recorded = json.loads(lock.read_text(encoding="utf-8")).get("process_started")
    except (OSError, ValueError, AttributeError):
        recorded = None
    now = process_started(pid)
    return recorded is None or now is None or str(recorded) == now


def recoverable() -> Path | None:
    """The newest autosave left by a Twofold process that did not close cleanly, or None.

    An autosave belongs to a live process when that process's lock file is
    present, its id is running and (where the system says) it started when
    the lock says; those, and this process's own, are left alone.
    """
    found = []
    own = autosave_path()
    for p in _autosave_dir().glob("session-*.json"):
        m = _NAME.fullmatch(p.name)
        if not m or p == own:
            continue
        pid, token = int(m.group(2)), m.group(3)
        if _still_running(lock_path(pid, token), pid):
            continue
        found.append(p)
    if not found:
        return None
    return max(found, key=lambda p: p.stat().st_mtime)


def discard_autosave(path) -> None:
    """Remove a recovered (or declined) autosave and the lock of the process that left it."""
    path = Path(path)
    m = _NAME.fullmatch(path.name)
    targets = [path] + ([path.with_name(f"running-{m.group(2)}{'-' + m.group(3) if m.group(3) else ''}.lock")]
                        if m and m.group(1) == "session" else [])
    for p in targets:
        try:
            p.unlink()
        except FileNotFoundError:
            pass
