"""Polynomial designs: terms, names, expansion on a well-scaled basis.

The engine works on *scaled* inputs ``u = (x - centre) / half_range`` (so
``|u| <= 1`` on the data) and, instead of powers ``u^k``, on Chebyshev
polynomials ``T_k(u)`` and their products: on data spread over [-1, 1] these
are far closer to orthogonal than powers, so cross-product matrices stay well
conditioned at high orders. An exact linear map links that working basis to the
raw-power terms a user reads (``x``, ``x^2``, ``x1*x2``...). Terms are ordered
by total degree, so the terms of every lower order form a leading block, and
the map is block lower triangular.
"""
from __future__ import annotations

import functools
import itertools
from dataclasses import dataclass
from fractions import Fraction
from math import comb

import numpy as np


def polynomial_terms(n_inputs: int, max_order: int, interactions: bool = False,
                     linear_only: tuple[int, ...] = (),
                     exclusive: tuple[tuple[int, int], ...] = ()) -> np.ndarray:
    """Exponent rows of every term up to ``max_order``, ordered by degree.

    Parameters
    ----------
    n_inputs : number of inputs.
    max_order : highest total degree.
    interactions : if False only per-input powers ``x_j^k``; if True every
        monomial of total degree up to ``max_order``.
    linear_only : inputs that take exponent at most 1 (0/1 indicator columns,
        for which ``x^k = x``).
    exclusive : pairs of inputs never multiplied (indicators of two levels of
        one text column: their product is always 0).

    Returns
    -------
    (P, n_inputs) int array; row t holds the exponent of each input in term t.
    """
    rows: list[tuple[int, ...]] = []
    cap, apart = set(linear_only), {tuple(sorted(p)) for p in exclusive}

    def allowed(e: list[int]) -> bool:
        if any(e[j] > 1 for j in cap):
            return False
        used = [j for j in range(n_inputs) if e[j]]
        return not any((a, b) in apart for i, a in enumerate(used) for b in used[i + 1:])

    for degree in range(1, max_order + 1):
        if interactions:
            # same order as scikit-learn's PolynomialFeatures within a degree
            for combo in itertools.combinations_with_replacement(range(n_inputs), degree):
                e = [0] * n_inputs
                for j in combo:
                    e[j] += 1
                if allowed(e):
                    rows.append(tuple(e))
        else:
            for j in range(n_inputs):
                e = [0] * n_inputs
                e[j] = degree
                if allowed(e):
                    rows.append(tuple(e))
    return np.array(rows, dtype=np.int64).reshape(len(rows), n_inputs)


def indicator_structure(X: np.ndarray) -> tuple[tuple[int, ...], tuple[tuple[int, int], ...]]:
    """0/1 columns of ``X`` (linear terms only) and pairs of them that are never 1 together.

    A column holding only the values 0 and 1 gains nothing from powers
    (``x^k = x``); two such columns that are never 1 on the same row (levels
    of one text input) have a product that is always 0.
    """
    X = np.asarray(X, dtype=float)
    if X.ndim != 2 or not len(X):
        return (), ()
    # a column with any value but 0 or 1 among its first rows cannot be 0/1: only the
    # columns that pass on those rows are checked on every row
    head = X[:256]
    maybe = np.flatnonzero(np.all((head == 0) | (head == 1), axis=0))
    binary = [int(j) for j in maybe
              if np.all((X[:, j] == 0) | (X[:, j] == 1)) and X[:, j].any() and not X[:, j].all()]
    pairs = [(a, b) for i, a in enumerate(binary) for b in binary[i + 1:]
             if not np.any((X[:, a] == 1) & (X[:, b] == 1))]
    return tuple(binary), tuple(pairs)


def term_name(exponents: np.ndarray, names: tuple[str, ...] | list[str]) -> str:
    """Readable name of one term: ``x``, ``x^2``, ``x1*x2^3``."""
    parts = []
    for name, e in zip(names, exponents):
        if e == 1:
            parts.append(str(name))
        elif e > 1:
            parts.append(f"{name}^{int(e)}")
    return "*".join(parts) if parts else "intercept"


