"""Session files on disk: written atomically, read back strictly.

Writing goes through a temporary file in the same folder and ``os.replace``,
so a session file is never left half-written.  Reading accepts JSON text
only, within the caps of :mod:`twofold.core.outputs.session`, and checks every field
with :func:`~twofold.core.outputs.session.validate_session`.
"""

from __future__ import annotations

import hashlib
import json
import math
import os
import re
import sys
import tempfile
from pathlib import Path

from twofold.core.errors import DataFileError
from twofold.core.outputs.session import (
    MAX_ABS_NUMBER,
    MAX_DEPTH,
    MAX_FILE_BYTES,
    MAX_INTEGER_DIGITS,
    SessionFileError,
    is_network_path,
    session_file_error,
    validate_session,
)

_DIGESTS: dict = {}  # (path, size, mtime_ns) -> digest, for autosaves after every tick


def file_sha256(path, reuse: bool = False) -> str:
    """SHA-256 of a file's bytes, read in chunks (the file is opened read-only).

    With ``reuse``, a digest computed earlier in this process for the same
    path, size and modification time is returned without reading the file
    again: autosaving after every tick must not re-read a large extract
    (about 1 s per GB).  Checks of whether the data changed never reuse.
    """
    st = os.stat(path)
    key = (str(Path(path).resolve()), st.st_size, st.st_mtime_ns)
    if reuse and key in _DIGESTS:
        return _DIGESTS[key]
    h = hashlib.sha256()
    with open(path, "rb") as fh:
        for chunk in iter(lambda: fh.read(1 << 20), b""):
            h.update(chunk)
    _DIGESTS[key] = h.hexdigest()
    return _DIGESTS[key]


# ---------------------------------------------------------------------------
# writing
# ---------------------------------------------------------------------------


def _umask() -> int:
    """The process umask, read without changing it where the system allows (Linux), else 0o022."""
    try:
        with open("/proc/self/status", encoding="ascii") as fh:
            for line in fh:
                if line.startswith("Umask:"):
                    return int(line.split()[1], 8)
    except (OSError, ValueError):
        pass
    return 0o022


def atomic_write(path, fill, private: bool = False) -> None:
    """Write a file through a temporary file in the same folder, then os.replace: never a half-written file.

    ``fill(tmp)`` writes the whole content to the path ``tmp``.  Should
    anything fail (a full disk, a file-size limit, a kill part-way), the
    temporary file is removed and a file already at ``path`` is left as it
    was.  The file gets ordinary permissions (0o666 less the umask), or
    owner-only ones when ``private`` (autosaves).
    """
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", suffix=".tmp", dir=path.parent)
    os.close(fd)
    try:
        fill(tmp)
        with open(tmp, "rb+") as fh:
            os.fsync(fh.fileno())
        if not sys.platform.startswith("win"):
            os.chmod(tmp, 0o600 if private else 0o666 & ~_umask())
        os.replace(tmp, path)
    except BaseException:
        try:
            os.unlink(tmp)
        except OSError:
            pass
        raise


def atomic_write_text(path, text: str, private: bool = False, encoding: str = "utf-8") -> None:
    """:func:`atomic_write` of a text (newlines written as they are)."""
    def fill(tmp):
        with open(tmp, "w", encoding=encoding, newline="\n") as fh:
            fh.write(text)

    atomic_write(path, fill, private=private)


def atomic_write_bytes(path, content: bytes, private: bool = False) -> None:
    """:func:`atomic_write` of bytes made beforehand (a workbook or PDF built in memory, so a failed
    write can leave no library's half-closed file behind)."""
    def fill(tmp):
        with open(tmp, "wb") as fh:
            fh.write(content)

    atomic_write(path, fill, private=private)


def write_failure(path, exc: BaseException, what: str = "") -> DataFileError:
    """The one sentence for a file that could not be written (the previous one, if any, is unchanged)."""
    import errno

    code = getattr(exc, "errno", None)
    if code in (errno.ENOSPC, getattr(errno, "EDQUOT", -1)):
        why = "the disk is full"
        fix = "free some space or choose another folder"
    elif code == errno.EFBIG:
        why = "the file would be larger than this computer allows"
        fix = "choose another folder or ask your IT staff about the file-size limit"
    else:
        why = getattr(exc, "strerror", None) or type(exc).__name__
        fix = "choose a folder you can write to"
    kept = " (the earlier file of that name is unchanged)" if Path(path).exists() else ""
    return DataFileError(f"Could not write {what + ' ' if what else ''}{path} ({why}){kept}; {fix}.")


def _resolved(path) -> Path | None:
    try:
        return Path(os.fspath(path)).expanduser().resolve()
    except (OSError, TypeError, ValueError, RuntimeError):
        return None


def same_file(a, b) -> bool:
    """Whether two paths name one file: equal once resolved (links followed), or the same file on disk.

    A network path is compared as text only (looking it up would reach the other computer).
    """
    if is_network_path(a) or is_network_path(b):
        return os.path.normcase(os.fspath(a)) == os.path.normcase(os.fspath(b))
    ra, rb = _resolved(a), _resolved(b)
    if ra is None or rb is None:
        return False
    if ra == rb or os.path.normcase(str(ra)) == os.path.normcase(str(rb)):
        return True
    try:
        return ra.exists() and rb.exists() and os.path.samefile(ra, rb)
    except OSError:
        return False


