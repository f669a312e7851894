"""Build Twofold's application folder: the program and everything it needs, no Python required.

    python scripts/build_app.py [--out DIST] [--work BUILD]

runs PyInstaller (one-folder mode) on the committed spec ``scripts/twofold_app.spec``
with the packages installed in this Python (``pip install -e '.[test]'`` brings
PyInstaller), offline: nothing is fetched.  The result is ``DIST/twofold/``: the
``twofold`` executable (``twofold.exe`` and ``twofold-window.exe`` on Windows) and
its ``_internal`` folder.  Copy the whole folder; the executable does not run
without ``_internal`` beside it.

After the build it prints the folder's size and the build time, and on Linux it
checks with ``ldd`` that every library the folder's programs and libraries need
is found (bundled, or part of the operating system); it exits 1 if one is not.

On Linux the spec also compiles an empty ICU data library with the C compiler
(``cc``), if there is one, in place of ICU's 32 MB of locale data (see the spec).

Build on the kind of computer the folder is for: a Windows folder on Windows
(the README has the steps for hospital IT), a Linux folder on Linux.
"""

from __future__ import annotations

import argparse
import os
import shutil
import subprocess
import sys
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
SPEC = ROOT / "scripts" / "twofold_app.spec"
NAME = "twofold"


def folder_size(folder: Path) -> int:
    """Bytes of every file under ``folder`` (unpacked size)."""
    return sum(p.stat().st_size for p in folder.rglob("*") if p.is_file() and not p.is_symlink())


def executable(folder: Path) -> Path:
    """The ``twofold`` program in an application folder."""
    return folder / (f"{NAME}.exe" if sys.platform.startswith("win") else NAME)


def missing_libraries(folder: Path) -> list[str]:
    """Libraries ``ldd`` cannot find for the folder's program and its shared libraries (Linux only).

    Each item reads ``FILE: LIBRARY``.  Libraries are looked up as the program
    would: the bundled folder first (``LD_LIBRARY_PATH`` set to it, as the
    program's own loader does), then the operating system.
    """
    if not sys.platform.startswith("linux") or shutil.which("ldd") is None:
        return []
    internal = folder / "_internal"
    dirs = sorted({str(p.parent) for p in internal.rglob("*.so*")} | {str(internal)})
    env = dict(os.environ, LD_LIBRARY_PATH=os.pathsep.join(dirs))
    missing = []
    candidates = [executable(folder)] + sorted(p for p in internal.rglob("*") if p.is_file() and ".so" in p.name)
    for path in candidates:
        out = subprocess.run(["ldd", str(path)], capture_output=True, text=True, env=env, check=False)
        for line in out.stdout.splitlines():
            if "not found" in line:
                missing.append(f"{path.relative_to(folder)}: {line.split('=>')[0].strip()}")
    return missing


def build(out: Path, work: Path, quiet: bool = True) -> Path:
    """Run PyInstaller on the spec; returns the application folder."""
    try:
        import PyInstaller  # noqa: F401
    except ImportError:
        raise SystemExit("build_app: PyInstaller is not installed here; install the test tools with "
                         "python -m pip install -e '.[test]' (or pip install pyinstaller) and try again.") from None
    command = [sys.executable, "-m", "PyInstaller", "--noconfirm", "--clean", "--distpath", str(out),
               "--workpath", str(work), str(SPEC)]
    if quiet:
        command[3:3] = ["--log-level", "WARN"]
    # Offline by construction: PyInstaller reads installed packages only; keep pip from being asked.
    env = dict(os.environ, PIP_NO_INDEX="1", PYTHONNOUSERSITE="1")
    env.pop("PYTHONPATH", None)
    env["PYTHONPATH"] = str(ROOT / "src")  # this checkout's Twofold, whatever is installed
    subprocess.run(command, check=True, env=env, cwd=ROOT)
    return out / NAME


def main(argv: list[str] | None = None) -> int:
    p = argparse.ArgumentParser(description="Build Twofold's application folder with PyInstaller.")
    p.add_argument("--out", type=Path, default=ROOT / "dist", help="where the folder is made (default: dist)")
    p.add_argument("--work", type=Path, default=ROOT / "build" / "pyinstaller",
                   help="PyInstaller's working folder (default: build/pyinstaller)")
    p.add_argument("--verbose", action="store_true", help="show PyInstaller's full log")
    args = p.parse_args(argv)
    start = time.perf_counter()
    folder = build(args.out.resolve(), args.work.resolve(), quiet=not args.verbose)
    seconds = time.perf_counter() - start
    size = folder_size(folder)
    print(f"built {folder} in {seconds:.0f} s; {size / 1e6:.0f} MB unpacked "
          f"({sum(1 for f in folder.rglob('*') if f.is_file())} files)")
    missing = missing_libraries(folder)
    for item in missing:
        print(f"missing library: {item}", file=sys.stderr)
    return 1 if missing else 0


if __name__ == "__main__":
    sys.exit(main())