@dataclass(frozen=True)
class PolynomialBasis:
    """Terms up to ``max_order`` on inputs scaled by fixed centres and half-ranges.

    The centres and half-ranges are a numerical device only: every reported
    quantity is in the basis of raw powers, standardised on the training rows
    exactly as scikit-learn's ``PolynomialFeatures -> StandardScaler`` does.
    """

    input_names: tuple[str, ...]
    max_order: int
    interactions: bool
    centre: np.ndarray
    half_range: np.ndarray
    terms: np.ndarray

    @classmethod
    def fit(cls, X: np.ndarray, input_names, max_order: int,
            interactions: bool = False) -> "PolynomialBasis":
        """Choose centre and half-range of each input from all rows ``X``."""
        X = np.asarray(X, dtype=float)
        lo = X.min(axis=0) if len(X) else np.zeros(X.shape[1])
        hi = X.max(axis=0) if len(X) else np.ones(X.shape[1])
        centre = (lo + hi) / 2.0
        half = (hi - lo) / 2.0
        half = np.where(half > 0, half, np.where(np.abs(centre) > 0, np.abs(centre), 1.0))
        linear_only, exclusive = indicator_structure(X)
        return cls(tuple(input_names), int(max_order), bool(interactions), centre, half,
                   polynomial_terms(X.shape[1], int(max_order), interactions, linear_only,
                                    exclusive))

    @property
    def n_terms(self) -> int:
        return int(self.terms.shape[0])

    def n_terms_at(self, order: int) -> int:
        """Number of terms (without intercept) of the model of ``order``."""
        return int(np.sum(self.terms.sum(axis=1) <= order))

    def names(self, order: int | None = None) -> list[str]:
        p = self.n_terms if order is None else self.n_terms_at(order)
        return [term_name(t, self.input_names) for t in self.terms[:p]]

    def scale(self, X: np.ndarray, out: np.ndarray | None = None) -> np.ndarray:
        """Scaled inputs ``(X - centre) / half_range``; into ``out`` when given (it may be
        ``X`` itself), otherwise one new array."""
        if out is None:
            U = np.subtract(np.asarray(X, dtype=float), self.centre)
        else:
            U = np.subtract(X, self.centre, out=out)
        U /= self.half_range
        return U

    def expand_scaled(self, U: np.ndarray, out: np.ndarray | None = None,
                      order: int | None = None) -> np.ndarray:
        """Working-basis terms of scaled inputs ``U`` (n, d) -> (n, p), Fortran order.

        Term ``t`` is ``prod_j T_{e_tj}(u_j)`` with ``T_k`` the Chebyshev
        polynomials of the first kind.
        """
        p = self.n_terms if order is None else self.n_terms_at(order)
        n, d = U.shape
        if out is None:
            out = np.empty((n, p), order="F")
        if p == 0:
            return out
        if not self.interactions and self.terms.shape[0] == d * self.max_order:
            # per-input terms: column (k-1)*d + j is T_k(u_j)
            out[:, :d] = U
            kmax = p // d
            if kmax >= 2:
                # 2u is held in the last block of columns, written last (in place, from
                # itself), so the expansion allocates nothing
                U2 = out[:, (kmax - 1) * d:kmax * d]
                np.add(out[:, :d], out[:, :d], out=U2)
                for k in range(2, kmax + 1):
                    dst = out[:, (k - 1) * d:k * d]
                    np.multiply(out[:, (k - 2) * d:(k - 1) * d], U2, out=dst)
                    if k == 2:
                        dst -= 1.0
                    else:
                        dst -= out[:, (k - 3) * d:(k - 2) * d]
            return out
        top = int(self.terms[:p].sum(axis=1).max())
        Ut = np.ascontiguousarray(U.T)      # each input one contiguous row
        cheb = [chebyshev_columns(Ut[j], top) for j in range(d)]
        for t in range(p):
            col = None
            for j, e in enumerate(self.terms[t]):
                if e:
                    col = cheb[j][e] if col is None else col * cheb[j][e]
            out[:, t] = col
        return out

    def expand(self, X: np.ndarray, order: int | None = None) -> np.ndarray:
        """Working-basis terms of raw inputs."""
        return self.expand_scaled(self.scale(X), order=order)

    def raw_map(self, order: int | None = None) -> tuple[np.ndarray, np.ndarray]:
        """Map from working-basis terms to raw-power terms, in floats.

        Returns ``(A, a0)`` with ``raw_terms = scaled_terms @ A.T + a0`` for
        every row. ``A`` is lower triangular in the degree ordering, so the
        map of a lower order is the leading block.
        """
        p = self.n_terms if order is None else self.n_terms_at(order)
        try:
            entries, a0 = _raw_map_entries(self.terms[:p], self.centre, self.half_range,
                                           exact=False)
        except OverflowError:
            entries, a0 = {(0, 0): float("inf")}, [float("inf")] * p
        A = np.zeros((p, p))
        for (i, j), v in entries.items():
            A[i, j] = float(v)
        return A, np.array([float(v) for v in a0], dtype=float)


