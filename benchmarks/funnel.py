"""How long a risk-adjusted comparison of units (funnel plot) takes.

Usage: python benchmarks/funnel.py [--rows N] [--units U] [--repeats R]

On N synthetic records spread over U units (default 100,000 rows, 50 units;
seeded risks and outcomes), times the comparison: observed and expected events
per unit, exact Poisson intervals, the overdispersion test, each unit's verdict
and the 95% and 99.8% funnel limits at 100 points; then the drawing of the
funnel plot as the window and reports draw it (PNG, render.usefulness_figures).
Last line: one JSON object {rows, units, funnel_ms, draw_ms, total_ms, load}
(medians; load is the 1-minute load average when the run ended).
"""

from __future__ import annotations

import argparse
import json
import os
import statistics
import sys
import time
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "src"))

from twofold.core.assessing.units import compare_units  # noqa: E402


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--rows", type=int, default=100_000)
    ap.add_argument("--units", type=int, default=50)
    ap.add_argument("--repeats", type=int, default=9)
    args = ap.parse_args(argv)
    rng = np.random.default_rng(2026)
    p = 1.0 / (1.0 + np.exp(-rng.normal(-1.5, 1.0, size=args.rows)))
    y = (rng.uniform(size=args.rows) < p).astype(float)
    units = np.array([f"unit {i:03d}" for i in rng.integers(0, args.units, size=args.rows)], dtype=object)
    from twofold.render.usefulness_figures import funnel_figure

    from twofold.core.assessing.units import VERDICTS

    within = VERDICTS["within"]  # the window names only the units outside the 95% limits
    times, draws = [], []
    for r in range(args.repeats + 1):
        t0 = time.perf_counter()
        rec = compare_units(units, y, p, "unit").as_record()
        t1 = time.perf_counter()
        adjusted = rec["limits_adjusted"]
        funnel_figure([u["expected"] for u in rec["units"]], [u["ratio"] for u in rec["units"]],
                      rec["limits"]["95"], rec["limits"]["99.8"], adjusted_95=adjusted and adjusted["95"],
                      adjusted_998=adjusted and adjusted["99.8"], labels=[u["unit"] if u["verdict"] != within else "" for u in rec["units"]])
        t2 = time.perf_counter()
        if r:  # the first round warms caches
            times.append((t1 - t0) * 1e3)
            draws.append((t2 - t1) * 1e3)
    print(json.dumps({"rows": args.rows, "units": args.units, "funnel_ms": round(statistics.median(times), 1),
                      "draw_ms": round(statistics.median(draws), 1),
                      "total_ms": round(statistics.median([a + b for a, b in zip(times, draws)]), 1),
                      "load": round(os.getloadavg()[0], 2)}))
    return 0


if __name__ == "__main__":
    sys.exit(main())
