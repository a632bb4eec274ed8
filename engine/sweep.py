"""The sweep: every (order, penalty, fold) cell from per-piece statistics.

One pass over the rows gives per-piece summaries of the highest-order design;
training and validation summaries of each split are combinations of pieces;
every lower order is a leading block; one symmetric eigen-decomposition per
(order, split) serves every penalty. Penalties are scikit-learn ``Ridge``
``alpha`` on raw-power terms standardised on the training rows, with an
unpenalised intercept.
"""
from __future__ import annotations

from dataclasses import dataclass, field
from typing import Callable

import numpy as np
import pandas as pd

from .design import PolynomialBasis
from .errors import InputProblem
from .moments import Moments, combine_batch, design_moments
from .schemes import FoldPlan

Progress = Callable[[float, str], None]

MAX_TERMS = 1500
_EPS = np.finfo(float).eps


# ---------------------------------------------------------------------------
# private solvers
# ---------------------------------------------------------------------------
@dataclass
class _CellFit:
    """Fits of one order on ``S`` training sets, for every penalty (batched)."""

    beta_u: np.ndarray         # (S, p, K) coefficients on the working basis
    w_std: np.ndarray          # (S, p, K) coefficients on standardised raw terms
    beta_raw: np.ndarray       # (S, p, K) coefficients on raw terms
    intercept_raw: np.ndarray  # (S, K)
    edf: np.ndarray            # (S, K) effective degrees of freedom, intercept included
    # pieces for leverage (leave-one-out)
    lev_u: tuple[np.ndarray, np.ndarray, np.ndarray] | None = None   # (du, Q, inv_lam)
    lev_raw: tuple | None = None  # (As, ds, Q, lam): row-scaled map, scaled SDs, eigen pairs


def _fit_penalties(n_t: np.ndarray, mean_t: np.ndarray, M_t: np.ndarray, p: int,
                   A: np.ndarray, a0: np.ndarray, penalties: np.ndarray,
                   keep_leverage: bool = False) -> _CellFit:
    """Ridge fits for all penalties from training summaries, batched over sets.

    ``n_t`` (S,), ``mean_t`` (S, p+1) and ``M_t`` (S, p+1, p+1) cover the
    first ``p`` working-basis terms and the target (last). Penalty 0 is solved
    on the standardised working basis with a rank-tolerant pseudo-inverse;
    positive penalties on standardised raw terms, one eigen-decomposition per
    set serving every penalty.
    """
    S, K = n_t.shape[0], penalties.size
    beta_u = np.zeros((S, p, K))
    w_std = np.zeros((S, p, K))
    beta_raw = np.zeros((S, p, K))
    edf = np.ones((S, K))
    fit = _CellFit(beta_u, w_std, beta_raw, np.repeat(mean_t[:, -1:], K, axis=1), edf)
    if p == 0:
        return fit
    Mff = M_t[:, :p, :p]
    Mfy = M_t[:, :p, -1]
    zero = penalties == 0
    pos = ~zero
    A = A[:p, :p]
    # raw terms can be huge (x^12 of x ~ 1e3): work with each raw term divided by
    # the largest entry of its row of A; standardisation removes the factor again
    r = np.abs(A).max(axis=1)
    r = np.where(r > 0, r, 1.0)
    As = A / r[:, None]
    Mraw = As @ Mff @ As.T
    craw = Mfy @ As.T
    ds = np.sqrt(np.clip(np.diagonal(Mraw, axis1=1, axis2=2), 0, None) / n_t[:, None])
    ds = np.where(ds > 0, ds, 1.0)
    if zero.any():
        du = np.sqrt(np.clip(np.diagonal(Mff, axis1=1, axis2=2), 0, None) / n_t[:, None])
        du = np.where(du > 0, du, 1.0)
        lam, Q = np.linalg.eigh(Mff / (du[:, :, None] * du[:, None, :]))
        tol = np.clip(lam[:, -1:], 0.0, None) * max(p, 10) * _EPS * 10
        keep = lam > tol
        inv = np.where(keep, 1.0 / np.where(keep, lam, 1.0), 0.0)
        z = np.einsum("sji,sj->si", Q, Mfy / du) * inv
        bu = np.einsum("sij,sj->si", Q, z) / du
        braw_s = np.linalg.solve(As.T, bu.T).T          # raw coefficients times r
        beta_u[:, :, zero] = bu[:, :, None]
        beta_raw[:, :, zero] = (braw_s / r)[:, :, None]
        w_std[:, :, zero] = (braw_s * ds)[:, :, None]
        edf[:, zero] = 1.0 + keep.sum(axis=1)[:, None]
        if keep_leverage:
            fit.lev_u = (du, Q, inv)
    if pos.any():
        lam, Q = np.linalg.eigh(Mraw / (ds[:, :, None] * ds[:, None, :]))
        lam = np.clip(lam, 0.0, None)
        al = penalties[pos]
        z = np.einsum("sji,sj->si", Q, craw / ds)
        shrink = 1.0 / (lam[:, :, None] + al[None, None, :])          # (S, p, K+)
        W = Q @ (z[:, :, None] * shrink)
        w_std[:, :, pos] = W
        beta_raw[:, :, pos] = W / (ds * r)[:, :, None]
        beta_u[:, :, pos] = As.T @ (W / ds[:, :, None])
        edf[:, pos] = 1.0 + np.einsum("si,sik->sk", lam, shrink)
        if keep_leverage:
            fit.lev_raw = (As, ds, Q, lam)
    # raw intercept: mean_y - mean(raw terms) . beta_raw, on the row-scaled terms
    mean_raw_s = mean_t[:, :p] @ As.T + a0[:p] / r
    fit.intercept_raw = mean_t[:, -1:] - np.einsum("si,sik->sk", mean_raw_s,
                                                   beta_raw * r[None, :, None])
    return fit