def chebyshev_columns(u: np.ndarray, top: int) -> list[np.ndarray]:
    """``[T_0(u), T_1(u), ..., T_top(u)]`` by the three-term recurrence."""
    cols = [np.ones_like(u), u]
    for k in range(2, top + 1):
        cols.append(2.0 * u * cols[k - 1] - cols[k - 2])
    return cols[:top + 1]


def chebyshev_table(k_max: int) -> list[list[int]]:
    """Integer monomial coefficients of T_0..T_k_max: ``T_k(u) = sum_m c[k][m] u^m``."""
    T = [[1], [0, 1]]
    for k in range(2, k_max + 1):
        a = [0] + [2 * c for c in T[k - 1]]
        b = T[k - 2] + [0] * (len(a) - len(T[k - 2]))
        T.append([x - y for x, y in zip(a, b)])
    return T[:k_max + 1]


@functools.lru_cache(maxsize=64)
def monomial_in_chebyshev(k_max: int) -> list[list[Fraction]]:
    """Exact ``u^m = sum_i c[m][i] T_i(u)`` for m = 0..k_max."""
    T = chebyshev_table(max(k_max, 1))
    out: list[list[Fraction]] = []
    for m in range(k_max + 1):
        # solve the triangular system T[:m+1] for u^m, highest term first
        rest = [Fraction(0)] * (m + 1)
        rest[m] = Fraction(1)
        coef = [Fraction(0)] * (m + 1)
        for i in range(m, -1, -1):
            if rest[i] == 0:
                continue
            c = rest[i] / T[i][i]
            coef[i] = c
            for j, t in enumerate(T[i]):
                rest[j] -= c * t
        out.append(coef)
    return out


def _raw_map_entries(terms: np.ndarray, centre: np.ndarray, half: np.ndarray,
                     exact: bool = True):
    """Expansion of each raw term ``prod_j x_j^e_j`` in the working basis.

    ``x_j = s_j u_j + c_j``; ``u_j^m`` is rewritten in Chebyshev polynomials;
    products over inputs give products of Chebyshev polynomials. With
    ``exact`` the entries are Fractions; otherwise floats (faster, for sweeps).
    """
    num = Fraction if exact else float
    p, d = terms.shape
    index = {tuple(int(v) for v in t): i for i, t in enumerate(terms)}
    c = [num(float(v)) for v in centre]
    s = [num(float(v)) for v in half]
    top = int(terms.max()) if terms.size else 0
    M = monomial_in_chebyshev(top)
    if not exact:
        M = [[float(v) for v in row] for row in M]
    entries: dict[tuple[int, int], Fraction] = {}
    a0 = [num(0)] * p
    for i, t in enumerate(terms):
        nz = [j for j in range(d) if t[j]]
        # per input: x_j^e as a polynomial in T_k(u_j)
        factors = []
        for j in nz:
            e = int(t[j])
            poly = [num(0)] * (e + 1)
            for m in range(e + 1):
                w = comb(e, m) * s[j] ** m * c[j] ** (e - m)
                if w:
                    for k, v in enumerate(M[m]):
                        poly[k] += w * v
            factors.append(poly)
        for ks in itertools.product(*[range(len(f)) for f in factors]):
            coef = num(1)
            for f, k in zip(factors, ks):
                coef *= f[k]
            if coef == 0:
                continue
            if sum(ks) == 0:
                a0[i] += coef
            else:
                k = [0] * d
                for j, kj in zip(nz, ks):
                    k[j] = kj
                key = (i, index[tuple(k)])
                entries[key] = entries.get(key, num(0)) + coef
    return entries, a0
