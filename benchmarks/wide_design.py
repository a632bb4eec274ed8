"""A sweep with more than 2,000 design terms: time and peak memory.

21 inputs at order 3 with interactions give 2,023 terms (the tool's former
limit was 1,500). The rows are summarised in chunks, so the full design is
never in memory; every factorisation is terms x terms.

Usage::

    .venv/bin/python benchmarks/wide_design.py [--rows 20000] [--inputs 21]

Last line: ``wide_terms <p> seconds <s> peak_mb <m>``.
"""
from __future__ import annotations

import argparse
import resource
import sys
import time
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--rows", type=int, default=20_000)
    ap.add_argument("--inputs", type=int, default=21)
    args = ap.parse_args()
    from engine import ArrayData, SchemeSpec, SweepSpec, analyse

    rng = np.random.default_rng(0)
    n, d = args.rows, args.inputs
    X = rng.uniform(-1, 1, (n, d))
    y = X.sum(axis=1) + X[:, 0] * X[:, 1] - X[:, 2] ** 3 + rng.normal(0, 0.1, n)
    data = ArrayData(X, y, inputs=tuple(f"x{i + 1}" for i in range(d)), target="y")
    spec = SweepSpec("y", data.inputs, max_order=3, interactions=True,
                     scheme=SchemeSpec("kfold", folds=5), penalties=(0.0, 0.1, 1.0, 10.0))
    t = time.perf_counter()
    a = analyse(data, spec)
    sec = time.perf_counter() - t
    peak = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024
    rec = a.recommendation.recommended
    print(f"{n:,} rows x {d} inputs, order 3 with interactions: {a.basis.n_terms} terms; "
          f"sweep {sec:.1f} s; recommended order {rec.order}, penalty {rec.penalty:g}")
    print(f"wide_terms {a.basis.n_terms} seconds {sec:.1f} peak_mb {peak:.0f}")


if __name__ == "__main__":
    main()
