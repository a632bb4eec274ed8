"""Coverage of the error interval and the prediction intervals in simulation.

A true cubic with normal noise (SD 1) on inputs uniform on [-2, 2]; the cell
(order 3, no penalty, or order 3 with a ridge penalty) is fixed. Per replicate:

* the error interval (nested cross-validation, Bates, Hastie and Tibshirani,
  JASA 2023) is checked against the true error of the model fitted on all
  rows, 1 + E_x[(f(x) - f_hat(x))^2], computed exactly by Gauss-Legendre
  quadrature (the squared difference is a polynomial);
* the analytic and CV+ prediction intervals (Barber et al., Annals of
  Statistics 2021) are checked on fresh rows from the same population, and
  the coverage Fitladder reports on validation rows is recorded.

Prints the share of replicates (or fresh rows) covered against the nominal
level. The test suite runs a smaller version (tests/test_intervals.py).

Usage: python benchmarks/interval_coverage.py [--replicates 1000] [--n 100]
"""
from __future__ import annotations

import argparse
import os
import sys
import time

import numpy as np

sys.path.insert(0, os.path.join(os.path.dirname(__file__), ".."))

from engine.analysis import ArrayData  # noqa: E402
from engine.intervals import error_interval, prediction_intervals  # noqa: E402
from engine.spec import SchemeSpec, SweepSpec  # noqa: E402

NODES, WEIGHTS = np.polynomial.legendre.leggauss(12)   # exact to degree 23


def truth(x):
    return 1.0 + x - 0.5 * x ** 3


def simulate(replicates: int, n: int, penalty: float, seed: int, repeats: int,
             fresh: int = 200) -> dict:
    spec = SweepSpec("y", ("x",), orders=(3,), penalties=(penalty,),
                     scheme=SchemeSpec("kfold", folds=5))
    hit_err, hit_a, hit_c, rep_a, rep_c = [], [], [], [], []
    xq = 2.0 * NODES
    for r in range(replicates):
        rng = np.random.default_rng(seed + r)
        x = rng.uniform(-2, 2, n)
        y = truth(x) + rng.normal(0, 1, n)
        data = ArrayData(x, y)
        s = SweepSpec(**{**spec.__dict__, "seed": r})
        ei = error_interval(data, s, 3, penalty, repeats=repeats)
        pi = prediction_intervals(data, s, 3, penalty)
        # true error of the model fitted on all rows: noise + mean squared bias over U(-2, 2)
        fq = pi.bounds(xq)["prediction"].to_numpy()
        err = 1.0 + 0.5 * float(np.sum(WEIGHTS * (truth(xq) - fq) ** 2))
        hit_err.append(ei.low <= err <= ei.high)
        xn = rng.uniform(-2, 2, fresh)
        yn = truth(xn) + rng.normal(0, 1, fresh)
        b = pi.bounds(xn)
        hit_a.append(np.mean((yn >= b["analytic_low"]) & (yn <= b["analytic_high"])))
        hit_c.append(np.mean((yn >= b["cvplus_low"]) & (yn <= b["cvplus_high"])))
        rep_a.append(pi.analytic_coverage)
        rep_c.append(pi.cvplus_coverage)
    return {"error_interval": float(np.mean(hit_err)), "analytic_fresh": float(np.mean(hit_a)),
            "cvplus_fresh": float(np.mean(hit_c)), "analytic_reported": float(np.mean(rep_a)),
            "cvplus_reported": float(np.mean(rep_c)), "level": ei.level}


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--replicates", type=int, default=1000)
    ap.add_argument("--n", type=int, default=100)
    ap.add_argument("--repeats", type=int, default=5, help="nested CV repetitions")
    ap.add_argument("--seed", type=int, default=1000)
    a = ap.parse_args()
    for penalty in (0.0, 1.0):
        t = time.perf_counter()
        res = simulate(a.replicates, a.n, penalty, a.seed, a.repeats)
        print(f"penalty {penalty:g}: n={a.n}, {a.replicates} replicates, nominal {res['level']:.2f} "
              f"({time.perf_counter() - t:.0f} s)")
        print(f"  error interval covers the true error        {res['error_interval']:.3f}")
        print(f"  analytic interval, fresh rows                {res['analytic_fresh']:.3f}"
              f"   (reported on validation rows {res['analytic_reported']:.3f})")
        print(f"  CV+ interval, fresh rows                     {res['cvplus_fresh']:.3f}"
              f"   (reported on validation rows {res['cvplus_reported']:.3f})")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
