"""Opening a workbook in Twofold: the compiled reader against the openpyxl route it replaced.

Usage::

    python benchmarks/open_workbook.py [--rows N] [--cols C] [--repeats K] [--keep PATH]

Writes a synthetic N x C workbook (default 200,000 x 20; the same mixed
columns as ``open_csv.py``, dates as date cells, missing yes/no cells empty)
with openpyxl, then alternates, K times each,

* new: ``read_table`` (python-calamine reads the cells; the sheet's XML is
  scanned for its reach before, and for formulas, merged cells and error
  cells while python-calamine parses), and
* old: the route Twofold used until 2026-12-03, openpyxl's read-only mode
  (``load_workbook(read_only=True, data_only=True)``, ``iter_rows``) with the
  same XML scan (both passes, one after the other), feeding the same table
  building and tidying (so any speed-up of those counts for both routes),

each followed by ``describe_columns`` (what the window does next), and
reports the median wall time of each and their ratio.  Both routes are
checked to give the same table.

The last line printed is JSON: ``{"rows", "cols", "new_ms", "old_ms", "speedup"}``.
Target: speedup >= 5.
"""

from __future__ import annotations

import argparse
import json
import statistics
import sys
import tempfile
import time
from pathlib import Path

SRC = Path(__file__).resolve().parents[1] / "src"
for folder in (SRC, Path(__file__).resolve().parent):
    if str(folder) not in sys.path:
        sys.path.insert(0, str(folder))


def write_workbook(path: Path, rows: int, cols: int) -> None:
    """The synthetic extract of ``open_csv.py`` in one sheet: dates as date cells, 'NA' as empty cells."""
    import datetime as dt

    import openpyxl

    from open_csv import synthetic_columns

    columns = []
    for name, values in synthetic_columns(rows, cols).items():
        values = values.tolist()
        if name.startswith("date"):
            values = [dt.datetime.strptime(v, "%Y-%m-%d") for v in values]
        elif name.startswith("yesno"):
            values = [None if v == "NA" else v for v in values]
        columns.append((name, values))
    book = openpyxl.Workbook(write_only=True)
    sheet = book.create_sheet("records (synthetic)")
    sheet.append([name for name, _ in columns])
    for row in zip(*(values for _, values in columns)):
        sheet.append(row)
    book.save(path)


def open_new(path: Path):
    from twofold.core.data.io import read_table
    from twofold.core.data.roles import describe_columns

    table = read_table(path)
    describe_columns(table.frame)
    return table.frame


def open_old(path: Path):
    """The openpyxl route: its rows into the same table building and tidying."""
    import warnings

    import openpyxl

    from twofold.core.data import read_workbook as rw
    from twofold.core.data.roles import describe_columns
    from twofold.core.data.tidy import tidy_frame

    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        book = openpyxl.load_workbook(path, read_only=True, data_only=True)
    try:
        sheet = book.sheetnames[0]
        ws = book[sheet]
        ws.reset_dimensions()
        rows = list(ws.iter_rows(min_row=1, min_col=1, values_only=True))
    finally:
        book.close()
    scan = rw.scan_sheet(path, rw.sheet_parts(path)[sheet], None)
    where = f"sheet '{sheet}' of {path.name}"
    frame, generated, _ = rw.frame_from_rows(rows, scan.merges, where, "put the records in it")
    frame, _ = tidy_frame(frame, where, "xlsx", generated)
    describe_columns(frame)
    return frame


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--rows", type=int, default=200_000)
    parser.add_argument("--cols", type=int, default=20)
    parser.add_argument("--repeats", type=int, default=3)
    parser.add_argument("--keep", metavar="PATH", help="write the workbook here and keep it; reused if it exists")
    args = parser.parse_args(argv)

    with tempfile.TemporaryDirectory() as tmp:
        path = Path(args.keep) if args.keep else Path(tmp) / "synthetic.xlsx"
        if not path.exists():
            t = time.perf_counter()
            write_workbook(path, args.rows, args.cols)
            print(f"wrote {path.stat().st_size / 2**20:.0f} MB in {time.perf_counter() - t:.1f} s", file=sys.stderr)
        new_frame, old_frame = open_new(path), open_old(path)  # warm the file cache and the imports once
        import pandas as pd

        pd.testing.assert_frame_equal(new_frame, old_frame)  # the same table either way
        new, old = [], []
        for _ in range(args.repeats):
            t = time.perf_counter()
            open_new(path)
            new.append(time.perf_counter() - t)
            t = time.perf_counter()
            open_old(path)
            old.append(time.perf_counter() - t)
        print(f"new {[round(x * 1000) for x in new]} ms; old {[round(x * 1000) for x in old]} ms", file=sys.stderr)
    new_ms, old_ms = statistics.median(new) * 1000, statistics.median(old) * 1000
    print(json.dumps({"rows": args.rows, "cols": args.cols, "new_ms": round(new_ms, 1), "old_ms": round(old_ms, 1),
                      "speedup": round(old_ms / new_ms, 2)}))
    return 0


if __name__ == "__main__":
    sys.exit(main())
