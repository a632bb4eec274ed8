"""All-rows summaries for the steps after the sweep, and the sizes that switch them on.

From `LARGE_ROWS` rows on, the candidate fits, their condition numbers and the
leverage and residual checks work from cross-product summaries formed in one
chunked pass over the rows (the full design is never held in memory), and
checks that need single rows use a seeded sample of at most `SAMPLE_ROWS` rows
per split. Below that size the exact row-wise routes are used (QR on the whole
design), which are cheap there.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .design import PolynomialBasis
from .moments import design_moments

#: From this many rows on, post-sweep steps work from summaries.
LARGE_ROWS = 50_000
#: Rows sampled (seeded) per split and role where a check needs single rows of a
#: large table (leverage shares: sampling SD of a 5% share about 0.3 points).
SAMPLE_ROWS = 5_000
#: Rows sampled (seeded) from each period for the shift tests of a large table.
SHIFT_SAMPLE_ROWS = 50_000
#: Rows per chunk of a pass over the rows.
CHUNK_ROWS = 32_768


@dataclass
class RowSummary:
    """Count, means and centred cross-products of ``[working-basis terms, target]``.

    Attributes
    ----------
    basis : the design (its highest order covers every model summarised).
    n : rows.
    mean : (P + 1,) column means, target last.
    comoment : (P + 1, P + 1) centred cross-products.
    """

    basis: PolynomialBasis
    n: float
    mean: np.ndarray
    comoment: np.ndarray

    def block(self, order: int) -> tuple[int, np.ndarray, np.ndarray]:
        """``(p, mean, comoment)`` of the first ``p`` terms of ``order`` and the target."""
        p = self.basis.n_terms_at(order)
        idx = np.r_[np.arange(p), self.basis.n_terms]
        return p, self.mean[idx], self.comoment[np.ix_(idx, idx)]


def summarise_rows(X: np.ndarray, y: np.ndarray, basis: PolynomialBasis,
                   labels: np.ndarray | None = None, n_sets: int = 1):
    """One chunked pass over the rows: summaries of every set of rows.

    Parameters
    ----------
    X : (n, d) raw inputs; y : (n,) target.
    basis : the design.
    labels : set of each row (``-1``: none); all rows one set when None.
    n_sets : number of sets.

    Returns
    -------
    `RowSummary` of all rows when ``labels`` is None, else the per-set
    `engine.moments.Moments`.
    """
    X = np.asarray(X, float)
    y = np.asarray(y, float)
    U = basis.scale(X)
    lab = np.zeros(y.size, dtype=np.int64) if labels is None else np.asarray(labels)
    st = design_moments(U, y, lab, n_sets, lambda Uc, out: basis.expand_scaled(Uc, out=out),
                        basis.n_terms, chunk_rows=CHUNK_ROWS)
    if labels is not None:
        return st
    return RowSummary(basis, float(st.n[0]), st.mean[0].copy(), st.comoment[0].copy())


def seeded_sample(rows: np.ndarray, size: int, seed: int) -> np.ndarray:
    """At most ``size`` of ``rows`` (ascending), drawn without replacement with ``seed``."""
    rows = np.asarray(rows)
    if rows.size <= size:
        return rows
    rng = np.random.default_rng(seed)
    return np.sort(rng.choice(rows, size=size, replace=False))


# ---------------------------------------------------------------------------
# per-split summaries for the checks
# ---------------------------------------------------------------------------
@dataclass
class FoldSummaries:
    """Training summaries of each split of a plan's first round of splits.

    Attributes
    ----------
    basis : the design (highest order covers every model checked).
    splits : per split, ``(training rows, validation rows)``, ascending.
    n_t, mean_t, comoment_t : training summaries, shapes (S,), (S, P+1), (S, P+1, P+1).
    """

    basis: PolynomialBasis
    splits: list[tuple[np.ndarray, np.ndarray]]
    n_t: np.ndarray
    mean_t: np.ndarray
    comoment_t: np.ndarray


def fold_summaries(X: np.ndarray, y: np.ndarray, basis: PolynomialBasis, plan) -> FoldSummaries:
    """One pass over the rows: training summaries of the first round's splits."""
    from .moments import combine_batch

    rnd = plan.rounds[0]
    js = [j for r, j in plan.split_round if r == 0]
    splits = [(np.asarray(plan.train_sets[i]), np.asarray(plan.valid_sets[i]))
              for i, (r, _) in enumerate(plan.split_round) if r == 0]
    st = summarise_rows(X, y, basis, labels=rnd.pieces, n_sets=rnd.n_pieces)
    n_t, m_t, M_t = combine_batch(st, rnd.train[js])
    return FoldSummaries(basis, splits, n_t, m_t, M_t)


