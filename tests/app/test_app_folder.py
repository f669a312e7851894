"""The application folder, used as a hospital site would use it.

The folder is built once (``scripts/build_app.py``, PyInstaller, from this
checkout's files) with the network switched off: the build runs in a network
namespace of its own (``unshare -n``), so it cannot fetch anything.  Then each
``twofold`` command runs from the folder in a fresh namespace (``unshare``)
where

* there is no network: the namespace has no interface up, not even loopback,
  so every socket connect fails;
* there is no Python: every Python of this machine (the one running the
  tests, its base installation, the system's ``/usr/bin/python3*`` and
  ``/usr/lib/python3*``) is covered by an empty read-only mount, and ``PATH``
  names only an empty folder; a probe checks that no Python can start;
* the application folder is mounted read-only, which binds root as well
  (file permission bits alone do not);
* the home folder is new (``HOME`` and ``TWOFOLD_HOME`` in a fresh folder).

The fit's JSON is compared with the installed package's (``python -m
twofold.cli``, run by this test's Python on the same files), reports (HTML,
PDF), a workbook, ``rerun --frozen``, ``predict`` and an offscreen
``snapshot`` (whose assessment runs in the process the window starts: a
second copy of the frozen program) must work, ``ldd`` must find every library
the folder's files need, and after every run no file may have appeared or
changed outside the Twofold folder in the new home and the outputs asked for.

Skipped only when PyInstaller is not installed (``pip install -e '.[test]'``
installs it).  ``TWOFOLD_APP_DIST`` may name a folder already built by
``scripts/build_app.py`` (its ``twofold`` folder's parent) to skip the build
while working on these tests.
"""

from __future__ import annotations

import glob
import json
import os
import shutil
import subprocess
import sys
import time
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[2]
SAMPLE = ROOT / "sample_studies" / "readmission_synthetic.csv"
PREDICTORS = ["age", "sex", "prior_admissions", "discharge_destination"]

pytestmark = [
    pytest.mark.slow,
    pytest.mark.skipif(not sys.platform.startswith("linux"), reason="the site checks use Linux namespaces and ldd"),
]

_JAIL = r"""
set -e
PATH=/usr/sbin:/usr/bin:/sbin:/bin
mount --bind "$APP" "$APP"
mount -o remount,bind,ro "$APP" "$APP"
for d in $HIDE_DIRS; do mount -t tmpfs -o ro,size=1k none "$d"; done
for f in $HIDE_FILES; do mount --bind /dev/null "$f"; done
PATH="$EMPTY_PATH"
exec "$@"
"""


def _unshare() -> list[str]:
    """The unshare command that gives a child no network and mounts of its own (fails the test if none works)."""
    for command in (["unshare", "-mn"], ["unshare", "-rmn"]):
        if shutil.which(command[0]) and subprocess.run(command + ["true"], capture_output=True).returncode == 0:
            return command
    pytest.fail("neither 'unshare -mn' nor 'unshare -rmn' works here, so the network cannot be blocked for the "
                "application folder; run the tests where Linux namespaces are allowed")


def _pythons() -> tuple[list[str], list[str]]:
    """Folders and files that hold a Python on this machine."""
    dirs = {os.path.realpath(p) for p in (sys.prefix, sys.base_prefix, sys.exec_prefix)}
    dirs |= {os.path.realpath(p) for p in glob.glob("/usr/lib/python3*") + glob.glob("/usr/local/lib/python3*")}
    files = set()
    for pattern in ("/usr/bin/python*", "/usr/local/bin/python*", "/bin/python*"):
        for p in glob.glob(pattern):
            real = os.path.realpath(p)
            if os.path.isfile(real) and not any(real.startswith(d + os.sep) for d in dirs):
                files.add(real)
    # Never a folder the system itself lives in (a Python installed under /usr is hidden file by file above).
    kept = {"/", "/usr", "/usr/local", "/opt", "/bin", "/lib", "/usr/lib", "/home", "/root", "/tmp"}
    return sorted(d for d in dirs if os.path.isdir(d) and d not in kept), sorted(files)


