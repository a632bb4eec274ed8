"""Sufficient statistics: counts, means and centred co-moment matrices.

Every error in a sweep follows from these per-piece summaries, so the rows are
read once. Summaries of disjoint row sets combine exactly (pairwise update),
which lets the same code run on chunks of a file, on partitions of a cluster
or on the pieces that make up a training set.
"""
from __future__ import annotations

from dataclasses import dataclass
from typing import Callable, Iterable

import numpy as np

from .threads import blas_threads, product_threads


@dataclass
class Moments:
    """Summaries of ``L`` disjoint row sets over ``q`` columns.

    Attributes
    ----------
    n : (L,) row counts.
    mean : (L, q) column means.
    comoment : (L, q, q) centred cross-products ``sum (r - mean)(r - mean)'``.
    """

    n: np.ndarray
    mean: np.ndarray
    comoment: np.ndarray

    @classmethod
    def empty(cls, n_sets: int, q: int) -> "Moments":
        return cls(np.zeros(n_sets), np.zeros((n_sets, q)), np.zeros((n_sets, q, q)))

    @property
    def n_sets(self) -> int:
        return int(self.n.shape[0])


def merge_into(acc: Moments, i: int, n_b: float, mean_b: np.ndarray, M_b: np.ndarray) -> None:
    """Add one summary into set ``i`` of ``acc`` in place (pairwise update)."""
    n_a = acc.n[i]
    if n_b == 0:
        return
    if n_a == 0:
        acc.n[i] = n_b
        acc.mean[i] = mean_b
        acc.comoment[i] = M_b
        return
    n = n_a + n_b
    d = mean_b - acc.mean[i]
    acc.comoment[i] += M_b + (n_a * n_b / n) * np.outer(d, d)
    acc.mean[i] += d * (n_b / n)
    acc.n[i] = n


def combine(parts: Moments, weights: np.ndarray) -> tuple[float, np.ndarray, np.ndarray]:
    """Combine the sets with ``weights`` 1 (selected) into one summary.

    Parameters
    ----------
    parts : summaries of disjoint row sets.
    weights : (L,) 0/1 selector.

    Returns
    -------
    (n, mean, comoment) of the union.
    """
    n, mean, M = combine_batch(parts, (np.asarray(weights) > 0)[None, :])
    return float(n[0]), mean[0], M[0]


def _merge(n_a, m_a, M_a, n_b, m_b, M_b):
    """Pairwise update of two summaries (new arrays; either may be empty)."""
    if n_b == 0:
        return n_a, m_a.copy(), M_a.copy()
    if n_a == 0:
        return n_b, m_b.copy(), M_b.copy()
    n = n_a + n_b
    d = m_b - m_a
    return n, m_a + d * (n_b / n), M_a + M_b + (n_a * n_b / n) * np.outer(d, d)


def _prefix_suffix(parts: Moments):
    """Summaries of pieces ``0..i-1`` (prefix) and ``i..L-1`` (suffix) for every ``i``.

    Built by pairwise merges only, so a training set "all pieces but a
    range" is one more merge and never a subtraction (no cancellation).
    """
    L, q = parts.mean.shape
    pre = (np.zeros(L + 1), np.zeros((L + 1, q)), np.zeros((L + 1, q, q)))
    suf = (np.zeros(L + 1), np.zeros((L + 1, q)), np.zeros((L + 1, q, q)))
    for i in range(L):
        pre[0][i + 1], pre[1][i + 1], pre[2][i + 1] = _merge(
            pre[0][i], pre[1][i], pre[2][i], parts.n[i], parts.mean[i], parts.comoment[i])
        j = L - 1 - i
        suf[0][j], suf[1][j], suf[2][j] = _merge(
            parts.n[j], parts.mean[j], parts.comoment[j], suf[0][j + 1], suf[1][j + 1],
            suf[2][j + 1])
    return pre, suf


