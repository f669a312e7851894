"""How long a refit takes after a predictor is ticked, beside statsmodels and a numpy floor.

Usage: python benchmarks/refit.py --rows N [--repeats R] [--seed S]

On N synthetic rows with 20 parameters (intercept, 16 numeric predictors and
a 4-level factor), three timings are alternated in one run:

* core: Twofold's refit after ticking the last predictor on: the design,
  the rank check, a Newton fit warm-started from the previous model, and every
  statistic the results show (Wald z and p, odds ratios and intervals, the
  joint factor test, the overall G test, the nested test against the previous
  model, events per parameter, the separation checks);
* statsmodels: ``Logit(y, X).fit()`` with its defaults on the same matrix, then
  its standard errors, p-values, intervals and the likelihood-ratio test
  against the constant model (which refits the constant-only model);
* floor: a plain numpy Newton fit from zero with its covariance matrix.

The last line printed is one JSON object {rows, params, core_ms,
statsmodels_ms, floor_ms} (medians).
"""

from __future__ import annotations

import argparse
import json
import statistics
import sys
import time
import warnings
from pathlib import Path

import numpy as np
import pandas as pd

sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "src"))

from twofold.core.data.io import LoadedTable  # noqa: E402
from twofold.core.models.fit import nested_test  # noqa: E402
from twofold.core.models.study import Study  # noqa: E402


def synthetic(rows: int, seed: int) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    data = {f"x{i:02d}": rng.normal(loc=i, scale=1 + i / 4, size=rows) for i in range(16)}
    data["ward"] = rng.choice(["north", "south", "east", "west"], size=rows, p=[0.4, 0.3, 0.2, 0.1])
    lp = -1.5 + sum(0.08 * (data[f"x{i:02d}"] - i) / (1 + i / 4) for i in range(16))
    lp = lp + np.select([data["ward"] == "south", data["ward"] == "east"], [0.3, -0.2], 0.0)
    data["y"] = (rng.random(rows) < 1 / (1 + np.exp(-lp))).astype(int)
    return pd.DataFrame(data)


def statistics_of(fit, previous):
    """Touch every figure the results show, so lazy ones are paid for."""
    fit.coefficient_rows
    fit.term_tests
    fit.overall
    fit.events_per_parameter
    return nested_test(previous, fit)


def time_core(study, predictors, rows, previous):
    study._aliased.clear()  # a tick makes a new design: its rank check is paid each time
    t0 = time.perf_counter()
    fit = study.fit(predictors, rows=rows, start=previous)
    statistics_of(fit, previous)
    return (time.perf_counter() - t0) * 1e3, fit


def time_statsmodels(X, y):
    from statsmodels.discrete.discrete_model import Logit

    t0 = time.perf_counter()
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        res = Logit(y, X).fit(disp=0)
        res.bse, res.pvalues, res.conf_int(), res.llr, res.llr_pvalue, res.aic, res.bic
    return (time.perf_counter() - t0) * 1e3, res


def time_floor(X, y, tol=1e-8, maxiter=35):
    t0 = time.perf_counter()
    b = np.zeros(X.shape[1])
    for _ in range(maxiter):
        p = 1.0 / (1.0 + np.exp(-(X @ b)))
        h = (X * (p * (1 - p))[:, None]).T @ X
        step = np.linalg.solve(h, X.T @ (y - p))
        b += step
        if np.max(np.abs(step)) < tol:
            break
    np.linalg.inv(h)
    return (time.perf_counter() - t0) * 1e3, b


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--rows", type=int, default=20_000)
    ap.add_argument("--repeats", type=int, default=None, help="alternated rounds (default by size)")
    ap.add_argument("--seed", type=int, default=20261201)
    args = ap.parse_args(argv)
    repeats = args.repeats or (15 if args.rows <= 100_000 else 5)

    frame = synthetic(args.rows, args.seed)
    study = Study(LoadedTable(frame, Path("synthetic.csv")))
    study.set_outcome("y")
    predictors = [c for c in frame.columns if c != "y"]
    rows = study.complete_rows(predictors)
    previous = study.fit(predictors[:-2] + predictors[-1:], rows=rows)  # without the last numeric column
    full = study.design(predictors, rows)
    X, y = full.X, full.y

    core, sm_, floor = [], [], []
    check = None
    for r in range(repeats + 1):  # the first round warms caches and is not counted
        order = [0, 1, 2][r % 3:] + [0, 1, 2][: r % 3]
        for which in order:
            if which == 0:
                ms, fit = time_core(study, predictors, rows, previous)
                (core if r else []).append(ms)
                check = fit
            elif which == 1:
                ms, res = time_statsmodels(X, y)
                (sm_ if r else []).append(ms)
            else:
                ms, b = time_floor(X, y)
                (floor if r else []).append(ms)
    # The three must agree, or the timings compare different work.
    np.testing.assert_allclose(check.params, res.params, rtol=1e-6, atol=1e-8)
    np.testing.assert_allclose(check.params, b, rtol=1e-6, atol=1e-8)
    out = {"rows": args.rows, "params": int(X.shape[1]),
           "core_ms": round(statistics.median(core), 1),
           "statsmodels_ms": round(statistics.median(sm_), 1),
           "floor_ms": round(statistics.median(floor), 1)}
    print(f"core iterations from the warm start: {check.iterations}; repeats: {repeats}", file=sys.stderr)
    print(json.dumps(out))
    return 0


if __name__ == "__main__":
    sys.exit(main())
