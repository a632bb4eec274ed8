"""Lasso and elastic net on the standardised training cross-product matrix.

Penalties mean scikit-learn's ``ElasticNet(alpha, l1_ratio)`` (``Lasso`` when
``l1_ratio = 1``) on raw-power terms standardised on the training rows, with
an unpenalised intercept::

    (1 / 2n) |y - Xw|^2 + alpha * l1_ratio * |w|_1 + alpha * (1 - l1_ratio) / 2 * |w|^2

Only the cross-product matrix ``G = X'X / n`` and vector ``b = X'y / n`` of
the standardised terms are needed (no second pass over the rows). Coordinate
descent runs along the penalties from the largest to the smallest, each
started from the previous solution (warm starts), vectorised over the
training sets. Once the signs of the coefficients settle, the solution on
that support is solved exactly (``(G_AA + l2 I) w_A = b_A - l1 s_A``) and kept
when it satisfies the optimality conditions. Convergence is judged by the
duality gap relative to the target's sum of squares (``gap <= tol * y'y``,
scikit-learn's scaling), so small penalties are not stopped early.

Effective degrees of freedom: lasso, the number of non-zero coefficients
(Zou, Hastie and Tibshirani 2007, "On the degrees of freedom of the lasso");
elastic net, the trace of the ridge-type hat matrix on the active set,
``sum mu / (mu + alpha (1 - l1_ratio))`` over the eigenvalues ``mu`` of
``G_AA`` (Zou and Hastie 2005, Tibshirani and Taylor 2012; formula quoted from
memory). The intercept adds one to both.
"""
from __future__ import annotations

import numpy as np

from .base import (FamilyFit, RawMap, TermSummary, fill_from_standardised, fill_least_squares,
                   finish_intercepts, standardise)

NAME = "lasso"
TOL = 1e-12
#: Grid points per decade of the internal warm-start path (chosen here).
WARM_PER_DECADE = 8


def _gap(G: np.ndarray, b: np.ndarray, yy: np.ndarray, w: np.ndarray, l1: float,
         l2: float) -> np.ndarray:
    """Duality gap of the elastic-net problem per set, scaled like ``y'y / n``.

    ``G`` (S, p, p), ``b`` (S, p) are mean-scaled (``X'X / n``, ``X'y / n``),
    ``yy`` (S,) is ``y'y / n`` of the centred target, ``w`` (S, p).
    """
    H = np.einsum("sij,sj->si", G, w)
    xta = b - H - l2 * w
    dual = np.abs(xta).max(axis=1) if w.shape[1] else np.zeros(w.shape[0])
    r2 = np.clip(yy + np.einsum("si,si->s", w, H) - 2.0 * np.einsum("si,si->s", b, w), 0, None)
    with np.errstate(divide="ignore", invalid="ignore"):
        const = np.where(dual > l1, l1 / np.where(dual > 0, dual, 1.0), 1.0)
    gap = np.where(dual > l1, 0.5 * (r2 + r2 * const * const), r2)
    gap = (gap + l1 * np.abs(w).sum(axis=1) - const * (yy - np.einsum("si,si->s", b, w))
           + 0.5 * l2 * (1.0 + const * const) * np.einsum("si,si->s", w, w))
    return gap


def _objective(Gaa: np.ndarray, ba: np.ndarray, wa: np.ndarray, l1: float, l2: float) -> float:
    return float(0.5 * wa @ (Gaa @ wa) - ba @ wa + l1 * np.abs(wa).sum() + 0.5 * l2 * wa @ wa)


def _solve(M: np.ndarray, v: np.ndarray) -> np.ndarray:
    try:
        out = np.linalg.solve(M, v)
        if np.all(np.isfinite(out)):
            return out
    except np.linalg.LinAlgError:
        pass
    return np.linalg.lstsq(M, v, rcond=None)[0]


