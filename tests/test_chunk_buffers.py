"""Passes over the rows that write into reused buffers give the numbers of fresh arrays.

The expansion, the scaling, the row pass of the summaries and the ridge solves of
the intervals reuse buffers chunk by chunk; each result is compared with the same
computation on fresh arrays (bit for bit) and with an outside reference.
"""
from __future__ import annotations

import numpy as np
import pytest

from engine.design import PolynomialBasis
from engine.families import RawMap, TermSummary, fit_family
from engine.intervals import _ridge_by_solve
from engine.sweep import piece_statistics


@pytest.mark.parametrize("order", [1, 2, 3, 6])
def test_expansion_into_a_buffer_matches_a_fresh_one_and_numpy_chebyshev(order):
    # Reference: numpy.polynomial.chebyshev.chebval for T_k(u_j).
    from numpy.polynomial import chebyshev

    rng = np.random.default_rng(3)
    X = rng.uniform(-3, 5, size=(300, 4))
    b = PolynomialBasis.fit(X, ("a", "b", "c", "d"), 6)
    U = b.scale(X)
    kept = U.copy()
    fresh = b.expand_scaled(U, order=order)
    p = fresh.shape[1]
    wide = np.full((500, p + 3), np.nan, order="F")      # a slice of a longer buffer
    into_f = b.expand_scaled(U, out=wide[:300, :p], order=order)
    into_c = b.expand_scaled(U, out=np.empty((300, p)), order=order)
    assert np.array_equal(into_f, fresh) and np.array_equal(into_c, fresh)
    assert np.array_equal(U, kept)                          # the inputs are left as they were
    assert np.isnan(wide[300:]).all() and np.isnan(wide[:, p:]).all()
    for t, e in enumerate(b.terms[:p]):
        want = np.ones(len(X))
        for j, k in enumerate(e):
            want *= chebyshev.chebval(U[:, j], np.eye(k + 1)[k])
        np.testing.assert_allclose(fresh[:, t], want, rtol=1e-12, atol=1e-12)


def test_scaling_in_place_matches_a_new_array():
    rng = np.random.default_rng(4)
    X = rng.normal(size=(200, 3)) * [1.0, 1e3, 1e-3] + [5.0, -2e4, 0.0]
    b = PolynomialBasis.fit(X, ("a", "b", "c"), 2)
    V = X.copy()
    assert b.scale(V, out=V) is V
    assert np.array_equal(V, b.scale(X))
    # (x - centre) / half_range with numpy directly
    np.testing.assert_array_equal(V, (X - b.centre) / b.half_range)


def test_pieces_summarised_from_raw_inputs_match_scaled_ones_and_numpy():
    # Reference: numpy.cov (bias=True) times the row count for each piece's design.
    rng = np.random.default_rng(5)
    n = 5000
    X = rng.uniform(-2, 3, size=(n, 3)) + [10.0, 0.0, 100.0]
    y = X @ [0.5, -0.2, 0.01] + rng.normal(0, 0.3, n)
    labels = rng.integers(-1, 7, size=n)
    b = PolynomialBasis.fit(X, ("a", "b", "c"), 3)
    own = piece_statistics(b, X, y, labels, 7, chunk_rows=512)
    given = piece_statistics(b, X, y, labels, 7, chunk_rows=512, U=b.scale(X))
    for a, c in ((own.n, given.n), (own.mean, given.mean), (own.comoment, given.comoment)):
        assert np.array_equal(a, c)
    R = np.column_stack([b.expand(X), y])
    for s in range(7):
        rows = R[labels == s]
        assert own.n[s] == len(rows)
        np.testing.assert_allclose(own.mean[s], rows.mean(axis=0), rtol=1e-12, atol=1e-12)
        want = np.cov(rows, rowvar=False, bias=True) * len(rows)
        np.testing.assert_allclose(own.comoment[s], want, rtol=1e-9,
                                   atol=1e-12 * np.abs(want).max())


def test_ridge_solved_a_few_sets_at_a_time_matches_each_set_alone_and_the_eigen_route():
    rng = np.random.default_rng(6)
    S, p = 37, 9                    # more sets than one batch, not a whole number of batches
    Z = rng.normal(size=(S, 60, p + 1))
    mean = Z.mean(axis=1)
    C = Z - mean[:, None, :]
    summary = TermSummary(np.full(S, 60.0), mean, np.einsum("sni,snj->sij", C, C))
    A = np.tril(rng.normal(size=(p, p))) + 3 * np.eye(p)
    raw = RawMap.select(A, rng.normal(size=p), np.arange(p), S)
    for penalty in (1e-3, 2.0):
        fast = _ridge_by_solve(summary, raw, penalty)
        for s in (0, 15, 16, 36):
            one = TermSummary(summary.n[s:s + 1], summary.mean[s:s + 1], summary.M[s:s + 1])
            alone = _ridge_by_solve(one, RawMap.select(A, raw.a0[0], np.arange(p), 1), penalty)
            assert np.array_equal(fast.beta_u[s], alone.beta_u[0])
        # the same ridge through the eigen-decomposition (checked against scikit-learn in
        # tests/test_sweep_parity.py)
        eig = fit_family("ridge", summary, raw, np.array([penalty]))
        np.testing.assert_allclose(fast.beta_u, eig.beta_u, rtol=1e-8,
                                   atol=1e-10 * np.abs(eig.beta_u).max())
