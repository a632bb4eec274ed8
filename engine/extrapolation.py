"""More rows or a simpler model? The learning curve carried past the data.

For each cell the mean validation error along the learning curve is fitted by
``error(n) = a * n^(-b) + c`` (``a, c >= 0``, ``0.05 <= b <= 3``; ``c`` is
the error no number of rows removes, ``a n^-b`` the part more rows shrink), a
common model of learning curves. For fixed ``b`` the curve is linear in
``(a, c)``, solved by least squares with both bounds; ``b`` is found by a grid
search refined by a bounded scalar minimisation (deterministic, no starting
values). Points are weighted by their standard errors. The same curve fitted
to each split's own learning curve gives the band: from the lowest to the
highest of those fits' predictions.

The extrapolation is declined, in plain words, when the mean curve does not
fall steadily as rows are added, when there are fewer than four sizes, or when
the per-split fits disagree so much that the band is wider than the value.
"""
from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import pandas as pd

B_RANGE = (0.05, 3.0)
FACTORS = (2.0, 5.0)
MIN_SIZES = 4


@dataclass(frozen=True)
class PowerLaw:
    """``error(n) = a * n^(-b) + c`` and its weighted residual sum of squares."""

    a: float
    b: float
    c: float
    rss: float

    def __call__(self, n) -> np.ndarray:
        return self.a * np.asarray(n, float) ** (-self.b) + self.c


def _solve_ac(n: np.ndarray, e: np.ndarray, w: np.ndarray, b) -> tuple[np.ndarray, ...]:
    """Weighted least squares of ``e`` on ``[n^-b, 1]`` with ``a, c >= 0``, for each ``b``.

    Two unknowns: the unconstrained solution of the 2 x 2 normal equations,
    or, when it breaks a bound, the better of the two one-variable fits
    (``a = 0`` or ``c = 0``). Returns ``(a, c, rss)`` with the shape of ``b``.
    """
    b = np.atleast_1d(np.asarray(b, float))
    X = n[None, :] ** (-b[:, None])             # (G, m)
    w2 = w * w
    sxx = (w2 * X * X).sum(axis=1)
    sx = (w2 * X).sum(axis=1)
    s1 = w2.sum()
    sxe = (w2 * X * e).sum(axis=1)
    se_ = (w2 * e).sum()
    det = sxx * s1 - sx * sx
    with np.errstate(divide="ignore", invalid="ignore"):
        a = np.where(det > 0, (sxe * s1 - sx * se_) / det, -1.0)
        c = np.where(det > 0, (sxx * se_ - sx * sxe) / det, -1.0)
    ok = (a >= 0) & (c >= 0)
    a_only = np.clip(np.where(sxx > 0, sxe / np.where(sxx > 0, sxx, 1.0), 0.0), 0, None)
    c_only = max(se_ / s1, 0.0)

    def rss(a_, c_):
        r = (e[None, :] - a_[:, None] * X - c_[:, None]) * w[None, :]
        return (r * r).sum(axis=1)
    r_full = np.where(ok, rss(np.where(ok, a, 0.0), np.where(ok, c, 0.0)), np.inf)
    r_a = rss(a_only, np.zeros_like(a_only))
    r_c = rss(np.zeros_like(a_only), np.full_like(a_only, c_only))
    best_a = np.where(ok, a, np.where(r_a <= r_c, a_only, 0.0))
    best_c = np.where(ok, c, np.where(r_a <= r_c, 0.0, c_only))
    return best_a, best_c, np.minimum(r_full, np.minimum(r_a, r_c))


def fit_power_law(n, error, se=None) -> PowerLaw | None:
    """Fit ``error = a n^-b + c`` to a learning curve.

    Parameters
    ----------
    n : training sizes (at least `MIN_SIZES` distinct, positive).
    error : mean validation error at each size.
    se : standard errors of ``error`` (weights ``1/se``); equal weights when None.

    Returns
    -------
    PowerLaw, or None when the data cannot carry the curve.
    """
    n = np.asarray(n, float)
    e = np.asarray(error, float)
    ok = np.isfinite(n) & np.isfinite(e) & (n > 0)
    n, e = n[ok], e[ok]
    if np.unique(n).size < MIN_SIZES:
        return None
    if se is None:
        w = np.ones_like(e)
    else:
        s = np.asarray(se, float)[ok]
        good = np.isfinite(s) & (s > 0)
        floor = np.median(s[good]) * 0.1 if good.any() else 1.0
        w = 1.0 / np.where(good, np.maximum(s, floor), np.max(s[good]) if good.any() else 1.0)
    w = w / w.max()
    scale = float(np.max(np.abs(e))) or 1.0
    e_s = e / scale
    grid = np.linspace(*B_RANGE, 120)
    rss = _solve_ac(n, e_s, w, grid)[2]
    i = int(np.argmin(rss))
    lo, hi = grid[max(i - 1, 0)], grid[min(i + 1, grid.size - 1)]
    if hi > lo:
        from scipy.optimize import minimize_scalar   # imported when a curve is fitted

        res = minimize_scalar(lambda b: float(_solve_ac(n, e_s, w, b)[2][0]), bounds=(lo, hi),
                              method="bounded", options={"xatol": 1e-6})
        b = float(res.x) if res.fun <= rss[i] else float(grid[i])
    else:
        b = float(grid[i])
    a, c, r = (float(v[0]) for v in _solve_ac(n, e_s, w, b))
    return PowerLaw(a * scale, b, c * scale, r * scale ** 2)


