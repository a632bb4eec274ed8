"""The chosen model fitted on all rows, solved accurately.

Without a penalty the least-squares problem is solved by QR on products of
Chebyshev polynomials of the scaled inputs (a well-conditioned basis), refined
with residuals in extended precision (corrected semi-normal equations, scaled
inputs and design formed in extended precision), carried as an unevaluated sum
of doubles, and mapped back to powers of the raw inputs in exact rational
arithmetic. With a penalty the ridge problem on
standardised raw terms is solved as an augmented least-squares problem by SVD.
"""
from __future__ import annotations

from dataclasses import dataclass, field
from fractions import Fraction
from math import comb

import numpy as np
from scipy.linalg import solve_triangular

from .design import PolynomialBasis, chebyshev_columns, chebyshev_table
from .errors import InputProblem
from .families import lasso as lasso_family


_PREDICT_CHUNK = 65_536
#: rows per block of `FinalModel.predict` (fewer for many terms: at most about
#: `_PREDICT_CELLS` values in the powers and terms of one block); the block's powers
#: and terms are built in two buffers reused from block to block
_PREDICT_BLOCK = 8_192
_PREDICT_CELLS = 1 << 21


@dataclass
class FinalModel:
    """A fitted polynomial model in original units.

    Attributes
    ----------
    order, penalty : the cell.
    input_names, target : column names.
    terms : names, ``"intercept"`` first.
    coefficients : raw-unit coefficients matching ``terms``.
    std_coefficients : coefficients on training-standardised raw terms (no intercept).
    centre, half_range : the scaling ``u = (x - centre) / half_range``.
    exponents : (p, d) exponents of each non-intercept term.
    scaled_intercept, scaled_coefficients : the same model on scaled-input
        monomials ``u^e``; predictions use these (numerically stable).
    condition_number : 2-norm condition number of the design of centred,
        standardised raw terms (scale-free; 1 = orthogonal terms).
    n_rows, r2, residual_sd, train_mse, effective_df : fit summaries.
    x_min, x_max : training range of each input.
    """

    order: int
    penalty: float
    input_names: tuple[str, ...]
    target: str
    terms: list[str]
    coefficients: np.ndarray
    std_coefficients: np.ndarray
    centre: np.ndarray
    half_range: np.ndarray
    exponents: np.ndarray
    scaled_intercept: float
    scaled_coefficients: np.ndarray
    condition_number: float
    n_rows: int
    r2: float
    residual_sd: float
    train_mse: float
    effective_df: float
    x_min: np.ndarray
    x_max: np.ndarray
    notes: list[str] = field(default_factory=list)
    #: singular values of the centred, standardised raw-term design (largest first)
    design_singular_values: np.ndarray | None = None
    family: str = "ridge"
    l1_ratio: float = 0.0
    #: text inputs among the inputs: column -> (reference level, levels with a term);
    #: their indicator columns ``column[level]`` are among ``input_names``
    text_inputs: dict = field(default_factory=dict)

    def predict(self, X) -> np.ndarray:
        """Predictions for raw inputs ``X`` of shape (m, d) (or (m,) with one input).

        The scaled-monomial sum, formed on blocks of rows in reused buffers: on each
        row the same operations in the same order as evaluating term by term (powers
        by repeated multiplication, each term times its coefficient added in the order
        of the terms), so the result does not depend on the block size.
        """
        X = np.asarray(X, dtype=float)
        if X.ndim == 1:
            X = X[:, None]
        if X.shape[1] != len(self.input_names):
            raise InputProblem(f"Expected {len(self.input_names)} input columns "
                               f"({', '.join(self.input_names)}), got {X.shape[1]}.",
                               code="bad_predict_input")
        out = np.full(X.shape[0], self.scaled_intercept)
        if not len(self.exponents) or not X.shape[0]:
            return out
        E = np.asarray(self.exponents, dtype=np.intp)
        n, nt, d, top = X.shape[0], E.shape[0], E.shape[1], int(E.max())
        levels = E.max(axis=0)
        # each term's factors u_j^e (inputs ascending) as rows (e - 1) * d + j of a block
        # of powers: the first of every term is gathered, the later ones multiplied in,
        # one factor position at a time for all terms that have it
        R = (E - 1) * d + np.arange(d)          # row of u_j^e in the block
        nz = E > 0
        j0 = nz.argmax(axis=1)
        first = R[np.arange(nt), j0]
        later = []
        if nz.sum(axis=1).max() > 1:             # products of inputs
            factors = [R[t, nz[t]] for t in range(nt)]
            later = [(np.array([t for t, f in enumerate(factors) if f.size > q], dtype=np.intp),
                      np.array([f[q] for f in factors if f.size > q], dtype=np.intp))
                     for q in range(1, max(f.size for f in factors))]
        # no products of inputs and the terms in the block's order: no gathering
        run = not later and np.array_equal(first, first[0] + np.arange(nt))
        b = np.asarray(self.scaled_coefficients, dtype=float)[:, None]
        centre = np.asarray(self.centre, dtype=float)[:, None]
        half_range = np.asarray(self.half_range, dtype=float)[:, None]
        # inputs needing each power beyond the first (all of them: one call per power)
        need = [slice(None) if np.all(levels >= k) else np.flatnonzero(levels >= k)
                for k in range(2, top + 1)]
        rows = min(n, _PREDICT_BLOCK, max(_PREDICT_BLOCK // 8,
                                          _PREDICT_CELLS // (top * d + (0 if run else nt))))
        P = np.empty((top, d, rows))     # u_j^k for the rows of one block, reused
        # the terms times their coefficients, reused (with a run: rows of P)
        T = None if run else np.empty((nt, rows))
        for i in range(0, n, rows):
            m = min(rows, n - i)
            if m < rows:                 # the last, shorter block
                P, T = np.empty((top, d, m)), None if run else np.empty((nt, m))
            # the scaled inputs, one contiguous row per input (transposed first: the
            # arithmetic then runs on contiguous rows)
            np.copyto(P[0], X[i:i + m].T)
            np.subtract(P[0], centre, out=P[0])
            np.divide(P[0], half_range, out=P[0])
            for k, sel in enumerate(need, start=2):   # u^k = u^(k-1) * u
                if isinstance(sel, slice):
                    np.multiply(P[k - 2], P[0], out=P[k - 1])
                else:
                    for j in sel:
                        np.multiply(P[k - 2, j], P[0, j], out=P[k - 1, j])
            flat = P.reshape(top * d, m)
            if run:                      # the powers are the terms: scaled in place
                T = flat[first[0]:first[0] + nt]
                np.multiply(T, b, out=T)
            else:
                np.take(flat, first, axis=0, out=T, mode="clip")  # this mode: unbuffered
                for sel, r in later:
                    T[sel] *= flat[r]
                np.multiply(T, b, out=T)
            acc = out[i:i + m]
            for t in range(nt):          # added in the order of the terms
                np.add(acc, T[t], out=acc)
        return out


def attach_text_inputs(model: FinalModel, factors: dict | None) -> FinalModel:
    """Record on ``model`` the text inputs (`engine.categorical.Factor`) whose indicator
    columns it uses, so a saved pipeline can one-hot encode the raw text column.

    Parameters
    ----------
    model : a fitted model; changed in place and returned.
    factors : ``{column: Factor}`` as `engine.loading.prepare` gives them (None: none).
    """
    names = set(model.input_names)
    for col, f in (factors or {}).items():
        if f.names and all(n in names for n in f.names):
            model.text_inputs[str(col)] = (str(f.reference), tuple(str(v) for v in f.levels))
    return model


# ---------------------------------------------------------------------------
# exact polynomial algebra on {multi-index: Fraction}
# ---------------------------------------------------------------------------
def _chebyshev_to_monomials(exponents: np.ndarray, g: list[Fraction]) -> dict:
    """sum_t g_t prod_j T_{e_tj}(u_j)  ->  {multi-index of u: coefficient}."""
    d = exponents.shape[1]
    T = chebyshev_table(int(exponents.max()) if exponents.size else 1)
    out: dict[tuple, Fraction] = {}
    for e, gt in zip(exponents, g):
        poly = {tuple([0] * d): Fraction(gt)}
        for j in range(d):
            if e[j] == 0:
                continue
            new = {}
            for k, c in poly.items():
                for m, t in enumerate(T[int(e[j])]):
                    if t:
                        kk = list(k)
                        kk[j] += m
                        kk = tuple(kk)
                        new[kk] = new.get(kk, Fraction(0)) + c * t
            poly = new
        for k, c in poly.items():
            out[k] = out.get(k, Fraction(0)) + c
    return out


def _substitute(poly: dict, scale: list[Fraction], shift: list[Fraction]) -> dict:
    """Polynomial in v, with v_j = scale_j * w_j + shift_j  ->  polynomial in w."""
    out: dict[tuple, Fraction] = {}
    for k, c in poly.items():
        parts = {(): c}
        for j, e in enumerate(k):
            new = {}
            for m in range(e + 1):
                f = comb(e, m) * scale[j] ** m * shift[j] ** (e - m)
                if f == 0:
                    continue
                for kk, cc in parts.items():
                    key = kk + (m,)
                    new[key] = new.get(key, Fraction(0)) + cc * f
            parts = new
        for kk, cc in parts.items():
            out[kk] = out.get(kk, Fraction(0)) + cc
    return out


def _chebyshev_design(U: np.ndarray, exponents: np.ndarray, dtype=float) -> np.ndarray:
    n, d = U.shape
    U = U.astype(dtype)
    kmax = int(exponents.max()) if exponents.size else 0
    Tj = [chebyshev_columns(U[:, j], kmax) for j in range(d)]
    V = np.ones((n, exponents.shape[0] + 1), dtype=dtype)
    for t, e in enumerate(exponents):
        for j in range(d):
            if e[j]:
                V[:, t + 1] *= Tj[j][int(e[j])]
    return V


def _lstsq_refined(V: np.ndarray, y: np.ndarray, V_ext: np.ndarray, y_ext: np.ndarray,
                   steps: int = 4) -> tuple[list[Fraction], int]:
    """Least squares by QR on column-scaled V, refined with extended-precision residuals.

    The solution is carried as the unevaluated sum of the first solve and each
    refinement step (every part a double), and returned as exact fractions, so
    the refined digits beyond double precision survive the map to raw powers.
    """
    norms = np.linalg.norm(V, axis=0)
    norms = np.where(norms > 0, norms, 1.0)
    Vs = V / norms
    Q, R = np.linalg.qr(Vs)
    diag = np.abs(np.diag(R))
    rank = int(np.sum(diag > diag.max() * max(V.shape) * np.finfo(float).eps))
    if rank < V.shape[1]:
        g, *_ = np.linalg.lstsq(Vs, y, rcond=None)
        return [Fraction(float(v)) / Fraction(float(s)) for v, s in zip(g, norms)], rank
    parts = [solve_triangular(R, Q.T @ y)]
    g_ext = parts[0].astype(V_ext.dtype)
    Vs_ext = V_ext / norms.astype(V_ext.dtype)
    for _ in range(steps):
        # corrected semi-normal equations: the normal-equation residual Vs' r is formed
        # in extended precision (Q' r would carry Q's rounding times the large
        # residual of an inconsistent system), then R'R step = Vs' r
        r = y_ext - Vs_ext @ g_ext
        rhs = (Vs_ext.T @ r).astype(float)
        step = solve_triangular(R, solve_triangular(R, rhs, trans="T"))
        parts.append(step)
        g_ext = g_ext + step.astype(V_ext.dtype)
    exact = [sum((Fraction(float(pt[t])) for pt in parts), Fraction(0)) / Fraction(float(norms[t]))
             for t in range(V.shape[1])]
    return exact, rank


def _too_large(order: int) -> InputProblem:
    return InputProblem(
        f"Raw powers up to order {order} of these inputs are too large to compute in "
        "double precision. Rescale the inputs (for example to thousands, or subtract a "
        "reference value) or lower the order.", code="values_too_large")


# ---------------------------------------------------------------------------
# public entry point
# ---------------------------------------------------------------------------
def _solve_from_summary(summary, X: np.ndarray, y: np.ndarray, order: int, penalty: float,
                        As: np.ndarray, r: np.ndarray, a0: np.ndarray, refine: int = 1):
    """The fit from all-rows cross-product summaries (large tables).

    Least squares is solved on the standardised Chebyshev working basis by a
    rank-tolerant eigen-decomposition and refined with ``refine`` streamed
    passes of residuals (seminormal refinement); ridge on standardised raw
    terms, as in the sweep. Singular values of the standardised raw-term design
    come from the eigenvalues of its cross-product matrix.

    Returns
    -------
    (chebyshev coefficients incl. intercept, edf, rank, sv, dsd_s)
    """
    basis = summary.basis
    p, m, M = summary.block(order)
    n = summary.n
    Mff, Mfy = M[:p, :p], M[:p, p]
    ybar = float(m[p])
    Mraw = As @ Mff @ As.T
    dsd_s = np.sqrt(np.clip(np.diag(Mraw), 0, None) / n)
    safe = np.where(dsd_s > 0, dsd_s, 1.0)
    C = Mraw / np.outer(safe, safe)
    C = (C + C.T) / 2
    if penalty == 0:
        du = np.sqrt(np.clip(np.diag(Mff), 0, None) / n)
        du = np.where(du > 0, du, 1.0)
        lam, Q = np.linalg.eigh(Mff / np.outer(du, du))
        tol = max(float(lam[-1]), 0.0) * max(p, 10) * np.finfo(float).eps * 10
        keep = lam > tol
        inv = np.where(keep, 1.0 / np.where(keep, lam, 1.0), 0.0)

        def solve(v):
            return (Q @ (inv * (Q.T @ (v / du)))) / du

        b = solve(Mfy)
        mf = m[:p]
        for _ in range(refine):
            g = np.zeros(p)
            for c0 in range(0, y.size, _PREDICT_CHUNK):   # scaled chunk by chunk (no n x d copy)
                F = basis.expand_scaled(basis.scale(X[c0:c0 + _PREDICT_CHUNK]), order=order) - mf
                res = (y[c0:c0 + _PREDICT_CHUNK] - ybar) - F @ b
                g += F.T @ res
            b = b + solve(g)
        g_all = np.r_[ybar - float(mf @ b), b]
        rank = int(keep.sum()) + 1
        lam_raw = np.clip(np.linalg.eigvalsh(C), 0, None)
        edf = float(min(rank, n))
    else:
        lam_raw, Qr = np.linalg.eigh(C)
        lam_raw = np.clip(lam_raw, 0, None)
        c = (As @ Mfy) / safe
        w = Qr @ ((Qr.T @ c) / (lam_raw + penalty))
        beta_c = As.T @ (w / safe)
        g_all = np.r_[ybar - float(m[:p] @ beta_c), beta_c]
        rank = p + 1
        edf = 1.0 + float(np.sum(lam_raw / (lam_raw + penalty)))
    sv = np.sqrt(np.sort(lam_raw)[::-1])
    return g_all, edf, rank, sv, dsd_s


def fit_final(X: np.ndarray, y: np.ndarray, input_names, order: int, penalty: float = 0.0,
              interactions: bool = False, target: str = "y",
              basis: PolynomialBasis | None = None, summary=None, family: str = "ridge",
              l1_ratio: float = 0.0, x_range: tuple | None = None) -> FinalModel:
    """Fit the model of ``order`` and ``penalty`` on all rows.

    Parameters
    ----------
    X : (n, d) raw inputs; y : (n,) target.
    input_names : names of the inputs.
    order : polynomial order (0 = intercept only).
    penalty : ridge ``alpha`` on standardised raw terms (0 = least squares).
    interactions : include products of inputs.
    target : name of the target, for reports.
    basis : scaling to use; fitted on ``X`` when None.
    summary : all-rows summaries (`engine.summaries.RowSummary`) of ``X`` and
        ``y``; when given, the fit is solved from them (large tables: no
        full design in memory) instead of by QR on the rows.
    family : ``"ridge"``, ``"lasso"`` or ``"elasticnet"`` (see `engine.families`).
    l1_ratio : elastic-net mixing parameter (1 for the lasso).
    x_range : ``(X.min(axis=0), X.max(axis=0))`` when already known (several
        cells fitted on the same rows look at every row once for it).

    Returns
    -------
    FinalModel
    """
    X = np.asarray(X, dtype=float)
    if X.ndim == 1:
        X = X[:, None]
    y = np.asarray(y, dtype=float)
    n, d = X.shape
    if summary is not None and summary.basis.max_order >= order and (
            family == "ridge" or penalty == 0):
        basis = summary.basis
    else:
        summary = None
    if basis is None or basis.max_order < order:
        basis = PolynomialBasis.fit(X, input_names, order, interactions)
    p = basis.n_terms_at(order)
    E = basis.terms[:p]
    scale_u = [Fraction(1) / Fraction(float(s)) for s in basis.half_range]
    shift_u = [-Fraction(float(c)) / Fraction(float(s)) for c, s in zip(basis.centre, basis.half_range)]
    notes: list[str] = []
    # standardised raw-term design, for the condition number and the ridge solve
    A, a0 = basis.raw_map(order)
    if not (np.all(np.isfinite(A)) and np.all(np.isfinite(a0))):
        raise _too_large(order)
    # each raw term divided by the largest entry of its row of A (raw powers can be
    # huge); standardisation removes the factor again
    r = np.abs(A).max(axis=1) if p else np.ones(0)
    r = np.where(r > 0, r, 1.0)
    As = A / r[:, None] if p else A
    if summary is not None and p:
        g, edf, rank, sv, dsd_s = _solve_from_summary(summary, X, y, order, penalty, As, r, a0)
        if rank < p + 1:
            notes.append(f"The design has rank {rank} for {p + 1} parameters: some terms are "
                         "exact combinations of others; the minimum-norm solution is reported.")
        cond = float(sv[0] / sv[-1]) if sv[-1] > 0 else float("inf")
        dsd = dsd_s * r
        poly_u = _chebyshev_to_monomials(np.vstack([np.zeros((1, d), int), E]),
                                         [Fraction(float(v)) for v in g])
        return _finish(basis, X, y, order, penalty, input_names, target, E, poly_u,
                       scale_u, shift_u, dsd, cond, edf, notes, sv,
                       sse=_summary_sse(summary, order, np.asarray(g, float)), x_range=x_range)
    U = basis.scale(X)          # the row route (small tables) only
    Fu = basis.expand_scaled(U, order=order) if p else np.zeros((n, 0))
    raw_s = Fu @ As.T + a0 / r if p else Fu
    raw_mean_s = raw_s.mean(axis=0) if p else np.zeros(0)
    dsd_s = raw_s.std(axis=0) if p else np.zeros(0)
    dsd_s_safe = np.where(dsd_s > 0, dsd_s, 1.0)
    dsd = dsd_s * r
    Tstd = (raw_s - raw_mean_s) / dsd_s_safe if p else raw_s
    if p:
        sv = np.linalg.svd(Tstd, compute_uv=False)
        cond = float(sv[0] / sv[-1]) if sv[-1] > 0 else float("inf")
    else:
        sv = np.zeros(0)
        cond = 1.0
    ybar = float(np.mean(y))
    if penalty == 0 or p == 0:
        V = _chebyshev_design(U, E)
        # the scaled inputs themselves in extended precision: u = (x - c) / h rounded
        # to double would be a different design from the one the exact map assumes
        U_ext = ((X.astype(np.longdouble) - basis.centre.astype(np.longdouble))
                 / basis.half_range.astype(np.longdouble))
        V_ext = _chebyshev_design(U_ext, E, dtype=np.longdouble)
        g, rank = _lstsq_refined(V, y, V_ext, y.astype(np.longdouble))
        if rank < p + 1:
            notes.append(f"The design has rank {rank} for {p + 1} parameters: some terms are "
                         "exact combinations of others; the minimum-norm solution is reported.")
        poly_u = _chebyshev_to_monomials(np.vstack([np.zeros((1, d), int), E]), g)
        edf = float(min(rank, n))
    else:
        if family == "ridge":
            Aug = np.vstack([Tstd, np.sqrt(penalty) * np.eye(p)])
            rhs = np.r_[y - ybar, np.zeros(p)]
            w, *_ = np.linalg.lstsq(Aug, rhs, rcond=None)
        else:
            ratio = 1.0 if family == "lasso" else float(l1_ratio)
            G = (Tstd.T @ Tstd / n)[None]
            b = (Tstd.T @ (y - ybar) / n)[None]
            yy = np.array([float(np.mean((y - ybar) ** 2))])
            pen1 = np.array([float(penalty)])
            W = lasso_family.solve_path(G, b, yy, pen1, ratio)
            w = W[0, :, 0]
            edf_cd = 1.0 + float(lasso_family.effective_df(G, W, ratio, pen1)[0, 0])
        beta_c = As.T @ (w / dsd_s_safe)    # on the Chebyshev working basis
        b0c = ybar - float(Fu.mean(axis=0) @ beta_c)
        poly_u = _chebyshev_to_monomials(np.vstack([np.zeros((1, d), int), E]),
                                         [Fraction(b0c)] + [Fraction(float(b)) for b in beta_c])
        edf = (1.0 + float(np.sum(sv ** 2 / (sv ** 2 + penalty))) if family == "ridge"
               else edf_cd)
    model = _finish(basis, X, y, order, penalty, input_names, target, E, poly_u, scale_u,
                    shift_u, dsd, cond, edf, notes, sv if p else None, x_range=x_range)
    if family != "ridge" and penalty > 0:
        model.family = str(family)
        model.l1_ratio = 1.0 if family == "lasso" else float(l1_ratio)
    return model


def _summary_sse(summary, order: int, g: np.ndarray) -> float | None:
    """Training sum of squared errors of working-basis coefficients ``g`` (intercept first)
    from all-rows summaries; None when it is so small against the target's own sum of
    squares that rounding would show (then the rows are read instead)."""
    p, m, M = summary.block(order)
    b = g[1:]
    d = float(m[p] - g[0] - m[:p] @ b)          # mean residual (0 up to rounding)
    sse = float(M[p, p] - 2.0 * b @ M[:p, p] + b @ M[:p, :p] @ b) + summary.n * d * d
    return sse if sse > 1e-6 * float(M[p, p]) else None


def _finish(basis, X, y, order, penalty, input_names, target, E, poly_u, scale_u, shift_u,
            dsd, cond, edf, notes, sv, sse: float | None = None,
            x_range: tuple | None = None) -> FinalModel:
    """Exact map to raw powers, the model, and its fit summaries (``sse``: the training
    sum of squared errors when already known from summaries; else from the rows;
    ``x_range``: the inputs' minima and maxima when already known)."""
    n, d = X.shape
    ybar = float(np.mean(y))
    poly_x = _substitute(poly_u, scale_u, shift_u)
    zero = tuple([0] * d)
    keys = [tuple(int(v) for v in e) for e in E]
    try:
        coef = np.array([float(poly_x.get(zero, 0))] + [float(poly_x.get(k, 0)) for k in keys])
    except OverflowError:
        raise _too_large(order) from None
    su_int = float(poly_u.get(zero, 0))
    su = np.array([float(poly_u.get(k, 0)) for k in keys])
    std_coef = coef[1:] * dsd
    model = FinalModel(
        order=int(order), penalty=float(penalty), input_names=tuple(input_names), target=target,
        terms=["intercept"] + basis.names(order), coefficients=coef, std_coefficients=std_coef,
        centre=basis.centre.copy(), half_range=basis.half_range.copy(), exponents=E.copy(),
        scaled_intercept=su_int, scaled_coefficients=su, condition_number=cond, n_rows=n,
        r2=float("nan"), residual_sd=float("nan"), train_mse=float("nan"), effective_df=edf,
        x_min=X.min(axis=0) if x_range is None else np.array(x_range[0], float),
        x_max=X.max(axis=0) if x_range is None else np.array(x_range[1], float), notes=notes,
        design_singular_values=None if sv is None else np.asarray(sv, float))
    if sse is None:
        resid = y - model.predict(X)
        sse = float(resid @ resid)
    sst = float(np.sum((y - ybar) ** 2))
    model.train_mse = sse / n
    model.r2 = 1.0 - sse / sst if sst > 0 else float("nan")
    dof = n - edf
    model.residual_sd = float(np.sqrt(sse / dof)) if dof > 0 else float("nan")
    return model
