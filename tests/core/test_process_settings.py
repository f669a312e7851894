"""The window's processes keep one linear-algebra thread and set the loaded libraries aside from the collector;
fits limit BLAS around themselves and give it back.

Read through threadpoolctl and the gc module (outside the project), in a fresh process each, so the test
run's own libraries are left as they were.
"""

from __future__ import annotations

import json
import subprocess
import sys

PROBE = r"""
import json, threadpoolctl
import numpy as np
from twofold.core.models.fit import keep_one_blas_thread, one_blas_thread

def blas():
    return [i["num_threads"] for i in threadpoolctl.threadpool_info() if i["user_api"] == "blas"]

out = {"start": blas()}
with one_blas_thread():
    out["in_fit"] = blas()
out["after_fit"] = blas()
if KEEP:
    keep_one_blas_thread()
    keep_one_blas_thread()  # twice is the same as once
    out["kept"] = blas()
    with one_blas_thread():
        pass
    out["kept_after_fit"] = blas()
print(json.dumps(out))
"""


def _run(keep: bool) -> dict:
    env_code = PROBE.replace("KEEP", "True" if keep else "False")
    done = subprocess.run([sys.executable, "-c", env_code], capture_output=True, text=True, timeout=120, check=True)
    return json.loads(done.stdout.strip().splitlines()[-1])


def test_a_fit_limits_blas_to_one_thread_and_gives_the_rest_back():
    out = _run(keep=False)
    assert out["start"], "threadpoolctl should find numpy's BLAS"
    assert out["in_fit"] == [1] * len(out["start"])
    assert out["after_fit"] == out["start"]


def test_the_window_keeps_one_blas_thread_for_good():
    out = _run(keep=True)
    assert out["kept"] == [1] * len(out["start"])
    assert out["kept_after_fit"] == out["kept"]  # a fit's own limit ends without lifting the window's


def test_settling_leaves_the_libraries_out_of_the_collectors_passes():
    code = ("import gc, json\nimport statsmodels.api, pandas\nfrom twofold.core.models.fit import settle_collector\n"
            "before = gc.get_freeze_count()\nsettle_collector()\nafter = gc.get_freeze_count()\n"
            "x = []\nx.append(x)\ndel x\nprint(json.dumps([before, after, gc.collect()]))")
    done = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, timeout=120, check=True)
    before, after, collected = json.loads(done.stdout.strip().splitlines()[-1])
    assert before == 0 and after > 10_000  # the loaded libraries' objects, set aside
    assert collected >= 1  # what is made afterwards is still collected
