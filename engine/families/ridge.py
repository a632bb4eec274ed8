"""Ridge: scikit-learn ``Ridge`` ``alpha`` on training-standardised raw terms.

One symmetric eigen-decomposition per training set serves every penalty:
``w(alpha) = Q diag(1 / (lam + alpha)) Q' c``; effective degrees of freedom
``1 + sum lam / (lam + alpha)`` (the trace of the hat matrix plus the intercept).
"""
from __future__ import annotations

import numpy as np

from .base import (FamilyFit, RawMap, TermSummary, fill_from_standardised, fill_least_squares,
                   finish_intercepts, standardise)

NAME = "ridge"


def fit(summary: TermSummary, raw: RawMap, penalties: np.ndarray,
        keep_leverage: bool = False) -> FamilyFit:
    """Ridge fits for all penalties from training summaries, batched over sets.

    Parameters
    ----------
    summary : training summaries of one term set (target last).
    raw : map of those terms to raw-power terms.
    penalties : (K,) ``alpha`` values, 0 = least squares (rank-tolerant).
    keep_leverage : keep what the exact leave-one-out needs.

    Returns
    -------
    FamilyFit
    """
    penalties = np.asarray(penalties, float)
    fit = FamilyFit.empty(summary, penalties.size)
    if summary.p == 0:
        return fit
    st = standardise(summary, raw)
    zero = penalties == 0
    pos = ~zero
    if zero.any():
        fill_least_squares(fit, summary, raw, st, zero, keep_leverage)
    if pos.any():
        lam, Q = np.linalg.eigh(st.G)
        lam = np.clip(lam, 0.0, None)
        al = penalties[pos]
        z = np.einsum("sji,sj->si", Q, st.c)
        shrink = 1.0 / (lam[:, :, None] + al[None, None, :])          # (S, p, K+)
        W = Q @ (z[:, :, None] * shrink)
        fill_from_standardised(fit, summary, raw, st, W, pos)
        fit.edf[:, pos] = 1.0 + np.einsum("si,sik->sk", lam, shrink)
        if keep_leverage:
            fit.lev_raw = (st.As, st.ds, Q, lam)
    finish_intercepts(fit, summary, raw)
    return fit
