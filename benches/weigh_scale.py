#!/usr/bin/env python3
"""End-to-end cost of the command line's default `weigh` on a large table.

Writes a seeded source (default 1,000,000 rows) and target (default 500,000 rows) of 20 numeric
columns as Parquet (source ~ N(0, I), target ~ N(0.5 e_1, I)), then runs
``shiftweight weigh --source ... --target ... --out ...`` with the default estimator (the automatic
choice) and with ``--estimator classifier``, each under ``/usr/bin/time -v``, and prints wall time
and peak resident memory next to the size of the input values (rows x columns x 8 bytes).

Build the binary first: ``cargo build --release -p shiftweight-cli``. Usage:
``.venv/bin/python benches/weigh_scale.py [--rows 1000000 --target-rows 500000 --dir /tmp/swscale]``.
Not part of the test suite; figures go to benches/README.md with the machine and its load.
"""

from __future__ import annotations

import argparse
import os
import pathlib
import re
import subprocess
import sys
import time

import numpy as np


def write_parquet(path: pathlib.Path, x: np.ndarray) -> None:
    import pyarrow as pa
    import pyarrow.parquet as pq

    table = pa.table({f"x{j}": x[:, j] for j in range(x.shape[1])})
    pq.write_table(table, path, compression="snappy")


def run(cmd: list[str]) -> tuple[float, float, str]:
    t0 = time.perf_counter()
    r = subprocess.run(["/usr/bin/time", "-v", *cmd], capture_output=True, text=True)
    wall = time.perf_counter() - t0
    if r.returncode != 0:
        sys.exit(f"{' '.join(cmd)} failed ({r.returncode}):\n{r.stderr[-2000:]}")
    m = re.search(r"Maximum resident set size \(kbytes\): (\d+)", r.stderr)
    peak_mb = int(m.group(1)) / 1024 if m else float("nan")
    return wall, peak_mb, r.stdout + r.stderr


def main() -> None:
    p = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    p.add_argument("--rows", type=int, default=1_000_000, help="source rows")
    p.add_argument("--target-rows", type=int, default=500_000)
    p.add_argument("--cols", type=int, default=20)
    p.add_argument("--dir", default="/tmp/swscale")
    p.add_argument("--cli", default=None, help="the binary (default: target/release/shiftweight)")
    p.add_argument("--only-default", action="store_true", help="skip the --estimator classifier run")
    a = p.parse_args()
    root = pathlib.Path(__file__).resolve().parents[1]
    tdir = pathlib.Path(os.environ.get("CARGO_TARGET_DIR", root / "target"))
    cli = a.cli or str(tdir / "release" / "shiftweight")
    d = pathlib.Path(a.dir)
    d.mkdir(parents=True, exist_ok=True)
    src, tgt = d / f"source_{a.rows}_{a.cols}.parquet", d / f"target_{a.target_rows}_{a.cols}.parquet"
    if not (src.exists() and tgt.exists()):
        rng = np.random.default_rng(0)
        write_parquet(src, rng.standard_normal((a.rows, a.cols)))
        t = rng.standard_normal((a.target_rows, a.cols))
        t[:, 0] += 0.5
        write_parquet(tgt, t)
    input_mb = (a.rows + a.target_rows) * a.cols * 8 / 2**20
    print(f"input values: {a.rows:,} + {a.target_rows:,} rows x {a.cols} columns = {input_mb:.0f} MB")
    runs = [("default (automatic choice)", [])]
    if not a.only_default:
        runs.append(("--estimator classifier", ["--estimator", "classifier"]))
    for name, extra in runs:
        out = d / "weights.csv"
        wall, peak, text = run([cli, "weigh", "--source", str(src), "--target", str(tgt), "--out", str(out), *extra])
        chosen = re.search(r"[Cc]hose [^.:]*", text)
        print(f"{name:28s} wall {wall:7.1f} s   peak memory {peak:7.0f} MB"
              f"   ({peak - input_mb:+.0f} MB over the input)   {chosen.group(0) if chosen else ''}")


if __name__ == "__main__":
    main()