def _finish(G: np.ndarray, b: np.ndarray, w: np.ndarray, l1: float, l2: float,
            max_steps: int) -> np.ndarray:
    """Exact solution of one set from a starting point, by sign-consistent active-set steps.

    On the current support ``A`` with signs ``s`` the problem is a quadratic:
    ``w_A = (G_AA + l2 I)^-1 (b_A - l1 s_A)``. A step moves towards it and stops
    at the point of lowest objective among the zero crossings on the way (that
    coordinate leaves ``A``); once the support solution keeps its signs, the
    inactive term that violates optimality most (``|b_j - G_j w| > l1``) joins
    ``A``. The objective never increases (the feature-sign search of Lee, Battle,
    Raina and Ng, 2007); it ends at the exact optimum.
    """
    w = w.copy()
    p = w.size
    for _ in range(max_steps):
        act = np.flatnonzero(w)
        grad = b - G @ w - l2 * w
        if act.size:
            sg = np.sign(w[act])
            Gaa = G[np.ix_(act, act)]
            target = _solve(Gaa + l2 * np.eye(act.size), b[act] - l1 * sg)
            if np.all(np.sign(target) == sg):
                w[act] = target
                grad = b - G @ w - l2 * w
            else:
                # line search over the zero crossings between w_A and target
                cur = w[act]
                d = target - cur
                with np.errstate(divide="ignore", invalid="ignore"):
                    ts = -cur / d
                ts = np.unique(np.r_[ts[(ts > 0) & (ts < 1)], 1.0])
                best_t, best_f = 0.0, _objective(Gaa, b[act], cur, l1, l2)
                for t in ts:
                    cand = cur + t * d
                    # evaluated with the signs of the current support
                    f = _objective(Gaa, b[act], cand, l1, l2)
                    if f < best_f - 1e-15 * abs(best_f):
                        best_t, best_f = t, f
                new = cur + best_t * d
                cross = np.isclose(best_t, -cur / np.where(d != 0, d, np.inf), rtol=1e-12,
                                   atol=0)
                new[cross] = 0.0
                if best_t == 0.0:
                    # no progress along the segment: drop the smallest coefficient
                    new[np.argmin(np.abs(cur))] = 0.0
                w[act] = new
                continue
        viol = np.abs(grad) - l1
        viol[act] = -np.inf
        if p == 0 or viol.max() <= 1e-13 * max(l1, 1e-300) + 1e-15:
            return w
        j = int(np.argmax(viol))
        # start the new term at zero with the sign of its gradient (it enters next step)
        w[j] = np.sign(grad[j]) * 1e-300
    return w


def _sweep(G: np.ndarray, diag: np.ndarray, g: np.ndarray, w: np.ndarray, coords,
           l1: float, den: np.ndarray) -> None:
    """One pass of coordinate descent over ``coords``, in place (``g = b - G w`` kept)."""
    for j in coords:
        wj = w[:, j]
        z = g[:, j] + diag[:, j] * wj
        new = np.sign(z) * np.maximum(np.abs(z) - l1, 0.0) / den[:, j]
        g -= G[:, j, :] * (new - wj)[:, None]
        w[:, j] = new


