"""Time the lasso sweep from summaries against scikit-learn's validation_curve loop.

Order 2 of 20 inputs with interactions (230 terms), n = 20,000 rows, 30 lasso
penalties x 10 shuffled folds. Ours: one pass over the rows, then coordinate
descent on each fold's 230 x 230 standardised cross-product matrix, warm
started along the penalties. scikit-learn: ``validation_curve`` over a
``PolynomialFeatures -> StandardScaler -> Lasso(tol=1e-10)`` pipeline on the
same folds.

The scikit-learn side is slow (every cell is a fresh fit on 18,000 x 230 rows to
a tight tolerance). By default it is timed on the first ``--sk-folds`` folds
(all 30 penalties) and its time for all 10 folds is extrapolated in proportion;
the output says so. ``--sk-folds 10`` runs it fully.

Usage: python benchmarks/lasso_vs_sklearn.py [--n 20000] [--sk-folds 2]
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

from sklearn.linear_model import Lasso  # noqa: E402
from sklearn.model_selection import validation_curve  # noqa: E402
from sklearn.pipeline import Pipeline  # noqa: E402
from sklearn.preprocessing import PolynomialFeatures, StandardScaler  # noqa: E402

from engine import ArrayData, SchemeSpec, SweepSpec, analyse  # noqa: E402

INPUTS = 20
ORDER = 2
FOLDS = 10
PENALTIES = tuple(np.logspace(-3, 0, 30))


def make_data(n: int, seed: int = 0) -> ArrayData:
    rng = np.random.default_rng(seed)
    X = rng.normal(size=(n, INPUTS))
    y = (1.5 * X[:, 0] - 1.0 * X[:, 1] + 0.7 * X[:, 2] * X[:, 3] + 0.5 * X[:, 4] ** 2
         + 0.3 * X[:, 5] + rng.normal(0, 1.0, n))
    names = tuple(f"x{j + 1}" for j in range(INPUTS))
    return ArrayData(X, y, names, "y")


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--n", type=int, default=20_000, help="rows")
    ap.add_argument("--sk-folds", type=int, default=2,
                    help="folds the scikit-learn loop is run on (10 = all; fewer: extrapolated)")
    args = ap.parse_args(argv)
    data = make_data(args.n)
    spec = SweepSpec("y", data.inputs, orders=(ORDER,), interactions=True, penalties=PENALTIES,
                     families=("lasso",), scheme=SchemeSpec("kfold", folds=FOLDS), seed=0)
    best, res = float("inf"), None
    for _ in range(2):
        t0 = time.perf_counter()
        res = analyse(data, spec)
        best = min(best, time.perf_counter() - t0)
    terms = res.sweep.parameters[0] - 1
    splits = list(zip(res.plan.train_sets, res.plan.valid_sets))
    k = max(1, min(args.sk_folds, FOLDS))
    pipe = Pipeline([("terms", PolynomialFeatures(ORDER, include_bias=False)),
                     ("scale", StandardScaler()),
                     ("lasso", Lasso(tol=1e-10, max_iter=1_000_000))])
    t0 = time.perf_counter()
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        _, va = validation_curve(pipe, data.X, data.y, param_name="lasso__alpha",
                                 param_range=list(PENALTIES), cv=splits[:k],
                                 scoring="neg_mean_squared_error", n_jobs=1)
    t_sk_part = time.perf_counter() - t0
    t_sk = t_sk_part * FOLDS / k
    ref = -va                                     # (penalties, k folds)
    ours = res.sweep.valid_mse[0][:, :k]
    rel = np.abs(ours - ref) / np.abs(ref)
    print(f"n={args.n}: order {ORDER} of {INPUTS} inputs = {terms} terms; {len(PENALTIES)} lasso "
          f"penalties x {FOLDS} folds")
    print(f"  sweep from summaries      {best:9.2f} s (best of 2; all {FOLDS} folds)")
    if k < FOLDS:
        print(f"  scikit-learn loop         {t_sk_part:9.2f} s on {k} of {FOLDS} folds "
              f"(all {len(PENALTIES)} penalties); extrapolated to {FOLDS} folds: {t_sk:.1f} s")
    else:
        print(f"  scikit-learn loop         {t_sk:9.2f} s (all folds)")
    nz = np.mean([(c != 0).sum() for c in res.sweep.coef_std[0].reshape(-1, terms)])
    print(f"  mean non-zero terms per cell {nz:.1f}; cells compared {rel.size}")
    print(f"speedup {t_sk / best:.0f}x max_rel_diff {rel.max():.3g}")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
