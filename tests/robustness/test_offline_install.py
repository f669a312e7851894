"""Installing from a wheelhouse with no network, and the wheelhouse script's instructions.

The full wheelhouse (numpy, scipy, ...) can only be built on a connected
machine, so the install test builds the wheel of Twofold alone and borrows the
dependencies from the environment running the tests: a fresh virtual
environment (``--without-pip``) gets a ``.pth`` file naming this environment's
site-packages, and pip installs Twofold's wheel into it with no index, proxies
pointing at a closed local port, and the network guard of
:mod:`robust_support` around it.  Then ``twofold fit`` must run from the new
environment's own copy.

Building needs setuptools >= 68 and wheel, which the test extras install
(or the interpreter named by ``TWOFOLD_BUILD_PYTHON``); ``TWOFOLD_WHEELHOUSE``
may name a folder that already holds a Twofold wheel instead.
"""

from __future__ import annotations

import json
import os
import shutil
import subprocess
import sys
import sysconfig
from pathlib import Path

import pytest

from robust_support import run_guarded

ROOT = Path(__file__).resolve().parents[2]
SCRIPT = ROOT / "scripts" / "build_wheelhouse.py"
SAMPLE = ROOT / "sample_studies" / "readmission_synthetic.csv"


def _cached_wheelhouse() -> Path | None:
    folder = os.environ.get("TWOFOLD_WHEELHOUSE")
    if folder and list(Path(folder).glob("twofold-*.whl")):
        return Path(folder)
    return None


def _build_python() -> str | None:
    """An interpreter that can build the wheel without the network, if there is one."""
    candidate = os.environ.get("TWOFOLD_BUILD_PYTHON", sys.executable)
    probe = ("import setuptools, wheel, sys; "
             "sys.exit(0 if int(setuptools.__version__.split('.')[0]) >= 68 else 1)")
    ok = subprocess.run([candidate, "-c", probe], capture_output=True).returncode == 0
    return candidate if ok else None


def test_dry_run_prints_the_commands_and_writes_the_instructions(tmp_path):
    out = tmp_path / "wheelhouse"
    res = subprocess.run([sys.executable, SCRIPT, "--out", out, "--platform", "win_amd64",
                          "--python-version", "3.12", "--dry-run"], capture_output=True, text=True, timeout=60)
    assert res.returncode == 0, res.stderr
    lines = [ln for ln in res.stdout.splitlines() if ln.startswith("+ ")]
    assert "pip wheel --no-deps" in lines[0]
    assert "pip download --only-binary=:all:" in lines[1] and "--platform win_amd64" in lines[1]
    assert "--python-version 3.12" in lines[1] and "numpy>=1.26" in lines[1]
    text = (out / "INSTALL.txt").read_text(encoding="utf-8")
    assert "python3 -m venv twofold-env" in text
    assert "twofold-env/bin/python -m pip install --no-index --find-links wheelhouse twofold" in text
    assert "twofold-env\\Scripts\\python -m pip install --no-index --find-links wheelhouse twofold" in text
    assert "administrator" in text
    assert not list(out.glob("*.whl"))  # a dry run builds nothing
    bad = subprocess.run([sys.executable, SCRIPT, "--out", out, "--python-version", "3.12", "--dry-run"],
                         capture_output=True, text=True, timeout=60)
    assert bad.returncode == 2 and "--python-version needs --platform" in bad.stderr


@pytest.mark.slow
def test_install_from_a_wheelhouse_with_no_network(tmp_path):
    wheelhouse = _cached_wheelhouse()
    if wheelhouse is None:
        builder = _build_python()
        if builder is None:
            pytest.skip("building offline needs setuptools>=68 and wheel here (or TWOFOLD_BUILD_PYTHON naming "
                        "an interpreter that has them)")
        # Build from a copy, so the repository gains no build folders.
        source = tmp_path / "source"
        source.mkdir()
        for name in ("pyproject.toml", "README.md"):
            shutil.copy(ROOT / name, source / name)
        shutil.copytree(ROOT / "src", source / "src",
                        ignore=shutil.ignore_patterns("__pycache__", "*.egg-info"))
        wheelhouse = tmp_path / "wheelhouse"
        build = subprocess.run([builder, SCRIPT, "--out", wheelhouse, "--no-deps", "--source", source],
                               capture_output=True, text=True, timeout=600)
        assert build.returncode == 0, build.stdout + build.stderr
        assert (wheelhouse / "INSTALL.txt").exists()
    assert list(wheelhouse.glob("twofold-*-py3-none-any.whl"))

    env_dir = tmp_path / "twofold-env"
    subprocess.run([sys.executable, "-m", "venv", "--without-pip", env_dir], check=True, timeout=120)
    python = env_dir / ("Scripts/python.exe" if os.name == "nt" else "bin/python")
    site = subprocess.run([python, "-c", "import sysconfig; print(sysconfig.get_paths()['purelib'])"],
                          capture_output=True, text=True, check=True).stdout.strip()
    # The dependencies (and pip itself) come from the environment running the tests.
    here = dict.fromkeys([sysconfig.get_paths()["purelib"], sysconfig.get_paths()["platlib"]])
    Path(site, "borrowed-dependencies.pth").write_text("\n".join(here) + "\n", encoding="utf-8")

    offline = {**os.environ, "PIP_NO_INDEX": "1", "PIP_CONFIG_FILE": os.devnull,
               "PIP_DISABLE_PIP_VERSION_CHECK": "1", "http_proxy": "http://127.0.0.1:9",
               "https_proxy": "http://127.0.0.1:9", "HTTP_PROXY": "http://127.0.0.1:9",
               "HTTPS_PROXY": "http://127.0.0.1:9", "PYTHONNOUSERSITE": "1"}
    offline.pop("PIP_INDEX_URL", None)
    offline.pop("PIP_EXTRA_INDEX_URL", None)
    install = run_guarded(["install", "--no-index", "--find-links", wheelhouse, "--no-deps", "--ignore-installed",
                           "twofold"], module="pip", python=str(python), env=offline, timeout=600)
    assert install.returncode == 0, install.stdout + install.stderr
    assert install.network == [], install.network

    where = subprocess.run([python, "-c", "import twofold; print(twofold.__file__)"], capture_output=True,
                           text=True, env=offline, check=True).stdout.strip()
    assert Path(where).resolve().is_relative_to(env_dir.resolve())  # its own copy, not the source tree
    command = env_dir / ("Scripts/twofold.exe" if os.name == "nt" else "bin/twofold")
    fit = subprocess.run([command, "fit", SAMPLE, "--outcome", "readmitted_30d", "--predictor", "age",
                          "--json", "-"], capture_output=True, text=True, env=offline, timeout=600)
    assert fit.returncode == 0, fit.stderr
    assert json.loads(fit.stdout)["rows_read"] == 5000
