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
from scipy.special import ndtri, stdtrit

from .design import PolynomialBasis
from .errors import InputProblem
from .families import RawMap, TermSummary, fit_family, sse
from .moments import combine_batch, design_moments
from .schemes import FoldPlan
from .spec import SweepSpec
from .summaries import CHUNK_ROWS, LARGE_ROWS
from .threads import one_thread

Progress = Callable[[float, str], None]

#: Nominal level of every interval (the level Bates et al. report).
LEVEL = 0.90
_ONE_SPLIT = ("holdout", "column")
_MAX_COVERAGE_ROWS = 5000
#: Large tables, shuffled schemes: groups of rows per outer fold that each
#: nested cross-validation repetition reshuffles (see `error_interval`).
GROUPS_PER_FOLD = 40


# ---------------------------------------------------------------------------
# fits of one cell on many row sets, from summaries
# ---------------------------------------------------------------------------
def _atoms(n: int, sets: list[np.ndarray]) -> tuple[np.ndarray, int, np.ndarray]:
    """Split rows into atoms: rows that belong to exactly the same sets.

    Returns ``(labels (n,), n_atoms, member (len(sets), n_atoms) 0/1)``;
    rows in no set get label -1. Each row's membership pattern is built up one
    set at a time as an integer code, renumbered to ``0..atoms-1`` before it
    could overflow, so the work is a few passes over ``n`` integers per set.
    """
    code = np.zeros(n, dtype=np.int64)
    bits = 0
    for s in sets:
        if bits >= 40:
            u, inv = np.unique(code, return_inverse=True)
            code = inv.ravel().astype(np.int64) + (0 if u.size and u[0] == 0 else 1)
            bits = int(code.max()).bit_length() if n else 0   # code 0 still: in no set
        code *= 2
        code[np.asarray(s, dtype=np.int64)] += 1
        bits += 1
    uniq, inv = np.unique(code, return_inverse=True)
    inv = inv.ravel()
    used = uniq != 0            # code 0: the row is in no set
    first = np.zeros(uniq.size, dtype=np.int64)
    first[inv[::-1]] = np.arange(n - 1, -1, -1)     # one row of every atom
    renum = np.cumsum(used) - 1
    labels = np.where(used[inv], renum[inv], -1).astype(np.int64)
    reps = first[used]
    member = np.zeros((len(sets), reps.size), dtype=np.int8)
    mask = np.zeros(n, dtype=bool)
    for j, s in enumerate(sets):
        s = np.asarray(s, dtype=np.int64)
        mask[s] = True
        member[j] = mask[reps]
        mask[s] = False
    return labels, int(reps.size), member


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
             l1_ratio: float = 0.0, basis: PolynomialBasis | None = None) -> "CellDesign":
        """The cell's design; ``basis``: the design of these rows at this or a higher
        order already fitted (its leading block of ``order`` is taken)."""
        X = np.asarray(data.X, float)
        if basis is not None and basis.max_order >= int(order):
            basis = replace(basis, max_order=int(order),
                            terms=basis.terms[:basis.n_terms_at(order)])
        else:
            basis = PolynomialBasis.fit(X, spec.inputs, int(order), spec.interactions)
        return cls(basis, X, np.asarray(data.y, float), float(penalty), family, float(l1_ratio))

    def matches(self, order: int, penalty: float, family: str, l1_ratio: float) -> bool:
        """True when this is the design of the cell ``(order, penalty, family, l1_ratio)``."""
        return (self.basis.max_order == int(order) and self.penalty == float(penalty)
                and self.family == family and self.l1_ratio == float(l1_ratio))

    @property
    def p(self) -> int:
        return int(self.basis.n_terms)

    def rows(self, idx: np.ndarray | None = None) -> np.ndarray:
        """Working-basis terms of the given rows.

        Small tables: all rows are expanded once, then kept. From
        `engine.summaries.LARGE_ROWS` rows on only the rows asked for are
        expanded (the full design is never held).
        """
        if self._F is None and idx is not None and self.y.size >= LARGE_ROWS:
            return (self.basis.expand_scaled(self.basis.scale(self.X[idx])) if self.p
                    else np.zeros((len(idx), 0)))
        if self._F is None:
            self._F = (self.basis.expand_scaled(self.basis.scale(self.X)) if self.p
                       else np.zeros((len(self.y), 0)))
        return self._F if idx is None else self._F[idx]

    def moments(self, labels: np.ndarray, n_sets: int):
        """Per-label summaries of ``[terms, y]``: one chunked pass over the rows (each
        chunk of inputs scaled where the pass gathered it: no scaled copy of them all)."""
        basis = self.basis
        return design_moments(self.X, self.y, labels, n_sets,
                              lambda Xc, out: basis.expand_scaled(basis.scale(Xc, out=Xc),
                                                                  out=out),
                              self.p, chunk_rows=CHUNK_ROWS)

    def summaries(self, sets: list[np.ndarray]) -> TermSummary:
        """Summaries of every row set (one pass over the rows for all of them)."""
        labels, n_atoms, member = _atoms(len(self.y), sets)
        n, mean, M = combine_batch(self.moments(labels, n_atoms), member)
        return TermSummary(n, mean, M)

    def fit_summary(self, summary: TermSummary, keep_leverage: bool = False,
                    coefficients_only: bool = False) -> "SetFits":
        """Fit the cell on each summarised row set (no pass over the rows).

        ``coefficients_only``: a positive ridge penalty is solved by one linear
        solve per set instead of an eigen-decomposition (the same solution; the
        effective degrees of freedom are then not formed, NaN).
        """
        A, a0 = self.basis.raw_map()
        raw = RawMap.select(A, a0, np.arange(self.p), summary.n_sets)
        if (coefficients_only and self.family == "ridge" and self.penalty > 0 and self.p
                and not keep_leverage):
            fast = _ridge_by_solve(summary, raw, self.penalty)
            if fast is not None:
                return SetFits(self, summary, fast.beta_u[:, :, 0], fast.edf[:, 0],
                               sse(summary, summary.mean, fast.beta_u)[:, 0])
        fit = fit_family(self.family, summary, raw, np.array([self.penalty]),
                         l1_ratio=self.l1_ratio, keep_leverage=keep_leverage)
        return SetFits(self, summary, fit.beta_u[:, :, 0], fit.edf[:, 0],
                       sse(summary, summary.mean, fit.beta_u)[:, 0], fit.lev_u, fit.lev_raw)

    def fit_sets(self, sets: list[np.ndarray], keep_leverage: bool = False) -> "SetFits":
        """Fit the cell on each row set (one pass over the rows for all of them)."""
        return self.fit_summary(self.summaries(sets), keep_leverage)

    def residuals(self, fits: "SetFits", assign: np.ndarray) -> np.ndarray:
        """Residuals ``y - prediction`` of many fits in one chunked pass over the rows.

        Parameters
        ----------
        fits : the fits.
        assign : (A, n) integers: ``assign[a, i]`` is the fit whose residual
            row ``i`` gets in output row ``a`` (``-1``: none, NaN out).

        Returns
        -------
        (A, n) residuals.
        """
        return self.residuals_of(fits.beta_u, _intercepts(fits), assign)

    def residuals_of(self, beta_u: np.ndarray, c: np.ndarray, assign: np.ndarray) -> np.ndarray:
        """`residuals` of fits given by working-basis coefficients ``beta_u`` (S, p) and
        intercepts ``c`` (S,); each chunk of rows is multiplied by the fits it needs only."""
        assign = _fit_numbers(assign)
        A_, n = assign.shape
        out = np.full((A_, n), np.nan)
        p = self.p
        S = c.size
        step = _step(p)
        m = min(step, n)
        ubuf = np.empty((m, self.X.shape[1]))   # one chunk's scaled inputs, terms and
        buf = np.empty((m, p), order="F")       # predictions, reused by every chunk
        pbuf = np.empty(0)                      # (grown as needed)
        pos = np.zeros(S, dtype=np.int64)
        for c0 in range(0, n, step):
            c1 = min(c0 + step, n)
            sub = assign[:, c0:c1]
            cols = np.flatnonzero(np.bincount(sub[sub >= 0], minlength=S))
            pos[cols] = np.arange(cols.size)
            if p and cols.size:
                if pbuf.size < (c1 - c0) * cols.size:
                    pbuf = np.empty(m * cols.size)
                Uc = self.basis.scale(self.X[c0:c1], out=ubuf[:c1 - c0])
                P = np.matmul(self.basis.expand_scaled(Uc, out=buf[:c1 - c0]),
                              np.ascontiguousarray(beta_u[cols].T),
                              out=pbuf[:(c1 - c0) * cols.size].reshape(c1 - c0, cols.size))
                P += c[cols]
            else:
                P = np.broadcast_to(c[cols], (c1 - c0, cols.size))
            yc = self.y[c0:c1]
            for a in range(A_):
                s = sub[a]
                at = np.flatnonzero(s >= 0)
                out[a, c0 + at] = yc[at] - P[at, pos[s[at]]]
        return out


