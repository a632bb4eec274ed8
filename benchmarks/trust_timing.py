"""Time nested cross-validation and selection stability on a 1,000-row table.

Usage: python benchmarks/trust_timing.py
"""
from __future__ import annotations

import os
import sys
import time

import numpy as np

sys.path.insert(0, os.path.join(os.path.dirname(__file__), ".."))

from engine import ArrayData, SchemeSpec, SweepSpec  # noqa: E402
from engine.trust import nested_cv, selection_stability  # noqa: E402


def main() -> int:
    rng = np.random.default_rng(0)
    n = 1000
    X = rng.normal(size=(n, 2))
    y = 1 + X[:, 0] - 0.5 * X[:, 1] ** 2 + 0.5 * rng.normal(size=n)   # noise variance 0.25
    data = ArrayData(X, y, ("a", "b"), "y")
    worst = 0.0
    for kind in ("kfold", "blocked", "loo"):
        spec = SweepSpec("y", ("a", "b"), max_order=6, scheme=SchemeSpec(kind))
        t0 = time.perf_counter()
        nested = nested_cv(data, spec)
        t1 = time.perf_counter()
        selection_stability(data, spec, resamples=20)
        t2 = time.perf_counter()
        worst = max(worst, t2 - t0)
        print(f"{kind:8s} nested CV {t1 - t0:.2f}s (outer MSE {nested.outer_mse:.3f}, inner "
              f"{nested.inner_mse:.3f}); stability, 20 resamples {t2 - t1:.2f}s")
    print(f"trust_seconds_max {worst:.2f}s")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