def solve_path(G: np.ndarray, b: np.ndarray, yy: np.ndarray, penalties: np.ndarray,
               l1_ratio: float, tol: float = TOL, cd_sweeps: int = 4,
               max_steps: int = 100_000, warm_path: bool = True) -> np.ndarray:
    """Elastic-net coefficients on standardised terms for every penalty.

    Parameters
    ----------
    G : (S, p, p) ``X'X / n`` of the training-standardised terms, per set.
    b : (S, p) ``X'y / n`` (centred target).
    yy : (S,) ``y'y / n`` of the centred target (scales the convergence test).
    penalties : (K,) positive ``alpha`` values (any order; solved largest first).
    l1_ratio : mixing parameter in (0, 1]; 1 = lasso.
    tol : stop when the duality gap is at most ``tol * yy``.
    cd_sweeps : coordinate-descent passes per penalty before the exact finish.
    max_steps : limit on active-set steps of the finish.
    warm_path : solve along a log grid from the largest useful penalty down to the
        smallest asked for (warm starts), returning only the penalties asked for.

    Returns
    -------
    (S, p, K) coefficients.
    """
    S, p = b.shape
    K = penalties.size
    out = np.zeros((S, p, K))
    if p == 0 or K == 0:
        return out
    if warm_path and l1_ratio > 0:
        # warm starts need a path: solve from where every coefficient is zero down to the
        # smallest penalty asked for, on a log grid of WARM_PER_DECADE points per decade,
        # and keep the penalties asked for (a cold start on strongly correlated terms can
        # take the exact finish through very many supports)
        top = float(np.abs(b).max()) / l1_ratio
        low = float(penalties.min())
        if top > low > 0:
            n_pts = int(np.ceil(np.log10(top / low) * WARM_PER_DECADE)) + 1
            grid = np.logspace(np.log10(top), np.log10(low), n_pts)
            allp = np.unique(np.r_[grid, penalties])
            full = solve_path(G, b, yy, allp, l1_ratio, tol=tol, cd_sweeps=cd_sweeps,
                              max_steps=max_steps, warm_path=False)
            pos = np.searchsorted(allp, penalties)
            return full[:, :, pos]
    diag = np.diagonal(G, axis1=1, axis2=2).copy()
    w = np.zeros((S, p))
    g = b.copy()                                    # b - G w
    prev = w.copy()
    worst = 0.0
    all_coords = range(p)
    for k in np.argsort(-penalties, kind="stable"):
        a = float(penalties[k])
        l1, l2 = a * l1_ratio, a * (1.0 - l1_ratio)
        den = diag + l2
        den = np.where(den > 0, den, np.inf)       # constant terms stay at zero
        limit = tol * yy
        sweeps = 0
        while True:
            # a full pass may change the support; then passes over the active set
            # until the signs stop changing; then an exact solve on that support
            _sweep(G, diag, g, w, all_coords, l1, den)
            sweeps += 1
            signs = np.sign(w)
            for _ in range(50):
                act = np.flatnonzero(np.any(signs != 0, axis=0))
                _sweep(G, diag, g, w, act, l1, den)
                sweeps += 1
                new_signs = np.sign(w)
                if np.array_equal(new_signs, signs):
                    break
                signs = new_signs
            gap = _gap(G, b, yy, w, l1, l2)
            if np.all(gap <= limit) or sweeps >= cd_sweeps:
                break
        todo = np.flatnonzero(gap > limit)
        for si in todo:
            # finish from the previous penalty's exact solution (its support is a
            # sound start; an unconverged coordinate-descent iterate may not be)
            start = prev[si] if np.abs(prev[si]).sum() else w[si]
            cand = _finish(G[si], b[si], start, l1, l2, max_steps=min(max_steps, 50 * p + 500))
            gc = _gap(G[si:si + 1], b[si:si + 1], yy[si:si + 1], cand[None], l1, l2)[0]
            if gc < gap[si]:
                w[si] = cand
                gap[si] = gc
        if todo.size:
            g = b - np.einsum("sij,sj->si", G, w)
        worst = max(worst, float(np.max(gap / np.where(yy > 0, yy, 1.0))))
        prev = w.copy()
        out[:, :, k] = w
    solve_path.last_gap = worst
    return out


def effective_df(G: np.ndarray, W: np.ndarray, l1_ratio: float,
                 penalties: np.ndarray) -> np.ndarray:
    """(S, K) effective degrees of freedom without the intercept (see the module notes)."""
    S, p, K = W.shape
    nz = W != 0
    if l1_ratio >= 1.0:
        return nz.sum(axis=1).astype(float)
    out = np.zeros((S, K))
    for s in range(S):
        for k in range(K):
            act = np.flatnonzero(nz[s, :, k])
            if act.size:
                mu = np.clip(np.linalg.eigvalsh(G[s][np.ix_(act, act)]), 0.0, None)
                l2 = penalties[k] * (1.0 - l1_ratio)
                out[s, k] = float(np.sum(mu / (mu + l2))) if l2 > 0 else float(np.sum(mu > 1e-12 * max(mu.max(), 1.0)))
    return out


def fit(summary: TermSummary, raw: RawMap, penalties: np.ndarray, l1_ratio: float = 1.0,
        tol: float = TOL) -> FamilyFit:
    """Lasso / elastic-net fits for all penalties from training summaries, batched over sets.

    Parameters
    ----------
    summary : training summaries of one term set (target last).
    raw : map of those terms to raw-power terms.
    penalties : (K,) ``alpha`` values; 0 = least squares (rank-tolerant), as for ridge.
    l1_ratio : mixing parameter in (0, 1]; 1 = lasso.
    tol : duality-gap tolerance relative to the target's mean square.

    Returns
    -------
    FamilyFit
    """
    penalties = np.asarray(penalties, float)
    fit_ = FamilyFit.empty(summary, penalties.size)
    if summary.p == 0:
        return fit_
    st = standardise(summary, raw)
    zero = penalties == 0
    pos = ~zero
    if zero.any():
        fill_least_squares(fit_, summary, raw, st, zero)
    if pos.any():
        n = summary.n[:, None]
        G = st.G / n[:, :, None]
        b = st.c / n
        yy = summary.M[:, -1, -1] / summary.n
        W = solve_path(G, b, yy, penalties[pos], float(l1_ratio), tol=tol)
        fill_from_standardised(fit_, summary, raw, st, W, pos)
        fit_.edf[:, pos] = 1.0 + effective_df(G, W, float(l1_ratio), penalties[pos])
    finish_intercepts(fit_, summary, raw)
    return fit_