def falls_steadily(error: np.ndarray, se: np.ndarray) -> tuple[bool, int]:
    """Whether a mean learning curve falls as rows are added, allowing for noise.

    A rise between neighbouring sizes larger than twice the standard error of
    the larger size's mean counts as not falling (common practice: a step
    within noise is no evidence either way). Returns ``(steady, first bad index)``.
    """
    e = np.asarray(error, float)
    s = np.nan_to_num(np.asarray(se, float), nan=0.0)
    for j in range(1, e.size):
        if e[j] - e[j - 1] > 2.0 * max(s[j], s[j - 1]) + 1e-12 * abs(e[j - 1]):
            return False, j
    return True, -1


@dataclass
class RowsOutlook:
    """What more rows would buy, per cell and for the recommended one.

    Attributes
    ----------
    rows_now : training rows of the largest learning-curve size (mean over splits).
    table_rows : rows of the table (the factors multiply this).
    factors : the multiples looked at (2 and 5).
    table : one row per cell: ``order``, ``penalty``, ``status`` ('fitted' or
        'declined'), ``reason``, ``error_now`` and, per factor ``f``,
        ``error_at_{f}x``, ``low_at_{f}x``, ``high_at_{f}x``; ``a``, ``b``,
        ``floor`` (``c``).
    recommended : the row of the recommended cell (a dict).
    supported_order : per factor, the order the larger table would support
        (None when declined).
    declined : True when nothing can be said for the recommended cell.
    verdict : plain sentences for the page and the pack.
    notes : how it was computed.
    """

    rows_now: float
    table_rows: int
    factors: tuple[float, ...]
    table: pd.DataFrame
    recommended: dict
    supported_order: dict
    declined: bool
    verdict: list[str] = field(default_factory=list)
    notes: list[str] = field(default_factory=list)

    def to_dict(self) -> dict:
        return {"rows_now": self.rows_now, "table_rows": self.table_rows,
                "factors": list(self.factors), "declined": self.declined,
                "recommended": dict(self.recommended),
                "supported_order": {f"{f:g}x": v for f, v in self.supported_order.items()},
                "verdict": list(self.verdict), "notes": list(self.notes),
                "cells": self.table.to_dict(orient="records")}


def _cell_outlook(curve: pd.DataFrame, folds: pd.DataFrame, factors, table_scale: float) -> dict:
    """Extrapolate one cell's learning curve; ``curve`` has one row per size."""
    curve = curve.sort_values("rows_used")
    n = curve["rows_used"].to_numpy(float)
    e = curve["validation_mse"].to_numpy(float)
    se = curve["validation_mse_se"].to_numpy(float)
    out: dict = {"error_now": float(e[-1]), "status": "declined", "reason": "", "a": np.nan,
                 "b": np.nan, "floor": np.nan}
    for f in factors:
        out.update({f"error_at_{f:g}x": np.nan, f"low_at_{f:g}x": np.nan,
                    f"high_at_{f:g}x": np.nan})
    if np.unique(n).size < MIN_SIZES:
        out["reason"] = (f"only {np.unique(n).size} learning-curve sizes; at least {MIN_SIZES} "
                         "are needed to fit the curve")
        return out
    steady, j = falls_steadily(e, se)
    if not steady:
        out["reason"] = (f"the validation error does not fall steadily as rows are added (it "
                         f"rises from {e[j - 1]:.4g} at {n[j - 1]:.0f} rows to {e[j]:.4g} at "
                         f"{n[j]:.0f}), so a curve through it cannot say what more rows bring")
        return out
    fit = fit_power_law(n, e, se)
    if fit is None:
        out["reason"] = "the curve could not be fitted"
        return out
    targets = {f: n[-1] * f for f in factors}
    split_preds = {f: [] for f in factors}
    by_split: dict = {f: {} for f in factors}
    for fold, g in folds.groupby("fold"):
        g = g.sort_values("rows_used")
        sf = fit_power_law(g["rows_used"].to_numpy(float), g["validation_mse"].to_numpy(float))
        if sf is not None:
            for f in factors:
                split_preds[f].append(float(sf(targets[f])))
                by_split[f][int(fold)] = float(sf(targets[f]))
    out["_by_split"] = by_split
    out.update({"a": fit.a, "b": fit.b, "floor": fit.c})
    for f in factors:
        mid = float(fit(targets[f]))
        vals = np.array(split_preds[f] + [mid])
        out[f"error_at_{f:g}x"] = mid
        out[f"low_at_{f:g}x"] = float(vals.min())
        out[f"high_at_{f:g}x"] = float(vals.max())
    top = max(factors)
    width = out[f"high_at_{top:g}x"] - out[f"low_at_{top:g}x"]
    if len(split_preds[top]) < 2:
        out["reason"] = "too few splits to put a band on the extrapolation"
        return out
    if width > abs(out[f"error_at_{top:g}x"]):
        out["reason"] = (f"the fits to each split's curve disagree too much (at {top:g}x the rows "
                         f"they range from {out[f'low_at_{top:g}x']:.4g} to "
                         f"{out[f'high_at_{top:g}x']:.4g}), so the extrapolation is unstable")
        return out
    out["status"] = "fitted"
    return out


