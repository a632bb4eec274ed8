"""Peak memory and throughput of the streaming path at 1e6, 1e7 and 5e7 rows.

Writes Parquet files (5 inputs and a target, written in pieces so the writer
never holds the table), then for each size runs the two streamed passes of
``fitladder run --stream`` (`engine.streaming.stream_statistics`: ranges, then
per-fold summaries of the order-3 design with interactions, 55 terms) in a
fresh process and reads that process's peak resident memory. Throughput is
compared with one in-memory ``X.T @ X`` of the same design on 1e6 rows (the
floor any row pass pays).

Usage::

    .venv/bin/python benchmarks/stream_memory.py [--rows 1000000 10000000 50000000] [--dir DIR]

Last line: ``peak_ratio <r> rows_per_s <v>``: peak RSS of the largest run over
that of the smallest, and the largest run's rows per second.
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

import numpy as np

REPO = Path(__file__).resolve().parents[1]
INPUTS = ["x1", "x2", "x3", "x4", "x5"]

CHILD = r"""
import json, resource, sys, time
sys.path.insert(0, sys.argv[1])
from engine.streaming import stream_statistics
t = time.perf_counter()
st = stream_statistics(sys.argv[2], "y", ["x1", "x2", "x3", "x4", "x5"], 3, True, 5, 0,
                       sample_rows=10_000)
dt = time.perf_counter() - t
print(json.dumps({"seconds": dt, "rows": st.rows_used,
                  "peak_mb": resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024}))
"""


def write_parquet(path: Path, rows: int, seed: int = 0, piece: int = 1_000_000) -> None:
    import pyarrow as pa
    import pyarrow.parquet as pq

    rng = np.random.default_rng(seed)
    writer = None
    try:
        for start in range(0, rows, piece):
            m = min(piece, rows - start)
            X = rng.uniform(-1, 1, size=(m, 5))
            y = X @ [1.0, -2.0, 0.5, 0.0, 3.0] + X[:, 0] * X[:, 1] + rng.normal(0, 0.1, m)
            table = pa.table({**{c: X[:, j] for j, c in enumerate(INPUTS)}, "y": y})
            if writer is None:
                writer = pq.ParquetWriter(path, table.schema)
            writer.write_table(table, row_group_size=256_000)
    finally:
        if writer is not None:
            writer.close()


def in_memory_rows_per_s(rows: int = 1_000_000) -> float:
    sys.path.insert(0, str(REPO))
    from engine.design import PolynomialBasis

    rng = np.random.default_rng(1)
    X = rng.uniform(-1, 1, size=(rows, 5))
    basis = PolynomialBasis.fit(X, INPUTS, 3, True)
    F = np.column_stack([basis.expand(X), rng.normal(size=rows)])
    from engine.threads import blas_threads, product_threads

    with blas_threads(product_threads()):   # the thread choice the row pass makes
        t = time.perf_counter()
        F.T @ F
        return rows / (time.perf_counter() - t)


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--rows", type=int, nargs="+", default=[1_000_000, 10_000_000, 50_000_000])
    ap.add_argument("--dir", default=None, help="folder for the Parquet files (default: temp)")
    args = ap.parse_args()
    with tempfile.TemporaryDirectory() as tmp:
        base = Path(args.dir or tmp)
        base.mkdir(parents=True, exist_ok=True)
        results = []
        for rows in args.rows:
            path = base / f"stream_{rows}.parquet"
            if not path.exists():
                t = time.perf_counter()
                write_parquet(path, rows)
                print(f"wrote {path.name} ({path.stat().st_size / 1e6:.0f} MB) in "
                      f"{time.perf_counter() - t:.1f} s", flush=True)
            out = subprocess.run([sys.executable, "-c", CHILD, str(REPO), str(path)],
                                 capture_output=True, text=True, env=dict(os.environ))
            if out.returncode != 0:
                raise SystemExit(out.stderr)
            r = json.loads(out.stdout.strip().splitlines()[-1])
            r["rows_per_s"] = r["rows"] / r["seconds"]
            results.append(r)
            print(f"rows {r['rows']:>11,}: peak RSS {r['peak_mb']:8.0f} MB, "
                  f"{r['seconds']:7.1f} s (two passes), {r['rows_per_s']:,.0f} rows/s", flush=True)
        mem = in_memory_rows_per_s()
        print(f"in-memory X.T @ X of the same design (1e6 rows): {mem:,.0f} rows/s; "
              f"streaming at {results[-1]['rows_per_s'] / mem:.2f} of that")
        print(f"peak_ratio {results[-1]['peak_mb'] / results[0]['peak_mb']:.2f} "
              f"rows_per_s {results[-1]['rows_per_s']:.0f}")


if __name__ == "__main__":
    main()