def combine_batch(parts: Moments, weights: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Combine pieces for several selections at once.

    Work grows linearly with the number of selections and pieces for the
    usual shapes: a selection of a few pieces is merged piece by piece; a
    selection of "all pieces but one contiguous range" (training sets of
    k-fold and blocked folds, prefixes of a learning curve) is one merge of a
    prefix and a suffix summary built once. Other selections fall back to one
    batched product (``S x L`` work per matrix entry). Every route uses the
    pairwise update, never "total minus part".

    Parameters
    ----------
    parts : summaries of ``L`` disjoint row sets.
    weights : (S, L) 0/1 selectors, one row per wanted union.

    Returns
    -------
    ``(n, mean, comoment)`` of shapes (S,), (S, q), (S, q, q).
    """
    sel = np.asarray(weights) > 0
    S, L = sel.shape
    q = parts.mean.shape[1]
    counts = sel.sum(axis=1)
    n_out, m_out, M_out = np.zeros(S), np.zeros((S, q)), np.zeros((S, q, q))
    rest = []
    pre_suf = None
    for s in range(S):
        ones = np.flatnonzero(sel[s])
        zeros = np.flatnonzero(~sel[s])
        if counts[s] <= 2 or counts[s] * 4 <= L:
            acc = (0.0, np.zeros(q), np.zeros((q, q)))
            for i in ones:
                acc = _merge(*acc, parts.n[i], parts.mean[i], parts.comoment[i])
            n_out[s], m_out[s], M_out[s] = acc
        elif zeros.size == 0 or zeros[-1] - zeros[0] + 1 == zeros.size:
            if pre_suf is None:
                pre_suf = _prefix_suffix(parts)
            (pn, pm, pM), (sn, sm, sM) = pre_suf
            a, b = (int(zeros[0]), int(zeros[-1]) + 1) if zeros.size else (L, L)
            n_out[s], m_out[s], M_out[s] = _merge(pn[a], pm[a], pM[a], sn[b], sm[b], sM[b])
        else:
            rest.append(s)
    if rest:
        n_r, m_r, M_r = _combine_dense(parts, sel[rest])
        n_out[rest], m_out[rest], M_out[rest] = n_r, m_r, M_r
    return n_out, m_out, M_out


def _combine_dense(parts: Moments, weights: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Any selections at once by one batched product (``S x L x q x q`` work)."""
    W = np.asarray(weights, dtype=float)
    Wn = W * parts.n[None, :]
    n = Wn.sum(axis=1)
    safe = np.where(n > 0, n, 1.0)
    mean = (Wn @ parts.mean) / safe[:, None]
    dev = parts.mean[None, :, :] - mean[:, None, :]
    M = np.einsum("sl,lij->sij", W, parts.comoment) + np.einsum("sl,sli,slj->sij", Wn, dev, dev)
    return n, mean, M


def chunk_moments(R: np.ndarray) -> tuple[float, np.ndarray, np.ndarray]:
    """Count, mean and centred co-moment of the rows of one block ``R``."""
    n = R.shape[0]
    mean = R.mean(axis=0)
    C = R - mean
    return float(n), mean, C.T @ C


def accumulate(chunks: Iterable[tuple[np.ndarray, np.ndarray]], n_sets: int, q: int,
               into: Moments | None = None) -> Moments:
    """Fold chunks of rows into per-set summaries.

    Parameters
    ----------
    chunks : iterable of ``(R, labels)``: ``R`` is an (m, q) block of design
        columns with the target last, ``labels`` the set of each row
        (``-1`` = row used by no set).
    n_sets : number of sets.
    q : number of columns.
    into : summaries to add to (updated in place); new ones when None.

    Returns
    -------
    The per-set `Moments`.
    """
    acc = Moments.empty(n_sets, q) if into is None else into
    for R, labels in chunks:
        labels = np.asarray(labels)
        if R.shape[0] == 0:
            continue
        if labels.size and labels[0] == labels[-1] and np.all(labels == labels[0]):
            if labels[0] >= 0:
                merge_into(acc, int(labels[0]), *chunk_moments(R))
            continue
        order = np.argsort(labels, kind="stable")
        sl = labels[order]
        cuts = np.flatnonzero(np.diff(sl)) + 1
        starts = np.r_[0, cuts]
        stops = np.r_[cuts, sl.size]
        for a, b in zip(starts, stops):
            lab = int(sl[a])
            if lab < 0:
                continue
            merge_into(acc, lab, *chunk_moments(R[order[a:b]]))
    return acc


def design_moments(U: np.ndarray, y: np.ndarray, labels: np.ndarray, n_sets: int,
                   expand: Callable[[np.ndarray, np.ndarray], np.ndarray], n_terms: int,
                   chunk_rows: int = 8192) -> Moments:
    """Per-set summaries of ``[terms(U), y]`` from one pass over the rows.

    Rows are grouped by label once, then expanded and summarised chunk by
    chunk (the full design is never held in memory); consecutive small sets
    share one expansion of their block of rows, and on a machine with idle
    cores the sets of a large pass are shared among threads, each set whole by
    one of them, so the numbers are the same either way. Each chunk is shifted by
    a fixed estimate of the column means, so that one cross-product with a
    column of ones gives its count, mean and centred co-moment without
    cancellation; chunk summaries then combine exactly.

    Several targets share the pass: they are extra columns after the terms.
    Each target's entries are computed by the same operations whatever the
    number of targets (the terms' cross-products once, then one product per
    target), so the statistics of one target are bit for bit those of a
    single-target pass.

    Parameters
    ----------
    U : (n, d) scaled inputs.
    y : (n,) target, or (n, T) several targets.
    labels : (n,) set of each row, ``-1`` for rows no set uses.
    n_sets : number of sets.
    expand : ``expand(U_chunk, out)`` writes the chunk's terms into ``out``; it may
        overwrite ``U_chunk``, always rows gathered into a buffer of the pass.
    n_terms : number of terms ``expand`` writes.
    chunk_rows : rows per chunk.

    Returns
    -------
    `Moments` over ``n_terms + T`` columns, the targets last.
    """
    labels = np.asarray(labels)
    small = labels.astype(np.int16 if n_sets < 32000 else np.int32)
    order = np.argsort(small, kind="stable")   # a radix sort for small integers
    sl = small[order]
    U = np.asarray(U)
    Y = np.asarray(y, dtype=float)
    Y = Y[:, None] if Y.ndim == 1 else Y
    n_targets = Y.shape[1]
    ys = [np.ascontiguousarray(Y[order, t]) for t in range(n_targets)]
    P = n_terms
    q = P + n_targets
    acc = Moments.empty(n_sets, q)
    if sl.size == 0:
        return acc
    # fixed shift: column means of an evenly spread sample of rows
    step = max(1, sl.size // 4096)
    sample = np.empty((len(range(0, sl.size, step)), P), order="F")
    expand(U[order[::step]], sample)
    shift_f = sample.mean(axis=0)
    shift_y = np.array([v[::step].mean() for v in ys])
    shift = np.r_[shift_f, shift_y]
    # wide designs: fewer rows per chunk, so one chunk's terms stay near 64 MB
    chunk_rows = int(max(256, min(chunk_rows, (8 << 20) // (P + 1))))
    # sized after the chunk length is settled (it may grow to 256 rows above)
    segments = _label_chunks(sl, chunk_rows)
    # small sets are grouped into blocks of up to BLOCK_ROWS rows (terms of a block stay
    # in the processor's cache); a longer chunk of one set is a block of its own
    block_rows = min(chunk_rows, BLOCK_ROWS)
    rows = max(min(block_rows, sl.size), max((c1 - c0 for _, c0, c1 in segments), default=0))

    def summarise(blocks: list) -> None:
        """Add the blocks' chunks into ``acc`` (buffers of its own: one per thread)."""
        ubuf = np.empty((rows, U.shape[1]), dtype=U.dtype)
        buf = np.empty((rows, P + 1), order="F")
        buf[:, P] = 1.0
        G_full = np.empty((q, q))
        s = np.empty(q)
        # each chunk's cross-products, shifted targets and co-moment, in the same buffers
        G = np.empty((P + 1, P + 1))
        r = np.empty((n_targets, rows))
        M_b = np.empty((q, q))
        for start, stop, members in blocks:
            # the block's rows gathered into one reused buffer (no sorted copy of U),
            # expanded and shifted at once; each set's rows are a slice of it
            block = buf[:stop - start]
            expand(np.take(U, order[start:stop], axis=0, out=ubuf[:stop - start],
                           mode="clip"), block[:, :P])      # (no index is out of range)
            block[:, :P] -= shift_f
            for lab, c0, c1 in members:
                R = buf[c0 - start:c1 - start]
                np.matmul(R.T, R, out=G)
                m = G[P, P]
                G_full[:P, :P] = G[:P, :P]
                s[:P] = G[:P, P]
                for t in range(n_targets):
                    np.subtract(ys[t][c0:c1], shift_y[t], out=r[t, :c1 - c0])
                for t in range(n_targets):
                    g = R.T @ r[t, :c1 - c0]
                    G_full[:P, P + t] = g[:P]
                    G_full[P + t, :P] = g[:P]
                    s[P + t] = g[P]
                    for u in range(t + 1):
                        G_full[P + t, P + u] = G_full[P + u, P + t] = \
                            r[t, :c1 - c0] @ r[u, :c1 - c0]
                np.outer(s, s, out=M_b)
                M_b /= m
                merge_into(acc, lab, m, shift + s / m, np.subtract(G_full, M_b, out=M_b))

    blocks = list(_blocks(segments, block_rows))
    if max((c1 - c0 for _, c0, c1 in segments), default=0) >= LARGE_PRODUCT_ROWS:
        with blas_threads(product_threads()):   # large cross-products: idle cores help
            summarise(blocks)
        return acc
    # many small sets: their products are too small to share out; the sets
    # themselves are shared among the idle cores, each set summarised whole by
    # one thread in the same steps as alone (so the numbers do not depend on it)
    parts = _share_blocks(blocks, product_threads() if sl.size >= THREADED_ROWS else 1)
    with blas_threads(1):
        if len(parts) == 1:
            summarise(blocks)
        else:
            from concurrent.futures import ThreadPoolExecutor
            with ThreadPoolExecutor(len(parts), thread_name_prefix="fitladder-rows") as pool:
                for done in [pool.submit(summarise, part) for part in parts]:
                    done.result()
    return acc


#: Most rows of small sets expanded together (one chunk of a larger set may be longer).
BLOCK_ROWS = 8192

#: Rows from which the small sets of a pass are shared among idle cores.
THREADED_ROWS = 200_000


def _share_blocks(blocks: list, workers: int) -> list[list]:
    """The blocks in up to ``workers`` runs of about equal rows, no set in two runs."""
    if workers <= 1 or len(blocks) < 2 * workers:
        return [blocks]
    first, total = blocks[0][0], blocks[-1][1] - blocks[0][0]
    parts: list[list] = [[]]
    for blk in blocks:
        cur = parts[-1]
        if (cur and len(parts) < workers and blk[0] - first >= total * len(parts) / workers
                and blk[2][0][0] != cur[-1][2][-1][0]):
            parts.append([])
        parts[-1].append(blk)
    return parts


#: A set's chunk of at least this many rows is one large cross-product, worth
#: the idle cores (`engine.threads.product_threads`); smaller ones run on one thread.
LARGE_PRODUCT_ROWS = 8192


def _label_chunks(sorted_labels: np.ndarray, chunk_rows: int) -> list[tuple[int, int, int]]:
    """``(label, start, stop)`` of every chunk of rows summarised on its own.

    Rows sorted by label; each label's rows are cut into chunks of at most
    ``chunk_rows`` from its first row; rows labelled ``-1`` are left out.
    """
    cuts = np.flatnonzero(np.diff(sorted_labels)) + 1
    out = []
    for a, b in zip(np.r_[0, cuts].tolist(), np.r_[cuts, sorted_labels.size].tolist()):
        lab = int(sorted_labels[a])
        if lab < 0:
            continue
        out.extend((lab, c0, min(c0 + chunk_rows, b)) for c0 in range(a, b, chunk_rows))
    return out


def _blocks(segments: list[tuple[int, int, int]], block_rows: int):
    """Consecutive chunks grouped into blocks of at most ``block_rows`` rows (a longer
    chunk: a block of its own).

    Yields ``(start, stop, chunks)``; a block's terms are expanded at once and
    each chunk is summarised from its slice, exactly as on its own.
    """
    members: list[tuple[int, int, int]] = []
    start = stop = 0
    for seg in segments:
        _, c0, c1 = seg
        if members and (c0 != stop or c1 - start > block_rows):
            yield start, stop, members
            members = []
        if not members:
            start = c0
        members.append(seg)
        stop = c1
    if members:
        yield start, stop, members


def target_moments(stats: Moments, n_terms: int, target: int) -> Moments:
    """The summaries of the terms and one target out of a several-target pass."""
    idx = np.r_[np.arange(n_terms), n_terms + int(target)]
    # contiguous copies, laid out exactly as a single-target pass lays them out
    return Moments(stats.n.copy(), np.ascontiguousarray(stats.mean[:, idx]),
                   np.ascontiguousarray(stats.comoment[:, idx][:, :, idx]))
