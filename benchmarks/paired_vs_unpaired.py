"""Paired against unpaired one-standard-error rule on a true cubic with heavy-tailed noise.

Each seed draws 1,000 rows of ``y = 0.5 x^3 - 1.5 x + 1.5 e`` with ``x`` uniform
on [-2, 2] and ``e`` Student-t with 3 degrees of freedom (heavy tails: a few
rows dominate each fold's error, so fold errors swing together for every
cell). Both rules see the same shuffled 10-fold sweep of orders 0..6 over the
default penalty grid; the script counts how often each recommends order 3 or
higher (the true order is 3).

Usage: python benchmarks/paired_vs_unpaired.py [--seeds 20] [--n 1000]
The last line reads ``paired <k>/<seeds> unpaired <k>/<seeds>``.
"""
from __future__ import annotations

import argparse
import os
import sys

import numpy as np

sys.path.insert(0, os.path.join(os.path.dirname(__file__), ".."))

from engine import ArrayData, SchemeSpec, SweepSpec, analyse  # noqa: E402


def draw(n: int, seed: int) -> ArrayData:
    rng = np.random.default_rng(seed)
    x = rng.uniform(-2.0, 2.0, n)
    y = 0.5 * x ** 3 - 1.5 * x + 1.5 * rng.standard_t(3, n)
    return ArrayData(x, y, ("x",), "y")


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--seeds", type=int, default=20)
    ap.add_argument("--n", type=int, default=1000)
    args = ap.parse_args()
    hits = {"paired": 0, "unpaired": 0}
    print(f"{'seed':>4}  {'paired pick':<26} {'unpaired pick':<26}")
    for seed in range(args.seeds):
        data = draw(args.n, seed)
        picks = {}
        for rule in hits:
            spec = SweepSpec("y", ("x",), max_order=6, scheme=SchemeSpec("kfold", folds=10),
                             seed=seed, rule=rule)
            rec = analyse(data, spec).recommendation.recommended
            picks[rule] = rec
            hits[rule] += int(rec.order >= 3)
        print(f"{seed:>4}  {picks['paired'].label:<26} {picks['unpaired'].label:<26}")
    print(f"paired {hits['paired']}/{args.seeds} unpaired {hits['unpaired']}/{args.seeds}")


if __name__ == "__main__":
    main()
