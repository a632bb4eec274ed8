"""Inputs that reproduce the target: copies, transforms and exact combinations.

A column computed from the target (a log-transformed copy, a total that the
target is part of, a difference whose parts are inputs) makes every model look
perfect on validation rows and worthless in use. This module finds such
inputs cheaply, from the correlation matrix of the inputs and the target and
from per-column ranks; no model is refitted per row or per cell of the sweep.
Only the few candidates found are confirmed by an exact leave-one-out
(PRESS) fit of one or two inputs.

What is screened:

* one input, straight line: squared correlation with the target;
* one input, monotone: Spearman rank correlation, and the straight-line fit
  after a standard transform (log, square root, square, reciprocal) of the
  target or of the input;
* two inputs, a plane: squared multiple correlation from the three pairwise
  correlations, for every pair.

Thresholds (chosen here): a leave-one-out R² of at least `NEAR_R2` (0.999) or a
rank correlation of at least `NEAR_RANK` (0.999) counts as reproducing the
target; a residual standard deviation below `EXACT_SHARE` (0.1%) of the
target's is an exact relation, at the level of the numbers' rounding.
"""
from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

#: Leave-one-out R² from one or two inputs at or above which an input counts as
#: reproducing the target (chosen here; calibration against a reference can
#: reach it honestly, which is why the advice asks rather than removes).
NEAR_R2 = 0.999
#: Spearman rank correlation at or above which one input is a monotone
#: near-function of the target (chosen here).
NEAR_RANK = 0.999
#: Residual SD as a share of the target's SD below which a relation is exact:
#: 1 - R² <= 1e-6, the size of rounding to four or five significant digits.
EXACT_SHARE = 1e-3
#: A second input must cut the unexplained share of the first by this factor
#: before a pair is reported (otherwise the single input says it all).
PAIR_GAIN = 10.0
#: Correlations and ranks are screened on at most this many evenly spaced rows
#: (a near-exact relation holds on any subset); candidates are confirmed by
#: leave-one-out fits on all rows.
RANK_ROWS = 10_000
#: Pairs are screened among at most this many inputs (those most correlated
#: with the target); 300 inputs give 44,850 pairs, a few milliseconds.
MAX_PAIR_INPUTS = 300

_TRANSFORMS = {
    "log": (lambda v: np.log(v), lambda v: np.all(v > 0)),
    "square root": (lambda v: np.sqrt(v), lambda v: np.all(v >= 0)),
    "square": (lambda v: v * v, lambda v: True),
    "reciprocal": (lambda v: 1.0 / v, lambda v: np.all(v != 0)),
}


@dataclass
class Reproduction:
    """Inputs that reproduce the target.

    Attributes
    ----------
    columns : the input(s) involved, one or two names.
    kind : ``'copy'`` (a straight line in one input), ``'transform'`` (a
        straight line after a standard transform), ``'monotone'`` (a monotone
        function of one input, found by ranks) or ``'combination'`` (a plane
        in two inputs).
    relation : a short formula in words, e.g. ``'log(y) = a + b * x'``.
    r2 : in-sample R² of the relation (rank correlation squared for ``monotone``).
    validation_r2 : leave-one-out R² of the relation (nan for ``monotone``).
    rank_correlation : Spearman correlation of the input with the target (one input).
    residual_share : residual SD over the target's SD, ``sqrt(1 - r2)``.
    exact : residual share below `EXACT_SHARE` (rounding level).
    coefficients : intercept then slopes of the relation (nan for ``monotone``).
    """

    columns: tuple[str, ...]
    kind: str
    relation: str
    r2: float
    validation_r2: float
    rank_correlation: float = float("nan")
    residual_share: float = float("nan")
    exact: bool = False
    coefficients: tuple[float, ...] = field(default_factory=tuple)

    def to_dict(self) -> dict:
        return {"columns": list(self.columns), "kind": self.kind, "relation": self.relation,
                "r2": self.r2, "validation_r2": self.validation_r2,
                "rank_correlation": self.rank_correlation,
                "residual_share": self.residual_share, "exact": self.exact,
                "coefficients": list(self.coefficients)}