def _sse(n_s: np.ndarray, mean_s: np.ndarray, M_s: np.ndarray, p: int, mean_t: np.ndarray,
         beta_u: np.ndarray) -> np.ndarray:
    """Sums of squared errors on row sets from their summaries, batched.

    ``n_s`` (S,), ``mean_s`` (S, p+1), ``M_s`` (S, p+1, p+1): the row sets;
    ``mean_t`` (S, p+1) the training means that fix each intercept;
    ``beta_u`` (S, p, K). Returns (S, K).
    """
    myy = M_s[:, -1, -1][:, None]
    dy = (mean_s[:, -1] - mean_t[:, -1])[:, None]
    if p == 0:
        return np.repeat(myy + n_s[:, None] * dy * dy, beta_u.shape[2], axis=1)
    Mff = M_s[:, :p, :p]
    Mfy = M_s[:, :p, -1]
    quad = (myy - 2.0 * np.einsum("si,sik->sk", Mfy, beta_u)
            + np.einsum("sik,sik->sk", beta_u, Mff @ beta_u))
    off = dy - np.einsum("si,sik->sk", mean_s[:, :p] - mean_t[:, :p], beta_u)
    return np.clip(quad + n_s[:, None] * off * off, 0.0, None)


# ---------------------------------------------------------------------------
# results
# ---------------------------------------------------------------------------
@dataclass
class SweepResult:
    """Every cell of a sweep, per split, with tables for charting.

    Arrays are indexed ``[order index, penalty index, split]``.
    """

    orders: list[int]
    penalties: np.ndarray
    parameters: np.ndarray            # (O,) terms + intercept
    term_names: list[list[str]]       # per order
    n_train: np.ndarray               # (S,)
    n_valid: np.ndarray               # (S,)
    train_mse: np.ndarray             # (O, K, S)
    valid_mse: np.ndarray             # (O, K, S); for leave-one-out S = 1 (pooled)
    valid_r2: np.ndarray              # (O, K, S)
    edf: np.ndarray                   # (O, K, S)
    coef_std: list[np.ndarray]        # per order (K, S, p)
    coef_raw: list[np.ndarray]        # per order (K, S, p)
    intercept_raw: np.ndarray         # (O, K, S)
    loo: bool = False
    loo_se: np.ndarray | None = None  # (O, K) standard error of the LOO mean
    plan_description: str = ""
    notes: list[str] = field(default_factory=list)

    def validation_table(self) -> pd.DataFrame:
        """One row per (order, penalty): mean errors across splits and their SE."""
        O, K, S = self.valid_mse.shape

        def se(a):
            if S < 2:
                return np.full((O, K), np.nan)
            return np.std(a, axis=2, ddof=1) / np.sqrt(S)

        vm = self.valid_mse.mean(axis=2)
        v_se = self.loo_se if self.loo else se(self.valid_mse)
        t_se = np.zeros((O, K)) if self.loo else se(self.train_mse)
        r2 = self.valid_r2
        finite = np.isfinite(r2)
        with np.errstate(invalid="ignore"):
            r2m = np.where(finite, r2, 0.0).sum(axis=2) / finite.sum(axis=2)
        return pd.DataFrame({
            "order": np.repeat(np.asarray(self.orders, dtype=int), K),
            "penalty": np.tile(self.penalties, O),
            "parameters": np.repeat(self.parameters, K).astype(int),
            "effective_df": self.edf.mean(axis=2).ravel(),
            "train_mse": self.train_mse.mean(axis=2).ravel(),
            "train_mse_se": t_se.ravel(),
            "validation_mse": vm.ravel(),
            "validation_mse_se": np.asarray(v_se).ravel(),
            "validation_rmse": np.sqrt(vm).ravel(),
            "validation_r2": r2m.ravel(),
            "folds": int(self.n_train.size),
        })

    def fold_table(self) -> pd.DataFrame:
        """Long table: one row per (order, penalty, split)."""
        O, K, S = self.valid_mse.shape
        oi, ki, si = np.meshgrid(np.arange(O), np.arange(K), np.arange(S), indexing="ij")
        return pd.DataFrame({
            "order": np.asarray(self.orders)[oi.ravel()],
            "penalty": self.penalties[ki.ravel()],
            "fold": si.ravel() + 1,
            "train_mse": self.train_mse.ravel(),
            "validation_mse": self.valid_mse.ravel(),
            "validation_r2": self.valid_r2.ravel(),
            "n_train": self.n_train[si.ravel()],
            "n_validation": self.n_valid[si.ravel()],
        })

    def coefficient_table(self) -> pd.DataFrame:
        """Coefficients per (order, penalty, term): mean and SD across splits.

        ``std_*`` are on training-standardised terms (comparable across terms);
        ``raw_*`` in original units of the inputs and target.
        """
        frames = []
        for i, q in enumerate(self.orders):
            names = ["intercept"] + self.term_names[i]
            cs = self.coef_std[i]   # (K, S, p)
            cr = self.coef_raw[i]
            K, S, p = cs.shape
            std = np.concatenate([np.full((K, S, 1), np.nan), cs], axis=2)
            raw = np.concatenate([self.intercept_raw[i][:, :, None], cr], axis=2)
            sd = (lambda a: np.std(a, axis=1, ddof=1)) if S > 1 else (lambda a: np.zeros_like(a[:, 0]))
            frames.append(pd.DataFrame({
                "order": q,
                "penalty": np.repeat(self.penalties, p + 1),
                "term": np.tile(names, K),
                "std_mean": std.mean(axis=1).ravel(),
                "std_sd": sd(std).ravel(),
                "raw_mean": raw.mean(axis=1).ravel(),
                "raw_sd": sd(raw).ravel(),
            }))
        return pd.concat(frames, ignore_index=True)


