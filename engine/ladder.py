"""Grids with more axes than order and penalty: lag depth, nested input sets, several targets.

Every cell of such a grid is an index set of one full design: the polynomial
terms of every column the request can use (current and past values of the
inputs, past values of the targets). One pass over the rows gives per-piece
summaries of that design with every target as an extra column; a cell's
training and validation summaries are sub-blocks of them. A *rung* fixes the
extra axes (input lag depth, target lag depth, number of inputs used, target);
inside a rung the sweep over order and penalty is the usual one.

The nested input sets rank the inputs inside each split, on its training rows
only (by the order in which they enter the lasso path of the standardised
current values, or in the user's order), so the ranking never sees the rows
that validate it.
"""
from __future__ import annotations

import itertools
from dataclasses import dataclass, field, replace

import numpy as np
import pandas as pd

from .design import PolynomialBasis
from .errors import InputProblem
from .lagged import LagSpec, LaggedDesign, build_lagged_design
from .moments import combine_batch, target_moments
from .schemes import FoldPlan
from .sweep import SweepResult, _empty_result, _fit_penalties, _sse, check_design_size, piece_statistics

#: extra columns of the validation table (and keys of summary.json grid rows)
RUNG_COLUMNS = ("lags", "target_lags", "inputs_used", "target")


@dataclass(frozen=True)
class Rung:
    """Values of the extra axes for a block of cells (``None``: axis not swept)."""

    target: str
    lags: int | None = None
    target_lags: int | None = None
    inputs_used: int | None = None

    def as_dict(self) -> dict:
        return {"lags": self.lags, "target_lags": self.target_lags,
                "inputs_used": self.inputs_used, "target": self.target}


@dataclass
class LadderResult:
    """Every cell of a many-axis grid for one target, per split.

    ``sweeps[i]`` holds the (order, penalty, split) results of ``rungs[i]``;
    rows of `validation_table` run rung by rung, then order, then penalty, and
    `split_errors` has the same rows.
    """

    target: str
    rungs: list[Rung]
    sweeps: list[SweepResult]
    columns: tuple[str, ...]
    rung_columns: list[list[np.ndarray]]   # per rung, per split: positions in ``columns``
    rankings: np.ndarray | None = None     # (S, d) inputs ranked on each split's training rows
    ranking_method: str | None = None
    repeats: int = 1
    loo: bool = False
    notes: list[str] = field(default_factory=list)

    @property
    def orders(self) -> list[int]:
        return self.sweeps[0].orders

    @property
    def penalties(self) -> np.ndarray:
        return self.sweeps[0].penalties

    @property
    def n_train(self) -> np.ndarray:
        return self.sweeps[0].n_train

    @property
    def n_valid(self) -> np.ndarray:
        return self.sweeps[0].n_valid

    @property
    def plan_description(self) -> str:
        return self.sweeps[0].plan_description

    def _with_rungs(self, frames: list[pd.DataFrame]) -> pd.DataFrame:
        out = []
        for rung, f in zip(self.rungs, frames):
            f = f.copy()
            for k, v in rung.as_dict().items():
                f[k] = v if v is not None else (pd.NA if k != "target" else v)
            out.append(f)
        t = pd.concat(out, ignore_index=True)
        for k in ("lags", "target_lags", "inputs_used"):
            t[k] = t[k].astype("Int64")
        return t

    def validation_table(self) -> pd.DataFrame:
        """One row per cell (rung, order, penalty), with the rung's axes as columns."""
        return self._with_rungs([s.validation_table() for s in self.sweeps])

    def split_errors(self):
        """Per-split validation MSE, (cells, splits), rows aligned with `validation_table`."""
        E = np.concatenate([s.valid_mse.reshape(-1, s.valid_mse.shape[2]) for s in self.sweeps])
        try:
            from .recommend import SplitErrors
        except ImportError:  # older recommendation module: a plain array
            return E
        return SplitErrors(E, self.n_train.copy(), self.n_valid.copy(), repeats=int(self.repeats))

    def fold_table(self) -> pd.DataFrame:
        """Long table: one row per (rung, order, penalty, split)."""
        return self._with_rungs([s.fold_table() for s in self.sweeps])

    def coefficient_table(self) -> pd.DataFrame:
        """Coefficients per (rung, order, penalty, term): mean and SD across splits."""
        return self._with_rungs([s.coefficient_table() for s in self.sweeps])

    def rung_index(self, row) -> int:
        """Index of the rung of a validation-table row (or a `Cell` with rung fields)."""
        get = (lambda k: row.get(k)) if hasattr(row, "get") else (lambda k: getattr(row, k, None))
        for i, r in enumerate(self.rungs):
            ok = True
            for k, v in r.as_dict().items():
                w = get(k)
                if v is None:
                    ok &= w is None or pd.isna(w)
                else:
                    ok &= (w is not None and not (isinstance(w, float) and np.isnan(w))
                           and (str(w) == v if k == "target" else int(w) == v))
            if ok:
                return i
        raise InputProblem("No such rung in this sweep.", code="unknown_cell")


