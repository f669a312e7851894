"""Twofold's own folders: settings, autosave and logs, and nowhere else.

``TWOFOLD_HOME`` overrides the location (tests use it); otherwise the
platform's usual per-user application-data folder is used.
"""

from __future__ import annotations

import os
import sys
from pathlib import Path


def app_dir() -> Path:
    """The per-user folder Twofold writes its own files to (created on demand)."""
    override = os.environ.get("TWOFOLD_HOME")
    if override:
        base = Path(override)
    elif sys.platform.startswith("win"):
        base = Path(os.environ.get("APPDATA", Path.home() / "AppData" / "Roaming")) / "Twofold"
    elif sys.platform == "darwin":
        base = Path.home() / "Library" / "Application Support" / "Twofold"
    else:
        base = Path(os.environ.get("XDG_DATA_HOME", Path.home() / ".local" / "share")) / "twofold"
    base.mkdir(parents=True, exist_ok=True)
    return base


def log_dir() -> Path:
    """Where unexpected errors are logged."""
    path = app_dir() / "logs"
    path.mkdir(parents=True, exist_ok=True)
    return path


def use_own_matplotlib_folder() -> None:
    """Keep matplotlib's font cache in Twofold's own folder, not the user's general cache.

    Called before matplotlib is first imported; a folder the user set with
    ``MPLCONFIGDIR`` is respected.
    """
    if "MPLCONFIGDIR" not in os.environ:
        folder = app_dir() / "matplotlib"
        folder.mkdir(parents=True, exist_ok=True)
        os.environ["MPLCONFIGDIR"] = str(folder)