# ---------------------------------------------------------------------------
# statistics and public entry points
# ---------------------------------------------------------------------------
def piece_statistics(basis: PolynomialBasis, X: np.ndarray, y: np.ndarray,
                     pieces: np.ndarray, n_pieces: int, chunk_rows: int = 32768) -> Moments:
    """Per-piece summaries of ``[terms(X), y]`` at the basis's highest order."""
    U = basis.scale(X)
    P = basis.n_terms
    return design_moments(U, np.asarray(y, float), pieces, n_pieces,
                          lambda Uc, out: basis.expand_scaled(Uc, out=out), P,
                          chunk_rows=chunk_rows)


def check_design_size(basis: PolynomialBasis) -> None:
    if basis.n_terms > MAX_TERMS:
        raise InputProblem(
            f"The highest order gives {basis.n_terms} terms, more than the {MAX_TERMS} this "
            "tool sweeps. Lower the maximum order, choose fewer inputs, or switch off "
            "interaction terms.", code="too_many_terms")


def run_sweep(X: np.ndarray, y: np.ndarray, basis: PolynomialBasis, plan: FoldPlan,
              orders: list[int], penalties, progress: Progress | None = None) -> SweepResult:
    """Validation errors and coefficients for every (order, penalty, split).

    Parameters
    ----------
    X : (n, d) raw inputs; y : (n,) target.
    basis : the design at the highest order.
    plan : the splits (`engine.schemes.make_plan`).
    orders : orders to report (each <= basis.max_order).
    penalties : ridge penalties, 0 = none.
    progress : called as ``progress(fraction_done, message)``.

    Returns
    -------
    SweepResult
    """
    check_design_size(basis)
    X = np.asarray(X, float)
    y = np.asarray(y, float)
    pen = np.asarray(penalties, float)
    A, a0 = basis.raw_map()
    if not (np.all(np.isfinite(A)) and np.all(np.isfinite(a0))):
        raise InputProblem(
            f"Raw powers up to order {basis.max_order} of these inputs are too large to "
            "compute in double precision. Rescale the inputs (for example to thousands, or "
            "subtract a reference value) or lower the highest order.", code="values_too_large")
    if plan.loo:
        return _loo_sweep(X, y, basis, orders, pen, A, a0, progress, plan.description)
    O, K, S = len(orders), pen.size, plan.n_splits
    ps = [basis.n_terms_at(q) for q in orders]
    res = _empty_result(orders, pen, ps, basis, S, plan.description)
    stats = []
    for r, rnd in enumerate(plan.rounds):
        stats.append(piece_statistics(basis, X, y, rnd.pieces, rnd.n_pieces))
        if progress:
            progress(0.8 * (r + 1) / len(plan.rounds), "Summarising rows")
    tr = [combine_batch(stats[r], plan.rounds[r].train[[j for rr, j in plan.split_round if rr == r]])
          for r in range(len(plan.rounds))]
    va = [combine_batch(stats[r], plan.rounds[r].valid[[j for rr, j in plan.split_round if rr == r]])
          for r in range(len(plan.rounds))]
    n_t, m_t, M_t = (np.concatenate([t[i] for t in tr]) for i in range(3))
    n_v, m_v, M_v = (np.concatenate([v[i] for v in va]) for i in range(3))
    res.n_train[:], res.n_valid[:] = n_t, n_v
    last = M_t.shape[1] - 1
    for i, p in enumerate(ps):
        idx = np.r_[np.arange(p), last]
        mt, Mt = m_t[:, idx], M_t[:, idx][:, :, idx]
        mv, Mv = m_v[:, idx], M_v[:, idx][:, :, idx]
        fit = _fit_penalties(n_t, mt, Mt, p, A, a0, pen)
        res.train_mse[i] = (_sse(n_t, mt, Mt, p, mt, fit.beta_u) / n_t[:, None]).T
        sse_v = _sse(n_v, mv, Mv, p, mt, fit.beta_u)
        res.valid_mse[i] = (sse_v / n_v[:, None]).T
        syy = Mv[:, -1, -1][:, None]
        with np.errstate(divide="ignore", invalid="ignore"):
            res.valid_r2[i] = np.where(syy > 0, 1.0 - sse_v / np.where(syy > 0, syy, 1.0),
                                       np.nan).T
        res.edf[i] = fit.edf.T
        res.coef_std[i][:] = fit.w_std.transpose(2, 0, 1)
        res.coef_raw[i][:] = fit.beta_raw.transpose(2, 0, 1)
        res.intercept_raw[i] = fit.intercept_raw.T
        if progress:
            progress(0.8 + 0.2 * (i + 1) / len(ps), f"Fitting order {orders[i]}")
    return res


