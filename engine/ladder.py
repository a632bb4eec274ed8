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
from dataclasses import dataclass, field

import numpy as np

from .design import PolynomialBasis
from .errors import InputProblem
from .lagged import LagSpec, LaggedDesign, build_lagged_design
from .moments import target_moments
from .schemes import FoldPlan
from .rungs import TermSet
from .sweep import (RIDGE_ONLY, SweepResult, check_design_size, piece_statistics,
                    split_summaries, sweep_summaries)

#: extra columns of the validation table (and keys of summary.json grid rows)
RUNG_COLUMNS = ("lags", "target_lags", "inputs_used", "target")


@dataclass
class LadderInfo:
    """What the grid of one target used beyond its table.

    Attributes
    ----------
    target : the column predicted.
    rung_columns : per rung key ``(lags, target_lags, inputs_used)``, the
        design columns of each split.
    rankings : (S, d) inputs ranked on each split's training rows, or None.
    ranking_method : ``"lasso"``, ``"given"`` or None.
    notes : plain sentences for the page and the pack.
    """

    target: str
    rung_columns: dict
    rankings: np.ndarray | None = None
    ranking_method: str | None = None
    notes: list[str] = field(default_factory=list)


# ---------------------------------------------------------------------------
# index sets of the full design
# ---------------------------------------------------------------------------
def column_terms(basis: PolynomialBasis, columns: np.ndarray, orders: list[int]) -> list[np.ndarray]:
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


# ---------------------------------------------------------------------------
# the whole grid
# ---------------------------------------------------------------------------
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
    """Split summaries of every target from one pass over the rows.

    Each target's summaries are bit for bit those of a single-target pass
    (`engine.moments.design_moments`).
    """
    P = basis.n_terms
    stats = []
    for r, rnd in enumerate(plan.rounds):
        stats.append(piece_statistics(basis, design.X, design.Y, rnd.pieces, rnd.n_pieces))
        if progress:
            progress(0.7 * (r + 1) / len(plan.rounds), "Summarising rows")
    return [split_summaries([target_moments(st, P, t) for st in stats], plan)
            for t in range(design.Y.shape[1])]


def run_ladder(design: LaggedDesign, basis: PolynomialBasis, plan: FoldPlan,
               targets: tuple[str, ...], inputs: tuple[str, ...], orders: list[int], penalties,
               lags: LagSpec | None = None, nested_inputs: str | None = None,
               families=RIDGE_ONLY, progress=None) -> list[tuple[SweepResult, LadderInfo]]:
    """Every (rung, order, setting, split) cell for every target.

    Parameters
    ----------
    design : the full design (`full_design`) on the rows every cell shares.
    basis : polynomial terms of every design column at the highest order.
    plan : the splits of ``design``'s rows.
    targets, inputs : names (``design.Y`` has one column per target).
    orders, penalties : the usual axes; families : (family, l1_ratio) pairs.
    lags : input and target lag depths to compare (``None``: no lag axis).
    nested_inputs : ``"lasso"`` or ``"given"`` to compare the first k inputs.

    Returns
    -------
    Per target, the `SweepResult` (rows of its tables run rung by rung, the
    rung's axes as columns) and the `LadderInfo`.
    """
    check_design_size(basis)
    if plan.loo:
        raise InputProblem("Lag depths and input counts are swept with folds, not "
                           "leave-one-out; choose k-fold, blocked folds or a later-period "
                           "holdout.", code="bad_scheme")
    pen = np.asarray(penalties, float)
    A, a0 = basis.raw_map()
    if not (np.all(np.isfinite(A)) and np.all(np.isfinite(a0))):
        raise InputProblem(
            f"Raw powers up to order {basis.max_order} of these columns are too large to "
            "compute in double precision. Rescale the inputs or lower the highest order.",
            code="values_too_large")
    summaries = summarise(design, basis, plan, progress)
    S = plan.n_splits
    d = len(inputs)
    lagged_mask = np.array([(lags is None) or (not lags.inputs) or (n in lags.inputs)
                            for n in inputs])
    if lags is None:
        depth_pairs: list[tuple[int | None, int | None]] = [(None, None)]
    else:
        depth_pairs = list(itertools.product(lags.depths, lags.target_depths))
    lin = linear_terms(basis, d)
    names = basis.names()
    out = []
    for t, target in enumerate(targets):
        n_t, m_t, M_t = summaries[t][:3]
        rankings = None
        ks: list[int | None] = [None]
        if nested_inputs is not None:
            ks = list(range(1, d + 1))
            if nested_inputs == "lasso":
                rankings = np.array([rank_inputs_by_lasso(n_t[s], m_t[s], M_t[s], lin)
                                     for s in range(S)])
            else:
                rankings = np.tile(np.arange(d), (S, 1))
        sets: list[TermSet] = []
        rung_columns = {}
        for (dx, dy), k in itertools.product(depth_pairs, ks):
            per_split = []
            for s in range(S):
                use = np.ones(d, bool) if k is None else np.isin(np.arange(d), rankings[s][:k])
                if dx is None:
                    cols = np.flatnonzero(use)
                else:
                    cols = design.columns_for(dx, dy, t, lagged_mask)
                    src = design.source[cols]
                    cols = cols[(src < 0) | use[np.clip(src, 0, None)]]
                per_split.append(cols)
            rung_columns[(dx, dy, k)] = per_split
            key = {}
            if dx is not None:
                key.update(lags=int(dx), target_lags=int(dy))
            if k is not None:
                key["inputs_used"] = int(k)
            key["target"] = target
            by_split = [column_terms(basis, c, orders) for c in per_split]
            for i, q in enumerate(orders):
                idx = [b[i] for b in by_split]
                if all(np.array_equal(idx[0], x) for x in idx[1:]):
                    sets.append(TermSet({"order": int(q), **key}, idx[0],
                                        [names[j] for j in idx[0]]))
                else:   # chosen inside each split: positions hold different terms per split
                    sets.append(TermSet({"order": int(q), **key}, np.stack(idx),
                                        [f"term {j + 1} (per-split inputs)"
                                         for j in range(idx[0].size)]))
        res = sweep_summaries(summaries[t], sets, A, a0, pen, families, plan.description)
        notes = []
        if design.note:
            notes.append(design.note)
        if nested_inputs == "lasso":
            notes.append("Inputs are ranked inside each split, on its training rows only, by the "
                         "order in which they enter the lasso path (never on all rows), so the "
                         "validation rows play no part in choosing the first k inputs.")
        elif nested_inputs == "given":
            notes.append("The first k inputs are taken in the order the inputs were listed.")
        out.append((res, LadderInfo(target, rung_columns, rankings, nested_inputs, notes)))
        if progress:
            progress(0.7 + 0.3 * (t + 1) / len(targets), f"Fitting target {target}")
    return out


