"""How long bootstrap validation takes.

Usage: python benchmarks/bootstrap.py [--rows N] [--repetitions B] [--workers W]

N synthetic rows (default 5,000) with 15 parameters (intercept, 11 numeric
predictors and a 4-level factor), B resamples (default 200), each refitting
the whole model and scoring it on the resample and on the original rows.
Last line: one JSON object {rows, params, repetitions, workers, seconds}.
"""

from __future__ import annotations

import argparse
import json
import sys
import time
from pathlib import Path

import numpy as np
import pandas as pd

sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "src"))

from twofold.core.data.io import LoadedTable  # noqa: E402
from twofold.core.models.modelling import bootstrap_validation  # noqa: E402
from twofold.core.models.study import Study  # noqa: E402


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--rows", type=int, default=5000)
    ap.add_argument("--repetitions", type=int, default=200)
    ap.add_argument("--workers", type=int, default=2)
    args = ap.parse_args(argv)
    rng = np.random.default_rng(99)
    frame = pd.DataFrame({f"x{i}": rng.normal(size=args.rows) for i in range(11)})
    frame["ward"] = rng.choice(["a", "b", "c", "d"], size=args.rows)
    lp = -1.2 + 0.3 * frame.x0 - 0.2 * frame.x1 + 0.1 * frame.x2
    frame["y"] = (rng.random(args.rows) < 1 / (1 + np.exp(-lp))).astype(int)
    study = Study(LoadedTable(frame, Path("synthetic.csv")))
    study.set_outcome("y")
    fit = study.fit([c for c in frame.columns if c != "y"])
    t0 = time.perf_counter()
    bootstrap_validation(fit, args.repetitions, seed=1, workers=args.workers)
    seconds = time.perf_counter() - t0
    print(json.dumps({"rows": args.rows, "params": fit.n_params, "repetitions": args.repetitions,
                      "workers": args.workers, "seconds": round(seconds, 2)}))
    return 0


if __name__ == "__main__":
    sys.exit(main())