def _supported_order(fitted: pd.DataFrame, f: float) -> int:
    """The order a table ``f`` times larger would support: a paired one-standard-error rule.

    Per split, each order's extrapolated error minus that of the order with
    the lowest expected error (same validation rows, so the split-to-split
    level cancels); the simplest order whose mean difference is within one
    standard error of the differences.
    """
    col = f"error_at_{f:g}x"
    best = fitted.sort_values(col).iloc[0]
    ref = best["_by_split"][f]
    for _, r in fitted.sort_values("order").iterrows():
        if int(r["order"]) == int(best["order"]):
            return int(r["order"])
        common = sorted(set(ref) & set(r["_by_split"][f]))
        if len(common) < 2:
            continue
        d = np.array([r["_by_split"][f][k] - ref[k] for k in common])
        if d.mean() <= d.std(ddof=1) / np.sqrt(d.size):
            return int(r["order"])
    return int(best["order"])


def rows_outlook(lc_folds: pd.DataFrame, lc_table: pd.DataFrame, recommended: tuple[int, float],
                 table_rows: int, factors=FACTORS,
                 cells: list[tuple[int, float]] | None = None) -> RowsOutlook:
    """Expected validation error at more rows, per order, and what order they would support.

    Parameters
    ----------
    lc_folds, lc_table : `engine.analysis.LearningCurve` ``folds`` and ``table``
        (every order of interest, every penalty).
    recommended : the recommended cell ``(order, penalty)``.
    table_rows : rows of the table now (the factors multiply the rows; each
        split's training set grows in proportion).
    factors : multiples of the rows to look at.
    cells : the (order, penalty) cells to carry forward (default: the
        recommended cell and, for every other order, its penalty with the
        lowest validation error at the largest learning-curve size).

    Returns
    -------
    RowsOutlook
    """
    factors = tuple(float(f) for f in factors)
    rq, ra = int(recommended[0]), float(recommended[1])
    t = lc_table.copy()
    rows_used = lc_folds.groupby(["order", "penalty", "train_size"])["rows_used"].mean()
    t = t.join(rows_used, on=["order", "penalty", "train_size"])
    largest = t["train_size"].max()
    picked, cells = cells, []
    for q, g in t[t["train_size"] == largest].groupby("order"):
        if picked is not None:
            break
        if q == rq:
            cells.append((rq, ra))
        else:
            r = g.sort_values(["validation_mse", "penalty"], ascending=[True, False]).iloc[0]
            cells.append((int(q), float(r["penalty"])))
    if picked is not None:
        cells = [(int(q), float(a)) for q, a in picked]
    if (rq, ra) not in cells:
        cells.append((rq, ra))
    rows = []
    for q, a in sorted(cells):
        sel_t = t[(t["order"] == q) & np.isclose(t["penalty"], a, rtol=1e-12, atol=0)]
        sel_f = lc_folds[(lc_folds["order"] == q)
                         & np.isclose(lc_folds["penalty"], a, rtol=1e-12, atol=0)]
        if sel_t.empty:
            continue
        rows.append({"order": q, "penalty": a, "recommended": (q, a) == (rq, ra),
                     **_cell_outlook(sel_t, sel_f, factors, 1.0)})
    table = pd.DataFrame(rows)
    by_split = table.pop("_by_split") if "_by_split" in table else None
    rows_now = float(t.loc[t["train_size"] == largest, "rows_used"].mean())
    rec = table[table["recommended"]].iloc[0].to_dict() if len(table) else {}
    declined = not rec or rec.get("status") != "fitted"
    supported: dict = {}
    verdict: list[str] = []
    fitted = table[table["status"] == "fitted"] if len(table) else table
    if by_split is not None:
        fitted = fitted.assign(_by_split=by_split[fitted.index])
    for f in factors:
        supported[f] = None if declined or fitted.empty else _supported_order(fitted, f)
    if declined:
        why = rec.get("reason") if rec else "the recommended cell has no learning curve"
        verdict.append(f"No forecast of what more rows would bring: {why}.")
    else:
        words = []
        for f in factors:
            words.append(f"about {rec[f'error_at_{f:g}x']:.4g} at {f:g}x the rows "
                         f"(band {rec[f'low_at_{f:g}x']:.4g} to {rec[f'high_at_{f:g}x']:.4g})")
        verdict.append(f"Now {rec['error_now']:.4g} (validation MSE with {rows_now:.0f} "
                       f"training rows); expected " + " and ".join(words) + ". The curve "
                       f"levels off near {rec['floor']:.4g}, the error more rows of the same "
                       "kind cannot remove.")
        top = max(factors)
        gain = rec["error_now"] - rec[f"error_at_{top:g}x"]
        share = gain / rec["error_now"] if rec["error_now"] > 0 else 0.0
        by_order: dict[int, list[float]] = {}
        for f in factors:
            if supported[f] is not None:
                by_order.setdefault(supported[f], []).append(f)
        for q, fs in by_order.items():
            when = " and ".join(f"{f:g}x" for f in fs)
            col = f"error_at_{fs[-1]:g}x"
            if q > rq:
                verdict.append(f"With {when} the rows the curves point to order {q} "
                               f"(expected {fitted.loc[fitted['order'] == q, col].iloc[0]:.4g} "
                               f"at {fs[-1]:g}x against {rec[col]:.4g} for order {rq}).")
            elif q < rq:
                verdict.append(f"With {when} the rows order {q} is expected to do as well as "
                               f"order {rq}: a simpler model may be enough.")
            else:
                verdict.append(f"With {when} the rows the curves still point to order {rq}.")
        verdict.append("More rows would buy little: the error is close to its floor."
                       if share < 0.05 else
                       f"More rows would lower the error by about {100 * share:.0f}% at "
                       f"{top:g}x the rows.")
    notes = ["Fitted error(n) = a·n^(-b) + c to the mean validation error of each order's "
             "learning curve (at the recommended penalty for the recommended order, at the "
             "penalty with the lowest validation error for each other order); the band runs from the lowest to the highest "
             "prediction of the same curve fitted to each split's own learning curve. The "
             "order a larger table would support is the simplest whose extrapolated error, "
             "split by split, is within one standard error of the lowest.",
             "An extrapolation assumes the new rows come from the same conditions as these; "
             "it is a guide for planning, not a promise."]
    return RowsOutlook(rows_now=rows_now, table_rows=int(table_rows), factors=factors,
                       table=table, recommended=rec, supported_order=supported,
                       declined=declined, verdict=verdict, notes=notes)


