"""Per-piece summaries: combinations and chunked accumulation against direct numpy sums."""
from __future__ import annotations

import numpy as np
from hypothesis import given, settings
from hypothesis import strategies as st

from engine.moments import _combine_dense, accumulate, combine_batch


def _direct(R: np.ndarray) -> tuple[float, np.ndarray, np.ndarray]:
    """Count, mean and centred cross-product straight from the rows (numpy.cov * (n - 1))."""
    if R.shape[0] == 0:
        return 0.0, np.zeros(R.shape[1]), np.zeros((R.shape[1], R.shape[1]))
    mean = R.mean(axis=0)
    M = np.cov(R, rowvar=False, bias=True) * R.shape[0] if R.shape[0] > 1 else np.zeros(
        (R.shape[1], R.shape[1]))
    return float(R.shape[0]), mean, np.atleast_2d(M)


def _pieces(rng, L: int, q: int, rows_per: int = 7):
    R = rng.normal(size=(L * rows_per, q)) * np.logspace(0, 4, q) + np.linspace(0, 1e5, q)
    labels = np.repeat(np.arange(L), rows_per)
    return R, labels, accumulate([(R, labels)], L, q)


def _check(R, labels, parts, W):
    n, mean, M = combine_batch(parts, W)
    for s in range(W.shape[0]):
        rows = R[np.isin(labels, np.flatnonzero(W[s]))]
        n_d, m_d, M_d = _direct(rows)
        assert n[s] == n_d
        np.testing.assert_allclose(mean[s], m_d, rtol=1e-12, atol=1e-12 * np.abs(m_d).max())
        np.testing.assert_allclose(M[s], M_d, rtol=1e-10, atol=1e-12 * np.abs(M_d).max())


def test_fold_complements_prefixes_and_single_pieces_match_numpy():
    rng = np.random.default_rng(1)
    L = 9
    R, labels, parts = _pieces(rng, L, 4)
    _check(R, labels, parts, 1 - np.eye(L))                       # k-fold training sets
    _check(R, labels, parts, np.eye(L))                           # k-fold validation sets
    _check(R, labels, parts, np.tril(np.ones((L, L))))            # learning-curve prefixes
    gap = np.ones((L, L))
    for s in range(L):
        gap[s, max(0, s - 1):s + 2] = 0                           # blocked with a gap
    _check(R, labels, parts, gap)


@settings(max_examples=30, deadline=None)
@given(L=st.integers(1, 12), S=st.integers(1, 8), seed=st.integers(0, 2**32 - 1))
def test_any_selection_matches_numpy_and_the_dense_product(L, S, seed):
    rng = np.random.default_rng(seed)
    R, labels, parts = _pieces(rng, L, 3, rows_per=3)
    W = (rng.random((S, L)) < rng.random()).astype(np.int8)
    _check(R, labels, parts, W)
    a = combine_batch(parts, W)
    b = _combine_dense(parts, W)
    for x, y in zip(a, b):
        np.testing.assert_allclose(x, y, rtol=1e-10, atol=1e-9 * (np.abs(y).max() + 1))


def test_many_folds_stay_exact():
    """1,000 folds: the linear-time route gives numpy's answer for every training set."""
    rng = np.random.default_rng(2)
    L = 1000
    R, labels, parts = _pieces(rng, L, 3, rows_per=2)
    W = 1 - np.eye(L)
    n, mean, M = combine_batch(parts, W)
    for s in (0, 1, 499, 998, 999):
        n_d, m_d, M_d = _direct(R[labels != s])
        assert n[s] == n_d
        np.testing.assert_allclose(M[s], M_d, rtol=1e-10)
        np.testing.assert_allclose(mean[s], m_d, rtol=1e-12)