# ---------------------------------------------------------------------------
# small functions on arrays
# ---------------------------------------------------------------------------
def correlations(X: np.ndarray, y: np.ndarray, between_inputs: bool = True
                 ) -> tuple[np.ndarray, np.ndarray | None, np.ndarray]:
    """Correlations of every input with the target and (optionally) with each other.

    Returns
    -------
    (r_xy, R_xx, ok): (p,) correlations with the target, (p, p) correlation
    matrix of the inputs (None unless ``between_inputs``), (p,) mask of
    inputs that vary (others get 0).
    """
    X = np.asarray(X, float)
    y = np.asarray(y, float).ravel()
    Xc = X - X.mean(axis=0)
    yc = y - y.mean()
    sx = np.sqrt(np.einsum("ij,ij->j", Xc, Xc))
    sy = math.sqrt(float(yc @ yc))
    ok = sx > 0
    Z = Xc / np.where(ok, sx, 1.0)
    r_xy = (Z.T @ yc) / sy if sy > 0 else np.zeros(X.shape[1])
    r_xy = np.clip(np.where(ok, r_xy, 0.0), -1.0, 1.0)
    R = np.clip(Z.T @ Z, -1.0, 1.0) if between_inputs else None
    return r_xy, R, ok


def rank_correlations(X: np.ndarray, y: np.ndarray) -> np.ndarray:
    """Spearman rank correlation of every input with the target (average ranks for ties).

    The ranks come from pandas (``rank(method="average")``: the same average
    ranks as ``scipy.stats.rankdata``, and as there a column holding NaN ranks
    as NaN), which the engine has loaded already; importing ``scipy.stats``
    here would cost a third of a second before a small table's sweep.
    """
    import pandas as pd

    X = np.asarray(X, float)
    if X.shape[0] < 3:
        return np.full(X.shape[1], np.nan)
    y = np.asarray(y, float)
    # one contiguous column per input, ranked column by column
    rx = pd.DataFrame(np.asfortranarray(X), copy=False).rank(method="average").to_numpy()
    rx = np.array(rx, dtype=float, order="F", copy=True)
    rx[:, np.isnan(X).any(axis=0)] = np.nan
    ry = pd.Series(y).rank(method="average").to_numpy(float, copy=True)
    if np.isnan(y).any():
        ry[:] = np.nan
    r, _, ok = correlations(rx, ry, between_inputs=False)
    return np.where(ok, r, np.nan)


def pair_r2(r_xy: np.ndarray, R: np.ndarray) -> np.ndarray:
    """Squared multiple correlation of the target on each pair of inputs.

    ``(r1² + r2² - 2 r1 r2 r12) / (1 - r12²)`` from the correlations of the
    two inputs with the target (r1, r2) and with each other (r12); nan on the
    diagonal and for pairs that are themselves (nearly) collinear.
    """
    r1 = r_xy[:, None]
    r2 = r_xy[None, :]
    den = 1.0 - R * R
    with np.errstate(divide="ignore", invalid="ignore"):
        out = (r1 * r1 + r2 * r2 - 2.0 * r1 * r2 * R) / den
    out[~(den > 1e-10)] = np.nan
    np.fill_diagonal(out, np.nan)
    return np.clip(out, 0.0, 1.0)


def loo_fit(F: np.ndarray, y: np.ndarray) -> tuple[float, float, np.ndarray]:
    """Straight-line (plane) fit of ``y`` on the columns of ``F``, with an intercept.

    Returns
    -------
    (r2, loo_r2, coefficients): in-sample R², leave-one-out R² from the exact
    identity ``e_i / (1 - h_i)`` (PRESS), and intercept then slopes.
    """
    F = np.asarray(F, float)
    if F.ndim == 1:
        F = F[:, None]
    y = np.asarray(y, float)
    n = y.size
    A = np.column_stack([np.ones(n), F])
    Q, Rf = np.linalg.qr(A)
    coef = np.linalg.lstsq(Rf, Q.T @ y, rcond=None)[0]
    e = y - A @ coef
    h = np.einsum("ij,ij->i", Q, Q)
    tss = float(np.sum((y - y.mean()) ** 2))
    if tss <= 0:
        return float("nan"), float("nan"), coef
    ok = h < 1 - 1e-12
    press = float(np.sum((e[ok] / (1.0 - h[ok])) ** 2)) if ok.all() else float("inf")
    return 1.0 - float(e @ e) / tss, 1.0 - press / tss, coef