# ---------------------------------------------------------------------------
# index sets of the full design
# ---------------------------------------------------------------------------
def term_sets(basis: PolynomialBasis, columns: np.ndarray, orders: list[int]) -> list[np.ndarray]:
    """Positions of the terms of each order that use only ``columns`` of the design."""
    mask = np.zeros(basis.terms.shape[1], bool)
    mask[np.asarray(columns, dtype=np.int64)] = True
    ok = np.all(basis.terms[:, ~mask] == 0, axis=1)
    deg = basis.terms.sum(axis=1)
    return [np.flatnonzero(ok & (deg <= q)) for q in orders]


def rank_inputs_by_lasso(n_t: float, mean_t: np.ndarray, M_t: np.ndarray,
                         linear_terms: np.ndarray) -> np.ndarray:
    """Inputs in the order they enter the lasso path, from one training summary.

    The path is that of the standardised current values (population SD), as
    ``sklearn.linear_model.lars_path_gram(method="lasso")`` computes it from
    the Gram matrix and the cross-products with the target; inputs that never
    enter follow in their given order.

    Parameters
    ----------
    n_t, mean_t, M_t : training summary (terms then target last).
    linear_terms : position of each input's linear term.

    Returns
    -------
    Input positions, first to enter first.
    """
    from sklearn.linear_model import lars_path_gram

    idx = np.asarray(linear_terms, dtype=np.int64)
    Mff = M_t[np.ix_(idx, idx)]
    Mfy = M_t[idx, -1]
    d = np.sqrt(np.clip(np.diag(Mff), 0, None))
    live = d > 0
    d = np.where(live, d, 1.0)
    gram = Mff / np.outer(d, d)
    xy = np.where(live, Mfy / d, 0.0)
    gram[~live, :] = 0.0
    gram[:, ~live] = 0.0
    gram[~live, ~live] = 1.0
    _, _, coefs = lars_path_gram(Xy=xy, Gram=gram, n_samples=int(n_t), method="lasso",
                                 return_path=True)
    nz = np.abs(coefs) > 0
    first = np.where(nz.any(axis=1), nz.argmax(axis=1), coefs.shape[1] + 1)
    return np.argsort(first, kind="stable")


