"""What every penalty family shares: the training summary of one term set,
the map to raw-power terms, the fit it returns, and errors from summaries.

A family solver takes a `TermSummary` (training statistics of one term set,
batched over splits), the `RawMap` of those terms and a list of penalties, and
returns a `FamilyFit`: coefficients on the working basis (for errors), on
training-standardised raw terms (comparable across terms), on raw terms, raw
intercepts and effective degrees of freedom, for every penalty.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

_EPS = np.finfo(float).eps


@dataclass
class TermSummary:
    """Summaries of ``S`` row sets over ``p`` terms and the target (last column).

    Attributes
    ----------
    n : (S,) row counts.
    mean : (S, p+1) column means.
    M : (S, p+1, p+1) centred cross-products.
    """

    n: np.ndarray
    mean: np.ndarray
    M: np.ndarray

    @property
    def p(self) -> int:
        return int(self.mean.shape[1] - 1)

    @property
    def n_sets(self) -> int:
        return int(self.n.shape[0])

    @classmethod
    def select(cls, n: np.ndarray, mean: np.ndarray, M: np.ndarray,
               index: np.ndarray) -> "TermSummary":
        """Summaries of the terms ``index`` of a full design (target = last column).

        ``index`` is (p,) for the same terms in every set, or (S, p) for
        terms chosen per set (for example inputs ranked inside each split).
        """
        last = M.shape[1] - 1
        index = np.asarray(index, dtype=np.int64)
        if index.ndim == 1:
            idx = np.r_[index, last]
            return cls(n, mean[:, idx], M[:, idx][:, :, idx])
        S = n.shape[0]
        idx = np.concatenate([index, np.full((S, 1), last)], axis=1)
        m = np.take_along_axis(mean, idx, axis=1)
        rows = np.take_along_axis(M, idx[:, :, None], axis=1)
        return cls(n, m, np.take_along_axis(rows, idx[:, None, :], axis=2))


@dataclass
class RawMap:
    """``raw_terms = working_terms @ A.T + a0`` for the terms of one term set.

    ``A`` is (S, p, p) and ``a0`` (S, p) (one per row set, equal when the terms
    are the same in every set). Selecting rows and columns of the full map is
    exact when the term set is closed downwards (with every term it holds each
    term of lower or equal powers of the same inputs): orders, input subsets and
    lag subsets are.
    """

    A: np.ndarray
    a0: np.ndarray

    @classmethod
    def select(cls, A: np.ndarray, a0: np.ndarray, index: np.ndarray, n_sets: int) -> "RawMap":
        index = np.asarray(index, dtype=np.int64)
        if index.ndim == 1:
            sub = A[np.ix_(index, index)]
            return cls(np.broadcast_to(sub, (n_sets,) + sub.shape),
                       np.broadcast_to(a0[index], (n_sets, index.size)))
        return cls(np.stack([A[np.ix_(ix, ix)] for ix in index]), a0[index])


@dataclass
class FamilyFit:
    """Fits of one term set on ``S`` training sets, for every penalty.

    Attributes
    ----------
    beta_u : (S, p, K) coefficients on the working basis (errors follow from them).
    w_std : (S, p, K) coefficients on training-standardised raw terms.
    beta_raw : (S, p, K) coefficients on raw terms.
    intercept_raw : (S, K).
    edf : (S, K) effective degrees of freedom, intercept included.
    lev_u, lev_raw : pieces for the exact leave-one-out leverage (ridge only).
    """

    beta_u: np.ndarray
    w_std: np.ndarray
    beta_raw: np.ndarray
    intercept_raw: np.ndarray
    edf: np.ndarray
    lev_u: tuple | None = None
    lev_raw: tuple | None = None

    @classmethod
    def empty(cls, summary: TermSummary, K: int) -> "FamilyFit":
        S, p = summary.n_sets, summary.p
        return cls(np.zeros((S, p, K)), np.zeros((S, p, K)), np.zeros((S, p, K)),
                   np.repeat(summary.mean[:, -1:], K, axis=1), np.ones((S, K)))


@dataclass
class Standardised:
    """Raw terms, row-scaled for range and standardised on the training rows.

    ``G = Mraw / (ds ds')`` is the cross-product matrix of the standardised raw
    terms (sum over rows), ``c = craw / ds`` their cross-products with the
    centred target; ``As``, ``r`` the row-scaled raw map and its row factors.
    """

    As: np.ndarray    # (S, p, p)
    r: np.ndarray     # (S, p)
    ds: np.ndarray    # (S, p) SD of row-scaled raw terms (1 where constant)
    G: np.ndarray     # (S, p, p)
    c: np.ndarray     # (S, p)
    constant: np.ndarray  # (S, p) bool: term constant on the training rows


def standardise(summary: TermSummary, raw: RawMap) -> Standardised:
    """Standardised raw terms of one term set (StandardScaler, population SD).

    Raw terms can be huge (x^12 of x ~ 1e3): each raw term is divided by the
    largest entry of its row of ``A``; standardisation removes the factor again.
    """
    p = summary.p
    Mff = summary.M[:, :p, :p]
    Mfy = summary.M[:, :p, -1]
    r = np.abs(raw.A).max(axis=2)
    r = np.where(r > 0, r, 1.0)
    As = raw.A / r[:, :, None]
    Mraw = As @ Mff @ As.transpose(0, 2, 1)
    craw = np.einsum("sj,sij->si", Mfy, As)
    var = np.clip(np.diagonal(Mraw, axis1=1, axis2=2), 0, None) / summary.n[:, None]
    constant = ~(var > 0)
    ds = np.where(constant, 1.0, np.sqrt(var))
    G = Mraw / (ds[:, :, None] * ds[:, None, :])
    return Standardised(As, r, ds, G, craw / ds, constant)


def fill_from_standardised(fit: FamilyFit, summary: TermSummary, raw: RawMap, st: Standardised,
                           W: np.ndarray, cols: np.ndarray) -> None:
    """Store standardised coefficients ``W`` (S, p, k) at penalty columns ``cols``."""
    fit.w_std[:, :, cols] = W
    fit.beta_raw[:, :, cols] = W / (st.ds * st.r)[:, :, None]
    fit.beta_u[:, :, cols] = st.As.transpose(0, 2, 1) @ (W / st.ds[:, :, None])


def finish_intercepts(fit: FamilyFit, summary: TermSummary, raw: RawMap) -> None:
    """Raw intercepts: mean target minus mean raw terms times raw coefficients."""
    p = summary.p
    if p == 0:
        return
    r = np.abs(raw.A).max(axis=2)
    r = np.where(r > 0, r, 1.0)
    As = raw.A / r[:, :, None]
    mean_raw_s = np.einsum("sj,sij->si", summary.mean[:, :p], As) + raw.a0 / r
    fit.intercept_raw = summary.mean[:, -1:] - np.einsum("si,sik->sk", mean_raw_s,
                                                         fit.beta_raw * r[:, :, None])


def least_squares(summary: TermSummary, raw: RawMap, keep_leverage: bool = False):
    """Unpenalised least squares on the standardised working basis, rank-tolerant.

    Returns ``(beta_u, braw_s, rank, leverage_pieces)`` with ``braw_s`` the raw
    coefficients times the row factors of `standardise`.
    """
    p = summary.p
    Mff = summary.M[:, :p, :p]
    Mfy = summary.M[:, :p, -1]
    n = summary.n
    du = np.sqrt(np.clip(np.diagonal(Mff, axis1=1, axis2=2), 0, None) / n[:, None])
    du = np.where(du > 0, du, 1.0)
    lam, Q = np.linalg.eigh(Mff / (du[:, :, None] * du[:, None, :]))
    tol = np.clip(lam[:, -1:], 0.0, None) * max(p, 10) * _EPS * 10
    keep = lam > tol
    inv = np.where(keep, 1.0 / np.where(keep, lam, 1.0), 0.0)
    z = np.einsum("sji,sj->si", Q, Mfy / du) * inv
    bu = np.einsum("sij,sj->si", Q, z) / du
    r = np.abs(raw.A).max(axis=2)
    r = np.where(r > 0, r, 1.0)
    As = raw.A / r[:, :, None]
    braw_s = np.linalg.solve(As.transpose(0, 2, 1), bu[:, :, None])[:, :, 0]
    return bu, braw_s, keep.sum(axis=1), ((du, Q, inv) if keep_leverage else None)


def fill_least_squares(fit: FamilyFit, summary: TermSummary, raw: RawMap, st: Standardised,
                       cols: np.ndarray, keep_leverage: bool = False) -> None:
    """Store the unpenalised fit at penalty columns ``cols``."""
    bu, braw_s, rank, lev = least_squares(summary, raw, keep_leverage)
    fit.beta_u[:, :, cols] = bu[:, :, None]
    fit.beta_raw[:, :, cols] = (braw_s / st.r)[:, :, None]
    fit.w_std[:, :, cols] = (braw_s * st.ds)[:, :, None]
    fit.edf[:, cols] = 1.0 + rank[:, None]
    if keep_leverage:
        fit.lev_u = lev


def sse(rows: TermSummary, train_mean: np.ndarray, beta_u: np.ndarray) -> np.ndarray:
    """Sums of squared errors on row sets from their summaries, batched.

    ``rows``: the row sets; ``train_mean`` (S, p+1) the training means that fix
    each intercept; ``beta_u`` (S, p, K) working-basis coefficients. Returns (S, K).
    """
    p = rows.p
    n_s, mean_s, M_s = rows.n, rows.mean, rows.M
    myy = M_s[:, -1, -1][:, None]
    dy = (mean_s[:, -1] - train_mean[:, -1])[:, None]
    if p == 0:
        return np.repeat(myy + n_s[:, None] * dy * dy, beta_u.shape[2], axis=1)
    Mff = M_s[:, :p, :p]
    Mfy = M_s[:, :p, -1]
    quad = (myy - 2.0 * np.einsum("si,sik->sk", Mfy, beta_u)
            + np.einsum("sik,sik->sk", beta_u, Mff @ beta_u))
    off = dy - np.einsum("si,sik->sk", mean_s[:, :p] - train_mean[:, :p], beta_u)
    return np.clip(quad + n_s[:, None] * off * off, 0.0, None)