def _step(p: int) -> int:
    """Rows per chunk of a pass that expands the design and multiplies it by a few fits:
    about 4 MB of terms, so that the product reads them from cache (measured on 1e6 rows
    x 120 terms: 0.45 s against 0.6 s with 64 MB chunks)."""
    return int(max(256, min(CHUNK_ROWS, (1 << 19) // max(p, 1))))


def _intercepts(fits: "SetFits") -> np.ndarray:
    """Working-basis intercepts of the fits: ``mean(y) - mean(terms) . beta``."""
    m = fits.summary.mean
    p = fits.beta_u.shape[1]
    return m[:, -1] - np.einsum("sp,sp->s", m[:, :p], fits.beta_u)


def _ridge_by_solve(summary: TermSummary, raw: RawMap, penalty: float):
    """Ridge at one positive penalty by ``(G + alpha I) w = c`` on the standardised raw terms
    (`engine.families.ridge` solves the same system through an eigen-decomposition);
    None when a system is not positive definite. Only ``beta_u`` and ``edf`` (NaN) of the
    returned fit are filled.

    The standardisation is that of `engine.families.base.standardise`, with the raw map
    scaled once when it is the same for every set (as `RawMap.select` gives it for one
    term set) rather than once per set. The systems are then formed, checked and
    solved `_SOLVE_SETS` sets at a time (each set's numbers are those of the whole
    batch at once), so no stack of every set's ``p x p`` matrices is held.
    """
    from .families.base import FamilyFit, standardise
    p = summary.p
    S = summary.n_sets
    ridge = penalty * np.eye(p)
    W = np.empty((S, p, 1))
    if raw.A.ndim == 3 and raw.A.shape[0] and raw.A.strides[0] == 0:
        A = raw.A[0]
        r = np.abs(A).max(axis=1)
        r = np.where(r > 0, r, 1.0)
        As = A / r[:, None]
        Mfy = summary.M[:, :p, -1]
        craw = np.einsum("sj,sij->si", Mfy, np.broadcast_to(As, (S, p, p)))
        ds = np.empty((S, p))
        for b0 in range(0, S, _SOLVE_SETS):
            b1 = min(b0 + _SOLVE_SETS, S)
            G = As @ summary.M[b0:b1, :p, :p] @ As.T        # Mraw, made G in place
            var = np.clip(np.diagonal(G, axis1=1, axis2=2), 0, None) / summary.n[b0:b1, None]
            d = ds[b0:b1] = np.where(~(var > 0), 1.0, np.sqrt(var))
            G /= d[:, :, None] * d[:, None, :]
            if not _solve_into(W[b0:b1], np.add(G, ridge, out=G), craw[b0:b1] / d):
                return None
        AsT = As.T
    else:
        st = standardise(summary, raw)
        G, c, ds, AsT = st.G, st.c, st.ds, st.As.transpose(0, 2, 1)
        for b0 in range(0, S, _SOLVE_SETS):
            b1 = min(b0 + _SOLVE_SETS, S)
            if not _solve_into(W[b0:b1], G[b0:b1] + ridge, c[b0:b1]):
                return None
    fit = FamilyFit.empty(summary, 1)
    fit.beta_u[:, :, 0:1] = AsT @ (W / ds[:, :, None])
    fit.edf[:, 0] = np.nan
    return fit


#: Ridge systems formed and solved together by `_ridge_by_solve`.
_SOLVE_SETS = 16


def _solve_into(W: np.ndarray, Gs: np.ndarray, c: np.ndarray) -> bool:
    """``W = Gs^-1 c`` for a stack of systems; False (W untouched) when one is not
    positive definite."""
    try:
        np.linalg.cholesky(Gs)          # positive definite, as the penalty makes it
    except np.linalg.LinAlgError:
        return False
    W[...] = np.linalg.solve(Gs, c[:, :, None])
    return True


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

    def take(self, index) -> "SetFits":
        """The fits of the sets ``index`` (an array of set numbers)."""
        ix = np.asarray(index, dtype=np.int64)
        summ = TermSummary(self.summary.n[ix], self.summary.mean[ix], self.summary.M[ix])

        def cut(t):
            return None if t is None else tuple(v[ix] for v in t)
        return SetFits(self.design, summ, self.beta_u[ix], self.edf[ix], self.sse[ix],
                       cut(self.lev_u), cut(self.lev_raw))

    def residual_df(self, s: int) -> float:
        return float(self.summary.n[s] - self.edf[s])


# ---------------------------------------------------------------------------
# interval pieces
# ---------------------------------------------------------------------------
def _t_quantile(q: float, df: float) -> float:
    """Student's t quantile: ``scipy.stats.t.ppf(q, df)`` for ``0 < q < 1``, ``df > 0``.

    The function that ppf calls (``scipy.special.stdtrit``), without importing
    ``scipy.stats``; ``+ 0.0`` as ppf adds its location 0 (a zero is +0.0).
    """
    return stdtrit(df, q) + 0.0


def _normal_quantile(q: float) -> float:
    """Standard normal quantile: ``scipy.stats.norm.ppf(q)`` for ``0 < q < 1``.

    The function that ppf calls (``scipy.special.ndtri``), without importing
    ``scipy.stats``; ``+ 0.0`` as ppf adds its location 0 (a zero is +0.0).
    """
    return ndtri(q) + 0.0


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
    half = _t_quantile(0.5 + level / 2.0, df) * sd * np.sqrt(1.0 + fits.variance_factor(s, F))
    return pred, pred - half, pred + half


def _union_count(C: np.ndarray, radii: list[np.ndarray], t: np.ndarray, sign: float) -> np.ndarray:
    """How many of ``{C[s] + sign * r : r in radii[s]}`` are ``<= t``, per point (C is (S, m))."""
    count = np.zeros(t.size)
    for s, r in enumerate(radii):
        if sign < 0:    # values c - r <= t  <=>  r >= c - t
            count += r.size - np.searchsorted(r, C[s] - t, side="left")
        else:           # values c + r <= t  <=>  r <= t - c
            count += np.searchsorted(r, t - C[s], side="right")
    return count


def _settle(C: np.ndarray, radii: list[np.ndarray], L: np.ndarray, H: np.ndarray, k: int,
            sign: float) -> tuple[np.ndarray, np.ndarray]:
    """Points whose bracket ``(L, H]`` holds one value of the union (one residual of one
    split, possibly repeated): the float at which that value is first counted.

    Returns ``(settled (m,) bool, t (m,))``: for a settled point ``t`` is the least
    float at which the count (`_union_count`) reaches ``k``, checked by counting at
    ``t`` and at the float below it, so it is exactly where the bisection ends.
    """
    m = L.size
    sets = np.zeros(m, dtype=np.int64)     # sets with values inside the bracket
    single = np.ones(m, dtype=bool)        # ... each of them a single (repeated) value
    which = np.zeros(m, dtype=np.int64)
    rho = np.zeros(m)
    for s, r in enumerate(radii):
        if sign < 0:
            a = np.searchsorted(r, C[s] - H, side="left")
            b = np.searchsorted(r, C[s] - L, side="left")
        else:
            a = np.searchsorted(r, L - C[s], side="right")
            b = np.searchsorted(r, H - C[s], side="right")
        has = b > a
        if r.size:
            first = r[np.minimum(a, r.size - 1)]
            single &= ~has | (first == r[np.maximum(b - 1, 0)])
            which = np.where(has, s, which)
            rho = np.where(has, first, rho)
        sets += has
    ok = (sets == 1) & single
    if not ok.any():
        return ok, H
    c = np.take_along_axis(C, which[None, :], axis=0)[0]
    # the least float t with the one value counted: r >= c - t (sign -) or r <= t - c (+)
    t = c - rho if sign < 0 else rho + c

    def counted(v):
        return (c - v <= rho) if sign < 0 else (v - c >= rho)
    for _ in range(4):
        t = np.where(counted(t), t, np.nextafter(t, np.inf))
    for _ in range(4):
        below = np.nextafter(t, -np.inf)
        t = np.where(counted(below), below, t)
    ok &= (_union_count(C, radii, t, sign) >= k)
    ok &= (_union_count(C, radii, np.nextafter(t, -np.inf), sign) < k)
    return ok, t


def _kth_of_union(centres: np.ndarray, radii: list[np.ndarray], k: int, sign: float,
                  iterations: int = 70) -> np.ndarray:
    """k-th smallest of ``{centres[:, s] + sign * r : r in radii[s], all s}`` per row.

    ``centres`` (m, S); ``radii[s]`` sorted ascending. Solved by bisection on
    the value with counts from binary searches, so no (m x N) matrix is formed;
    the bisection ends at the least float whose count reaches ``k``. Rows whose
    bracket has narrowed to one value of the union take that float directly
    (found from the value and checked by counting); rows whose midpoint equals
    an end of their bracket can move no further. Both are set aside every few
    steps (the result is the same).
    """
    m, S = centres.shape
    rmax = max(float(r[-1]) if r.size else 0.0 for r in radii)
    lo = centres.min(axis=1) - rmax - 1.0
    hi = centres.max(axis=1) + rmax + 1.0
    live = np.arange(m)
    C = np.ascontiguousarray(centres.T)        # (S, live rows)
    L, H = lo, hi
    for it in range(iterations):
        mid = 0.5 * (L + H)
        if it % 4 == 3:
            moving = (mid != L) & (mid != H)
            hi[live[~moving]] = H[~moving]          # adjacent floats: H is the answer
            if it >= 23:
                done, t = _settle(C, radii, L, H, k, sign)
                done &= moving
                hi[live[done]] = t[done]
                moving &= ~done
            if not moving.all():
                live = live[moving]
                if live.size == 0:
                    return hi
                L, H, C, mid = L[moving], H[moving], C[:, moving], mid[moving]
        ok = _union_count(C, radii, mid, sign) >= k
        H = np.where(ok, mid, H)
        L = np.where(ok, L, mid)
    hi[live] = H
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


def _cell_design(data, spec: SweepSpec, order: int, penalty: float, family: str,
                 l1_ratio: float, design: CellDesign | None) -> CellDesign:
    if design is not None and design.matches(order, penalty, family, l1_ratio):
        return design
    return CellDesign.make(data, spec, order, penalty, family, l1_ratio)


def _shuffle_groups(n: int, n_groups: int, seed: int) -> np.ndarray:
    """Rows dealt at random into ``n_groups`` groups of equal size (one row apart)."""
    group = np.empty(n, dtype=np.int64)
    group[np.random.default_rng(int(seed)).permutation(n)] = np.arange(n) % n_groups
    return group


def _grouped_outer_folds(design: CellDesign, k: int, R: int, seed: int):
    """Nested cross-validation sets of ``R`` shuffled ``k``-fold repetitions, from group summaries.

    The rows are dealt once at random into ``k * GROUPS_PER_FOLD`` equal groups
    and summarised in one pass; each repetition deals the groups afresh into
    ``k`` folds (seed ``seed + r``), so every fold is a random set of rows, as
    with a row-level shuffle, and every set's summary is a merge of groups.

    Returns ``((group (n,), of (R, G)), fold summaries)``: each row's group, the
    outer fold of every group in each repetition, and per repetition the
    ``(n, mean, comoment)`` of its folds.
    """
    n = design.y.size
    G = k * GROUPS_PER_FOLD
    group = _shuffle_groups(n, G, seed)
    st = design.moments(group, G)
    return _deal_groups(st, group, G, k, R, seed)


def _shared_groups(groups, design: CellDesign, k: int):
    """The sweep's random row groups (`engine.analysis.RowGroups`) on this cell's design,
    or None when they cannot serve ``k`` outer folds."""
    from .moments import Moments
    b, full = design.basis, groups.basis
    G = groups.n_groups
    if (G % k or G < 2 * k or groups.label.size != design.y.size or np.any(groups.label < 0)
            or b.max_order > full.max_order or b.interactions != full.interactions
            or b.centre.shape != full.centre.shape or not np.array_equal(b.centre, full.centre)
            or not np.array_equal(b.half_range, full.half_range)
            or not np.array_equal(b.terms, full.terms[:b.n_terms])):
        return None
    idx = np.r_[np.arange(design.p), full.n_terms]
    st = groups.stats
    return Moments(st.n, st.mean[:, idx], st.comoment[:, idx][:, :, idx]), groups.label, G


def _deal_groups(st, group: np.ndarray, G: int, k: int, R: int, seed: int):
    """Each repetition deals the ``G`` groups afresh into ``k`` folds (seed ``seed + r``)."""
    fold_sum = []
    of_all = np.empty((R, G), dtype=np.int64)
    for r in range(R):
        of = np.empty(G, dtype=np.int64)
        of[np.random.default_rng(int(seed) + r).permutation(G)] = np.arange(G) % k
        of_all[r] = of
        W = (of[None, :] == np.arange(k)[:, None]).astype(np.int8)
        fold_sum.append(combine_batch(st, W))
    return (group, of_all), fold_sum


def _fold_error_stats(design: CellDesign, fits: "SetFits", fold_of, k: int, shift: float,
                      extra: tuple | None = None):
    """Count, sum and sum of squares of the outer squared errors of every (repetition, fold).

    ``fits`` are the outer fits, repetition-major (``r * k + fold``). ``fold_of``
    is either ``(R, n)`` (each row's outer fold per repetition, -1: none) or
    ``(group (n,), of (R, G))`` when folds are unions of row groups; then the
    rows are taken group by group and only the ``R`` fits each row needs are
    evaluated. Sums are of ``e - shift`` (``e`` the squared error), against
    cancellation. One pass over the rows either way.

    ``extra``: ``(beta_u (S, p), intercepts (S,), assign (A, n))``, other fits whose
    residuals the same pass forms (as `CellDesign.residuals_of`); the design of
    each chunk of rows is then expanded once for both.

    Returns
    -------
    ``(cnt, s1, s2)`` each (R, k); with ``extra``, ``((cnt, s1, s2), residuals (A, n))``.
    """
    c_out = _intercepts(fits)
    if isinstance(fold_of, tuple):
        stats, res = _grouped_error_stats(design, fits.beta_u, c_out, fold_of, k, shift, extra)
        return stats if extra is None else (stats, res)
    R = fold_of.shape[0]
    S1 = c_out.size
    assign = np.where(fold_of >= 0, fold_of + k * np.arange(R)[:, None], -1)
    beta, c = fits.beta_u, c_out
    if extra is not None:
        beta = np.vstack([beta, extra[0]])
        c = np.r_[c, extra[1]]
        more = _fit_numbers(extra[2])
        assign = np.vstack([assign, np.where(more >= 0, more.astype(np.int64) + S1, -1)])
    res = design.residuals_of(beta, c, assign)
    cnt, s1, s2 = np.zeros((R, k)), np.zeros((R, k)), np.zeros((R, k))
    for r in range(R):
        ok = fold_of[r] >= 0
        f = fold_of[r, ok]
        e = res[r, ok] ** 2 - shift
        cnt[r] = np.bincount(f, minlength=k)[:k]
        s1[r] = np.bincount(f, weights=e, minlength=k)[:k]
        s2[r] = np.bincount(f, weights=e * e, minlength=k)[:k]
    return (cnt, s1, s2) if extra is None else ((cnt, s1, s2), res[R:])


def _uniform_fits(assign: np.ndarray, group: np.ndarray, first: np.ndarray,
                  block: int = 1 << 16) -> np.ndarray:
    """``(A, G)``: the fit of every output row in every group when all the group's rows
    share one (their value in ``assign``), else -2; ``first`` holds one row of each group.

    Found in sequential passes over blocks of rows (small buffers, reused), rather
    than by gathering rows group by group.
    """
    A_, n = assign.shape
    same = assign[:, first]
    at_first = np.empty(min(block, n), dtype=same.dtype)
    differs = np.empty(min(block, n), dtype=bool)
    for a in range(A_):
        found = []
        for i0 in range(0, n, block):
            i1 = min(i0 + block, n)
            g = group[i0:i1]
            np.take(same[a], g, out=at_first[:i1 - i0], mode="clip")   # labels are in range
            np.not_equal(assign[a, i0:i1], at_first[:i1 - i0], out=differs[:i1 - i0])
            if differs[:i1 - i0].any():
                found.append(g[differs[:i1 - i0]])
        if found:
            same[a, np.unique(np.concatenate(found))] = -2
    return same


def _grouped_error_stats(design: CellDesign, beta_u: np.ndarray, c_out: np.ndarray, fold_of,
                         k: int, shift: float, extra: tuple | None):
    """`_fold_error_stats` on folds that are unions of row groups: rows taken group by
    group, each multiplied by the ``R`` outer fits it needs and the ``extra`` fits its
    rows are assigned (usually one per output row within a group).

    Every chunk of rows is gathered, expanded, multiplied and squared in buffers
    allocated once for the pass."""
    group, of = fold_of
    R, G = of.shape
    n = design.y.size
    cnt, s1, s2 = np.zeros((R, k)), np.zeros((R, k)), np.zeros((R, k))
    # small labels sort by radix (the same stable order)
    order = np.argsort(group.astype(np.int16) if G < (1 << 15) else group, kind="stable")
    bounds = np.r_[0, np.cumsum(np.bincount(group, minlength=G))]
    p = design.p
    step = _step(p)
    m = min(step, n)
    X, y = design.X, design.y
    ubuf = np.empty((m, X.shape[1]))
    buf = np.empty((m, p), order="F")
    ybuf = np.empty(m)
    ebuf = np.empty(R * m)
    ar = np.arange(R)
    if extra is not None:
        beta_x, c_x, assign_x = extra
        assign_x = _fit_numbers(assign_x)
        A_ = assign_x.shape[0]
        res = np.full((A_, n), np.nan)
        beta_all = np.vstack([beta_u, beta_x])
        c_all = np.r_[c_out, c_x]
        S1, S2 = c_out.size, c_x.size
        same = _uniform_fits(assign_x, group, order[np.minimum(bounds[:-1], max(n - 1, 0))])
        rbuf = np.empty(m)
        pos = np.zeros(S2, dtype=np.int64)
    else:
        beta_all, c_all, res, S2 = beta_u, c_out, None, 0
    pbuf = np.empty((R + S2) * m)
    for g in range(G):
        cols = ar * k + of[:, g]
        for c0 in range(bounds[g], bounds[g + 1], step):
            rows = order[c0:min(c0 + step, bounds[g + 1])]
            mr = rows.size
            if extra is not None:
                one = same[:, g]
                sub = assign_x[:, rows] if np.any(one == -2) else None
                fits_x = one[one >= 0] if sub is None else sub[sub >= 0]
                need = np.flatnonzero(np.bincount(fits_x, minlength=S2))
                pos[need] = R + np.arange(need.size)
                take = np.r_[cols, S1 + need]
            else:
                take = cols
            # predictions one fit per row of PT (each fit's values contiguous)
            if p:
                Uc = np.take(X, rows, axis=0, out=ubuf[:mr], mode="clip")
                F = design.basis.expand_scaled(design.basis.scale(Uc, out=Uc), out=buf[:mr])
                PT = np.matmul(beta_all[take], F.T, out=pbuf[:take.size * mr].reshape(-1, mr))
                PT += c_all[take][:, None]
            else:
                PT = np.broadcast_to(c_all[take][:, None], (take.size, mr))
            yr = np.take(y, rows, out=ybuf[:mr], mode="clip")
            e = np.subtract(yr, PT[:R], out=ebuf[:R * mr].reshape(R, mr))
            np.square(e, out=e)
            e -= shift
            cnt[ar, of[:, g]] += mr
            s1[ar, of[:, g]] += e.sum(axis=1)
            np.square(e, out=e)
            s2[ar, of[:, g]] += e.sum(axis=1)
            if extra is not None:
                for a in range(A_):
                    if one[a] >= 0:
                        res[a, rows] = np.subtract(yr, PT[pos[one[a]]], out=rbuf[:mr])
                    elif one[a] == -2:
                        s = sub[a]
                        at = np.flatnonzero(s >= 0)
                        res[a, rows[at]] = yr[at] - PT[pos[s[at]], at]
    return (cnt, s1, s2), res


def _fit_numbers(assign) -> np.ndarray:
    """``assign`` as a 2-d array of integers (its own integer type kept: no copy)."""
    assign = np.atleast_2d(np.asarray(assign))
    return assign if assign.dtype.kind in "iu" else assign.astype(np.int64)


def _nested_cv_parts(design: CellDesign, fold_sum: list, k: int):
    """Fits and inner errors of every repetition from its ``k`` fold summaries.

    Returns ``(outer fits (R*k sets, repetition-major), s_in (R, k), n_in (R, k))``:
    ``s_in[r, kk]`` the inner validation squared errors summed over the inner
    folds of outer fold ``kk``, ``n_in`` their rows.
    """
    from .moments import Moments
    sel_outer = 1 - np.eye(k, dtype=np.int8)
    pairs = [(kk, j) for kk in range(k) for j in range(k) if j != kk]
    sel_inner = np.ones((len(pairs), k), dtype=np.int8)
    for i, (kk, j) in enumerate(pairs):
        sel_inner[i, [kk, j]] = 0
    sel = np.vstack([sel_outer, sel_inner])
    R = len(fold_sum)
    per = sel.shape[0]
    q = fold_sum[0][1].shape[1] if R else design.p + 1
    # every repetition's training summaries written into one stack (no list of copies)
    n_t, m_t, M_t = np.empty(R * per), np.empty((R * per, q)), np.empty((R * per, q, q))
    for r, fs in enumerate(fold_sum):
        at = slice(r * per, (r + 1) * per)
        n_t[at], m_t[at], M_t[at] = combine_batch(Moments(*fs), sel)
    fits = design.fit_summary(TermSummary(n_t, m_t, M_t), coefficients_only=True)
    j_idx = np.array([j for _, j in pairs])
    owner = np.array([kk for kk, _ in pairs])
    t_idx = np.concatenate([r * per + k + np.arange(len(pairs)) for r in range(R)])
    v_n = np.concatenate([fs[0][j_idx] for fs in fold_sum])
    v_m = np.concatenate([fs[1][j_idx] for fs in fold_sum])
    v_M = np.empty((R * len(pairs), q, q))
    for r, fs in enumerate(fold_sum):
        np.take(fs[2], j_idx, axis=0, out=v_M[r * len(pairs):(r + 1) * len(pairs)],
                mode="clip")                                # (indices in range)
    sse_in = sse(TermSummary(v_n, v_m, v_M), fits.summary.mean[t_idx],
                 fits.beta_u[t_idx][:, :, None])[:, 0].reshape(R, len(pairs))
    s_in = np.stack([np.bincount(owner, weights=sse_in[r], minlength=k) for r in range(R)])
    n_in = np.stack([np.bincount(owner, weights=v_n.reshape(R, -1)[r], minlength=k)
                     for r in range(R)])
    outer = np.concatenate([r * per + np.arange(k) for r in range(R)])
    return fits.take(outer), s_in, n_in


def error_interval(data, spec: SweepSpec, order: int, penalty: float, level: float = LEVEL,
                   repeats: int | None = None, folds: int | None = None,
                   family: str = "ridge", l1_ratio: float = 0.0,
                   progress: Progress | None = None,
                   design: CellDesign | None = None, groups=None) -> ErrorInterval:
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
    design : the cell's `CellDesign` when the caller already has it.
    groups : `engine.analysis.RowGroups`, random row groups the sweep already
        summarised (large tables, shuffled schemes); the repetitions reshuffle
        them instead of groups summarised here in a pass of their own.

    Returns
    -------
    ErrorInterval

    Notes
    -----
    Every fit and every inner error comes from summaries; the outer errors of
    single rows (for the spread) come from one pass over the rows that
    predicts every outer fit at once. From `engine.summaries.LARGE_ROWS` rows
    on, shuffled schemes deal the rows once into seeded groups of equal size
    and each repetition reshuffles the groups into folds (said in the notes).
    """
    job = _error_job(data, spec, order, penalty, level, repeats, folds, family, l1_ratio,
                     progress, design, groups)
    if isinstance(job, ErrorInterval):
        return job
    return job.finish(_fold_error_stats(job.design, job.fits, job.fold_of, job.k, job.shift))


@dataclass
class _ErrorJob:
    """A nested cross-validation waiting for its outer errors of single rows: the outer
    fits, each row's outer fold, the shift of the sums (`_fold_error_stats`) and what
    turns those sums into the `ErrorInterval`."""

    design: CellDesign
    fits: SetFits
    fold_of: object
    k: int
    shift: float
    finish: Callable[[tuple], ErrorInterval]


def _error_job(data, spec: SweepSpec, order: int, penalty: float, level: float,
               repeats: int | None, folds: int | None, family: str, l1_ratio: float,
               progress: Progress | None, design: CellDesign | None,
               groups) -> "ErrorInterval | _ErrorJob":
    """`error_interval` up to its pass over the rows (one-split schemes: the interval)."""
    design = _cell_design(data, spec, order, penalty, family, l1_ratio, design)
    y = design.y
    n = y.size
    kind = spec.scheme.kind
    z = _normal_quantile(0.5 + level / 2.0)
    if kind in _ONE_SPLIT:
        from .analysis import plan_for
        plan = plan_for(data, spec.scheme, spec.seed)
        tr, va = plan.train_sets[0], plan.valid_sets[0]
        fits = design.fit_sets([tr])
        assign = np.full(n, -1, dtype=np.int64)
        assign[va] = 0
        e = design.residuals(fits, assign)[0, va] ** 2
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
    if progress:
        progress(0.0, f"Nested cross-validation, {R} repetition{'s' if R > 1 else ''}")
    grouped = shuffled and n >= LARGE_ROWS and n >= 2 * k * GROUPS_PER_FOLD
    notes: list[str] = []
    if grouped:
        shared = _shared_groups(groups, design, k) if groups is not None else None
        if shared is not None:   # the sweep's pass summarised them: no pass here
            st, label, G = shared
            fold_of, fold_sum = _deal_groups(st, label, G, k, R, int(spec.seed))
            how = (f"the rows of each of the sweep's {G // groups.per_piece} folds were dealt "
                   f"once at random into {groups.per_piece} groups (seed {groups.seed}), "
                   f"{G} groups of about {n // G:,} rows")
        else:
            fold_of, fold_sum = _grouped_outer_folds(design, k, R, int(spec.seed))
            G = k * GROUPS_PER_FOLD
            how = (f"the rows were dealt once at random into {G} groups of about "
                   f"{n // G:,} rows (seed {int(spec.seed)})")
        outer_fits, s_in, n_in = _nested_cv_parts(design, fold_sum, k)
        notes.append(f"With {n:,} rows the repetitions reshuffle groups, not single rows: "
                     f"{how}, and each repetition deals the groups afresh into {k} folds "
                     f"(seeds {int(spec.seed)} to {int(spec.seed) + R - 1}).")
    else:
        fold_of, fold_sum, outer_fits, s_in, n_in = _exact_nested(data, spec, design, k, R)
    # outer errors of single rows: every outer fit predicted in one pass over the rows
    inner_sse = float(s_in.sum())
    inner_n = float(n_in.sum())
    err_ncv = inner_sse / inner_n

    def finish(stats: tuple) -> ErrorInterval:
        cnt, s1, s2 = stats
        used = cnt > 0
        mean_out = np.where(used, s1 / np.where(used, cnt, 1.0), 0.0) + err_ncv
        var_out = np.where(cnt > 1, (s2 - np.where(used, s1 * s1 / np.where(used, cnt, 1.0), 0.0))
                           / np.where(cnt > 1, cnt - 1, 1.0), 0.0)
        a_list = ((s_in / np.where(n_in > 0, n_in, 1.0) - mean_out) ** 2)[used]
        b_list = np.where(cnt > 1, var_out / np.where(used, cnt, 1.0), 0.0)[used]
        N = float(cnt.sum())
        S1, S2 = float(s1.sum()), float(s2.sum())
        err_cv = S1 / N + err_ncv
        naive_se = (math.sqrt(max((S2 - S1 * S1 / N) / (N - 1), 0.0)) / math.sqrt(n) if N > 1
                    else float("nan"))
        mse_hat = float(np.mean(a_list) - np.mean(b_list))
        se = math.sqrt(max(mse_hat, 0.0) * (k - 1) / k)
        # the width stays between the naive one and sqrt(K) times it (Bates et al., section 4)
        se = min(max(se, naive_se), math.sqrt(k) * naive_se)
        bias = (1.0 + (k - 2) / k) * (err_ncv - err_cv)
        # the bias correction assumes exchangeable rows; contiguous blocks keep the plain estimate
        centre = err_cv if kind == "blocked" else err_ncv - bias
        notes.insert(0, "Nested cross-validation (Bates, Hastie and Tibshirani 2023): "
                     f"{k} outer folds"
                     + (f", repeated {R} times with fresh shuffles" if R > 1 else "")
                     + "; the model is the fixed cell, refitted in every fold. Plain "
                     f"cross-validation gives {err_cv:.4g} with a naive standard error of "
                     f"{naive_se:.2g}; the nested estimate of its spread is {se:.2g}.")
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
    return _ErrorJob(design, outer_fits, fold_of, k, err_ncv, finish)


def _exact_nested(data, spec: SweepSpec, design: CellDesign, k: int, R: int):
    """Nested cross-validation sets on the scheme's own outer splits (row-level shuffles).

    Per repetition: outer training sets and inner (training, validation) sets
    as `_inner_splits` builds them, all summarised in one pass over the rows.

    Returns ``(fold_of (R, n), None, outer fits (R*k), s_in (R, k), n_in (R, k))``.
    """
    n = design.y.size
    fold_of = np.full((R, n), -1, dtype=np.int64)
    train_parts, val_parts, owners, counts = [], [], [], []
    for r in range(R):
        outer = _nested_outer(data, spec, k, int(spec.seed) + r)
        sets, t_pos, v_pos, own = [], [], [], []
        for kk, (tr, va) in enumerate(outer):
            fold_of[r, va] = kk
            sets.append(tr)
        for kk in range(len(outer)):
            for itr, iva in _inner_splits(outer, kk):
                t_pos.append(len(sets))
                sets.append(itr)
                v_pos.append(len(sets))
                sets.append(iva)
                own.append(kk)
        summ = design.summaries(sets)
        tr_idx = np.r_[np.arange(len(outer)), np.asarray(t_pos, dtype=np.int64)]
        train_parts.append(TermSummary(summ.n[tr_idx], summ.mean[tr_idx], summ.M[tr_idx]))
        v = np.asarray(v_pos, dtype=np.int64)
        val_parts.append(TermSummary(summ.n[v], summ.mean[v], summ.M[v]))
        owners.append(np.asarray(own, dtype=np.int64))
        counts.append((len(outer), len(t_pos)))
    n_t = np.concatenate([t.n for t in train_parts])
    m_t = np.concatenate([t.mean for t in train_parts])
    M_t = np.concatenate([t.M for t in train_parts])
    fits = design.fit_summary(TermSummary(n_t, m_t, M_t), coefficients_only=True)
    s_in = np.zeros((R, k))
    n_in = np.zeros((R, k))
    outer_idx = []
    start = 0
    for r, (n_out, n_inner) in enumerate(counts):
        outer_idx.append(start + np.arange(n_out))
        t_idx = start + n_out + np.arange(n_inner)
        val = val_parts[r]
        e = sse(val, fits.summary.mean[t_idx], fits.beta_u[t_idx][:, :, None])[:, 0]
        s_in[r, :n_out] = np.bincount(owners[r], weights=e, minlength=n_out)
        n_in[r, :n_out] = np.bincount(owners[r], weights=val.n, minlength=n_out)
        start += n_out + n_inner
    return fold_of, None, fits.take(np.concatenate(outer_idx)), s_in, n_in


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
    oof : ridge and least squares: ``(rows, residuals)`` of the first round's
        validation rows (ascending) under their split models.
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
    oof: tuple | None = field(default=None, repr=False)

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


def _from_pieces(plan: FoldPlan, pieces: list, basis: PolynomialBasis | None,
                 design: CellDesign):
    """Inner splits and the summaries `prediction_intervals` needs, merged from piece summaries.

    Returns ``(inner_all, summary)`` in the order splits, all rows, inner
    training sets, or None when the pieces cannot give them (another design,
    rows outside round 0's pieces, or a split with fewer than two inner folds).
    """
    b = design.basis
    if (basis is None or b.max_order > basis.max_order or b.interactions != basis.interactions
            or b.centre.shape != basis.centre.shape
            or not np.array_equal(b.centre, basis.centre)
            or not np.array_equal(b.half_range, basis.half_range)
            or not np.array_equal(b.terms, basis.terms[:b.n_terms])
            or len(pieces) != len(plan.rounds) or np.any(plan.rounds[0].pieces < 0)):
        return None
    idx = np.r_[np.arange(design.p), basis.n_terms]
    picks: list[tuple[int, np.ndarray]] = []
    for r, j in plan.split_round:
        picks.append((r, plan.rounds[r].train[j] > 0))
    picks.append((0, np.ones(plan.rounds[0].n_pieces, dtype=bool)))
    inner_all = []
    for r, j in plan.split_round:
        rnd = plan.rounds[r]
        tr = rnd.train[j] > 0
        inner = []
        for j2 in range(rnd.train.shape[0]):
            va_sel = (rnd.valid[j2] > 0) & tr
            if j2 == j or pieces[r].n[va_sel].sum() == 0:
                continue
            lut = np.r_[va_sel, False]            # piece -1 (unused rows) -> False
            inner.append(((tr & (rnd.train[j2] > 0)), np.flatnonzero(lut[rnd.pieces])))
        if len(inner) < 2:
            return None
        picks += [(r, sel) for sel, _ in inner]
        inner_all.append([(None, iva) for _, iva in inner])
    n_out = np.zeros(len(picks))
    m_out = np.zeros((len(picks), idx.size))
    M_out = np.zeros((len(picks), idx.size, idx.size))
    for r in range(len(plan.rounds)):
        at = [i for i, (rr, _) in enumerate(picks) if rr == r]
        if not at:
            continue
        n_r, m_r, M_r = combine_batch(pieces[r], np.stack([picks[i][1] for i in at]))
        n_out[at], m_out[at], M_out[at] = n_r, m_r[:, idx], M_r[:, idx][:, :, idx]
    return inner_all, TermSummary(n_out, m_out, M_out)


def prediction_intervals(data, spec: SweepSpec, order: int, penalty: float,
                         level: float = LEVEL, plan: FoldPlan | None = None,
                         family: str = "ridge", l1_ratio: float = 0.0,
                         max_checked_rows: int = _MAX_COVERAGE_ROWS,
                         design: CellDesign | None = None, pieces: list | None = None,
                         pieces_basis: PolynomialBasis | None = None) -> PredictionIntervals:
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
    design : the cell's `CellDesign` when the caller already has it.
    pieces, pieces_basis : per round of ``plan``, the piece summaries of the
        design ``pieces_basis`` (target last) that the sweep formed
        (`engine.analysis.Analysis.pieces`); every training set is then merged
        from them instead of summarised in a pass over the rows (used when the
        cell's design is a leading block of ``pieces_basis``).

    Returns
    -------
    PredictionIntervals

    Notes
    -----
    Every model (the scheme's split models, the model on all rows, and the
    models on the folds inside each split's training rows) is fitted from
    summaries formed in one pass over the rows; the residuals of every
    validation row under every model that needs them come from one more pass
    (`how_sure` shares that pass with the error interval's).
    """
    job = _intervals_job(data, spec, order, penalty, level, plan, family, l1_ratio,
                         max_checked_rows, design, pieces, pieces_basis)
    return job.finish(job.design.residuals_of(job.beta_u, job.intercepts, job.assign))


@dataclass
class _IntervalsJob:
    """Prediction intervals waiting for the residuals of their fits on single rows
    (``assign`` as in `CellDesign.residuals`) and what turns them into the result."""

    design: CellDesign
    beta_u: np.ndarray
    intercepts: np.ndarray
    assign: np.ndarray
    finish: Callable[[np.ndarray], PredictionIntervals]


def _intervals_job(data, spec: SweepSpec, order: int, penalty: float, level: float,
                   plan: FoldPlan | None, family: str, l1_ratio: float, max_checked_rows: int,
                   design: CellDesign | None, pieces: list | None,
                   pieces_basis: PolynomialBasis | None) -> _IntervalsJob:
    """`prediction_intervals` up to its pass over the rows."""
    from .analysis import plan_for
    notes: list[str] = []
    if plan is None:
        scheme = spec.scheme
        if scheme.kind == "loo":
            scheme = replace(scheme, kind="kfold", folds=min(10, len(data.y)))
            notes.append("Intervals use shuffled 10-fold splits (the sweep used leave-one-out).")
        plan = plan_for(data, scheme, spec.seed)
    design = _cell_design(data, spec, order, penalty, family, l1_ratio, design)
    y = design.y
    n = y.size
    analytic = family == "ridge"
    later = spec.scheme.kind in ("holdout", "blocked")
    rng = np.random.default_rng(int(spec.seed))
    rounds = _plan_splits(plan)
    # scheme's split models + validation residuals (for CV+ at new points)
    trains = [tr for rnd in rounds for tr, _ in rnd]
    valids = [va for rnd in rounds for _, va in rnd]
    S = len(trains)
    shared = _from_pieces(plan, pieces, pieces_basis, design) if pieces is not None else None
    if shared is not None:
        # every training set is a union of the sweep's pieces: no pass over the rows
        inner_all, summ = shared
    else:
        inner_all = [_inner_splits(rnd, kk) for rnd in rounds for kk in range(len(rnd))]
        # every training set (splits, all rows, folds inside each split) from one pass
        summ = design.summaries(trains + [np.arange(n)]
                                + [itr for inner in inner_all for itr, _ in inner])
    inner_first = np.cumsum([0] + [len(inner) for inner in inner_all])
    split_fits = design.fit_summary(TermSummary(summ.n[:S + 1], summ.mean[:S + 1],
                                                summ.M[:S + 1]), keep_leverage=analytic)
    rest = np.arange(S + 1, summ.n.shape[0])
    inner_fits = design.fit_summary(TermSummary(summ.n[rest], summ.mean[rest], summ.M[rest]))
    # residuals: each round's validation rows under their split model, and each split's
    # inner validation rows under their inner model (fits numbered split, then inner)
    # the smallest integers that number every fit (the table is as long as the rows)
    n_fits = S + 1 + int(inner_first[-1])
    assign = np.full((len(rounds) + S, n), -1,
                     dtype=np.int16 if n_fits < (1 << 15) else np.int64)
    s0 = 0
    for r, rnd in enumerate(rounds):
        for kk in range(len(rnd)):
            assign[r, valids[s0 + kk]] = s0 + kk
        s0 += len(rnd)
    for s, inner in enumerate(inner_all):
        for j, (_, iva) in enumerate(inner):
            assign[len(rounds) + s, iva] = S + 1 + inner_first[s] + j
    both = SetFits(design, summ, np.vstack([split_fits.beta_u, inner_fits.beta_u]),
                   np.r_[split_fits.edf, inner_fits.edf], np.r_[split_fits.sse, inner_fits.sse])

    def finish(res: np.ndarray) -> PredictionIntervals:
        round_of = [r for r, rnd in enumerate(rounds) for _ in rnd]
        # out-of-fold residuals of the first round in row order (ridge: the checks' fits too)
        rows0 = np.flatnonzero(assign[0] >= 0)
        oof = (rows0, res[0, rows0]) if family == "ridge" else None
        radii = [np.sort(np.abs(res[round_of[s], va])) for s, va in enumerate(valids)]
        # coverage on unseen rows: rebuild each interval from a split's training rows alone
        per_split = []
        per_round_budget = max(1, max_checked_rows // max(1, S))
        cov_a, cov_c, wid_a, wid_c = [], [], [], []
        s0 = 0
        for rnd in rounds:
            for kk, (tr, va) in enumerate(rnd):
                s = s0 + kk
                inner = inner_all[s]
                ifits = inner_fits.take(inner_first[s] + np.arange(len(inner)))
                iradii = [np.sort(np.abs(res[len(rounds) + s, iva])) for _, iva in inner]
                rows = _sample(va, per_round_budget, rng)
                F = design.rows(rows)
                centres = np.column_stack([ifits.predict(j, F) for j in range(len(inner))])
                c_lo, c_hi = cvplus_bounds(centres, iradii, level)
                inside_c = (y[rows] >= c_lo) & (y[rows] <= c_hi)
                cov_c.append(inside_c)
                wid_c.append(c_hi - c_lo)
                row = {"split": s + 1, "training_rows": int(tr.size),
                       "checked_rows": int(rows.size),
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
        if checked < sum(va.size for va in valids):
            notes.append(f"The checked rows are a seeded sample (seed {int(spec.seed)}) of at most "
                         f"{per_round_budget:,} validation rows per split; the CV+ intervals use "
                         "the residuals of every validation row.")
        if analytic and penalty > 0:
            notes.append("The analytic interval counts the variance of the penalised fit but not "
                         "the bias the penalty adds; CV+ needs no such assumption.")
        if analytic:
            notes.append("The analytic interval assumes independent errors of constant spread "
                         "with a normal shape; CV+ assumes only that new rows are exchangeable "
                         "with the old.")
        final = split_fits.take([S])
        split_only = split_fits.take(np.arange(S))
        return PredictionIntervals(
            level=level, analytic_coverage=a_cov, cvplus_coverage=float(cov_c_all.mean()),
            analytic_width=a_w, cvplus_width=float(np.median(np.concatenate(wid_c))),
            checked_rows=checked, checked_on="later period" if later else "validation rows",
            per_split=pd.DataFrame(per_split), notes=notes, design=design, final=final,
            split_fits=split_only, radii=radii, oof=oof)
    return _IntervalsJob(design, both.beta_u, _intercepts(both), assign, finish)


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
        # one design serves both; BLAS on one thread for the many
        # small solves, the row passes pick their own
        with one_thread():
            plain = analysis.model_data is None
            b = getattr(analysis, "basis", None)
            # the sweep's design of these rows (large tables, whose one pass served the sweep
            # and the learning curve): no second look at every row
            same = (plain and getattr(analysis, "learning_pieces", None) is not None
                    and b is not None and analysis.n_rows == len(data_w.y)
                    and b.centre.shape == (np.shape(data_w.X)[1],)
                    and b.input_names == spec_w.inputs and b.interactions == spec_w.interactions)
            design = CellDesign.make(data_w, spec_w, rec.order, rec.penalty, family, l1,
                                     basis=b if same else None)
            err = _error_job(data_w, spec_w, rec.order, rec.penalty, level, None, None, family,
                             l1, progress, design, analysis.row_groups if plain else None)
            # the sweep's piece summaries give every training set (plain analyses)
            shared = analysis.pieces if plain else None
            pred = _intervals_job(data_w, spec_w, rec.order, rec.penalty, level,
                                  analysis.plan if shared else None, family, l1,
                                  _MAX_COVERAGE_ROWS, design, shared, analysis.basis)
            if isinstance(err, _ErrorJob):
                # one pass over the rows: the outer errors of the nested cross-validation
                # and the residuals of the prediction intervals' fits
                stats, res = _fold_error_stats(design, err.fits, err.fold_of, err.k, err.shift,
                                               extra=(pred.beta_u, pred.intercepts, pred.assign))
                err = err.finish(stats)
            else:
                res = design.residuals_of(pred.beta_u, pred.intercepts, pred.assign)
            pred = pred.finish(res)
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