def refuse_writing_over(outputs, data_files, session_file=None) -> None:
    """Refuse any output that is one of the data files an analysis uses, or the session file being read.

    ``outputs`` may hold None and ``-`` (standard output), which are passed
    over; ``data_files`` holds every data file involved (a session's own, a
    new extract).  Compared on resolved paths, so a relative path, a link or
    a second name of the same file is caught before anything is written.
    """
    for out in outputs:
        if not out or str(out) == "-":
            continue
        for data in data_files:
            if data and same_file(out, data):
                raise DataFileError(f"{out} is the data file itself ({Path(os.fspath(data)).name}); "
                                    "Twofold never writes to the data, so choose another file name.")
        if session_file is not None and same_file(out, session_file):
            raise DataFileError(f"{out} is the session file being read; choose another file name for the output.")


def save_session(session: dict, path) -> Path:
    """Write a session file atomically (temporary file, then ``os.replace``).

    A data path inside the session file's folder is written relative to it,
    so the folder can be moved as a whole.

    Raises
    ------
    SessionFileError
        When the session is not valid, or ``path`` is the data file.
    DataFileError
        When the folder cannot be written.
    """
    path = Path(os.fspath(path))
    validate_session(session)
    data = Path(session["data"])
    if same_file(path, data) or (not data.is_absolute() and same_file(path, path.parent / data)):
        raise SessionFileError(f"{path} is the data file itself; Twofold never writes to the data, "
                               "so choose another file name for the session.")
    out = dict(session)
    try:
        rel = data.resolve().relative_to(path.parent.resolve())
        out["data"] = rel.as_posix()
    except (ValueError, OSError):
        pass
    text = json.dumps(out, indent=1, ensure_ascii=False, allow_nan=False)
    try:
        atomic_write_text(path, text + "\n")
    except OSError as exc:
        raise write_failure(path, exc, "the session file") from None
    return path


# ---------------------------------------------------------------------------
# reading, strictly
# ---------------------------------------------------------------------------


def _max_depth(text: str) -> int:
    """Deepest nesting of [ and { outside strings, without recursion."""
    import numpy as np  # here, not at the top: the window writes its autosave mark before numpy is loaded

    stripped = re.sub(r'"(?:[^"\\]|\\.)*"', '""', text)
    brackets = np.frombuffer(re.sub(r"[^\[\]{}]", "", stripped).encode("ascii"), dtype=np.uint8)
    if not brackets.size:
        return 0
    step = np.where((brackets == ord("[")) | (brackets == ord("{")), 1, -1)
    return int(np.cumsum(step).max())


def _parse(text: str, path) -> object:
    def no_constant(name):
        raise session_file_error(path, f"it holds {name}, which is not a number")

    def checked_int(digits: str):
        if len(digits.lstrip("-")) > MAX_INTEGER_DIGITS:
            raise session_file_error(
                path, f"it holds a whole number of {len(digits.lstrip('-'))} digits, far too large")
        return int(digits)

    def checked_float(s: str):
        x = float(s)
        if not math.isfinite(x) or abs(x) > MAX_ABS_NUMBER:
            raise session_file_error(path, f"it holds the number {s[:30]}, which is too large")
        return x

    def no_duplicates(pairs):
        out = {}
        for k, v in pairs:
            if k in out:
                raise session_file_error(path, f"the key '{k[:40]}' appears twice")
            out[k] = v
        return out

    return json.loads(text, parse_constant=no_constant, parse_int=checked_int, parse_float=checked_float,
                      object_pairs_hook=no_duplicates)


def load_session(path) -> dict:
    """Read and check a session file; nothing in it is ever run.

    Relative data paths are resolved against the session file's folder.  The
    data file itself is not opened here.

    Raises
    ------
    SessionFileError
        With one sentence saying what is wrong, for any file that is not a
        valid session of this schema version.
    """
    path = Path(os.fspath(path))
    if not path.is_file():
        raise SessionFileError(f"The session file {path} does not exist or is not a file; check the name and folder.")
    size = path.stat().st_size
    if size > MAX_FILE_BYTES:
        raise session_file_error(path, f"it is {size / 1e6:.0f} MB, far larger than any session")
    with open(path, "rb") as fh:
        raw = fh.read(MAX_FILE_BYTES + 1)
    if raw[:2] in (b"\x80\x02", b"\x80\x03", b"\x80\x04", b"\x80\x05") or raw[:1] == b"\x80":
        raise session_file_error(
            path, "it is a Python pickle, which Twofold never reads because loading one can run code")
    try:
        text = raw.decode("utf-8-sig")
    except UnicodeDecodeError:
        raise session_file_error(path, "it is not text (a session is JSON text)") from None
    if not text.strip():
        raise session_file_error(path, "it is empty")
    if _max_depth(text) > MAX_DEPTH:
        raise session_file_error(path, f"it nests lists or objects more than {MAX_DEPTH} deep, which no session does")
    try:
        session = _parse(text, path)
    except SessionFileError:
        raise
    except (ValueError, RecursionError) as exc:
        where = f" (line {exc.lineno}, column {exc.colno})" if isinstance(exc, json.JSONDecodeError) else ""
        raise session_file_error(path, f"it is not valid JSON{where}") from None
    validate_session(session, path)
    data = Path(session["data"])
    if not data.is_absolute() and not is_network_path(session["data"]):
        session["data"] = str((path.parent / data).resolve())
    return session