def _share(r2: float) -> float:
    return math.sqrt(max(1.0 - r2, 0.0)) if np.isfinite(r2) else float("nan")


def _transform_fits(x: np.ndarray, y: np.ndarray, xname: str, target: str):
    """Best straight line after a standard transform of the target or of the input."""
    best = None
    for tname, (f, valid) in _TRANSFORMS.items():
        for side in ("target", "input"):
            src = y if side == "target" else x
            if not valid(src):
                continue
            with np.errstate(all="ignore"):
                tv = f(src)
            if not np.all(np.isfinite(tv)) or not np.ptp(tv) > 0:
                continue
            if side == "target":
                r2, loo, coef = loo_fit(x, tv)
                rel = f"{tname} of {target} = a + b * {xname}"
            else:
                r2, loo, coef = loo_fit(tv, y)
                rel = f"{target} = a + b * {tname} of {xname}"
            if np.isfinite(loo) and (best is None or loo > best[1]):
                best = (r2, loo, coef, rel)
    return best


class _Columns:
    """Inputs given as one (n, p) array or as a list of p columns, read the same way.

    ``X[:, j]`` and ``X[:, [a, b]]`` give columns; ``rows(step)`` every
    ``step``-th row of all columns (from a list: gathered into a new array laid
    out column by column, as rows of a column-ordered array are).
    """

    def __init__(self, X) -> None:
        if isinstance(X, (list, tuple)):
            self._cols = [np.asarray(c, float).ravel() for c in X]
            self._X = None
            n = self._cols[0].size if self._cols else 0
            self.shape = (n, len(self._cols))
        else:
            X = np.asarray(X, float)
            self._X = X[:, None] if X.ndim == 1 else X
            self.shape = self._X.shape

    def rows(self, step: int) -> np.ndarray:
        if self._X is not None:
            return self._X[::step]
        n, p = self.shape
        out = np.empty((len(range(0, n, step)), p), order="F")
        for j, c in enumerate(self._cols):
            out[:, j] = c[::step]
        return out

    def __getitem__(self, key):
        if self._X is not None:
            return self._X[key]
        _, j = key
        if isinstance(j, list):
            return np.column_stack([self._cols[i] for i in j])
        return self._cols[j]


# ---------------------------------------------------------------------------
# public entry point
# ---------------------------------------------------------------------------
def find_reproductions(X, y, inputs, target: str = "target") -> list[Reproduction]:
    """Inputs, single or in pairs, that reproduce the target almost exactly.

    Parameters
    ----------
    X : (n, p) input values, or a list of p columns of n values each (not
        copied: only the screened rows and the columns of the candidates
        are gathered).
    y : (n,) target values.
    inputs : the p input names.
    target : the target's name (used in the relation text).

    Returns
    -------
    list of `Reproduction`, the closest first (exact ones before near ones,
    then by validation R² or rank correlation). Each input appears at most
    once: a pair is reported only when neither of its inputs already
    reproduces the target on its own.
    """
    from .threads import one_thread

    with one_thread():   # small products only: threads would wait on busy cores
        return _find_reproductions(_Columns(X), y, inputs, target)


