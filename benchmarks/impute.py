"""How long multiple imputation takes, and a tick with imputation on.

Usage: python benchmarks/impute.py [--rows N] [--tick-rows N ...] [--m M] [--repeats R]

1. Making M = 20 imputed copies of N = 5,000 rows x 10 columns (six numbers,
   two two-valued columns and two grouped ones with 3 and 4 groups) with 10%
   of the cells missing (missing at random given the outcome and the first
   column): predictive mean matching, logistic and multinomial draws, 5
   cycles per copy.
2. A tick with imputation on at each ``--tick-rows``: the copies already made
   (as the window keeps them), the model with one more predictor (10
   parameters) fitted on all M copies, warm-started from the previous model's
   fits, pooled by Rubin's rules, its pooled G test (D3), the D1 test of the
   grouped predictor and the nested D3 test against the previous model.  The
   new predictor's encodings are made on every copy inside the timing, as in
   the window.

The last line printed is one JSON object with the medians.
"""

from __future__ import annotations

import argparse
import json
import statistics
import sys
import time
from pathlib import Path

import numpy as np
import pandas as pd

sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "src"))

from twofold.core.data.io import LoadedTable  # noqa: E402
from twofold.core.models.imputation import impute  # noqa: E402
from twofold.core.models.pooling import ImputedCopies, pooled_nested  # noqa: E402
from twofold.core.models.study import Study  # noqa: E402


def synthetic(n: int, seed: int, missing_columns: int = 10) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    base = rng.standard_normal((n, 6)) @ np.linalg.cholesky(0.3 * np.ones((6, 6)) + 0.7 * np.eye(6)).T
    frame = pd.DataFrame(base, columns=[f"x{i}" for i in range(1, 7)])
    frame["b1"] = np.where(rng.random(n) < 1 / (1 + np.exp(-base[:, 0])), "yes", "no")
    frame["b2"] = np.where(rng.random(n) < 0.3, "yes", "no")
    frame["g3"] = rng.choice(["A", "B", "C"], n, p=[0.5, 0.3, 0.2])
    frame["g4"] = rng.choice(["P", "Q", "R", "S"], n)
    lp = -1.2 + base[:, :6] @ np.array([0.5, -0.3, 0.2, 0.1, 0.0, 0.25]) + 0.4 * (frame["b1"] == "yes") \
        + np.select([frame["g3"] == "B", frame["g3"] == "C"], [0.3, 0.6], 0)
    y = (rng.random(n) < 1 / (1 + np.exp(-lp))).astype(int)
    columns = list(frame.columns)[:missing_columns]
    for col in columns:
        p = 0.08 + 0.08 * y * (base[:, 0] > 0)  # about 10% overall, more among events with high x1
        frame.loc[rng.random(n) < p, col] = np.nan
    frame["y"] = y
    return frame


def study_of(frame: pd.DataFrame) -> Study:
    st = Study(LoadedTable(frame, Path("benchmark.csv")))
    st.set_outcome("y")
    return st


COLUMNS = ["x1", "x2", "x3", "x4", "x5", "x6", "b1", "b2", "g3", "g4"]
#: 8 predictors = 10 parameters with the intercept (g3 gives two); the tick adds x6.
TICK = ["x1", "x2", "x3", "x4", "x5", "b1", "g3", "x6"]


def time_imputation(rows: int, m: int, repeats: int) -> tuple[list[float], float]:
    frame = synthetic(rows, 1)
    share = float(frame[COLUMNS].isna().to_numpy().mean())
    st = study_of(frame)
    times = []
    for r in range(repeats):
        t0 = time.perf_counter()
        impute(st, COLUMNS, m=m, seed=r)
        times.append(time.perf_counter() - t0)
    return times, share


def time_tick(rows: int, m: int, repeats: int) -> list[float]:
    # At large sizes the copies are made with two incomplete columns (setup, not timed): a tick's cost does not
    # depend on how the copies were made.
    frame = synthetic(rows, 2, missing_columns=10 if rows <= 20_000 else 2)
    st = study_of(frame)
    made = impute(st, TICK, m=m, seed=1)
    times = []
    for _ in range(repeats):
        copies = ImputedCopies(st, made)
        previous = copies.fit(TICK[:-1])
        previous.overall  # noqa: B018  (shown before the tick)
        t0 = time.perf_counter()
        fit = copies.fit(TICK, start=previous)
        fit.overall, fit.term_tests, fit.coefficient_rows  # noqa: B018
        pooled_nested(previous, fit)
        times.append(time.perf_counter() - t0)
    assert fit.n_params == 10
    return times


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--rows", type=int, default=5000)
    ap.add_argument("--tick-rows", type=int, nargs="+", default=[5000, 100_000])
    ap.add_argument("--m", type=int, default=20)
    ap.add_argument("--repeats", type=int, default=3)
    args = ap.parse_args()
    times, share = time_imputation(args.rows, args.m, args.repeats)
    print(f"imputation, {args.m} copies of {args.rows:,} rows x 10 columns, {100 * share:.1f}% of cells missing: "
          + ", ".join(f"{t:.2f} s" for t in times))
    out = {"rows": args.rows, "m": args.m, "missing_share": round(share, 4),
           "impute_s": round(statistics.median(times), 3)}
    for rows in args.tick_rows:
        ticks = time_tick(rows, args.m, args.repeats)
        print(f"tick with imputation on, {rows:,} rows x 10 parameters, {args.m} copies: "
              + ", ".join(f"{1000 * t:.0f} ms" for t in ticks))
        out[f"tick_{rows}_ms"] = round(1000 * statistics.median(ticks), 1)
    print(json.dumps(out))


if __name__ == "__main__":
    main()
