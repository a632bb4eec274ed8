"""Time the one-pass sweep against the scikit-learn loop a practitioner would write.

The practitioner's loop: for every order, one ``validation_curve`` call over the
penalties on a PolynomialFeatures -> StandardScaler -> Ridge pipeline, on the
same 10 folds. Both must give the same validation MSE for every
(order, penalty, fold) cell.

Then, at a larger n, the whole grid is timed against one ``X.T @ X`` of the
highest-order design (already built), the floor for any method that looks at
every row.

Usage: python benchmarks/sweep_vs_sklearn.py [--n 100000] [--big-n 1000000]
The last line reads ``speedup <ratio>x max_rel_diff <value>``.
"""
from __future__ import annotations

import argparse
import os
import sys
import time
import warnings

import numpy as np

sys.path.insert(0, os.path.join(os.path.dirname(__file__), ".."))

from sklearn.linear_model import Ridge  # noqa: E402
from sklearn.model_selection import validation_curve  # noqa: E402
from sklearn.pipeline import Pipeline  # noqa: E402
from sklearn.preprocessing import PolynomialFeatures, StandardScaler  # noqa: E402

from engine import ArrayData, SchemeSpec, SweepSpec, analyse  # noqa: E402

ORDERS = tuple(range(1, 13))
FOLDS = 10


def make_data(n: int, seed: int = 0) -> ArrayData:
    rng = np.random.default_rng(seed)
    x = rng.uniform(-1.0, 1.0, n)
    y = np.sin(3 * x) + 0.5 * x + 0.3 * rng.normal(size=n)
    return ArrayData(x, y, ("x",), "y")


def spec_for(penalties) -> SweepSpec:
    return SweepSpec("y", ("x",), orders=ORDERS, penalties=tuple(penalties),
                     scheme=SchemeSpec("kfold", folds=FOLDS), seed=0)


def time_sweep(data: ArrayData, spec: SweepSpec, repeats: int = 3):
    best, result = float("inf"), None
    for _ in range(repeats):
        t0 = time.perf_counter()
        result = analyse(data, spec)
        best = min(best, time.perf_counter() - t0)
    return best, result


def sklearn_loop(data: ArrayData, penalties, splits):
    """The loop a practitioner writes: one validation_curve call per order."""
    out = np.zeros((len(ORDERS), len(penalties), len(splits)))
    t0 = time.perf_counter()
    for i, q in enumerate(ORDERS):
        pipe = Pipeline([("terms", PolynomialFeatures(q, include_bias=False)),
                         ("scale", StandardScaler()), ("ridge", Ridge())])
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            _, va = validation_curve(pipe, data.X, data.y, param_name="ridge__alpha",
                                     param_range=list(penalties), cv=splits,
                                     scoring="neg_mean_squared_error", n_jobs=1)
        out[i] = -va
    return time.perf_counter() - t0, out


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--n", type=int, default=100_000, help="rows for the comparison with scikit-learn")
    ap.add_argument("--big-n", type=int, default=1_000_000,
                    help="rows for the comparison with one X.T @ X (0 to skip)")
    args = ap.parse_args(argv)

    # 30 penalties: 29 log-spaced from 1e-6 to 1e3, and no penalty. scikit-learn's
    # Ridge(alpha=0) solves the unpenalised problem through its normal equations,
    # which lose digits at order 12; the 1e-6 rtol check below is on every cell.
    penalties = (0.0,) + tuple(np.logspace(-6, 3, 29))
    data = make_data(args.n)
    spec = spec_for(penalties)
    t_sweep, res = time_sweep(data, spec)
    splits = list(zip(res.plan.train_sets, res.plan.valid_sets))
    t_sk, ref = sklearn_loop(data, penalties, splits)
    ours = res.sweep.valid_mse
    rel = np.abs(ours - ref) / np.abs(ref)
    cells = len(ORDERS) * len(penalties) * FOLDS
    print(f"n={args.n}: {len(ORDERS)} orders x {len(penalties)} penalties x {FOLDS} folds "
          f"= {cells} cells")
    print(f"  one-pass sweep        {t_sweep * 1e3:9.1f} ms (best of 3)")
    print(f"  scikit-learn loop     {t_sk * 1e3:9.1f} ms (12 validation_curve calls)")
    worst = np.unravel_index(np.argmax(rel), rel.shape)
    print(f"  largest relative difference at order {ORDERS[worst[0]]}, penalty "
          f"{penalties[worst[1]]:.3g}, fold {worst[2] + 1}: {rel.max():.3g}")
    pos = np.array(penalties) > 0
    print(f"  largest relative difference with a penalty > 0: {rel[:, pos].max():.3g}")

    if args.big_n:
        big = make_data(args.big_n, seed=1)
        t_big, big_res = time_sweep(big, spec)
        # the grid alone, with the folds already dealt (the shuffle that deals
        # rows into folds as scikit-learn's KFold does is a fixed cost of its own)
        from engine.analysis import make_basis
        from engine.sweep import run_sweep
        basis = make_basis(big, spec)
        t_grid = float("inf")
        for _ in range(3):
            t0 = time.perf_counter()
            run_sweep(big.X, big.y, basis, big_res.plan, list(ORDERS), penalties)
            t_grid = min(t_grid, time.perf_counter() - t0)
        F = np.column_stack([big.X[:, 0] ** k for k in ORDERS])
        t_xtx = float("inf")
        for _ in range(5):
            t0 = time.perf_counter()
            G = F.T @ F
            t_xtx = min(t_xtx, time.perf_counter() - t0)
        del G
        print(f"n={args.big_n}: one X.T @ X of the {F.shape[0]} x {F.shape[1]} design "
              f"{t_xtx * 1e3:.1f} ms")
        print(f"  whole analysis (folds dealt, grid, tables, recommendation) {t_big * 1e3:.1f} ms, "
              f"ratio {t_big / t_xtx:.2f}")
        print(f"  grid alone from dealt folds {t_grid * 1e3:.1f} ms, ratio {t_grid / t_xtx:.2f}")
    print(f"speedup {t_sk / t_sweep:.0f}x max_rel_diff {rel.max():.3g}")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