def linear_terms(basis: PolynomialBasis, d: int) -> np.ndarray:
    """Position of the linear term of each of the first ``d`` design columns."""
    deg = basis.terms.sum(axis=1)
    return np.array([int(np.flatnonzero((deg == 1) & (basis.terms[:, j] == 1))[0])
                     for j in range(d)])


def subset_sweep(res: SweepResult, keep: list[int]) -> SweepResult:
    """The term sets ``keep`` of a sweep (every setting and split), as a sweep of their own."""
    keep = [int(i) for i in keep]
    pick = np.asarray(keep, dtype=np.int64)
    return SweepResult(
        orders=[res.orders[i] for i in keep], penalties=res.penalties,
        parameters=np.asarray(res.parameters)[pick], term_names=[res.term_names[i] for i in keep],
        n_train=res.n_train, n_valid=res.n_valid, train_mse=res.train_mse[pick],
        valid_mse=res.valid_mse[pick], valid_r2=res.valid_r2[pick], edf=res.edf[pick],
        coef_std=[res.coef_std[i] for i in keep], coef_raw=[res.coef_raw[i] for i in keep],
        intercept_raw=res.intercept_raw[pick], loo=res.loo,
        loo_se=None if res.loo_se is None else res.loo_se[pick],
        plan_description=res.plan_description, notes=list(res.notes),
        families=res.families, l1_ratios=res.l1_ratios,
        rung_keys=[res.rung_keys[i] for i in keep])


#: axes a grid may have, in the order the page offers them
GRID_AXES = ("order", "penalty", "lags", "target_lags", "inputs_used", "family", "l1_ratio")


def grid_axes(table) -> list[str]:
    """Axes of a validation table with more than one value."""
    return [k for k in GRID_AXES if k in table.columns and table[k].nunique(dropna=True) > 1]


def grid_slice(table, x: str, y: str, fixed: dict):
    """Rows of a validation table with every axis but ``x`` and ``y`` held at ``fixed``.

    Axes not named in ``fixed`` (and not ``x`` or ``y``) must have a single
    value; the result has one row per (x, y) pair.
    """
    from .errors import InputProblem

    keep = np.ones(len(table), bool)
    for k in grid_axes(table):
        if k in (x, y):
            continue
        if k not in fixed:
            raise InputProblem(f"Hold the axis '{k}' at one value to draw the other two.",
                               code="bad_axes")
        v = fixed[k]
        col = table[k]
        keep &= (col.astype(str) == str(v)).to_numpy() if k == "family" else \
            np.isclose(col.astype(float).to_numpy(), float(v), rtol=1e-12, atol=0)
    out = table[keep]
    if out.duplicated([x, y]).any():  # pragma: no cover - guarded by grid_axes
        raise InputProblem("The chosen axes do not identify one cell each.", code="bad_axes")
    return out