def more_rows(analysis, data, spec=None, factors=FACTORS, learning=None) -> RowsOutlook:
    """`rows_outlook` for the recommended cell of ``analysis`` and every order of its request.

    Runs `engine.analysis.learning_curve` on every order (one pass over the
    rows per round of splits), unless ``learning`` (a `LearningCurve` of the
    same data and request) already holds every order at the penalties needed.
    """
    from dataclasses import replace

    from .analysis import learning_curve
    spec = analysis.spec if spec is None else spec
    data_w, spec_w = analysis.working(data, spec)
    rec = analysis.recommendation.recommended
    # per order, the penalty the sweep found best (the recommended one for its order):
    # the learning curve then runs only at those penalties
    t = analysis.at_rung()
    cells = [(int(rec.order), float(rec.penalty))]
    for q, g in t.groupby("order"):
        if int(q) != int(rec.order):
            r = g.sort_values(["validation_mse", "penalty"], ascending=[True, False]).iloc[0]
            cells.append((int(q), float(r["penalty"])))
    pens = tuple(sorted({a for _, a in cells}))
    orders = sorted({q for q, _ in cells})
    if learning is not None and learning.covers(orders, pens):
        lc = learning.restrict(orders, pens)
    else:
        lc = learning_curve(data_w, replace(spec_w, penalties=pens), orders=orders)
    out = rows_outlook(lc.folds, lc.table, (rec.order, rec.penalty), int(len(data_w.y)), factors,
                       cells=cells)
    if lc.note:
        out.notes.append(lc.note)
    return out
