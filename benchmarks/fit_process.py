"""The whole ``twofold fit`` process on a CSV, beside a plain pandas + statsmodels script.

Usage: python benchmarks/fit_process.py [--rows N] [--repeats R]

Writes a synthetic CSV of N rows to a temporary folder, then alternates two
processes R times: ``twofold fit ... --json -`` and a plain script doing the
same work: it reads the same CSV with pandas, builds the same design
(indicator columns, complete cases), fits ``statsmodels.api.Logit``, and
computes what the JSON carries besides the fit: the AUC (Mann-Whitney), the
Hosmer-Lemeshow groups, the calibration slope, influence (GLM
``get_influence``) and a likelihood-ratio test for every predictor.
The last line printed is one JSON object {rows, twofold_ms, plain_script_ms}
(medians of wall-clock time).
"""

from __future__ import annotations

import argparse
import json
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parent))

from refit import synthetic  # noqa: E402

PLAIN = r"""
import sys, json
import numpy as np, pandas as pd
import statsmodels.api as sm
path = sys.argv[1]
df = pd.read_csv(path)
preds = [c for c in df.columns if c != "y"]
df = df.dropna(subset=preds + ["y"])
X = pd.get_dummies(df[preds], columns=["ward"], drop_first=True, dtype=float)
X = sm.add_constant(X)
res = sm.Logit(df["y"], X).fit(disp=0)
ci = np.exp(res.conf_int())
from scipy import stats
y = df["y"].to_numpy(dtype=float); p = res.predict()
auc = stats.mannwhitneyu(p[y == 1], p[y == 0]).statistic / ((y == 1).sum() * (y == 0).sum())
groups = pd.qcut(p, 10, labels=False, duplicates="drop")
hl = pd.DataFrame({"y": y, "p": p, "g": groups}).groupby("g").agg(o=("y", "sum"), e=("p", "sum"), n=("y", "size"))
lp = np.log(p / (1 - p))
slope = sm.Logit(y, sm.add_constant(lp)).fit(disp=0).params[1]
infl = sm.GLM(y, X, family=sm.families.Binomial()).fit(start_params=res.params).get_influence()
cooks = infl.cooks_distance[0]
terms = {c: [k for k in X.columns if k == c or k.startswith(c + "_")] for c in preds}
lr = {c: 2 * (res.llf - sm.Logit(df["y"], X.drop(columns=cols)).fit(disp=0, start_params=res.params.drop(cols)).llf)
      for c, cols in terms.items()}
out = {"params": res.params.tolist(), "bse": res.bse.tolist(), "z": res.tvalues.tolist(),
       "p": res.pvalues.tolist(), "or": np.exp(res.params).tolist(), "ci": ci.values.tolist(),
       "llf": res.llf, "llnull": res.llnull, "g": res.llr, "g_p": res.llr_pvalue,
       "aic": res.aic, "bic": res.bic, "auc": auc, "hl": hl.values.tolist(), "slope": slope,
       "cooks": sorted(cooks)[-10:], "lr": lr}
print(json.dumps(out))
"""


def timed(cmd) -> float:
    t0 = time.perf_counter()
    res = subprocess.run(cmd, capture_output=True, text=True)
    ms = (time.perf_counter() - t0) * 1e3
    if res.returncode != 0:
        raise SystemExit(f"command failed: {' '.join(cmd[:4])} ...\n{res.stderr}")
    return ms


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--rows", type=int, default=100_000)
    ap.add_argument("--repeats", type=int, default=7)
    args = ap.parse_args(argv)
    with tempfile.TemporaryDirectory() as tmp:
        csv = Path(tmp) / "synthetic.csv"
        frame = synthetic(args.rows, 7)
        frame.to_csv(csv, index=False)
        preds = [c for c in frame.columns if c != "y"]
        ours = [sys.executable, "-m", "twofold.cli", "fit", str(csv), "--outcome", "y", "--json", "-",
                "--predictor", *preds]
        plain = [sys.executable, "-c", PLAIN, str(csv)]
        a, b = [], []
        for r in range(args.repeats + 1):  # the first round warms the file cache
            pair = [(ours, a), (plain, b)] if r % 2 == 0 else [(plain, b), (ours, a)]
            for cmd, sink in pair:
                ms = timed(cmd)
                if r:
                    sink.append(ms)
    print(json.dumps({"rows": args.rows, "twofold_ms": round(statistics.median(a)),
                      "plain_script_ms": round(statistics.median(b))}))
    return 0


if __name__ == "__main__":
    sys.exit(main())