def _find_reproductions(X: _Columns, y, inputs, target: str) -> list[Reproduction]:
    y = np.asarray(y, float).ravel()
    names = [str(c) for c in inputs]
    n, p = X.shape
    if n < 5 or p == 0 or not np.ptp(y) > 0:
        return []
    # screening on at most RANK_ROWS evenly spaced rows; candidates confirmed on all
    step = max(1, -(-n // RANK_ROWS))
    Xs, ys = X.rows(step), y[::step]
    if not np.ptp(ys) > 0:
        Xs, ys = X.rows(1), y
    r_xy, _, ok = correlations(Xs, ys, between_inputs=False)
    rho = rank_correlations(Xs, ys)
    found: list[Reproduction] = []
    single_r2 = r_xy * r_xy
    taken: set[int] = set()
    for j in range(p):
        if not ok[j]:
            continue
        cand = None
        if single_r2[j] >= NEAR_R2 * 0.99:          # screen, then confirm exactly
            r2, loo, coef = loo_fit(X[:, j], y)
            if loo >= NEAR_R2:
                cand = Reproduction((names[j],), "copy", f"{target} = a + b * {names[j]}",
                                    r2, loo, float(rho[j]), _share(r2), _share(r2) < EXACT_SHARE,
                                    tuple(float(c) for c in coef))
        if cand is None and np.isfinite(rho[j]) and abs(rho[j]) >= NEAR_RANK:
            best = _transform_fits(X[:, j], y, names[j], target)
            if best is not None and best[1] >= NEAR_R2:
                r2, loo, coef, rel = best
                cand = Reproduction((names[j],), "transform", rel, r2, loo, float(rho[j]),
                                    _share(r2), _share(r2) < EXACT_SHARE,
                                    tuple(float(c) for c in coef))
            else:
                cand = Reproduction((names[j],), "monotone",
                                    f"{target} rises and falls with {names[j]}"
                                    if rho[j] > 0 else f"{target} falls as {names[j]} rises",
                                    float(rho[j] ** 2), float("nan"), float(rho[j]),
                                    float("nan"), False)
        if cand is not None:
            found.append(cand)
            taken.add(j)
    # pairs among the inputs most correlated with the target
    if p >= 2:
        pool = np.flatnonzero(ok)
        pool = [int(j) for j in pool if j not in taken]
        if len(pool) > MAX_PAIR_INPUTS:
            pool = sorted(pool, key=lambda j: -abs(r_xy[j]))[:MAX_PAIR_INPUTS]
        if len(pool) >= 2:
            idx = np.asarray(pool)
            _, R, _ = correlations(Xs[:, idx], ys)
            P = pair_r2(r_xy[idx], R)
            iu = np.triu_indices(len(idx), 1)
            vals = P[iu]
            hits = np.flatnonzero(np.nan_to_num(vals, nan=0.0) >= NEAR_R2 * 0.99)
            hits = hits[np.argsort(-vals[hits])]
            used: set[int] = set()
            for h in hits[:20]:
                a, b = int(idx[iu[0][h]]), int(idx[iu[1][h]])
                if a in used or b in used:
                    continue
                rest = 1.0 - max(single_r2[a], single_r2[b])
                r2, loo, coef = loo_fit(X[:, [a, b]], y)
                if not (loo >= NEAR_R2) or (1.0 - r2) * PAIR_GAIN > rest:
                    continue
                found.append(Reproduction(
                    (names[a], names[b]), "combination",
                    f"{target} = a + b * {names[a]} + c * {names[b]}", r2, loo,
                    float("nan"), _share(r2), _share(r2) < EXACT_SHARE,
                    tuple(float(c) for c in coef)))
                used.update((a, b))

    def key(r: Reproduction):
        v = r.validation_r2 if np.isfinite(r.validation_r2) else abs(r.rank_correlation) ** 2
        return (not r.exact, -v)

    return sorted(found, key=key)


def describe(r: Reproduction, target: str = "the target") -> str:
    """A plain clause for messages: which columns and how closely."""
    cols = " and ".join(r.columns)
    if r.kind == "monotone":
        return (f"{cols} orders the rows almost exactly as {target} does (rank correlation "
                f"{r.rank_correlation:.4f})")
    share = r.residual_share
    rest = ("no residual beyond rounding" if not share >= 1e-7 else
            f"residual SD {100 * share:.2g}% of the target's")
    return f"{r.relation} holds with validation R² {r.validation_r2:.4f} ({rest})"


__all__ = ["NEAR_R2", "NEAR_RANK", "EXACT_SHARE", "Reproduction", "correlations",
           "rank_correlations", "pair_r2", "loo_fit", "find_reproductions", "describe"]
