"""What opening a CSV costs in Twofold, against pandas reading it alone.

Usage::

    python benchmarks/open_csv.py [--rows N] [--cols C] [--repeats K] [--keep PATH]

Writes a synthetic N x C CSV (default 1,000,000 x 20) of mixed columns: a
record number, decimals, whole numbers, yes/no text with missing cells,
groups, dates and a free-text code.  Then it alternates, K times each,

* Twofold: ``read_table`` + ``describe_columns`` (what the window does to
  show a file's columns), and
* pandas: ``pandas.read_csv`` with its defaults,

and reports the median wall time of each.  Peak memory is measured once for
each in a fresh subprocess: the growth of the peak resident set size
(``VmHWM`` in ``/proc/self/status`` after resetting it, else
``resource.getrusage(...).ru_maxrss``) over the process's size after its
imports, compared with the in-memory size of the frame Twofold holds
(``frame.memory_usage(deep=True).sum()``).

The last line printed is JSON::

    {"rows", "cols", "twofold_ms", "pandas_ms", "ratio", "peak_mb", "frame_mb",
     "memory_ratio", "pandas_peak_mb"}

Targets: ratio <= 1.5 and memory_ratio <= 3.
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

SRC = Path(__file__).resolve().parents[1] / "src"
if str(SRC) not in sys.path:
    sys.path.insert(0, str(SRC))


def write_csv(path: Path, rows: int, cols: int, seed: int = 20240601) -> None:
    """A synthetic extract: column kinds cycle so any ``cols`` mixes numbers and text."""
    import pandas as pd

    pd.DataFrame(synthetic_columns(rows, cols, seed)).to_csv(path, index=False)


def synthetic_columns(rows: int, cols: int, seed: int = 20240601) -> dict:
    """The columns of the synthetic extract, by name (dates as ISO text, missing yes/no cells as 'NA')."""
    import numpy as np

    rng = np.random.default_rng(seed)
    kinds = ["decimal", "whole", "yesno", "group", "decimal", "date", "decimal", "sex", "whole", "code"]
    data = {"record_id": np.arange(1, rows + 1)}
    for j in range(1, cols):
        kind = kinds[(j - 1) % len(kinds)]
        name = f"{kind}_{j}"
        if kind == "decimal":
            data[name] = np.round(rng.normal(60, 12, rows), 1)
        elif kind == "whole":
            data[name] = rng.integers(0, 120, rows)
        elif kind == "yesno":
            data[name] = rng.choice(np.array(["yes", "no", "NA"], dtype=object), rows, p=[0.3, 0.6, 0.1])
        elif kind == "group":
            data[name] = rng.choice(np.array([f"ward {k}" for k in range(12)], dtype=object), rows)
        elif kind == "sex":
            data[name] = rng.choice(np.array(["F", "M"], dtype=object), rows)
        elif kind == "date":
            days = rng.integers(0, 1500, rows)
            data[name] = (np.datetime64("2020-01-01") + days).astype(str)
        else:  # a free-text code, different in almost every row
            data[name] = np.char.add("C", rng.integers(0, 10 * rows, rows).astype(str))
    return data


def time_twofold(path: Path) -> float:
    from twofold.core.data.io import read_table
    from twofold.core.data.roles import describe_columns

    t = time.perf_counter()
    table = read_table(path)
    describe_columns(table.frame)
    return time.perf_counter() - t


def time_pandas(path: Path) -> float:
    import pandas as pd

    t = time.perf_counter()
    pd.read_csv(path)
    return time.perf_counter() - t


def child(which: str, path: str) -> None:
    """In a fresh process: the peak memory growth of one way of opening the file."""
    import resource

    import pandas as pd

    from twofold.core.data.io import read_table
    from twofold.core.data.roles import describe_columns

    def rss_mb() -> float:
        """The peak resident set size so far, in MB."""
        status = Path("/proc/self/status")
        if status.exists():
            for line in status.read_text().splitlines():
                if line.startswith("VmHWM:"):
                    return int(line.split()[1]) / 1024
        # ru_maxrss is in kilobytes on Linux and bytes on macOS.
        scale = 1 / 1024 if sys.platform != "darwin" else 1 / 1024 / 1024
        return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss * scale

    # A child may inherit its parent's high-water mark: reset the peak to the
    # current size where Linux allows it, so the growth below is this work's.
    try:
        Path("/proc/self/clear_refs").write_text("5")
    except OSError:
        pass
    before = rss_mb()
    if which == "twofold":
        table = read_table(path)
        describe_columns(table.frame)
        frame = table.frame
    else:
        frame = pd.read_csv(path)
    peak = rss_mb() - before
    print(json.dumps({"peak_mb": peak, "frame_mb": frame.memory_usage(deep=True).sum() / 2**20}))


def measure_memory(which: str, path: Path) -> dict:
    out = subprocess.run([sys.executable, __file__, "--child", which, str(path)],
                         capture_output=True, text=True, check=True)
    return json.loads(out.stdout.strip().splitlines()[-1])


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--rows", type=int, default=1_000_000)
    parser.add_argument("--cols", type=int, default=20)
    parser.add_argument("--repeats", type=int, default=5)
    parser.add_argument("--keep", metavar="PATH", help="write the CSV here and keep it (default: a temporary file)")
    parser.add_argument("--child", nargs=2, metavar=("WHICH", "PATH"), help=argparse.SUPPRESS)
    args = parser.parse_args(argv)
    if args.child:
        child(*args.child)
        return 0

    with tempfile.TemporaryDirectory() as tmp:
        path = Path(args.keep) if args.keep else Path(tmp) / "synthetic.csv"
        t = time.perf_counter()
        write_csv(path, args.rows, args.cols)
        print(f"wrote {path.stat().st_size / 2**20:.0f} MB in {time.perf_counter() - t:.1f} s", file=sys.stderr)
        mem = measure_memory("twofold", path)
        pandas_mem = measure_memory("pandas", path)
        time_twofold(path)  # warm the file cache and the imports once
        time_pandas(path)
        ours, theirs = [], []
        for _ in range(args.repeats):
            ours.append(time_twofold(path))
            theirs.append(time_pandas(path))
        print(f"twofold {[round(x * 1000) for x in ours]} ms; pandas {[round(x * 1000) for x in theirs]} ms",
              file=sys.stderr)
    twofold_ms = statistics.median(ours) * 1000
    pandas_ms = statistics.median(theirs) * 1000
    result = {
        "rows": args.rows,
        "cols": args.cols,
        "twofold_ms": round(twofold_ms, 1),
        "pandas_ms": round(pandas_ms, 1),
        "ratio": round(twofold_ms / pandas_ms, 3),
        "peak_mb": round(mem["peak_mb"], 1),
        "frame_mb": round(mem["frame_mb"], 1),
        "memory_ratio": round(mem["peak_mb"] / mem["frame_mb"], 3),
        "pandas_peak_mb": round(pandas_mem["peak_mb"], 1),
    }
    print(json.dumps(result))
    return 0


if __name__ == "__main__":
    sys.exit(main())