def test_wide_designs_are_summarised_in_small_chunks_exactly():
    """Thousands of terms: chunks shrink so one chunk's terms stay small; numbers unchanged."""
    from engine.moments import design_moments

    rng = np.random.default_rng(4)
    n, P = 700, 2100
    U = rng.uniform(-1, 1, size=(n, 3))
    W = rng.normal(size=(3, P))
    y = rng.normal(size=n)
    labels = rng.integers(0, 3, n)
    calls = []

    def expand(Uc, out):
        calls.append(Uc.shape[0])
        out[:] = np.tanh(Uc @ W)

    st = design_moments(U, y, labels, 3, expand, P)
    assert max(calls) <= (8 << 20) // (P + 1) + 1      # about 64 MB of terms per chunk
    R = np.column_stack([np.tanh(U @ W), y])
    for s in range(3):
        n_d, m_d, M_d = _direct(R[labels == s])
        assert st.n[s] == n_d
        np.testing.assert_allclose(st.comoment[s], M_d, rtol=1e-9, atol=1e-9 * np.abs(M_d).max())


def test_many_small_sets_are_summarised_block_by_block_exactly():
    """Sets much smaller than a chunk share one expansion of their block; a set
    larger than a chunk is cut as before; rows labelled -1 are left out; several
    targets. Every set against numpy on its own rows."""
    from engine.moments import design_moments

    rng = np.random.default_rng(8)
    sizes = [3, 1, 40, 7, 250, 2, 90, 11]      # set 4 spans more than one chunk of 64
    labels = np.concatenate([np.full(s, i) for i, s in enumerate(sizes)] + [np.full(9, -1)])
    rng.shuffle(labels)
    n, P = labels.size, 6
    U = rng.uniform(-1, 1, size=(n, 2))
    W = rng.normal(size=(2, P))
    Y = np.column_stack([U @ W[:, :2].sum(axis=1) + rng.normal(size=n), rng.normal(size=n)])
    calls = []

    def expand(Uc, out):
        calls.append(Uc.shape[0])
        out[:] = np.sin(Uc @ W) + 10.0

    st = design_moments(U, Y, labels, len(sizes), expand, P, chunk_rows=64)
    assert len(calls) - 1 < len(sizes) + 250 // 64    # (the first call: the shift's sample)
    R = np.column_stack([np.sin(U @ W) + 10.0, Y])
    for s in range(len(sizes)):
        n_d, m_d, M_d = _direct(R[labels == s])
        assert st.n[s] == n_d
        np.testing.assert_allclose(st.mean[s], m_d, rtol=1e-12)
        np.testing.assert_allclose(st.comoment[s], M_d, rtol=1e-9, atol=1e-9 * np.abs(M_d).max())


def test_sets_shared_among_threads_give_the_same_numbers_bit_for_bit(monkeypatch):
    """Small sets summarised by two threads (each set whole by one of them) equal the
    one-thread pass exactly, and numpy on each set's rows."""
    import engine.moments as mo

    rng = np.random.default_rng(12)
    n, P, L = 6000, 5, 40
    labels = rng.integers(-1, L, n)
    U = rng.uniform(-1, 1, size=(n, 2))
    W = rng.normal(size=(2, P))
    y = U[:, 0] ** 2 + rng.normal(size=n)

    def expand(Uc, out):
        out[:] = np.cos(Uc @ W)

    monkeypatch.setattr(mo, "THREADED_ROWS", 0)
    monkeypatch.setenv("FITLADDER_BLAS_THREADS", "1")
    one = mo.design_moments(U, y, labels, L, expand, P, chunk_rows=256)
    monkeypatch.setenv("FITLADDER_BLAS_THREADS", "2")
    parts = mo._share_blocks(list(mo._blocks(mo._label_chunks(np.sort(labels), 256), 256)), 2)
    assert len(parts) == 2
    assert not ({m[0] for b in parts[0] for m in b[2]} & {m[0] for b in parts[1] for m in b[2]})
    two = mo.design_moments(U, y, labels, L, expand, P, chunk_rows=256)
    for a, b in ((one.n, two.n), (one.mean, two.mean), (one.comoment, two.comoment)):
        assert np.array_equal(a, b)
    R = np.column_stack([np.cos(U @ W), y])
    for s in (0, 17, L - 1):
        n_d, m_d, M_d = _direct(R[labels == s])
        assert two.n[s] == n_d
        np.testing.assert_allclose(two.comoment[s], M_d, rtol=1e-9, atol=1e-9 * np.abs(M_d).max())
