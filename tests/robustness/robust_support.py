"""Helpers of the robustness tests: a network guard for child processes, and file snapshots.

The guard
---------
:func:`run_guarded` runs ``python -m twofold.cli ARGV`` (or any module, or a
snippet of code) in a child process whose ``socket`` module cannot reach the
network.  Before the program starts, a ``-c`` prelude

* replaces ``socket.socket.connect``, ``connect_ex``, ``sendto``,
  ``socket.create_connection``, ``getaddrinfo``, ``gethostbyname``,
  ``gethostbyname_ex`` and ``gethostbyaddr`` with functions that record the
  attempt and raise ``OSError``;
* adds an audit hook (PEP 578) that does the same for the C-level
  ``socket.connect``, ``socket.sendto``, ``socket.sendmsg``,
  ``socket.getaddrinfo`` and ``socket.gethost*`` events, which catches code
  that kept a reference to the original functions or calls ``_socket``;
* records (without blocking) every ``subprocess.Popen`` and ``os.system``,
  since a child process would escape the guard.

Local ``AF_UNIX`` connections are allowed (they are not network use) but
recorded too.  Every record is appended as one JSON line to a log file named
by the environment, so an attempt is seen even if the program swallows the
``OSError``.  A test asserts that the log holds no network attempt.

To guard another entry point (the window's paths, say), call
``run_guarded(argv, module="twofold.gui.snapshot")`` or
``run_guarded(code="import twofold.gui.app")``.
"""

from __future__ import annotations

import json
import os
import subprocess
import sys
import tempfile
from dataclasses import dataclass, field
from pathlib import Path

_PRELUDE = r'''
import json, os, socket, sys

_LOG = os.environ["TWOFOLD_GUARD_LOG"]


def _record(kind, detail, blocked=True):
    with open(_LOG, "a", encoding="utf-8") as fh:
        fh.write(json.dumps({"kind": kind, "detail": repr(detail)[:300], "blocked": blocked}) + "\n")


def _blocker(kind):
    def blocked(*args, **kwargs):
        _record(kind, args[:2])
        raise OSError(f"network use blocked by the test guard ({kind})")
    return blocked


_real_connect = socket.socket.connect
_real_connect_ex = socket.socket.connect_ex


def _is_local(sock):
    return getattr(socket, "AF_UNIX", None) is not None and sock.family == socket.AF_UNIX


def _connect(self, address):
    if _is_local(self):
        _record("unix_connect", address, blocked=False)
        return _real_connect(self, address)
    _record("connect", address)
    raise OSError("network use blocked by the test guard (connect)")


def _connect_ex(self, address):
    if _is_local(self):
        _record("unix_connect", address, blocked=False)
        return _real_connect_ex(self, address)
    _record("connect_ex", address)
    raise OSError("network use blocked by the test guard (connect_ex)")


socket.socket.connect = _connect
socket.socket.connect_ex = _connect_ex
socket.socket.sendto = _blocker("sendto")
for _name in ("create_connection", "getaddrinfo", "gethostbyname", "gethostbyname_ex", "gethostbyaddr"):
    setattr(socket, _name, _blocker(_name))

_NET_EVENTS = {"socket.connect", "socket.sendto", "socket.sendmsg", "socket.getaddrinfo",
               "socket.gethostbyname", "socket.gethostbyaddr"}


def _audit(event, args):
    if event in _NET_EVENTS:
        if event == "socket.connect" and args and _is_local(args[0]):
            return
        _record("audit:" + event, args[1:] if event.startswith("socket.connect") else args)
        raise OSError(f"network use blocked by the test guard ({event})")
    if event in ("subprocess.Popen", "os.system", "os.posix_spawn", "os.exec"):
        _record("process:" + event, args[:2], blocked=False)


sys.addaudithook(_audit)
del _name
'''

_RUN_MODULE = r'''
import runpy, sys
sys.argv = [{module!r}, *{argv!r}]
runpy.run_module({module!r}, run_name="__main__", alter_sys=True)
'''


@dataclass
class GuardedRun:
    """What a guarded child process did."""

    returncode: int
    stdout: str
    stderr: str
    records: list = field(default_factory=list)

    @property
    def network(self) -> list:
        """Attempts to reach the network (all blocked)."""
        return [r for r in self.records if r["blocked"]]

    @property
    def processes(self) -> list:
        """Child processes started (not blocked)."""
        return [r for r in self.records if r["kind"].startswith("process:")]


def run_guarded(argv=(), *, module: str = "twofold.cli", code: str | None = None, env: dict | None = None,
                cwd=None, timeout: float = 300, python: str | None = None) -> GuardedRun:
    """Run ``python -m MODULE ARGV`` (or ``code``) with the network guard in place.

    ``python`` is the interpreter to use (default: the one running the tests).
    """
    with tempfile.TemporaryDirectory(prefix="twofold-guard-") as tmp:
        log = Path(tmp) / "attempts.jsonl"
        log.touch()
        body = code if code is not None else _RUN_MODULE.format(module=module, argv=[str(a) for a in argv])
        full_env = dict(os.environ if env is None else env)
        full_env["TWOFOLD_GUARD_LOG"] = str(log)
        proc = subprocess.run([python or sys.executable, "-c", _PRELUDE + "\n" + body], capture_output=True, text=True,
                              env=full_env, cwd=cwd, timeout=timeout)
        records = [json.loads(line) for line in log.read_text(encoding="utf-8").splitlines() if line.strip()]
    return GuardedRun(proc.returncode, proc.stdout, proc.stderr, records)


def run_cli(*argv, env: dict | None = None, cwd=None, timeout: float = 300) -> subprocess.CompletedProcess:
    """Run ``python -m twofold.cli ARGV`` plainly, as a user would."""
    return subprocess.run([sys.executable, "-m", "twofold.cli", *map(str, argv)], capture_output=True,
                          text=True, env=env, cwd=cwd, timeout=timeout)


def snapshot(*folders) -> dict:
    """Every file under the folders, with its size and modification time."""
    out = {}
    for folder in folders:
        for root, _, files in os.walk(folder):
            for name in files:
                p = Path(root) / name
                st = p.stat()
                out[p] = (st.st_size, st.st_mtime_ns)
    return out


def changed_files(before: dict, after: dict) -> set:
    """Files created or modified between two snapshots."""
    return {p for p, sig in after.items() if before.get(p) != sig}


#: The end of a window-driving script: run ``steps`` (callables returning True once done) while the
#: window is idle, until ``deadline``; ``stopped()`` may end it early.  No braces, so it can be
#: appended to a script that is filled in with ``str.format``.
STEP_LOOP = r'''

def advance():
    if time.monotonic() > deadline or stopped():
        print("stopped at step", len(steps), file=sys.stderr, flush=True)
        app.exit(4)
        return
    while steps and not s.busy:
        if not steps[0]():
            break
        steps.pop(0)
    if steps:
        QTimer.singleShot(30, advance)


QTimer.singleShot(0, advance)
sys.exit(app.exec())
'''
