"""How long the assessment takes beside the fit.

Usage: python benchmarks/assessment.py [--rows N] [--repeats R]

On N synthetic rows with 20 parameters (as in refit.py), times the fit and
then the assessment (AUC with DeLong interval, ROC points, Brier, calibration
slope and intercept, Hosmer-Lemeshow, calibration groups and smoothed curve,
pseudo-R-squared, influence, variance inflation, drop-one likelihood-ratio
tests, sample size); profile intervals and Firth are left out, as they run in
the background. Last line: one JSON object {rows, params, fit_ms,
assessment_ms, drop_one_ms} (medians).
"""

from __future__ import annotations

import argparse
import json
import statistics
import sys
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parent))
sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "src"))

from refit import synthetic  # noqa: E402

from twofold.core.assessing.assessment import assess  # noqa: E402
from twofold.core.data.io import LoadedTable  # noqa: E402
from twofold.core.models.study import Study, drop_one_tests  # noqa: E402


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--rows", type=int, default=100_000)
    ap.add_argument("--repeats", type=int, default=7)
    args = ap.parse_args(argv)
    frame = synthetic(args.rows, 3)
    study = Study(LoadedTable(frame, Path("synthetic.csv")))
    study.set_outcome("y")
    predictors = [c for c in frame.columns if c != "y"]
    fits, assessments, drops = [], [], []
    for r in range(args.repeats + 1):
        t0 = time.perf_counter()
        fit = study.fit(predictors)
        t1 = time.perf_counter()
        assess(study, fit)
        t2 = time.perf_counter()
        drop_one_tests(study, fit)
        t3 = time.perf_counter()
        if r:  # the first round warms caches
            fits.append((t1 - t0) * 1e3)
            assessments.append((t2 - t1) * 1e3)
            drops.append((t3 - t2) * 1e3)
    print(json.dumps({"rows": args.rows, "params": fit.n_params, "fit_ms": round(statistics.median(fits), 1),
                      "assessment_ms": round(statistics.median(assessments), 1),
                      "drop_one_ms": round(statistics.median(drops), 1)}))
    return 0


if __name__ == "__main__":
    sys.exit(main())
