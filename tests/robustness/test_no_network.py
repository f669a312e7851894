"""Nothing lost, nothing leaked: the data file is never written, no network is used,
and files appear only where the user asked for them.

The command line runs in a child process under the guard of
:mod:`robust_support` (socket functions replaced and an audit hook in place,
every attempt logged).  To guard another path, add a case that calls
``run_guarded(argv, module=...)`` or ``run_guarded(code=...)`` and asserts
``result.network == []``.
"""

from __future__ import annotations

import hashlib
import importlib.util
import json
import os
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from robust_support import changed_files, run_guarded, snapshot
from twofold.core.data.io import read_table


def sha256(path: Path) -> str:
    return hashlib.sha256(path.read_bytes()).hexdigest()


@pytest.fixture(scope="module")
def data_dir(tmp_path_factory):
    """A CSV and an XLSX of the same records, alone in their folder."""
    folder = tmp_path_factory.mktemp("data")
    rng = np.random.default_rng(2024)
    n = 400
    age = np.round(rng.uniform(25, 90, n))
    dest = rng.choice(["home", "care home", "other hospital"], n, p=[0.6, 0.25, 0.15])
    alone = rng.choice(["yes", "no"], n)
    eta = -3.5 + 0.04 * age + np.where(dest == "care home", 0.7, 0.0) + np.where(alone == "yes", 0.4, 0.0)
    died = (rng.uniform(size=n) < 1 / (1 + np.exp(-eta))).astype(int)
    frame = pd.DataFrame({"age": age, "destination": dest, "alone": alone, "died": died})
    frame.to_csv(folder / "records.csv", index=False)
    with pd.ExcelWriter(folder / "records.xlsx", engine="openpyxl") as w:
        pd.DataFrame({"about": ["synthetic records"]}).to_excel(w, sheet_name="readme", index=False)
        frame.to_excel(w, sheet_name="records", index=False)
    return folder


def isolated_env(root: Path) -> tuple[dict, list]:
    """Environment with every per-user and temporary folder inside ``root``; the folders to watch."""
    folders = {name: root / name for name in ("home", "twofold_home", "tmp", "cwd", "out", "xdg")}
    for f in folders.values():
        f.mkdir(parents=True, exist_ok=True)
    env = dict(os.environ)
    env.update({
        "HOME": str(folders["home"]), "USERPROFILE": str(folders["home"]),
        "TWOFOLD_HOME": str(folders["twofold_home"]),
        "TMPDIR": str(folders["tmp"]), "TEMP": str(folders["tmp"]), "TMP": str(folders["tmp"]),
        "XDG_CONFIG_HOME": str(folders["xdg"] / "config"), "XDG_CACHE_HOME": str(folders["xdg"] / "cache"),
        "XDG_DATA_HOME": str(folders["xdg"] / "data"),
        "QT_QPA_PLATFORM": "offscreen",
    })
    env.pop("MPLCONFIGDIR", None)
    return env, folders


def test_the_guard_sees_and_blocks_every_kind_of_attempt():
    """The guard itself: attempts through the module functions and through _socket are logged and refused."""
    code = (
        "import socket, _socket\n"
        "for attempt in (lambda: socket.create_connection(('127.0.0.1', 9), timeout=1),\n"
        "                lambda: socket.getaddrinfo('example.org', 443),\n"
        "                lambda: socket.socket().connect(('127.0.0.1', 9)),\n"
        "                lambda: _socket.socket().connect(('127.0.0.1', 9)),\n"
        "                lambda: socket.socket(socket.AF_INET, socket.SOCK_DGRAM).sendto(b'x', ('127.0.0.1', 9))):\n"
        "    try:\n"
        "        attempt()\n"
        "    except OSError:\n"
        "        pass\n"
        "    else:\n"
        "        raise SystemExit('an attempt got through')\n"
    )
    res = run_guarded(code=code)
    assert res.returncode == 0, res.stderr
    kinds = [r["kind"] for r in res.network]
    assert "create_connection" in kinds and "getaddrinfo" in kinds and "connect" in kinds
    assert "audit:socket.connect" in kinds  # _socket bypasses the patched methods, not the audit hook
    assert "sendto" in kinds