@pytest.fixture(scope="module")
def app(tmp_path_factory):
    pytest.importorskip("PyInstaller", reason="PyInstaller is not installed (pip install -e '.[test]' brings it)")
    unshare = _unshare()
    given = os.environ.get("TWOFOLD_APP_DIST")
    if given:
        folder = Path(given) / "twofold"
        build_seconds = None
    else:
        dist = tmp_path_factory.mktemp("dist")
        start = time.perf_counter()
        res = subprocess.run(unshare + [sys.executable, str(ROOT / "scripts" / "build_app.py"), "--out", str(dist),
                                        "--work", str(tmp_path_factory.mktemp("build"))],
                             capture_output=True, text=True, timeout=1800)
        build_seconds = time.perf_counter() - start
        assert res.returncode in (0, 1), res.stdout[-3000:] + res.stderr[-3000:]  # 1: a library is missing
        print(res.stdout.strip().splitlines()[0] if res.stdout.strip() else "")
        folder = dist / "twofold"
    assert (folder / "twofold").is_file()
    return {"folder": folder, "unshare": unshare, "build_seconds": build_seconds}


@pytest.fixture(scope="module")
def site(app, tmp_path_factory):
    """A fresh home, an empty PATH and an outputs folder; runs the frozen twofold as the site would."""
    base = tmp_path_factory.mktemp("site")
    home, outputs, temp, empty_bin = base / "home", base / "outputs", base / "tmp", base / "bin"
    for p in (home, outputs, temp, empty_bin):
        p.mkdir()
    twofold_home = home / "Twofold"
    data = base / "data"
    data.mkdir()
    shutil.copy(SAMPLE, data / SAMPLE.name)
    hide_dirs, hide_files = _pythons()
    env = {"PATH": "/usr/bin:/bin", "EMPTY_PATH": str(empty_bin), "HOME": str(home), "TWOFOLD_HOME": str(twofold_home), "TMPDIR": str(temp),
           "LANG": "C.UTF-8", "QT_QPA_PLATFORM": "offscreen", "APP": str(app["folder"]),
           "HIDE_DIRS": " ".join(hide_dirs), "HIDE_FILES": " ".join(hide_files)}

    def run(*args, timeout=300, check=True):
        command = app["unshare"] + ["/bin/sh", "-c", _JAIL, "jail", *map(str, args)]
        res = subprocess.run(command, env=env, cwd=outputs, capture_output=True, text=True, timeout=timeout)
        if check:
            assert res.returncode == 0, f"{args[:3]} exited {res.returncode}: {res.stderr[-2000:]}"
        return res

    def twofold(*args, **kw):
        return run(str(app["folder"] / "twofold"), *args, **kw)

    return {"base": base, "home": home, "twofold_home": twofold_home, "outputs": outputs, "temp": temp,
            "data": data / SAMPLE.name, "run": run, "twofold": twofold, "env": env}


def _files(folder: Path) -> dict:
    return {p: (p.stat().st_size, p.stat().st_mtime_ns) for p in folder.rglob("*") if p.is_file()}


def _numbers(obj, path=""):
    """Every number in a JSON value, by its place."""
    if isinstance(obj, dict):
        for k, v in obj.items():
            yield from _numbers(v, f"{path}.{k}")
    elif isinstance(obj, list):
        for i, v in enumerate(obj):
            yield from _numbers(v, f"{path}[{i}]")
    elif isinstance(obj, (int, float)) and not isinstance(obj, bool):
        yield path, obj


def test_the_jail_has_no_python_no_network_and_a_read_only_folder(app, site):
    for python in [sys.executable, "/usr/bin/python3", "python3"]:
        res = site["run"]("/bin/sh", "-c", f"{python} -c 'print(1)'", check=False)
        assert res.returncode != 0 and res.stdout.strip() != "1", f"{python} still runs in the jail"
    res = site["run"]("/bin/sh", "-c", f"/bin/touch {app['folder']}/written", check=False)
    assert res.returncode != 0 and not (app["folder"] / "written").exists()
    res = site["run"]("/bin/sh", "-c", "/bin/cat /proc/net/dev", check=False)
    up = [ln.split(":")[0].strip() for ln in res.stdout.splitlines()[2:]]
    assert up == ["lo"], res.stdout  # a namespace of its own: only a loopback device, which is down
    res = site["run"]("/bin/sh", "-c", "/bin/cat /sys/class/net/lo/operstate", check=False)
    assert res.stdout.strip() in ("down", "unknown")


def _build_script():
    """scripts/build_app.py as a module."""
    import importlib.util

    spec = importlib.util.spec_from_file_location("build_app", ROOT / "scripts" / "build_app.py")
    module = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(module)
    return module