def _empty_result(orders, pen, ps, basis, S, desc) -> SweepResult:
    O, K = len(orders), pen.size
    return SweepResult(
        orders=list(orders), penalties=pen, parameters=np.array(ps) + 1,
        term_names=[basis.names(q) for q in orders],
        n_train=np.zeros(S), n_valid=np.zeros(S),
        train_mse=np.zeros((O, K, S)), valid_mse=np.zeros((O, K, S)),
        valid_r2=np.zeros((O, K, S)), edf=np.zeros((O, K, S)),
        coef_std=[np.zeros((K, S, p)) for p in ps], coef_raw=[np.zeros((K, S, p)) for p in ps],
        intercept_raw=np.zeros((O, K, S)), plan_description=desc)


def _loo_sweep(X, y, basis, orders, pen, A, a0, progress, desc) -> SweepResult:
    """Exact leave-one-out from the hat-matrix identity, one fit per order."""
    n = y.size
    ps = [basis.n_terms_at(q) for q in orders]
    res = _empty_result(orders, pen, ps, basis, 1, desc)
    res.loo = True
    res.loo_se = np.zeros((len(orders), pen.size))
    stats = piece_statistics(basis, X, y, np.zeros(n, dtype=np.int64), 1)
    n_t, m_t, M_t = stats.n, stats.mean, stats.comoment      # one set: all rows
    res.n_train[0], res.n_valid[0] = n - 1, 1
    F = basis.expand(X)
    Fc = F - m_t[0, :-1]
    yc = y - m_t[0, -1]
    sst = M_t[0, -1, -1]
    flagged = 0
    last = M_t.shape[1] - 1
    for i, p in enumerate(ps):
        idx = np.r_[np.arange(p), last]
        mt, Mt = m_t[:, idx], M_t[:, idx][:, :, idx]
        fit = _fit_penalties(n_t, mt, Mt, p, A, a0, pen, keep_leverage=True)
        E = yc[:, None] - Fc[:, :p] @ fit.beta_u[0]          # (n, K) residuals
        H = np.full((n, pen.size), 1.0 / n)
        if p:
            if fit.lev_u is not None:
                du, Q, inv = (v[0] for v in fit.lev_u)
                TQ = (Fc[:, :p] / du) @ Q
                H[:, pen == 0] += ((TQ * TQ) @ inv)[:, None]
            if fit.lev_raw is not None:
                As, ds, Q, lam = fit.lev_raw
                TQ = ((Fc[:, :p] @ As.T) / ds[0]) @ Q[0]
                lam = lam[0]
                H[:, pen > 0] += (TQ * TQ) @ (1.0 / (lam[:, None] + pen[pen > 0][None, :]))
        denom = 1.0 - H
        bad = denom < 1e-10
        flagged = max(flagged, int(bad.any(axis=1).sum()))
        R = np.where(bad, np.nan, E / np.where(bad, 1.0, denom))
        sq = R * R
        res.valid_mse[i, :, 0] = np.nanmean(sq, axis=0)
        res.loo_se[i] = np.nanstd(sq, axis=0, ddof=1) / np.sqrt(np.sum(~bad, axis=0))
        res.valid_r2[i, :, 0] = 1.0 - np.nansum(sq, axis=0) / sst if sst > 0 else np.nan
        res.train_mse[i, :, 0] = np.mean(E * E, axis=0)
        res.edf[i, :, 0] = fit.edf[0]
        res.coef_std[i][:, 0, :] = fit.w_std[0].T
        res.coef_raw[i][:, 0, :] = fit.beta_raw[0].T
        res.intercept_raw[i, :, 0] = fit.intercept_raw[0]
        if progress:
            progress((i + 1) / len(ps), f"Leave-one-out, order {orders[i]}")
    if flagged:
        res.notes.append(f"{flagged} rows have leverage 1 for some model (the model passes "
                         "through them exactly); their leave-one-out error is undefined and "
                         "left out of the mean.")
    if (pen > 0).any():
        res.notes.append("Leave-one-out with a penalty keeps the standardisation of all rows "
                         "fixed, as is usual for the closed-form leave-one-out of ridge.")
    res.notes.append("With leave-one-out the training error shown is that of the fit on all rows.")
    return res
