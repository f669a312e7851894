"""Twofold's own folders: settings, autosave and logs, and nowhere else.

``TWOFOLD_HOME`` overrides the location (tests use it); otherwise the
platform's usual per-user application-data folder is used.  On locked-down
workstations that folder may not be creatable or writable (a read-only or
redirected home folder): Twofold then works without it, and never falls back
to a shared folder such as the system's temporary one.
"""

from __future__ import annotations

import os
import sys
from pathlib import Path


def app_dir_path() -> Path:
    """Where Twofold's own folder is, whether or not it exists."""
    override = os.environ.get("TWOFOLD_HOME")
    if override:
        return Path(override)
    if sys.platform.startswith("win"):
        return Path(os.environ.get("APPDATA", Path.home() / "AppData" / "Roaming")) / "Twofold"
    if sys.platform == "darwin":
        return Path.home() / "Library" / "Application Support" / "Twofold"
    return Path(os.environ.get("XDG_DATA_HOME", Path.home() / ".local" / "share")) / "twofold"


def app_dir() -> Path:
    """The per-user folder Twofold writes its own files to (created on demand); OSError when it cannot be."""
    try:
        base = app_dir_path()
    except RuntimeError as exc:  # no home folder can be found at all
        raise OSError(str(exc)) from None
    base.mkdir(parents=True, exist_ok=True)
    return base


def own_folder_problem() -> str | None:
    """None when Twofold's own folder can be created and written, else why not (a short phrase)."""
    import tempfile

    try:
        folder = app_dir()
        with tempfile.TemporaryFile(dir=folder):
            pass
    except OSError as exc:
        where = ""
        try:
            where = f"{app_dir_path()} "
        except RuntimeError:
            pass
        return f"Twofold's own folder {where}cannot be written ({exc.strerror or type(exc).__name__})"
    return None


def log_dir() -> Path:
    """Where unexpected errors are logged; OSError when Twofold's own folder cannot be written."""
    path = app_dir() / "logs"
    path.mkdir(parents=True, exist_ok=True)
    return path


def use_own_matplotlib_folder() -> None:
    """Keep matplotlib's font cache in Twofold's own folder, not the user's general cache.

    Called before matplotlib is first imported; a folder the user set with
    ``MPLCONFIGDIR`` is respected.  When Twofold's folder cannot be written,
    a private temporary folder (readable by this user only) serves instead.
    """
    if "MPLCONFIGDIR" not in os.environ:
        try:
            folder = app_dir() / "matplotlib"
            folder.mkdir(parents=True, exist_ok=True)
        except OSError:
            import atexit
            import shutil
            import tempfile

            folder = tempfile.mkdtemp(prefix="twofold-matplotlib-")  # mode 0o700
            atexit.register(shutil.rmtree, folder, ignore_errors=True)
        os.environ["MPLCONFIGDIR"] = str(folder)
