"""How sure: an interval for the recommended cell's error and prediction intervals.

Three numbers answer "how sure can we be?" for one cell (order, penalty):

* **Error interval** — where the mean squared error of the model fitted on all
  rows lies for new rows like these. For schemes with several folds it is the
  nested cross-validation interval of Bates, Hastie and Tibshirani ("Cross-
  validation: what does it estimate and how well does it do it?", JASA 2023,
  Algorithm 1): inside each outer training set an inner cross-validation over
  the remaining folds measures how far a cross-validation estimate strays from
  the error on rows it did not see; that spread, not the naive fold-to-fold
  standard error, sets the width. For one-split schemes (later-period holdout,
  train/test column) it is the mean of the per-row squared errors on the
  validation rows with their standard error: the error of the model trained on
  the earlier rows, on the later period.
* **Analytic prediction interval** (least squares and ridge) — ``prediction ±
  t * s * sqrt(1 + h(x))`` with ``s`` the residual standard deviation and
  ``h(x)`` the variance factor of the fitted value; with a penalty the bias the
  penalty introduces is not counted (said in the notes).
* **CV+ prediction interval** (Barber, Candès, Ramdas, Tibshirani, "Predictive
  inference with the jackknife+", Annals of Statistics 2021, section on K-fold
  CV+) — built from the scheme's own split models and their validation
  residuals; with one split it is the split-conformal interval.

Every fit comes from summaries (counts, means, centred cross-products) of the
cell's design on unions of small row pieces, with the same ridge solver as the
sweep (`engine.families`): one pass over the rows per set of splits, then small
p x p solves. Per-row predictions are formed only where per-row values are
needed (validation rows, new points).

Empirical coverage is measured on rows the intervals never saw: for each split
of the scheme the intervals are rebuilt from the split's training rows alone
(CV+ with inner folds inside the training rows) and checked on its validation
rows — for time schemes, on the later period.
"""
from __future__ import annotations

import math
from dataclasses import dataclass, field, replace
from typing import Callable

import numpy as np
import pandas as pd
from scipy import stats

from .design import PolynomialBasis
from .errors import InputProblem
from .families import RawMap, TermSummary, fit_family, sse
from .moments import combine_batch
from .schemes import FoldPlan
from .spec import SchemeSpec, SweepSpec
from .sweep import piece_statistics

Progress = Callable[[float, str], None]

#: Nominal level of every interval (the level Bates et al. report).
LEVEL = 0.90
_ONE_SPLIT = ("holdout", "column")
_MAX_COVERAGE_ROWS = 5000


# ---------------------------------------------------------------------------
# fits of one cell on many row sets, from summaries
# ---------------------------------------------------------------------------
def _atoms(n: int, sets: list[np.ndarray]) -> tuple[np.ndarray, int, np.ndarray]:
    """Split rows into atoms: rows that belong to exactly the same sets.

    Returns ``(labels (n,), n_atoms, member (len(sets), n_atoms) 0/1)``;
    rows in no set get label -1.
    """
    B = np.zeros((n, len(sets)), dtype=bool)
    for j, s in enumerate(sets):
        B[np.asarray(s, dtype=np.int64), j] = True
    used = B.any(axis=1)
    packed = np.packbits(B, axis=1)
    uniq, inv = np.unique(packed, axis=0, return_inverse=True)
    inv = inv.ravel()
    member = np.unpackbits(uniq, axis=1, count=len(sets)).T.astype(np.int8)
    labels = np.where(used, inv, -1).astype(np.int64)
    return labels, int(uniq.shape[0]), member