def _rung_result(stats, S: int, basis: PolynomialBasis, A: np.ndarray, a0: np.ndarray,
                 sets: list[list[np.ndarray]], orders: list[int], pen: np.ndarray,
                 desc: str) -> SweepResult:
    """(order, penalty, split) results of one rung from the split summaries.

    ``sets[s][i]`` are the design terms of order ``orders[i]`` in split ``s``;
    when every split uses the same sets the fits are batched over splits.
    """
    n_t, m_t, M_t, n_v, m_v, M_v = stats
    last = M_t.shape[1] - 1
    shared = all(len(a) == len(b) and np.array_equal(a, b)
                 for s in range(1, S) for a, b in zip(sets[0], sets[s]))
    all_names = basis.names()
    if shared:
        ps = [t.size for t in sets[0]]
        res = _empty_result(orders, pen, ps, basis, S, desc)
        res.term_names = [[all_names[j] for j in t] for t in sets[0]]
    else:
        ps = [sets[0][i].size for i in range(len(orders))]
        union = [np.unique(np.concatenate([sets[s][i] for s in range(S)]))
                 for i in range(len(orders))]
        res = _empty_result(orders, pen, [u.size for u in union], basis, S, desc)
        res.parameters = np.array(ps) + 1
        res.term_names = [[all_names[j] for j in u] for u in union]
    res.n_train[:], res.n_valid[:] = n_t, n_v
    groups = [np.arange(S)] if shared else [np.array([s]) for s in range(S)]
    for i in range(len(orders)):
        for g in groups:
            terms = sets[int(g[0])][i]
            p = terms.size
            idx = np.r_[terms, last]
            nt, nv = n_t[g], n_v[g]
            mt, Mt = m_t[g][:, idx], M_t[g][:, idx][:, :, idx]
            mv, Mv = m_v[g][:, idx], M_v[g][:, idx][:, :, idx]
            fit = _fit_penalties(nt, mt, Mt, p, A[np.ix_(terms, terms)], a0[terms], pen)
            res.train_mse[i][:, g] = (_sse(nt, mt, Mt, p, mt, fit.beta_u) / nt[:, None]).T
            sse_v = _sse(nv, mv, Mv, p, mt, fit.beta_u)
            res.valid_mse[i][:, g] = (sse_v / nv[:, None]).T
            syy = Mv[:, -1, -1][:, None]
            with np.errstate(divide="ignore", invalid="ignore"):
                res.valid_r2[i][:, g] = np.where(
                    syy > 0, 1.0 - sse_v / np.where(syy > 0, syy, 1.0), np.nan).T
            res.edf[i][:, g] = fit.edf.T
            if shared:
                res.coef_std[i][:] = fit.w_std.transpose(2, 0, 1)
                res.coef_raw[i][:] = fit.beta_raw.transpose(2, 0, 1)
            else:
                pos = np.searchsorted(union[i], terms)
                res.coef_std[i][:, g[0], pos] = fit.w_std[0].T
                res.coef_raw[i][:, g[0], pos] = fit.beta_raw[0].T
            res.intercept_raw[i][:, g] = fit.intercept_raw.T
    return res


# ---------------------------------------------------------------------------
# the whole grid
# ---------------------------------------------------------------------------
@dataclass
class LadderDesign:
    """The full design of a many-axis request and its split summaries."""

    design: LaggedDesign
    basis: PolynomialBasis
    plan: FoldPlan
    targets: tuple[str, ...]
    statistics: list[tuple]      # per target: (n_t, m_t, M_t, n_v, m_v, M_v)


def full_design(X: np.ndarray, Y: np.ndarray, inputs: tuple[str, ...], targets: tuple[str, ...],
                lags: LagSpec | None, groups: np.ndarray | None) -> LaggedDesign:
    """The design at the deepest lag (or the inputs as they are, without lags)."""
    if lags is None:
        X = np.asarray(X, float)
        Yc = np.asarray(Y, float)
        Yc = Yc[:, None] if Yc.ndim == 1 else Yc
        d = X.shape[1]
        return LaggedDesign(X=X, columns=tuple(inputs), source=np.arange(d, dtype=np.int64),
                            lag=np.zeros(d, dtype=np.int64), Y=Yc,
                            kept=np.arange(X.shape[0]), rows_dropped=0)
    return build_lagged_design(X, Y, tuple(inputs), tuple(targets), lags, groups)


def summarise(design: LaggedDesign, basis: PolynomialBasis, plan: FoldPlan,
              progress=None) -> list[tuple]:
    """Split summaries of every target from one pass over the rows."""
    P = basis.n_terms
    stats = []
    for r, rnd in enumerate(plan.rounds):
        stats.append(piece_statistics(basis, design.X, design.Y, rnd.pieces, rnd.n_pieces))
        if progress:
            progress(0.7 * (r + 1) / len(plan.rounds), "Summarising rows")
    out = []
    for t in range(design.Y.shape[1]):
        tr, va = [], []
        for r, rnd in enumerate(plan.rounds):
            st = target_moments(stats[r], P, t)
            sel = [j for rr, j in plan.split_round if rr == r]
            tr.append(combine_batch(st, rnd.train[sel]))
            va.append(combine_batch(st, rnd.valid[sel]))
        n_t, m_t, M_t = (np.concatenate([x[i] for x in tr]) for i in range(3))
        n_v, m_v, M_v = (np.concatenate([x[i] for x in va]) for i in range(3))
        out.append((n_t, m_t, M_t, n_v, m_v, M_v))
    return out


