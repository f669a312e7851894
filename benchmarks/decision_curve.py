"""How long a decision curve takes.

Usage: python benchmarks/decision_curve.py [--rows N] [--thresholds T] [--repeats R]

On N synthetic records (outcome drawn from seeded risks), times the net benefit
of the model, of treating everyone and of treating no one at T thresholds
(default 100 thresholds at 100,000 rows), and, for comparison, a plain numpy
loop that counts the treated records threshold by threshold, and the drawing
of the curve as the window and reports draw it (PNG, render.usefulness_figures).
Last line: one JSON object {rows, thresholds, curve_ms, loop_ms, draw_ms,
total_ms (curve and drawing), load} (medians; load is the 1-minute load
average when the run ended).
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

from twofold.core.assessing.decision import decision_curve  # noqa: E402


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--rows", type=int, default=100_000)
    ap.add_argument("--thresholds", type=int, default=100)
    ap.add_argument("--repeats", type=int, default=9)
    args = ap.parse_args(argv)
    rng = np.random.default_rng(2026)
    p = 1.0 / (1.0 + np.exp(-rng.normal(-1.5, 1.0, size=args.rows)))
    y = (rng.uniform(size=args.rows) < p).astype(float)
    thresholds = np.round(np.linspace(0.01, 0.99, args.thresholds), 12)
    from twofold.render.usefulness_figures import decision_figure

    curve_ms, loop_ms, draw_ms = [], [], []
    for r in range(args.repeats + 1):
        t0 = time.perf_counter()
        curve = decision_curve(y, p, thresholds)
        t1 = time.perf_counter()
        loop = [((p >= t) & (y == 1)).sum() / y.size - ((p >= t) & (y == 0)).sum() / y.size * t / (1 - t)
                for t in thresholds]
        t2 = time.perf_counter()
        decision_figure(curve.thresholds, curve.model, curve.treat_all)
        t3 = time.perf_counter()
        if r:  # the first round warms caches
            curve_ms.append((t1 - t0) * 1e3)
            loop_ms.append((t2 - t1) * 1e3)
            draw_ms.append((t3 - t2) * 1e3)
    assert np.allclose(curve.model, loop, atol=1e-12)
    print(json.dumps({"rows": args.rows, "thresholds": args.thresholds,
                      "curve_ms": round(statistics.median(curve_ms), 1),
                      "loop_ms": round(statistics.median(loop_ms), 1),
                      "draw_ms": round(statistics.median(draw_ms), 1),
                      "total_ms": round(statistics.median([a + b for a, b in zip(curve_ms, draw_ms)]), 1),
                      "load": round(os.getloadavg()[0], 2)}))
    return 0


if __name__ == "__main__":
    sys.exit(main())
