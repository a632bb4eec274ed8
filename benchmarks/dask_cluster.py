"""Per-fold statistics on a 2-worker Dask LocalCluster against the in-memory result.

Writes a folder of Parquet files (5 inputs and a target), computes the per-fold
summaries of the order-3 design with interactions (55 terms) three ways:
in memory (the whole table loaded, the ordinary row pass with the same hashed
folds), streamed from the files, and on a local Dask cluster of 2 worker
processes with one thread each (`engine.cluster`). Prints the largest relative
difference of the cluster's summaries from the in-memory ones (target:
<= 1e-12) and the throughput of each.

Usage::

    .venv/bin/python benchmarks/dask_cluster.py [--rows 2000000] [--parts 8]

Last line: ``max_rel_diff <d> cluster_over_memory <ratio>`` (rows/s on the
cluster over rows/s in memory, the ranges pass included on both sides).
"""
from __future__ import annotations

import argparse
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

REPO = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(REPO))

INPUTS = ["x1", "x2", "x3", "x4", "x5"]


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--rows", type=int, default=2_000_000)
    ap.add_argument("--parts", type=int, default=8)
    args = ap.parse_args()
    import distributed
    import pandas as pd

    from engine import SchemeSpec, SweepSpec
    from engine.cluster import cluster_statistics
    from engine.design import PolynomialBasis
    from engine.streaming import row_folds, stream_statistics
    from engine.sweep import piece_statistics

    rng = np.random.default_rng(0)
    X = rng.uniform(-1, 1, size=(args.rows, 5))
    y = X @ [1.0, -2.0, 0.5, 0.0, 3.0] + X[:, 0] * X[:, 1] + rng.normal(0, 0.1, args.rows)
    spec = SweepSpec("y", tuple(INPUTS), max_order=3, interactions=True,
                     scheme=SchemeSpec("kfold", folds=5), seed=0)
    with tempfile.TemporaryDirectory() as tmp:
        folder = Path(tmp) / "parts"
        folder.mkdir()
        step = -(-args.rows // args.parts)
        for i, a in enumerate(range(0, args.rows, step)):
            pd.DataFrame({**{c: X[a:a + step, j] for j, c in enumerate(INPUTS)},
                          "y": y[a:a + step]}).to_parquet(folder / f"part{i:03d}.parquet")

        t = time.perf_counter()
        basis = PolynomialBasis.fit(X, tuple(INPUTS), 3, True)
        mem = piece_statistics(basis, X, y, row_folds(np.arange(args.rows), 5, 0), 5)
        t_mem = time.perf_counter() - t

        t = time.perf_counter()
        streamed = stream_statistics(folder, "y", INPUTS, 3, True, 5, 0, sample_rows=1000)
        t_stream = time.perf_counter() - t

        cluster = distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=True,
                                           dashboard_address=None)
        with distributed.Client(cluster) as client:
            client.run(lambda: None)   # workers up before the clock starts
            t = time.perf_counter()
            remote = cluster_statistics("local", str(folder), "y", INPUTS, spec,
                                        sample_rows=1000, client=client)
            t_cluster = time.perf_counter() - t
        cluster.close()

    def rel(a, b):
        scale = np.abs(b).max()
        return float(np.abs(a - b).max() / scale) if scale else 0.0

    diff = max(rel(remote.folds.comoment, mem.comoment), rel(remote.folds.mean, mem.mean),
               rel(remote.folds.n, mem.n))
    diff_stream = max(rel(streamed.folds.comoment, mem.comoment),
                      rel(streamed.folds.mean, mem.mean))
    n = args.rows
    print(f"rows {n:,} in {args.parts} Parquet files; 55 design terms, 5 folds")
    print(f"in memory (one row pass):        {t_mem:7.2f} s  {n / t_mem:12,.0f} rows/s")
    print(f"streamed from files (2 passes):  {t_stream:7.2f} s  {n / t_stream:12,.0f} rows/s  "
          f"max rel diff {diff_stream:.1e}")
    print(f"Dask LocalCluster, 2 workers:    {t_cluster:7.2f} s  {n / t_cluster:12,.0f} rows/s  "
          f"max rel diff {diff:.1e}")
    print(f"max_rel_diff {diff:.2e} cluster_over_memory {t_mem / t_cluster:.2f}")


if __name__ == "__main__":
    main()