def test_every_library_is_found(app):
    missing = _build_script().missing_libraries(app["folder"])
    system = subprocess.run(["ldconfig", "-p"], capture_output=True, text=True).stdout
    # A library the folder lacks is allowed only when this machine lacks it too (so it could not be bundled)
    # and only the X11 screen plugin needs it: a Linux desktop has these; offscreen and the command line do not
    # use them.
    for item in missing:
        where, lib = item.split(": ")
        assert lib not in system, f"{lib} is on this machine but not in the folder ({where})"
        assert "Xcb" in where or "xcb" in where, f"{where} needs {lib}, which is nowhere"


def test_fit_reports_workbook_rerun_predict_and_snapshot(app, site):
    twofold, out, data = site["twofold"], site["outputs"], site["data"]
    before_data = _files(data.parent)
    before_app = _files(app["folder"])

    # The fit's numbers: the same as the installed package's on the same file.
    args = ["fit", data, "--outcome", "readmitted_30d", "--predictor", *PREDICTORS, "--smaller", "age", "sex"]
    frozen = json.loads(twofold(*args, "--json", "-").stdout)
    installed = subprocess.run([sys.executable, "-m", "twofold.cli", *map(str, args), "--json", "-"],
                               capture_output=True, text=True, timeout=300, check=True)
    reference = json.loads(installed.stdout)
    ours, theirs = dict(_numbers(frozen)), dict(_numbers(reference))
    assert ours.keys() == theirs.keys() and len(ours) > 100
    for key, value in theirs.items():
        assert ours[key] == pytest.approx(value, rel=1e-9, abs=1e-12), key

    # Reports, the session, the table.
    twofold(*args, "--report", out / "report.html", "--session-out", out / "analysis.twofold.json",
            "--table-out", out / "table.xlsx")
    twofold(*args, "--report", out / "report.pdf")
    assert (out / "report.pdf").read_bytes().startswith(b"%PDF")
    assert "readmitted_30d" in (out / "report.html").read_text(encoding="utf-8")

    # A workbook: the same records give the same fit.
    import openpyxl
    import pandas as pd

    frame = pd.read_csv(data)
    book = openpyxl.Workbook()
    sheet = book.active
    sheet.append(list(frame.columns))
    for row in frame.itertuples(index=False):
        sheet.append([None if pd.isna(v) else (v.item() if hasattr(v, "item") else v) for v in row])
    workbook = site["base"] / "data" / "extract.xlsx"
    book.save(workbook)
    before_data = _files(data.parent)
    from_book = json.loads(twofold("fit", workbook, *args[2:], "--json", "-").stdout)
    assert from_book["rows_used"] == frozen["rows_used"]
    assert [t["estimate"] for t in from_book["terms"]] == pytest.approx([t["estimate"] for t in frozen["terms"]])

    # The saved analysis again: frozen coefficients on the same rows, and one patient's risk.
    rerun = json.loads(twofold("rerun", out / "analysis.twofold.json", "--frozen", "--json", "-").stdout)
    assert rerun["frozen"] is True and rerun["rows_used"] == frozen["rows_used"]
    # The saved coefficients on the rows they were fitted to: the same log-likelihood (algebra).
    assert rerun["log_likelihood"] == pytest.approx(frozen["log_likelihood"], rel=1e-9)
    patient = ["--value", "age=70", "--value", "sex=F", "--value", "prior_admissions=2",
               "--value", "discharge_destination=home", "--json", "-"]
    predicted = json.loads(twofold("predict", out / "analysis.twofold.json", *patient).stdout)
    installed = subprocess.run([sys.executable, "-m", "twofold.cli", "predict", str(out / "analysis.twofold.json"),
                                *patient], capture_output=True, text=True, timeout=300, check=True)
    expected = json.loads(installed.stdout)
    for key in ("probability", "ci_low", "ci_high"):
        assert predicted[key] == pytest.approx(expected[key], rel=1e-9)

    # The window, offscreen, with its assessment in a second copy of the frozen program.
    snap = twofold("snapshot", data, "--outcome", "readmitted_30d", "--predictor", "age", "sex",
                   "--out", out / "window.png", timeout=600)
    assert (out / "window.png").read_bytes().startswith(b"\x89PNG"), snap.stderr
    logs = site["twofold_home"] / "logs"
    assert not logs.exists() or not any(logs.iterdir()), [p.read_text()[-2000:] for p in logs.iterdir()]

    # Nothing written anywhere else: not the data's folder, not the application folder, not the temporary
    # folder, not the home folder outside Twofold's own.
    assert _files(data.parent) == before_data
    assert _files(app["folder"]) == before_app
    assert not any(site["temp"].iterdir()), sorted(site["temp"].rglob("*"))
    outside = [p for p in site["home"].rglob("*") if p.is_file() and site["twofold_home"] not in p.parents]
    assert outside == []
    wanted = {"report.html", "report.pdf", "analysis.twofold.json", "table.xlsx", "window.png"}
    assert {p.name for p in out.iterdir()} == wanted