@dataclass
class CellDesign:
    """The design of one cell: its basis, raw map and working-basis rows."""

    basis: PolynomialBasis
    X: np.ndarray
    y: np.ndarray
    penalty: float
    family: str = "ridge"
    l1_ratio: float = 0.0
    _F: np.ndarray | None = field(default=None, repr=False)

    @classmethod
    def make(cls, data, spec: SweepSpec, order: int, penalty: float, family: str = "ridge",
             l1_ratio: float = 0.0) -> "CellDesign":
        X = np.asarray(data.X, float)
        basis = PolynomialBasis.fit(X, spec.inputs, int(order), spec.interactions)
        return cls(basis, X, np.asarray(data.y, float), float(penalty), family, float(l1_ratio))

    @property
    def p(self) -> int:
        return int(self.basis.n_terms)

    def rows(self, idx: np.ndarray | None = None) -> np.ndarray:
        """Working-basis terms of the given rows (all rows are expanded once, then kept)."""
        if self._F is None:
            self._F = self.basis.expand(self.X) if self.p else np.zeros((len(self.y), 0))
        return self._F if idx is None else self._F[idx]

    def fit_sets(self, sets: list[np.ndarray], keep_leverage: bool = False) -> "SetFits":
        """Fit the cell on each row set (one pass over the rows for all of them)."""
        labels, n_atoms, member = _atoms(len(self.y), sets)
        st = piece_statistics(self.basis, self.X, self.y, labels, n_atoms)
        n, mean, M = combine_batch(st, member)
        summary = TermSummary(n, mean, M)
        A, a0 = self.basis.raw_map()
        raw = RawMap.select(A, a0, np.arange(self.p), summary.n_sets)
        fit = fit_family(self.family, summary, raw, np.array([self.penalty]),
                         l1_ratio=self.l1_ratio, keep_leverage=keep_leverage)
        return SetFits(self, summary, fit.beta_u[:, :, 0], fit.edf[:, 0],
                       sse(summary, summary.mean, fit.beta_u)[:, 0], fit.lev_u, fit.lev_raw)


@dataclass
class SetFits:
    """Fits of one cell on ``S`` row sets.

    Attributes
    ----------
    design : the cell.
    summary : training summaries (target last).
    beta_u : (S, p) coefficients on the working basis.
    edf : (S,) effective degrees of freedom (intercept included).
    sse : (S,) training sums of squared errors.
    lev_u, lev_raw : pieces of the fitted-value variance (ridge and least squares).
    """

    design: CellDesign
    summary: TermSummary
    beta_u: np.ndarray
    edf: np.ndarray
    sse: np.ndarray
    lev_u: tuple | None = None
    lev_raw: tuple | None = None

    def predict(self, s: int, F: np.ndarray) -> np.ndarray:
        """Predictions of fit ``s`` for working-basis rows ``F``."""
        m = self.summary.mean[s]
        p = self.design.p
        if p == 0:
            return np.full(F.shape[0], m[-1])
        return m[-1] + (F - m[:p]) @ self.beta_u[s]

    def variance_factor(self, s: int, F: np.ndarray) -> np.ndarray:
        """``h(x)``: variance of the fitted value at rows ``F`` over the noise variance.

        Least squares: ``1/n + c' M^+ c`` (``c`` the centred terms, ``M`` their
        cross-products). Ridge on standardised terms ``z``:
        ``1/n + z' Q diag(lam / (lam + alpha)^2) Q' z``. Bias is not counted.
        """
        n = float(self.summary.n[s])
        out = np.full(F.shape[0], 1.0 / n)
        p = self.design.p
        if p == 0:
            return out
        c = F - self.summary.mean[s, :p]
        a = self.design.penalty
        if a == 0 and self.lev_u is not None:
            du, Q, inv = (v[s] for v in self.lev_u)
            TQ = (c / du) @ Q
            return out + (TQ * TQ) @ inv
        if a > 0 and self.lev_raw is not None:
            As, ds, Q, lam = self.lev_raw
            TQ = ((c @ As[s].T) / ds[s]) @ Q[s]
            return out + (TQ * TQ) @ (lam[s] / (lam[s] + a) ** 2)
        raise ValueError("no variance pieces for this fit")

    def residual_df(self, s: int) -> float:
        return float(self.summary.n[s] - self.edf[s])