def _standardised(fs: FoldSummaries, s: int, order: int, penalty: float):
    """Terms map, centre, scale and eigen-pairs of one split's standardised design.

    Without a penalty the working basis is used (hat values do not depend on
    the basis); with one, raw-power terms (on which the penalty is defined),
    row-scaled against overflow. Returns ``(T, shift, scale, lam, Q)`` with
    ``z = (F @ T - shift) / scale`` the standardised terms of working-basis rows ``F``.
    """
    p = fs.basis.n_terms_at(order)
    Mff = fs.comoment_t[s, :p, :p]
    mf = fs.mean_t[s, :p]
    n = fs.n_t[s]
    if penalty > 0:
        A, a0 = fs.basis.raw_map(order)
        r = np.abs(A).max(axis=1)
        r = np.where(r > 0, r, 1.0)
        T = (A / r[:, None]).T
        M = T.T @ Mff @ T
        shift = mf @ T
    else:
        T = np.eye(p)
        M = Mff
        shift = mf
    sd = np.sqrt(np.clip(np.diag(M), 0, None) / n)
    sd = np.where(sd > 0, sd, 1.0)
    G = M / np.outer(sd, sd)
    lam, Q = np.linalg.eigh((G + G.T) / 2)
    return T, shift, sd, np.clip(lam, 0, None), Q


def split_leverage(fs: FoldSummaries, X: np.ndarray, order: int, penalty: float,
                   seed: int, sample_rows: int | None = None) -> list[dict]:
    """Leverage of held-out and training rows per split, from summaries.

    The threshold ``2 p_eff / n`` uses the exact trace of each training fit's
    hat matrix (from its eigenvalues); the shares of rows above it are
    counted on a seeded sample of at most ``sample_rows`` training and
    ``sample_rows`` held-out rows per split (all rows when fewer).

    Returns
    -------
    per split: ``threshold``, ``validation_share_above``,
    ``training_share_above``, ``max_validation_leverage`` (over the sample),
    ``validation_rows``, ``training_rows``, ``sampled``.
    """
    X = np.asarray(X, float)
    sample_rows = SAMPLE_ROWS if sample_rows is None else int(sample_rows)
    p = fs.basis.n_terms_at(order)
    out = []
    for s, (tr, va) in enumerate(fs.splits):
        n = float(fs.n_t[s])
        if p == 0:
            thr = 2.0 / n
            out.append({"threshold": thr, "validation_share_above": float(1 / n > thr),
                        "training_share_above": 0.0, "max_validation_leverage": 1 / n,
                        "validation_rows": va.size, "training_rows": tr.size, "sampled": False})
            continue
        T, shift, sd, lam, Q = _standardised(fs, s, order, penalty)
        if penalty > 0:
            w = 1.0 / (lam + penalty)
            trace = 1.0 + float(np.sum(lam * w))
        else:
            keep = lam > max(float(lam[-1]), 0.0) * max(p, 10) * np.finfo(float).eps * 10
            w = np.where(keep, 1.0 / np.where(keep, lam, 1.0), 0.0)
            trace = 1.0 + float(keep.sum())
        thr = 2.0 * trace / n

        def hat(rows: np.ndarray) -> np.ndarray:
            h = np.empty(rows.size)
            for c0 in range(0, rows.size, CHUNK_ROWS):
                F = fs.basis.expand(X[rows[c0:c0 + CHUNK_ROWS]], order=order) @ T
                Z = ((F - shift) / sd) @ Q   # the raw terms' constant offset cancels here
                h[c0:c0 + CHUNK_ROWS] = 1.0 / n + (Z * Z) @ w
            return h

        tr_s = seeded_sample(tr, sample_rows, seed + 2 * s)
        va_s = seeded_sample(va, sample_rows, seed + 2 * s + 1)
        h_tr, h_va = hat(tr_s), hat(va_s)
        out.append({"threshold": thr,
                    "validation_share_above": float(np.mean(h_va > thr)) if h_va.size else 0.0,
                    "training_share_above": float(np.mean(h_tr > thr)) if h_tr.size else 0.0,
                    "max_validation_leverage": float(h_va.max()) if h_va.size else 0.0,
                    "validation_rows": int(va.size), "training_rows": int(tr.size),
                    "sampled": bool(tr_s.size < tr.size or va_s.size < va.size)})
    return out


def out_of_fold_from_summaries(fs: FoldSummaries, X: np.ndarray, y: np.ndarray, order: int,
                               penalty: float) -> tuple[np.ndarray, np.ndarray]:
    """Validation residuals of one cell per split: fits from the training
    summaries (the sweep's solver), residuals in one streamed pass.

    Returns
    -------
    (rows, residuals): validated rows (ascending) and their residuals.
    """
    from .sweep import _fit_penalties

    X = np.asarray(X, float)
    y = np.asarray(y, float)
    p = fs.basis.n_terms_at(order)
    P = fs.basis.n_terms
    idx = np.r_[np.arange(p), P]
    m_t = fs.mean_t[:, idx]
    M_t = fs.comoment_t[:, idx][:, :, idx]
    A, a0 = fs.basis.raw_map(order)
    fit = _fit_penalties(fs.n_t, m_t, M_t, p, A, a0, np.array([float(penalty)]))
    rows, res = [], []
    for s, (_, va) in enumerate(fs.splits):
        beta = fit.beta_u[s, :, 0]
        e = np.empty(va.size)
        for c0 in range(0, va.size, CHUNK_ROWS):
            rr = va[c0:c0 + CHUNK_ROWS]
            pred = np.full(rr.size, m_t[s, -1])
            if p:
                pred += (fs.basis.expand(X[rr], order=order) - m_t[s, :p]) @ beta
            e[c0:c0 + CHUNK_ROWS] = y[rr] - pred
        rows.append(va)
        res.append(e)
    r = np.concatenate(rows)
    e = np.concatenate(res)
    o = np.argsort(r, kind="stable")
    return r[o], e[o]
