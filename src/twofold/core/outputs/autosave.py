"""The autosave: the running session kept on disk, and its recovery after a crash.

Each Twofold process keeps its session in ``autosave/session-<pid>.json``
under the application folder, next to a lock file ``running-<pid>.lock``
that marks it as running.  A clean exit removes both; an autosave whose
process is gone without a clean exit can be recovered.
"""

from __future__ import annotations

import datetime as _dt
import json
import os
import re
import sys
from pathlib import Path

from twofold.core.outputs.session import validate_session
from twofold.core.outputs.storage import atomic_write_text


def _autosave_dir() -> Path:
    from twofold.paths import app_dir

    folder = app_dir() / "autosave"
    folder.mkdir(parents=True, exist_ok=True)
    return folder


def autosave_path(pid: int | None = None) -> Path:
    """Where this process (or process ``pid``) keeps its autosaved session."""
    return _autosave_dir() / f"session-{os.getpid() if pid is None else int(pid)}.json"


def _lock_path(pid: int | None = None) -> Path:
    return _autosave_dir() / f"running-{os.getpid() if pid is None else int(pid)}.lock"


def start_autosave() -> Path:
    """Mark this process as running (a small lock file with its pid); call once at start."""
    lock = _lock_path()
    atomic_write_text(lock, json.dumps({"pid": os.getpid(), "started": _dt.datetime.now(
        _dt.timezone.utc).replace(microsecond=0).isoformat()}) + "\n", private=True)
    return lock


def autosave(session: dict) -> Path:
    """Save the session to this process's autosave file (atomically), marking the process as running."""
    if not _lock_path().exists():
        start_autosave()
    path = autosave_path()
    validate_session(session)
    atomic_write_text(path, json.dumps(session, indent=1, ensure_ascii=False, allow_nan=False) + "\n", private=True)
    return path


def clean_exit() -> None:
    """On a clean exit: remove this process's autosave and its lock."""
    for p in (autosave_path(), _lock_path()):
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


def recoverable() -> Path | None:
    """The newest autosave left by a Twofold process that did not close cleanly, or None.

    An autosave belongs to a live process when that process's lock file is
    present and the pid is running; those (and this process's own) are left
    alone.
    """
    found = []
    for p in _autosave_dir().glob("session-*.json"):
        m = re.fullmatch(r"session-(\d+)\.json", p.name)
        if not m:
            continue
        pid = int(m.group(1))
        if pid == os.getpid():
            continue
        if _lock_path(pid).exists() and _pid_alive(pid):
            continue
        found.append(p)
    if not found:
        return None
    return max(found, key=lambda p: p.stat().st_mtime)


def discard_autosave(path) -> None:
    """Remove a recovered (or declined) autosave and the lock of the process that left it."""
    path = Path(path)
    m = re.fullmatch(r"session-(\d+)\.json", path.name)
    targets = [path] + ([_lock_path(int(m.group(1)))] if m else [])
    for p in targets:
        try:
            p.unlink()
        except FileNotFoundError:
            pass