# ---------------------------------------------------------------------------
# interval pieces
# ---------------------------------------------------------------------------
def analytic_bounds(fits: SetFits, s: int, F: np.ndarray,
                    level: float = LEVEL) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Analytic prediction interval of fit ``s`` at rows ``F``: ``(prediction, low, high)``.

    ``prediction ± t_{df, (1+level)/2} * s * sqrt(1 + h(x))`` with
    ``s^2 = SSE / (n - edf)`` and ``df = n - edf`` (textbook least-squares
    prediction interval; with a penalty the variance is that of the ridge
    fitted value and the bias is ignored).
    """
    pred = fits.predict(s, F)
    df = fits.residual_df(s)
    if df <= 0:
        inf = np.full_like(pred, np.inf)
        return pred, -inf, inf
    sd = math.sqrt(max(fits.sse[s], 0.0) / df)
    half = stats.t.ppf(0.5 + level / 2.0, df) * sd * np.sqrt(1.0 + fits.variance_factor(s, F))
    return pred, pred - half, pred + half


def _kth_of_union(centres: np.ndarray, radii: list[np.ndarray], k: int, sign: float,
                  iterations: int = 70) -> np.ndarray:
    """k-th smallest of ``{centres[:, s] + sign * r : r in radii[s], all s}`` per row.

    ``centres`` (m, S); ``radii[s]`` sorted ascending. Solved by bisection on
    the value with counts from binary searches, so no (m x N) matrix is formed.
    """
    m, S = centres.shape
    rmax = max(float(r[-1]) if r.size else 0.0 for r in radii)
    lo = centres.min(axis=1) - rmax - 1.0
    hi = centres.max(axis=1) + rmax + 1.0
    for _ in range(iterations):
        mid = 0.5 * (lo + hi)
        count = np.zeros(m)
        for s in range(S):
            r = radii[s]
            if sign < 0:    # values c - r <= t  <=>  r >= c - t
                count += r.size - np.searchsorted(r, centres[:, s] - mid, side="left")
            else:           # values c + r <= t  <=>  r <= t - c
                count += np.searchsorted(r, mid - centres[:, s], side="right")
        ok = count >= k
        hi = np.where(ok, mid, hi)
        lo = np.where(ok, lo, mid)
    return hi


def cvplus_bounds(centres: np.ndarray, radii: list[np.ndarray],
                  level: float = LEVEL) -> tuple[np.ndarray, np.ndarray]:
    """CV+ interval (Barber et al. 2021) at ``m`` points.

    Parameters
    ----------
    centres : (m, S) prediction of each split's model at each point.
    radii : per split, the sorted absolute validation residuals of its model.
    level : nominal coverage ``1 - alpha``.

    Returns
    -------
    (low, high): low is the floor(alpha (N+1))-th smallest of
    ``mu_s(x) - R_i``, high the ceil((1-alpha)(N+1))-th smallest of
    ``mu_s(x) + R_i`` over all N validation residuals (minus or plus infinity
    when N is too small for the level).
    """
    N = int(sum(r.size for r in radii))
    alpha = 1.0 - level
    k_lo = int(math.floor(alpha * (N + 1)))
    k_hi = int(math.ceil((1.0 - alpha) * (N + 1)))
    m = centres.shape[0]
    low = (_kth_of_union(centres, radii, k_lo, -1.0) if k_lo >= 1
           else np.full(m, -np.inf))
    high = (_kth_of_union(centres, radii, k_hi, 1.0) if k_hi <= N
            else np.full(m, np.inf))
    return low, high


def _inner_splits(outer: list[tuple[np.ndarray, np.ndarray]], k: int,
                  blocks: int = 5) -> list[tuple[np.ndarray, np.ndarray]]:
    """Inner splits inside outer training set ``k``.

    The other outer splits' validation rows inside the training set are the
    inner folds, trained on the training set less whatever the other split
    leaves out of its own training (so blocked gaps carry over). With a single
    outer split, contiguous blocks of the training rows in row order.
    """
    T = outer[k][0]
    out = []
    for j, (tr_j, va_j) in enumerate(outer):
        if j == k:
            continue
        va = np.intersect1d(va_j, T, assume_unique=True)
        if va.size:
            out.append((np.intersect1d(T, tr_j, assume_unique=True), va))
    if len(out) >= 2:
        return out
    parts = [b for b in np.array_split(T, min(blocks, max(2, T.size // 4))) if b.size]
    return [(np.setdiff1d(T, b, assume_unique=True), b) for b in parts]


def _plan_splits(plan: FoldPlan) -> list[list[tuple[np.ndarray, np.ndarray]]]:
    """The plan's splits grouped by round (each round's splits partition its rows)."""
    rounds: dict[int, list] = {}
    for (r, _), tr, va in zip(plan.split_round, plan.train_sets, plan.valid_sets):
        rounds.setdefault(r, []).append((tr, va))
    return list(rounds.values())


# ---------------------------------------------------------------------------
# error interval
# ---------------------------------------------------------------------------
@dataclass
class ErrorInterval:
    """An interval for the mean squared error of the cell on new rows like these.

    Attributes
    ----------
    method : ``'nested cross-validation'`` or ``'validation rows'``.
    level : nominal coverage.
    estimate : centre of the interval (bias-corrected for nested CV).
    low, high : the interval.
    cv_estimate : plain cross-validation estimate on the same folds.
    se : standard error behind the width.
    naive_se : the naive standard error (per-row squared errors / sqrt(n)).
    folds, repeats : outer folds and repetitions.
    rows : rows behind the estimate (validation rows for one split, all rows otherwise).
    notes : plain sentences.
    """

    method: str
    level: float
    estimate: float
    low: float
    high: float
    cv_estimate: float
    se: float
    naive_se: float
    folds: int
    repeats: int
    rows: int = 0
    notes: list[str] = field(default_factory=list)

    def to_dict(self) -> dict:
        return {"method": self.method, "rows": self.rows, "level": self.level, "estimate": self.estimate,
                "low": self.low, "high": self.high, "cv_estimate": self.cv_estimate,
                "se": self.se, "naive_se": self.naive_se, "folds": self.folds,
                "repeats": self.repeats, "notes": list(self.notes)}


def _nested_outer(data, spec: SweepSpec, folds: int, seed: int):
    from .trust import outer_splits   # the outer splits of selection nested CV, reused
    return outer_splits(data, replace(spec, seed=seed), folds)[0]


def error_interval(data, spec: SweepSpec, order: int, penalty: float, level: float = LEVEL,
                   repeats: int | None = None, folds: int | None = None,
                   family: str = "ridge", l1_ratio: float = 0.0,
                   progress: Progress | None = None) -> ErrorInterval:
    """Interval for the error of the cell ``(order, penalty)`` fitted on all rows.

    Parameters
    ----------
    data, spec : prepared data and the request (its scheme decides the folds).
    order, penalty : the cell (a fixed model, not re-chosen inside the folds).
    level : nominal coverage.
    repeats : repetitions of the nested cross-validation with fresh shuffles
        (default 10 for shuffled schemes; 1 for ordered or grouped folds,
        whose splits do not change with the seed).
    folds : outer folds (default: the scheme's, at most 10).
    family, l1_ratio : the cell's penalty family.
    progress : called as ``progress(fraction_done, message)``.

    Returns
    -------
    ErrorInterval
    """
    design = CellDesign.make(data, spec, order, penalty, family, l1_ratio)
    y = design.y
    n = y.size
    kind = spec.scheme.kind
    z = stats.norm.ppf(0.5 + level / 2.0)
    if kind in _ONE_SPLIT:
        from .analysis import plan_for
        plan = plan_for(data, spec.scheme, spec.seed)
        tr, va = plan.train_sets[0], plan.valid_sets[0]
        fits = design.fit_sets([tr])
        e = (y[va] - fits.predict(0, design.rows(va))) ** 2
        mean = float(e.mean())
        se = float(e.std(ddof=1) / math.sqrt(e.size)) if e.size > 1 else float("nan")
        note = (f"Mean of the {e.size} per-row squared errors on the validation rows of the "
                "model trained on the training rows, with a {:.0f}% normal interval from their "
                "standard error. It is the error of that model on those rows (for a time "
                "scheme: on the later period), not of a model refitted on all rows."
                .format(100 * level))
        return ErrorInterval("validation rows", level, mean, float(max(mean - z * se, 0.0)),
                             float(mean + z * se), mean, se, se, 1, 1, int(e.size), [note])
    k = int(folds or min(max(int(spec.scheme.folds), 2), 10))
    if kind == "loo":
        k = int(folds or min(10, n // 2))
    shuffled = kind in ("kfold", "repeated", "loo")
    R = int(repeats if repeats is not None else (10 if shuffled else 1))
    R = R if shuffled else 1
    a_list, b_list = [], []
    inner_sse = inner_n = 0.0
    out_errors = []
    for r in range(R):
        if progress:
            progress(r / R, f"Nested cross-validation, repetition {r + 1} of {R}")
        outer = _nested_outer(data, spec, k, int(spec.seed) + r)
        sets, index = [], []
        for kk, (tr, va) in enumerate(outer):
            inner = _inner_splits(outer, kk)
            sets.append(tr)
            index.append([len(sets) - 1])
            for itr, iva in inner:
                sets += [itr, iva]
                index[-1] += [len(sets) - 2, len(sets) - 1]
        # training and validation summaries of every set in one pass
        fits = design.fit_sets(sets)
        # inner errors of every (outer fold, inner fold) pair in one batched call
        t_idx = np.array([ix[q] for ix in index for q in range(1, len(ix), 2)])
        v_idx = t_idx + 1
        owner = np.array([kk for kk, ix in enumerate(index) for _ in range(1, len(ix), 2)])
        sm = fits.summary
        val = TermSummary(sm.n[v_idx], sm.mean[v_idx], sm.M[v_idx])
        sse_in = sse(val, sm.mean[t_idx], fits.beta_u[t_idx][:, :, None])[:, 0]
        s_in = np.bincount(owner, weights=sse_in, minlength=len(outer))
        n_in = np.bincount(owner, weights=sm.n[v_idx], minlength=len(outer))
        inner_sse += float(s_in.sum())
        inner_n += float(n_in.sum())
        for kk, (tr, va) in enumerate(outer):
            e_out = (y[va] - fits.predict(index[kk][0], design.rows(va))) ** 2
            out_errors.append(e_out)
            a_list.append((s_in[kk] / n_in[kk] - e_out.mean()) ** 2)
            b_list.append(e_out.var(ddof=1) / e_out.size if e_out.size > 1 else 0.0)
    e_all = np.concatenate(out_errors)
    err_cv = float(e_all.mean())
    err_ncv = inner_sse / inner_n
    naive_se = float(e_all.std(ddof=1) / math.sqrt(n)) if e_all.size > 1 else float("nan")
    mse_hat = float(np.mean(a_list) - np.mean(b_list))
    se = math.sqrt(max(mse_hat, 0.0) * (k - 1) / k)
    # the width stays between the naive one and sqrt(K) times it (Bates et al., section 4)
    se = min(max(se, naive_se), math.sqrt(k) * naive_se)
    bias = (1.0 + (k - 2) / k) * (err_ncv - err_cv)
    # the bias correction assumes exchangeable rows; contiguous blocks keep the plain estimate
    centre = err_cv if kind == "blocked" else err_ncv - bias
    notes = [f"Nested cross-validation (Bates, Hastie and Tibshirani 2023): {k} outer folds"
             + (f", repeated {R} times with fresh shuffles" if R > 1 else "")
             + f"; the model is the fixed cell, refitted in every fold. Plain cross-validation "
             f"gives {err_cv:.4g} with a naive standard error of {naive_se:.2g}; the nested "
             f"estimate of its spread is {se:.2g}."]
    if kind == "blocked":
        notes.append("Folds are contiguous blocks in row order with the scheme's gap; the "
                     "method assumes rows are exchangeable, so the interval is centred on the "
                     "plain estimate without the bias correction, and with serial dependence "
                     "it is a rough guide.")
    if progress:
        progress(1.0, "Nested cross-validation done")
    return ErrorInterval("nested cross-validation", level, float(centre),
                         float(max(centre - z * se, 0.0)), float(centre + z * se), err_cv,
                         float(se), naive_se, k, R, int(n), notes)


# ---------------------------------------------------------------------------
# prediction intervals
# ---------------------------------------------------------------------------
@dataclass
class PredictionIntervals:
    """Prediction intervals of one cell and how often they held on unseen rows.

    Attributes
    ----------
    level : nominal coverage.
    analytic_coverage, cvplus_coverage : share of checked rows inside each
        interval (None when the analytic interval does not apply).
    analytic_width, cvplus_width : median interval width on the checked rows.
    checked_rows : rows checked (validation rows of every split; a seeded
        sample when there are many).
    checked_on : ``'validation rows'`` or ``'later period'``.
    per_split : one row per split: rows, coverage of each interval.
    notes : plain sentences.
    """

    level: float
    analytic_coverage: float | None
    cvplus_coverage: float
    analytic_width: float | None
    cvplus_width: float
    checked_rows: int
    checked_on: str
    per_split: pd.DataFrame
    notes: list[str] = field(default_factory=list)
    design: CellDesign | None = field(default=None, repr=False)
    final: SetFits | None = field(default=None, repr=False)
    split_fits: SetFits | None = field(default=None, repr=False)
    radii: list[np.ndarray] = field(default_factory=list, repr=False)

    def bounds(self, X_new) -> pd.DataFrame:
        """Intervals at new input rows ``X_new`` (raw units).

        Returns
        -------
        DataFrame with ``prediction`` (the model fitted on all rows),
        ``analytic_low``, ``analytic_high`` (NaN when not applicable),
        ``cvplus_low`` and ``cvplus_high``.
        """
        X_new = np.asarray(X_new, float)
        if X_new.ndim == 1:
            X_new = X_new[:, None]
        d = self.design
        F = d.basis.expand(X_new) if d.p else np.zeros((X_new.shape[0], 0))
        if self.analytic_coverage is not None:
            pred, lo, hi = analytic_bounds(self.final, 0, F, self.level)
        else:
            pred = self.final.predict(0, F)
            lo = hi = np.full(pred.shape, np.nan)
        S = self.split_fits.beta_u.shape[0]
        centres = np.column_stack([self.split_fits.predict(s, F) for s in range(S)])
        c_lo, c_hi = cvplus_bounds(centres, self.radii, self.level)
        return pd.DataFrame({"prediction": pred, "analytic_low": lo, "analytic_high": hi,
                             "cvplus_low": c_lo, "cvplus_high": c_hi})

    def to_dict(self) -> dict:
        return {"level": self.level, "analytic_coverage": self.analytic_coverage,
                "cvplus_coverage": self.cvplus_coverage,
                "analytic_median_width": self.analytic_width,
                "cvplus_median_width": self.cvplus_width, "checked_rows": self.checked_rows,
                "checked_on": self.checked_on, "notes": list(self.notes)}


def _sample(idx: np.ndarray, limit: int, rng: np.random.Generator) -> np.ndarray:
    return idx if idx.size <= limit else np.sort(rng.choice(idx, size=limit, replace=False))


def prediction_intervals(data, spec: SweepSpec, order: int, penalty: float,
                         level: float = LEVEL, plan: FoldPlan | None = None,
                         family: str = "ridge", l1_ratio: float = 0.0,
                         max_checked_rows: int = _MAX_COVERAGE_ROWS) -> PredictionIntervals:
    """Analytic and CV+ prediction intervals of one cell, with their coverage on unseen rows.

    Parameters
    ----------
    data, spec : prepared data and the request.
    order, penalty : the cell.
    level : nominal coverage.
    plan : the splits (default: the spec's scheme; leave-one-out is replaced
        by shuffled 10-fold splits).
    family, l1_ratio : the cell's penalty family (the analytic interval is
        for ridge and least squares only).
    max_checked_rows : at most this many validation rows (a seeded sample) are
        checked for coverage.

    Returns
    -------
    PredictionIntervals
    """
    from .analysis import plan_for
    notes: list[str] = []
    if plan is None:
        scheme = spec.scheme
        if scheme.kind == "loo":
            scheme = replace(scheme, kind="kfold", folds=min(10, len(data.y)))
            notes.append("Intervals use shuffled 10-fold splits (the sweep used leave-one-out).")
        plan = plan_for(data, scheme, spec.seed)
    design = CellDesign.make(data, spec, order, penalty, family, l1_ratio)
    y = design.y
    n = y.size
    analytic = family == "ridge"
    later = spec.scheme.kind in ("holdout", "blocked")
    rng = np.random.default_rng(int(spec.seed))
    rounds = _plan_splits(plan)
    # scheme's split models + validation residuals (for CV+ at new points)
    trains = [tr for rnd in rounds for tr, _ in rnd]
    valids = [va for rnd in rounds for _, va in rnd]
    split_fits = design.fit_sets(trains + [np.arange(n)], keep_leverage=analytic)
    S = len(trains)
    radii = [np.sort(np.abs(y[va] - split_fits.predict(s, design.rows(va))))
             for s, va in enumerate(valids)]
    # coverage on unseen rows: rebuild each interval from a split's training rows alone
    per_split = []
    per_round_budget = max(1, max_checked_rows // max(1, S))
    cov_a, cov_c, wid_a, wid_c = [], [], [], []
    s0 = 0
    for rnd in rounds:
        for kk, (tr, va) in enumerate(rnd):
            s = s0 + kk
            inner = _inner_splits(rnd, kk)
            ifits = design.fit_sets([itr for itr, _ in inner])
            iradii = [np.sort(np.abs(y[iva] - ifits.predict(j, design.rows(iva))))
                      for j, (_, iva) in enumerate(inner)]
            rows = _sample(va, per_round_budget, rng)
            F = design.rows(rows)
            centres = np.column_stack([ifits.predict(j, F) for j in range(len(inner))])
            c_lo, c_hi = cvplus_bounds(centres, iradii, level)
            inside_c = (y[rows] >= c_lo) & (y[rows] <= c_hi)
            cov_c.append(inside_c)
            wid_c.append(c_hi - c_lo)
            row = {"split": s + 1, "training_rows": int(tr.size), "checked_rows": int(rows.size),
                   "cvplus_coverage": float(inside_c.mean())}
            if analytic:
                _, a_lo, a_hi = analytic_bounds(split_fits, s, F, level)
                inside_a = (y[rows] >= a_lo) & (y[rows] <= a_hi)
                cov_a.append(inside_a)
                wid_a.append(a_hi - a_lo)
                row["analytic_coverage"] = float(inside_a.mean())
            per_split.append(row)
        s0 += len(rnd)
    cov_c_all = np.concatenate(cov_c)
    checked = int(cov_c_all.size)
    a_cov = float(np.concatenate(cov_a).mean()) if analytic else None
    a_w = float(np.median(np.concatenate(wid_a))) if analytic else None
    notes.append(
        f"Coverage checked on {checked:,} {'later-period' if later else 'validation'} rows: "
        "each split's intervals were rebuilt from its training rows alone (CV+ with folds "
        "inside the training rows) and tested on rows they never saw.")
    if analytic and penalty > 0:
        notes.append("The analytic interval counts the variance of the penalised fit but not "
                     "the bias the penalty adds; CV+ needs no such assumption.")
    if analytic:
        notes.append("The analytic interval assumes independent errors of constant spread "
                     "with a normal shape; CV+ assumes only that new rows are exchangeable "
                     "with the old.")
    final = SetFits(design, *(_slice(split_fits, S)))
    split_only = SetFits(design, *(_slice(split_fits, slice(0, S))))
    return PredictionIntervals(
        level=level, analytic_coverage=a_cov, cvplus_coverage=float(cov_c_all.mean()),
        analytic_width=a_w, cvplus_width=float(np.median(np.concatenate(wid_c))),
        checked_rows=checked, checked_on="later period" if later else "validation rows",
        per_split=pd.DataFrame(per_split), notes=notes, design=design, final=final,
        split_fits=split_only, radii=radii)


def _slice(f: SetFits, s) -> tuple:
    """Fields of ``f`` after `design`, for set(s) ``s`` (an int keeps one set)."""
    sl = slice(s, s + 1) if isinstance(s, int) else s
    summ = TermSummary(f.summary.n[sl], f.summary.mean[sl], f.summary.M[sl])

    def cut(t):
        return None if t is None else tuple(v[sl] if np.ndim(v) and v.shape[0] == f.edf.shape[0]
                                            else v for v in t)
    lev_raw = None
    if f.lev_raw is not None:
        As, ds, Q, lam = f.lev_raw
        lev_raw = (As[sl], ds[sl], Q[sl], lam[sl])
    return summ, f.beta_u[sl], f.edf[sl], f.sse[sl], cut(f.lev_u), lev_raw


# ---------------------------------------------------------------------------
# public entry point for the recommended cell
# ---------------------------------------------------------------------------
@dataclass
class HowSure:
    """The error interval and prediction intervals of the recommended cell.

    Attributes
    ----------
    order, penalty, label : the cell.
    error : `ErrorInterval`.
    prediction : `PredictionIntervals`.
    """

    order: int
    penalty: float
    label: str
    error: ErrorInterval
    prediction: PredictionIntervals

    def sentences(self) -> list[str]:
        """Plain sentences for the page and the pack."""
        e, p = self.error, self.prediction
        lvl = f"{100 * e.level:.0f}%"
        if e.method == "nested cross-validation":
            first = (f"Error of this model on new rows like these: MSE {e.estimate:.4g}, "
                     f"{lvl} interval {e.low:.4g} to {e.high:.4g} (nested cross-validation).")
        else:
            first = (f"Error on the validation rows: MSE {e.estimate:.4g}, {lvl} interval "
                     f"{e.low:.4g} to {e.high:.4g} (from the {e.rows:,} per-row errors).")
        where = "later-period" if p.checked_on == "later period" else "validation"
        second = (f"{100 * p.level:.0f}% prediction intervals held for "
                  + (f"{100 * p.analytic_coverage:.0f}% (analytic, median width "
                     f"{p.analytic_width:.3g}) and " if p.analytic_coverage is not None else "")
                  + f"{100 * p.cvplus_coverage:.0f}% (CV+, median width {p.cvplus_width:.3g}) "
                  f"of {p.checked_rows:,} {where} rows they never saw.")
        return [first, second]

    def to_dict(self) -> dict:
        return {"order": self.order, "penalty": self.penalty, "cell": self.label,
                "error_interval": self.error.to_dict(),
                "prediction_intervals": self.prediction.to_dict(),
                "summary": self.sentences()}


def how_sure(analysis, data, spec: SweepSpec | None = None, level: float = LEVEL,
             progress: Progress | None = None) -> HowSure:
    """Error interval and prediction intervals of the recommended cell of ``analysis``.

    Parameters
    ----------
    analysis : a finished `engine.analysis.Analysis`.
    data : the prepared data it was run on.
    spec : the request (default: the analysis's).
    level : nominal coverage of every interval.
    progress : called as ``progress(fraction_done, message)``.

    Returns
    -------
    HowSure
    """
    spec = analysis.spec if spec is None else spec
    data_w, spec_w = analysis.working(data, spec)
    rec = analysis.recommendation.recommended
    family = str(getattr(rec, "family", None) or "ridge")
    l1 = float(getattr(rec, "l1_ratio", None) or 0.0)
    try:
        err = error_interval(data_w, spec_w, rec.order, rec.penalty, level, family=family,
                             l1_ratio=l1, progress=progress)
        pred = prediction_intervals(data_w, spec_w, rec.order, rec.penalty, level,
                                    family=family, l1_ratio=l1)
    except InputProblem:
        raise
    except (ValueError, np.linalg.LinAlgError) as exc:
        raise InputProblem(f"The intervals could not be computed: {exc}",
                           code="intervals_failed") from exc
    from .labels import cell_text
    return HowSure(int(rec.order), float(rec.penalty), cell_text(rec.order, rec.penalty),
                   err, pred)


def band_table(sure: HowSure, data, extend: float = 0.25, points: int = 241,
               sample: int = 2000) -> pd.DataFrame:
    """The prediction band of the recommended model, for the side-by-side chart.

    With one input: the intervals along a grid reaching a quarter of the range
    past the data (as `engine.compare.curve_table`), ``x`` the input. With
    several inputs: a band about the line of perfect agreement, ``x`` the
    actual value and the bounds the median lower and upper offsets of the
    intervals at the data rows (a seeded sample of at most ``sample`` rows).

    Returns
    -------
    DataFrame with ``x``, ``cvplus_low``, ``cvplus_high``, ``analytic_low``,
    ``analytic_high``, ``model`` (the cell's label) and ``layout``
    (``'curve'`` or ``'diagonal'``).
    """
    p = sure.prediction
    X = np.asarray(data.X, float)
    if X.ndim == 1:
        X = X[:, None]
    y = np.asarray(data.y, float)
    if X.shape[1] == 1:
        lo, hi = float(X[:, 0].min()), float(X[:, 0].max())
        span = hi - lo if hi > lo else max(abs(lo), 1.0)
        grid = np.unique(np.r_[np.linspace(lo - extend * span, hi + extend * span, points), lo, hi])
        b = p.bounds(grid)
        out = pd.DataFrame({"x": grid, "cvplus_low": b["cvplus_low"],
                            "cvplus_high": b["cvplus_high"], "analytic_low": b["analytic_low"],
                            "analytic_high": b["analytic_high"], "layout": "curve"})
    else:
        rows = _sample(np.arange(y.size), sample, np.random.default_rng(0))
        b = p.bounds(X[rows])
        pred = b["prediction"].to_numpy()
        grid = np.linspace(float(y.min()), float(y.max()), 2)

        def off(col):
            v = b[col].to_numpy() - pred
            return float(np.median(v)) if np.all(np.isfinite(v)) else np.nan
        # actual in [predicted + low offset, predicted + high offset], drawn with the
        # predicted value on the vertical axis: predicted in [actual - high, actual - low]
        out = pd.DataFrame({"x": grid, "cvplus_low": grid - off("cvplus_high"),
                            "cvplus_high": grid - off("cvplus_low"),
                            "analytic_low": grid - off("analytic_high"),
                            "analytic_high": grid - off("analytic_low"), "layout": "diagonal"})
    out["model"] = sure.label
    return out