def test_fit_with_every_option_uses_no_network_and_writes_only_what_was_asked(data_dir, tmp_path):
    """Every option of ``twofold fit``, in two runs because --firth cannot yet be combined with --spline."""
    from concurrent.futures import ThreadPoolExecutor

    env, dirs = isolated_env(tmp_path)
    data = data_dir / "records.csv"
    before_hash = sha256(data)
    out = dirs["out"]
    common = ["fit", data, "--outcome", "died", "--event", "1", "--predictor", "age", "destination", "alone",
              "--smaller", "age", "--reference", "destination=home", "--profile-ci", "--threshold", "0.2"]
    runs = {
        "a": common + ["--spline", "age:3", "--interaction", "age:alone", "--validate", "5", "--seed", "1",
                       "--json", out / "a.json", "--session-out", out / "a.twofold",
                       "--report", out / "a.html", "--table-out", out / "a.csv"],
        "b": common + ["--firth", "--json", out / "b.json", "--table-out", out / "b.xlsx"],
    }
    asked = {out / n for n in ("a.json", "a.twofold", "a.html", "a.csv", "b.json", "b.xlsx")}
    before = snapshot(data_dir, *dirs.values())
    with ThreadPoolExecutor(2) as pool:
        results = dict(zip(runs, pool.map(lambda argv: run_guarded(argv, env=env, cwd=dirs["cwd"]), runs.values())))
    for res in results.values():
        assert res.returncode == 0, res.stderr
        assert res.network == [], res.network
        # matplotlib lists the machine's fonts with fc-list the first time it builds its
        # font cache (a local program, no network); nothing else may be started.
        others = [p for p in res.processes if "fc-list" not in p["detail"]]
        assert others == [], others
    assert sha256(data) == before_hash
    # Besides what was asked, only Twofold's own folder may gain files (matplotlib's font cache).
    changed = changed_files(before, snapshot(data_dir, *dirs.values()))
    assert {p for p in changed if dirs["twofold_home"] not in p.parents} == asked
    assert json.loads((out / "a.json").read_text(encoding="utf-8"))["rows_used"] == 400
    assert json.loads((out / "b.json").read_text(encoding="utf-8"))["method"] != \
        json.loads((out / "a.json").read_text(encoding="utf-8"))["method"]


def test_plain_fit_writes_only_its_json(data_dir, tmp_path):
    env, dirs = isolated_env(tmp_path)
    target = dirs["out"] / "fit.json"
    before = snapshot(data_dir, *dirs.values())
    res = run_guarded(["fit", data_dir / "records.csv", "--outcome", "died", "--predictor", "age", "alone",
                       "--json", target], env=env, cwd=dirs["cwd"])
    assert res.returncode == 0, res.stderr
    assert res.network == [] and res.processes == []
    assert changed_files(before, snapshot(data_dir, *dirs.values())) == {target}


def test_a_failing_fit_writes_nothing(data_dir, tmp_path):
    """A user error (unknown column) leaves no log, no partial output, and one line on stderr."""
    env, dirs = isolated_env(tmp_path)
    before = snapshot(data_dir, *dirs.values())
    res = run_guarded(["fit", data_dir / "records.csv", "--outcome", "died", "--predictor", "agee",
                       "--json", dirs["out"] / "fit.json"], env=env, cwd=dirs["cwd"])
    assert res.returncode == 2 and len(res.stderr.strip().splitlines()) == 1
    assert "did you mean 'age'" in res.stderr
    assert res.network == []
    assert changed_files(before, snapshot(data_dir, *dirs.values())) == set()


def test_workbooks_are_only_read(data_dir, tmp_path):
    book = data_dir / "records.xlsx"
    before_hash = sha256(book)
    table = read_table(book, sheet="records")
    assert len(table.frame) == 400
    env, dirs = isolated_env(tmp_path)
    res = run_guarded(["fit", book, "--sheet", "records", "--outcome", "died", "--predictor", "age",
                       "--json", dirs["out"] / "x.json"], env=env, cwd=dirs["cwd"])
    assert res.returncode == 0, res.stderr
    assert res.network == []
    assert sha256(book) == before_hash


@pytest.mark.skipif(importlib.util.find_spec("PySide6") is None, reason="PySide6 is not installed")
def test_importing_the_window_uses_no_network(tmp_path):
    env, dirs = isolated_env(tmp_path)
    res = run_guarded(code="import twofold.gui.app", env=env, cwd=dirs["cwd"])
    assert res.returncode == 0, res.stderr
    assert res.network == [], res.network
