"""Reading tables: heatwalk.io.tables.read_table against pandas alone, on the same files, in one run.

Files: 10^6 rows x 4 columns of float64 (standard normal draws, fixed seed),
written once as CSV (with a header line, full-precision floats: about 78 MB)
and as Parquet. Readers compared side by side:

- CSV:     ``read_table(path)``  vs  ``pandas.read_csv(path)``
- Parquet: ``read_table(path)``  vs  ``pandas.read_parquet(path)``

read_table does more than pandas: a streaming scan of the bytes accounts for
every line (blank and comment lines, ragged rows, NUL bytes), every value is
checked finite and a float64 array (n, 4) is returned; the ratio is the price
of those checks. On a shared machine timings swing by 2x from run to run:
take the best of several repeats (``--repeats``).

Each measurement runs in a fresh Python process (so one reader's memory does
not hide another's), after the imports; the readers alternate, R repeats.
Reported: best wall-clock seconds, and peak resident memory above the
process's size just before the read (VmHWM - VmRSS from /proc/self/status,
Linux), the median over repeats. One process per reader also runs under
tracemalloc for the peak of memory allocated through Python's allocators
(numpy and pandas buffers; Arrow's own memory pool is not seen there).
Targets: time ratio <= 1.5 (the issue's goal); the same bound for the peak
resident memory (ours).

    python benchmarks/read_tables.py [--rows 1000000] [--repeats 3]
"""

from __future__ import annotations

import argparse
import json
import os
import subprocess
import sys
import tempfile
import time
from pathlib import Path

READERS = {
    "csv": {"heatwalk": "heatwalk.io.tables:read_table", "pandas": "pandas:read_csv"},
    "parquet": {"heatwalk": "heatwalk.io.tables:read_table", "pandas": "pandas:read_parquet"},
}
TARGET = 1.5


def _status_kib(key: str) -> int:
    for line in Path("/proc/self/status").read_text().splitlines():
        if line.startswith(key + ":"):
            return int(line.split()[1])
    raise RuntimeError(f"{key} not in /proc/self/status")


def child(spec: str, path: str, trace: bool) -> None:
    """Run one read in this process and print a JSON line of its cost."""
    import hashlib
    import importlib
    import tracemalloc

    import numpy as np

    module, name = spec.split(":")
    fn = getattr(importlib.import_module(module), name)
    import pandas  # noqa: F401  (imported before measuring, as it is by both readers)
    import pyarrow.parquet  # noqa: F401

    before = _status_kib("VmRSS")
    if trace:
        tracemalloc.start()
    t0 = time.perf_counter()
    out = fn(path)
    seconds = time.perf_counter() - t0
    traced = tracemalloc.get_traced_memory()[1] if trace else None
    peak = _status_kib("VmHWM") - before
    values = out.values if hasattr(out, "values") else out.to_numpy()
    digest = hashlib.sha256(np.ascontiguousarray(values, dtype=np.float64).tobytes()).hexdigest()
    print(json.dumps({"seconds": seconds, "rss_mib": peak / 1024, "traced_mib": None if traced is None else
                      traced / 2**20, "shape": list(np.shape(values)), "checksum": digest}))


def run(spec: str, path: Path, trace: bool = False) -> dict:
    r = subprocess.run([sys.executable, __file__, "--child", spec, str(path)] + (["--trace"] if trace else []),
                       capture_output=True, text=True, check=True, env={**os.environ, "OMP_NUM_THREADS": "1"})
    return json.loads(r.stdout.strip().splitlines()[-1])


def make_files(folder: Path, rows: int) -> dict[str, Path]:
    import numpy as np
    import pandas as pd

    rng = np.random.default_rng(20240601)
    df = pd.DataFrame(rng.standard_normal((rows, 4)), columns=["a", "b", "c", "d"])
    paths = {"csv": folder / "table.csv", "parquet": folder / "table.parquet"}
    df.to_csv(paths["csv"], index=False)
    df.to_parquet(paths["parquet"], index=False)
    return paths


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--rows", type=int, default=1_000_000)
    ap.add_argument("--repeats", type=int, default=3)
    ap.add_argument("--child", nargs=2, metavar=("READER", "PATH"), help=argparse.SUPPRESS)
    ap.add_argument("--trace", action="store_true", help=argparse.SUPPRESS)
    args = ap.parse_args(argv)
    if args.child:
        child(*args.child, args.trace)
        return 0
    import statistics

    with tempfile.TemporaryDirectory() as tmp:
        paths = make_files(Path(tmp), args.rows)
        sizes = {k: p.stat().st_size / 2**20 for k, p in paths.items()}
        rows = []
        for fmt, readers in READERS.items():
            got = {who: [] for who in readers}
            for _ in range(args.repeats):
                for who, spec in readers.items():
                    got[who].append(run(spec, paths[fmt]))
            traced = {who: run(spec, paths[fmt], trace=True)["traced_mib"] for who, spec in readers.items()}
            sums = {who: got[who][0]["checksum"] for who in readers}
            assert sums["heatwalk"] == sums["pandas"], f"{fmt}: the readers' values differ"
            best = {who: min(g["seconds"] for g in got[who]) for who in readers}
            rss = {who: statistics.median(g["rss_mib"] for g in got[who]) for who in readers}
            rows.append((fmt, sizes[fmt], best, rss, traced))
    print(f"{args.rows:,} rows x 4 float64 columns; best of {args.repeats} (time), median (memory)\n")
    head = (f"{'file':8} {'MiB':>6} | {'heatwalk s':>10} {'pandas s':>9} {'ratio':>6} | {'heatwalk RSS':>12} "
            f"{'pandas RSS':>10} {'ratio':>6} | {'heatwalk py':>11} {'pandas py':>9} {'ratio':>6}")
    print(head)
    print("-" * len(head))
    report = {}
    for fmt, size, best, rss, traced in rows:
        tr, mr, pr = (best["heatwalk"] / best["pandas"], rss["heatwalk"] / rss["pandas"],
                      traced["heatwalk"] / traced["pandas"])
        print(f"{fmt:8} {size:6.1f} | {best['heatwalk']:10.3f} {best['pandas']:9.3f} {tr:6.2f} | "
              f"{rss['heatwalk']:10.1f}Mi {rss['pandas']:8.1f}Mi {mr:6.2f} | "
              f"{traced['heatwalk']:9.1f}Mi {traced['pandas']:7.1f}Mi {pr:6.2f}")
        report[fmt] = {"file_mib": size, "seconds": best, "peak_rss_mib": rss, "traced_peak_mib": traced,
                       "time_ratio": tr, "rss_ratio": mr, "traced_ratio": pr}
    print(f"\ntarget: time ratio <= {TARGET}, peak-memory (RSS) ratio <= {TARGET}")
    for fmt, r in report.items():
        ok = r["time_ratio"] <= TARGET and r["rss_ratio"] <= TARGET
        print(f"  {fmt}: {'met' if ok else 'NOT met'}")
    out = Path(__file__).parent / "results" / "read_tables.json"
    out.write_text(json.dumps({"rows": args.rows, "repeats": args.repeats, "results": report}, indent=2) + "\n")
    print(f"wrote {out}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