def run_ladder(design: LaggedDesign, basis: PolynomialBasis, plan: FoldPlan,
               targets: tuple[str, ...], inputs: tuple[str, ...], orders: list[int], penalties,
               lags: LagSpec | None = None, nested_inputs: str | None = None,
               progress=None) -> list[LadderResult]:
    """Every (rung, order, penalty, split) cell for every target.

    Parameters
    ----------
    design : the full design (`full_design`) on the rows every cell shares.
    basis : polynomial terms of every design column at the highest order.
    plan : the splits of ``design``'s rows.
    targets, inputs : names (``design.Y`` has one column per target).
    orders, penalties : the usual axes.
    lags : input and target lag depths to compare (``None``: no lag axis).
    nested_inputs : ``"lasso"`` or ``"given"`` to compare the first k inputs.

    Returns
    -------
    One `LadderResult` per target.
    """
    check_design_size(basis)
    if plan.loo:
        raise InputProblem("Lag depths, input counts and several targets are swept with "
                           "folds, not leave-one-out; choose k-fold, blocked folds or a "
                           "later-period holdout.", code="bad_scheme")
    pen = np.asarray(penalties, float)
    A, a0 = basis.raw_map()
    if not (np.all(np.isfinite(A)) and np.all(np.isfinite(a0))):
        raise InputProblem(
            f"Raw powers up to order {basis.max_order} of these columns are too large to "
            "compute in double precision. Rescale the inputs or lower the highest order.",
            code="values_too_large")
    stats_all = summarise(design, basis, plan, progress)
    S = plan.n_splits
    d = len(inputs)
    lagged_mask = np.array([(lags is None) or (not lags.inputs) or (n in lags.inputs)
                            for n in inputs])
    depth_pairs: list[tuple[int | None, int | None]]
    if lags is None:
        depth_pairs = [(None, None)]
    else:
        depth_pairs = list(itertools.product(lags.depths, lags.target_depths))
    # position of each input's current-value linear term in the full basis
    lin = np.array([int(np.flatnonzero((basis.terms.sum(axis=1) == 1) & (basis.terms[:, j] == 1))[0])
                    for j in range(d)])
    results = []
    for t, target in enumerate(targets):
        stats = stats_all[t]
        n_t, m_t, M_t = stats[:3]
        rankings = None
        ks: list[int | None] = [None]
        if nested_inputs is not None:
            ks = list(range(1, d + 1))
            if nested_inputs == "lasso":
                rankings = np.array([rank_inputs_by_lasso(n_t[s], m_t[s], M_t[s], lin)
                                     for s in range(S)])
            else:
                rankings = np.tile(np.arange(d), (S, 1))
        rungs, sweeps, cols_per_rung = [], [], []
        for (dx, dy), k in itertools.product(depth_pairs, ks):
            per_split_cols = []
            for s in range(S):
                use = np.ones(d, bool) if k is None else np.isin(np.arange(d), rankings[s][:k])
                if dx is None:
                    cols = np.flatnonzero(use)
                else:
                    cols = design.columns_for(dx, dy, t, lagged_mask)
                    src = design.source[cols]
                    cols = cols[(src < 0) | use[np.clip(src, 0, None)]]
                per_split_cols.append(cols)
            sets = [term_sets(basis, c, orders) for c in per_split_cols]
            sweeps.append(_rung_result(stats, S, basis, A, a0, sets, orders, pen,
                                       plan.description))
            rungs.append(Rung(target=target, lags=dx, target_lags=dy, inputs_used=k))
            cols_per_rung.append(per_split_cols)
        notes = []
        if design.note:
            notes.append(design.note)
        if nested_inputs == "lasso":
            notes.append("Inputs are ranked inside each split, on its training rows only, by the "
                         "order in which they enter the lasso path (never on all rows), so the "
                         "validation rows play no part in choosing the first k inputs.")
        elif nested_inputs == "given":
            notes.append("The first k inputs are taken in the order the inputs were listed.")
        results.append(LadderResult(
            target=target, rungs=rungs, sweeps=sweeps, columns=design.columns,
            rung_columns=cols_per_rung, rankings=rankings, ranking_method=nested_inputs,
            repeats=len(plan.rounds) if plan.kind == "repeated" else 1, notes=notes))
        if progress:
            progress(0.7 + 0.3 * (t + 1) / len(targets), f"Fitting target {target}")
    return results