def _same_numbers(frozen: dict, reference: dict) -> None:
    ours, theirs = dict(_numbers(frozen)), dict(_numbers(reference))
    assert ours.keys() == theirs.keys() and ours
    for key, value in theirs.items():
        assert ours[key] == pytest.approx(value, rel=1e-9, abs=1e-12), key


def test_curves_interactions_bootstrap_decision_curve_adapting_and_units(app, site, tmp_path):
    """The commands that use more of scipy, statsmodels and matplotlib than a plain fit: the same numbers frozen
    and installed (the folder leaves out modules, fonts and ICU's data; a missing one shows up here)."""
    twofold, data = site["twofold"], site["data"]
    out = site["base"] / "more"
    out.mkdir()

    def installed(*args):
        res = subprocess.run([sys.executable, "-m", "twofold.cli", *map(str, args)], capture_output=True, text=True,
                             timeout=600, check=True, env=dict(os.environ, TWOFOLD_HOME=str(tmp_path / "home")))
        return json.loads(res.stdout)

    args = ["fit", data, "--outcome", "readmitted_30d", "--predictor", "age", "sex", "prior_admissions",
            "--spline", "age:4", "--interaction", "sex:prior_admissions", "--profile-ci", "--validate", "20",
            "--seed", "3", "--net-benefit", "0.05:0.5:0.05", "--subgroups", "discharge_destination"]
    frozen = json.loads(twofold(*args, "--json", "-", "--session-out", out / "curve.twofold.json",
                                "--report", out / "curve.pdf", timeout=900).stdout)
    _same_numbers(frozen, installed(*args, "--json", "-"))
    assert frozen["net_benefit"] and (out / "curve.pdf").read_bytes().startswith(b"%PDF")

    firth = ["fit", data, "--outcome", "readmitted_30d", "--predictor", "age", "sex", "--firth"]
    _same_numbers(json.loads(twofold(*firth, "--json", "-").stdout), installed(*firth, "--json", "-"))

    adapt = ["rerun", out / "curve.twofold.json", "--adapt", "--json", "-"]
    _same_numbers(json.loads(twofold(*adapt).stdout), installed(*adapt))
    units = ["units", out / "curve.twofold.json", "--unit", "discharge_destination", "--json", "-"]
    frozen_units = json.loads(twofold(*units).stdout)
    _same_numbers(frozen_units, installed(*units))
    assert len(frozen_units["units"]) == 4


def test_bad_input_exits_2_in_one_sentence(site):
    res = site["twofold"]("fit", site["data"], "--outcome", "no_such_column", "--predictor", "age", check=False)
    assert res.returncode == 2 and len(res.stderr.strip().splitlines()) == 1 and "Traceback" not in res.stderr


def test_build_time_and_size_are_reported(app):
    size = _build_script().folder_size(app["folder"])
    print(f"application folder: {size / 1e6:.0f} MB; build {app['build_seconds'] or 0:.0f} s")
    # What the folder must not carry: the Qt modules and test packages left out on purpose.
    names = {p.name for p in app["folder"].rglob("*")}
    for unwanted in ("libQt6Qml.so.6", "libQt6Quick.so.6", "libQt6WebEngineCore.so.6", "libQt6Multimedia.so.6",
                     "QtQml.abi3.so", "pytest", "hypothesis", "sklearn"):
        assert unwanted not in names
    assert size > 50e6  # a real folder, not an empty shell
    # ICU's data is the empty library the spec compiles (where a C compiler is at hand), and a library two
    # wheels ship as identical copies is there once (the other a link).
    icu = [p for p in app["folder"].rglob("libicudata.so*") if not p.is_symlink()]
    if shutil.which("cc") or shutil.which("gcc"):
        assert icu and all(p.stat().st_size < 100_000 for p in icu)
    copies: dict = {}
    for p in app["folder"].rglob("*.so*"):
        if p.is_file() and not p.is_symlink():
            copies.setdefault((p.name, p.stat().st_size), []).append(p)
    same = [ps for ps in copies.values() if len(ps) > 1 and len({q.read_bytes() for q in ps}) == 1]
    assert same == []
