"""Build a wheelhouse: Twofold and every package it needs, for installing without internet access.

Hospital computers are often offline and users rarely have administrator
rights.  A wheelhouse is a folder of ready-built packages ("wheels"); copied
to such a computer, it lets a user install Twofold into a folder of their own
with Python's standard tools, never touching the network.

On a connected machine
----------------------
For the same kind of computer as this one (same operating system, processor
and Python version)::

    python scripts/build_wheelhouse.py --out wheelhouse

runs ``pip wheel . -w wheelhouse``, which builds Twofold's wheel and fetches
(or builds) wheels of all its runtime dependencies.

For another kind of computer, name its platform tag and Python version::

    python scripts/build_wheelhouse.py --out wheelhouse-windows --platform win_amd64 --python-version 3.12
    python scripts/build_wheelhouse.py --out wheelhouse-mac --platform macosx_11_0_arm64 --python-version 3.12

This builds Twofold's own wheel (pure Python, so it fits every platform) with
``pip wheel --no-deps``, then runs ``pip download --only-binary=:all:
--platform TAG --python-version X.Y`` for the dependencies listed in
pyproject.toml, so only ready-built wheels for that platform are fetched.
Common tags: ``win_amd64``, ``macosx_11_0_arm64``, ``macosx_10_9_x86_64``,
``manylinux2014_x86_64``.  Repeat ``--platform`` to accept several tags.

Either way an INSTALL.txt in the folder tells the user what to type.

Offline
-------
``--no-deps`` builds only Twofold's own wheel, with the build tools already
installed here (``--no-build-isolation``), so it needs no network; the tests
use it.  ``--dry-run`` prints the commands and writes INSTALL.txt only.
"""

from __future__ import annotations

import argparse
import shlex
import subprocess
import sys
import tomllib
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]


def runtime_requirements(source: Path) -> list[str]:
    """The ``[project] dependencies`` of pyproject.toml."""
    with open(source / "pyproject.toml", "rb") as fh:
        return list(tomllib.load(fh)["project"]["dependencies"])


def commands(source: Path, out: Path, platforms: list[str], python_version: str | None, no_deps: bool) -> list:
    """The pip commands that fill the wheelhouse."""
    pip = [sys.executable, "-m", "pip"]
    if no_deps:
        return [pip + ["wheel", "--no-deps", "--no-build-isolation", "--wheel-dir", str(out), str(source)]]
    if not platforms:
        return [pip + ["wheel", "--wheel-dir", str(out), str(source)]]
    download = pip + ["download", "--only-binary=:all:", "--dest", str(out)]
    for tag in platforms:
        download += ["--platform", tag]
    if python_version:
        download += ["--python-version", python_version]
    return [pip + ["wheel", "--no-deps", "--wheel-dir", str(out), str(source)],
            download + runtime_requirements(source)]


def install_text(folder_name: str, platforms: list[str], python_version: str | None, no_deps: bool = False) -> str:
    """INSTALL.txt: how to install from the folder, as a user, with no network."""
    if no_deps:
        platforms, python_version = ["any computer (Twofold only: its dependencies were left out)"], None
    target = ("for " + ", ".join(platforms) + (f" and Python {python_version}" if python_version else "")
              if platforms else "for the same kind of computer and Python version it was built on")
    return f"""Installing Twofold without internet access
==========================================

This folder ("{folder_name}") holds Twofold and every package it needs, built
{target}.  Installing needs no internet connection and no administrator
rights: everything goes into a folder of your own.

1. Python 3.11 or newer must be installed.  If it is not, install it for your
   user only (on Windows, the python.org installer with "Install for all users"
   left unticked needs no administrator rights).

2. Open a terminal (Windows: Command Prompt) in the folder that CONTAINS the
   "{folder_name}" folder, and type the lines for your system.

   Windows:

       py -m venv twofold-env
       twofold-env\\Scripts\\python -m pip install --no-index --find-links {folder_name} twofold

   macOS and Linux:

       python3 -m venv twofold-env
       twofold-env/bin/python -m pip install --no-index --find-links {folder_name} twofold

   "--no-index" tells pip not to look on the internet; "--find-links" points it
   at this folder.  The new "twofold-env" folder holds the whole installation;
   deleting it uninstalls Twofold.

3. Start Twofold:

       Windows:          twofold-env\\Scripts\\twofold
       macOS and Linux:  twofold-env/bin/twofold

   or, without the window, for example:

       twofold-env/bin/twofold fit data.csv --outcome died --predictor age --json -

Twofold reads your data files and never changes them, and it never uses the
network.
"""


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--out", type=Path, default=Path("wheelhouse"), help="the folder to fill (default: wheelhouse)")
    parser.add_argument("--platform", action="append", default=[], metavar="TAG",
                        help="build for another platform, e.g. win_amd64 (repeatable)")
    parser.add_argument("--python-version", metavar="X.Y", help="the Python version of the other platform, e.g. 3.12")
    parser.add_argument("--source", type=Path, default=ROOT, help="the Twofold source folder (default: this repository)")
    parser.add_argument("--no-deps", action="store_true", help="only Twofold's own wheel (needs no network)")
    parser.add_argument("--dry-run", action="store_true", help="print the commands and write INSTALL.txt only")
    args = parser.parse_args(argv)
    if args.python_version and not args.platform:
        parser.error("--python-version needs --platform (a wheelhouse for this computer uses this Python)")
    out = args.out.resolve()
    out.mkdir(parents=True, exist_ok=True)
    for cmd in commands(args.source.resolve(), out, args.platform, args.python_version, args.no_deps):
        print("+ " + " ".join(shlex.quote(str(c)) for c in cmd), flush=True)
        if not args.dry_run:
            done = subprocess.run(cmd)
            if done.returncode:
                print(f"build_wheelhouse: the command above failed (exit {done.returncode}); "
                      "building the full wheelhouse needs an internet connection.", file=sys.stderr)
                return done.returncode
    (out / "INSTALL.txt").write_text(install_text(out.name, args.platform, args.python_version, args.no_deps), encoding="utf-8")
    wheels = sorted(p.name for p in out.glob("*.whl"))
    print(f"{len(wheels)} wheel{'s' if len(wheels) != 1 else ''} in {out}; instructions in {out / 'INSTALL.txt'}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
