"""The sweep: every (order, penalty, fold) cell from per-piece statistics.

One pass over the rows gives per-piece summaries of the highest-order design;
training and validation summaries of each split are combinations of pieces;
every lower order is a leading block; one symmetric eigen-decomposition per
(order, split) serves every penalty. Penalties are scikit-learn ``Ridge``
``alpha`` on raw-power terms standardised on the training rows, with an
unpenalised intercept.
"""
from __future__ import annotations

from dataclasses import dataclass, field
from typing import Callable

import numpy as np
import pandas as pd

from .design import PolynomialBasis
from .errors import InputProblem
from .families import FamilyFit, RawMap, TermSummary, fit_family, ridge, sse
from .moments import Moments, combine_batch, design_moments
from .rungs import TermSet
from .rungs import order as order_rung
from .penalty_range import data_penalties
from .recommend import SplitErrors
from .schemes import FoldPlan

Progress = Callable[[float, str], None]

#: Most design terms swept. The rows are summarised in chunks (the full design is
#: never formed) and every factorisation is terms x terms, so the limit is set by
#: the per-fold cross-product matrices (8 * terms^2 bytes each) and the time of
#: the eigen-decompositions; 2,500 terms ran on a 2-core, 24 GB machine.
MAX_TERMS = 2500
RIDGE_ONLY: tuple[tuple[str, float], ...] = (("ridge", 0.0),)


# ---------------------------------------------------------------------------
# private solvers (thin wrappers over engine.families, kept for callers that
# summarise leading blocks of one order)
# ---------------------------------------------------------------------------
_CellFit = FamilyFit


def _fit_penalties(n_t: np.ndarray, mean_t: np.ndarray, M_t: np.ndarray, p: int,
                   A: np.ndarray, a0: np.ndarray, penalties: np.ndarray,
                   keep_leverage: bool = False) -> FamilyFit:
    """Ridge fits of the leading ``p`` terms (see `engine.families.ridge.fit`)."""
    summary = TermSummary(n_t, mean_t, M_t)
    raw = RawMap.select(A, a0, np.arange(p), summary.n_sets)
    return ridge.fit(summary, raw, np.asarray(penalties, float), keep_leverage=keep_leverage)


def _sse(n_s: np.ndarray, mean_s: np.ndarray, M_s: np.ndarray, p: int, mean_t: np.ndarray,
         beta_u: np.ndarray) -> np.ndarray:
    """Sums of squared errors from summaries (see `engine.families.base.sse`)."""
    return sse(TermSummary(n_s, mean_s, M_s), mean_t, beta_u)


# ---------------------------------------------------------------------------
# results
# ---------------------------------------------------------------------------
@dataclass
class SweepResult:
    """Every cell of a sweep, per split, with tables for charting.

    Arrays are indexed ``[term set, setting, split]``: a term set is one rung
    of the ladder (today one order; ``rung_keys`` hold its coordinates), a
    setting one (family, l1_ratio, penalty) triple. Rows of
    `validation_table` run over term sets, then settings (row ``i * K + k``).
    """

    orders: list[int]
    penalties: np.ndarray             # (K,) penalty of each setting
    parameters: np.ndarray            # (O,) terms + intercept
    term_names: list[list[str]]       # per term set
    n_train: np.ndarray               # (S,)
    n_valid: np.ndarray               # (S,)
    train_mse: np.ndarray             # (O, K, S)
    valid_mse: np.ndarray             # (O, K, S); for leave-one-out S = 1 (pooled)
    valid_r2: np.ndarray              # (O, K, S)
    edf: np.ndarray                   # (O, K, S)
    coef_std: list[np.ndarray]        # per term set (K, S, p)
    coef_raw: list[np.ndarray]        # per term set (K, S, p)
    intercept_raw: np.ndarray         # (O, K, S)
    loo: bool = False
    loo_se: np.ndarray | None = None  # (O, K) standard error of the LOO mean
    plan_description: str = ""
    notes: list[str] = field(default_factory=list)
    families: list[str] | None = None     # (K,) family of each setting; None = all ridge
    l1_ratios: np.ndarray | None = None   # (K,) mixing parameter (0 for ridge)
    rung_keys: list[dict] | None = None   # (O,) coordinates of each term set
    repeats: int = 1                  # repetitions of a k-fold partition (repeated k-fold)
    # one split or leave-one-out: per-row squared errors on the validation rows,
    # summarised over rows (cells in validation-table order)
    row_count: int = 0
    row_sum: np.ndarray | None = None        # (O*K,) sum of squared errors
    row_comoment: np.ndarray | None = None   # (O*K, O*K) centred co-moment of squared errors
    statistics: tuple | None = field(default=None, repr=False)   # split summaries
    row_fits: list | None = field(default=None, repr=False)      # one split: fits for the row pass
    pieces: list | None = field(default=None, repr=False)        # per-round piece summaries
    # leave-one-out: (n, cells) squared error of each held-out row (NaN where undefined),
    # columns in validation-table order
    loo_rows: np.ndarray | None = field(default=None, repr=False)

    def __post_init__(self) -> None:
        K = int(np.asarray(self.penalties).size)
        if self.families is None:
            self.families = ["ridge"] * K
        if self.l1_ratios is None:
            self.l1_ratios = np.zeros(K)
        if self.rung_keys is None:
            self.rung_keys = [{"order": int(q)} for q in self.orders]

    def _extra_keys(self) -> list[str]:
        keys: list[str] = []
        for k in self.rung_keys or []:
            keys += [name for name in k if name != "order" and name not in keys]
        return keys

    def _cell_columns(self, oi: np.ndarray, ki: np.ndarray) -> dict:
        cols = {"order": np.asarray(self.orders, dtype=int)[oi]}
        cols["family"] = np.asarray(self.families, dtype=object)[ki]
        cols["l1_ratio"] = np.asarray(self.l1_ratios, dtype=float)[ki]
        cols["penalty"] = np.asarray(self.penalties, dtype=float)[ki]
        for name in self._extra_keys():
            cols[name] = np.array([self.rung_keys[i].get(name) for i in oi], dtype=object)
        return cols

    def at_settings(self, keep: list[int]) -> "SweepResult":
        """The settings ``keep`` (family, l1_ratio, penalty) of every term set, as a sweep."""
        pick = np.asarray([int(k) for k in keep], dtype=np.int64)
        return SweepResult(
            orders=list(self.orders), penalties=np.asarray(self.penalties)[pick],
            parameters=self.parameters, term_names=self.term_names, n_train=self.n_train,
            n_valid=self.n_valid, train_mse=self.train_mse[:, pick],
            valid_mse=self.valid_mse[:, pick], valid_r2=self.valid_r2[:, pick],
            edf=self.edf[:, pick], coef_std=[c[pick] for c in self.coef_std],
            coef_raw=[c[pick] for c in self.coef_raw], intercept_raw=self.intercept_raw[:, pick],
            loo=self.loo, loo_se=None if self.loo_se is None else self.loo_se[:, pick],
            plan_description=self.plan_description, notes=list(self.notes),
            families=[self.families[k] for k in pick], l1_ratios=np.asarray(self.l1_ratios)[pick],
            rung_keys=self.rung_keys,
            loo_rows=None if self.loo_rows is None else self.loo_rows.reshape(
                self.loo_rows.shape[0], len(self.orders), -1)[:, :, pick].reshape(
                self.loo_rows.shape[0], -1))

    @property
    def n_splits(self) -> int:
        """Number of train/validation splits: for leave-one-out, one per held-out row."""
        if self.loo:
            return int(self.n_train[0]) + 1
        return int(self.n_train.size)

    def validation_errors(self) -> np.ndarray:
        """(cells, splits) validation MSE, rows aligned with `validation_table`."""
        O, K, S = self.valid_mse.shape
        return self.valid_mse.reshape(O * K, S)

    def split_errors(self) -> SplitErrors:
        """Per-split validation MSE with what the paired rule needs, rows aligned with
        `validation_table`.

        For a single split and for leave-one-out it also carries the per-row
        sums that give paired standard errors (see `engine.recommend`).
        """
        return SplitErrors(self.validation_errors().copy(), self.n_train.copy(),
                           self.n_valid.copy(), repeats=int(self.repeats),
                           row_count=int(self.row_count), row_sum=self.row_sum,
                           row_comoment=self.row_comoment)

    def validation_table(self) -> pd.DataFrame:
        """One row per cell (term set x setting): mean errors across splits and their SE."""
        O, K, S = self.valid_mse.shape

        def se(a):
            if S < 2:
                return np.full((O, K), np.nan)
            return np.std(a, axis=2, ddof=1) / np.sqrt(S)

        vm = self.valid_mse.mean(axis=2)
        v_se = self.loo_se if self.loo else se(self.valid_mse)
        if not self.loo and S == 1 and self.row_count > 1 and self.row_comoment is not None:
            # one split: standard error of the mean over its validation rows
            n = float(self.row_count)
            v_se = np.sqrt(np.clip(np.diagonal(self.row_comoment), 0, None)
                           / (n - 1.0) / n).reshape(O, K)
        t_se = np.zeros((O, K)) if self.loo else se(self.train_mse)
        r2 = self.valid_r2
        finite = np.isfinite(r2)
        with np.errstate(invalid="ignore"):
            r2m = np.where(finite, r2, 0.0).sum(axis=2) / finite.sum(axis=2)
        oi = np.repeat(np.arange(O), K)
        ki = np.tile(np.arange(K), O)
        cols = self._cell_columns(oi, ki)
        return pd.DataFrame({
            "order": cols["order"],
            "penalty": cols["penalty"],
            "parameters": np.repeat(self.parameters, K).astype(int),
            "effective_df": self.edf.mean(axis=2).ravel(),
            "train_mse": self.train_mse.mean(axis=2).ravel(),
            "train_mse_se": t_se.ravel(),
            "validation_mse": vm.ravel(),
            "validation_mse_se": np.asarray(v_se).ravel(),
            "validation_rmse": np.sqrt(vm).ravel(),
            "validation_r2": r2m.ravel(),
            "folds": self.n_splits,
            **{k: v for k, v in cols.items() if k not in ("order", "penalty")},
        })

    def fold_table(self) -> pd.DataFrame:
        """Long table: one row per (cell, split).

        For leave-one-out a split is one held-out row: one row per (cell, held-out
        row), ``fold`` the row's number (1-based, in the order of the prepared data),
        ``validation_mse`` its squared leave-one-out error (empty where the model
        passes through the row exactly), ``validation_r2`` empty (one row has no R²)
        and ``train_mse`` that of the fit on all rows, as in the validation table.
        """
        O, K, S = self.valid_mse.shape
        if self.loo and self.loo_rows is not None:
            n = self.loo_rows.shape[0]
            cell = np.repeat(np.arange(O * K), n)
            oi, ki = cell // K, cell % K
            cols = self._cell_columns(oi, ki)
            return pd.DataFrame({
                "order": cols["order"],
                "penalty": cols["penalty"],
                "fold": np.tile(np.arange(1, n + 1), O * K),
                "train_mse": self.train_mse[oi, ki, 0],
                "validation_mse": self.loo_rows.T.ravel(),
                "validation_r2": np.full(cell.size, np.nan),
                "n_train": np.full(cell.size, n - 1),
                "n_validation": np.ones(cell.size, dtype=int),
                **{k: v for k, v in cols.items() if k not in ("order", "penalty")},
            })
        oi, ki, si = np.meshgrid(np.arange(O), np.arange(K), np.arange(S), indexing="ij")
        cols = self._cell_columns(oi.ravel(), ki.ravel())
        return pd.DataFrame({
            "order": cols["order"],
            "penalty": cols["penalty"],
            "fold": si.ravel() + 1,
            "train_mse": self.train_mse.ravel(),
            "validation_mse": self.valid_mse.ravel(),
            "validation_r2": self.valid_r2.ravel(),
            "n_train": self.n_train[si.ravel()],
            "n_validation": self.n_valid[si.ravel()],
            **{k: v for k, v in cols.items() if k not in ("order", "penalty")},
        })

    def coefficient_table(self) -> pd.DataFrame:
        """Coefficients per (order, penalty, term): mean and SD across splits.

        ``std_*`` are on training-standardised terms (comparable across terms);
        ``raw_*`` in original units of the inputs and target.
        """
        frames = []
        for i, q in enumerate(self.orders):
            names = ["intercept"] + self.term_names[i]
            cs = self.coef_std[i]   # (K, S, p)
            cr = self.coef_raw[i]
            K, S, p = cs.shape
            std = np.concatenate([np.full((K, S, 1), np.nan), cs], axis=2)
            raw = np.concatenate([self.intercept_raw[i][:, :, None], cr], axis=2)
            sd = (lambda a: np.std(a, axis=1, ddof=1)) if S > 1 else (lambda a: np.zeros_like(a[:, 0]))
            cols = self._cell_columns(np.full(K * (p + 1), i), np.repeat(np.arange(K), p + 1))
            frames.append(pd.DataFrame({
                "order": q,
                "penalty": np.repeat(self.penalties, p + 1),
                "term": np.tile(names, K),
                "std_mean": std.mean(axis=1).ravel(),
                "std_sd": sd(std).ravel(),
                "raw_mean": raw.mean(axis=1).ravel(),
                "raw_sd": sd(raw).ravel(),
                **{k: v for k, v in cols.items() if k not in ("order", "penalty")},
            }))
        return pd.concat(frames, ignore_index=True)


# ---------------------------------------------------------------------------
# statistics and public entry points
# ---------------------------------------------------------------------------
def piece_statistics(basis: PolynomialBasis, X: np.ndarray, y: np.ndarray,
                     pieces: np.ndarray, n_pieces: int, chunk_rows: int = 32768,
                     U: np.ndarray | None = None) -> Moments:
    """Per-piece summaries of ``[terms(X), y]`` at the basis's highest order
    (``U``: ``basis.scale(X)`` when the caller already has it; otherwise each chunk of
    rows is scaled where it was gathered, the same values, and no scaled copy of ``X``
    is made)."""
    P = basis.n_terms
    if U is None:
        return design_moments(np.asarray(X, dtype=float), np.asarray(y, float), pieces,
                              n_pieces, lambda Xc, out: basis.expand_scaled(
                                  basis.scale(Xc, out=Xc), out=out), P, chunk_rows=chunk_rows)
    return design_moments(U, np.asarray(y, float), pieces, n_pieces,
                          lambda Uc, out: basis.expand_scaled(Uc, out=out), P,
                          chunk_rows=chunk_rows)


def check_design_size(basis: PolynomialBasis) -> None:
    if basis.n_terms > MAX_TERMS:
        raise InputProblem(
            f"The highest order gives {basis.n_terms} terms, more than the {MAX_TERMS} this "
            "tool sweeps. Lower the maximum order, choose fewer inputs, or switch off "
            "interaction terms.", code="too_many_terms")


def settings_grid(penalties, families=RIDGE_ONLY) -> tuple[list[str], np.ndarray, np.ndarray]:
    """The settings axis: every (family, l1_ratio) pair times every penalty.

    Returns ``(family (K,), l1_ratio (K,), penalty (K,))``, pairs outermost.
    """
    pen = np.asarray(penalties, float)
    fam: list[str] = []
    l1: list[float] = []
    for f, r in families:
        fam += [str(f)] * pen.size
        l1 += [float(r)] * pen.size
    return fam, np.asarray(l1, float), np.tile(pen, len(families))


def fit_settings(summary: TermSummary, raw: RawMap, penalties: np.ndarray,
                 families=RIDGE_ONLY, keep_leverage: bool = False) -> FamilyFit:
    """Fits of one term set for every setting (family pairs outermost), batched over sets."""
    fits = [fit_family(f, summary, raw, penalties, l1_ratio=r, keep_leverage=keep_leverage)
            for f, r in families]
    if len(fits) == 1:
        return fits[0]
    out = FamilyFit(*(np.concatenate([getattr(ft, name) for ft in fits], axis=-1)
                      for name in ("beta_u", "w_std", "beta_raw", "intercept_raw", "edf")))
    return out


def run_sweep(X: np.ndarray, y: np.ndarray, basis: PolynomialBasis, plan: FoldPlan,
              orders: list[int], penalties, progress: Progress | None = None,
              families=RIDGE_ONLY, term_sets: list[TermSet] | None = None,
              statistics: tuple | None = None) -> SweepResult:
    """Validation errors and coefficients for every (term set, setting, split).

    Parameters
    ----------
    X : (n, d) raw inputs; y : (n,) target.
    basis : the design at the highest order (all terms).
    plan : the splits (`engine.schemes.make_plan`).
    orders : orders to report (each <= basis.max_order); ignored when
        ``term_sets`` is given.
    penalties : penalties of every family, 0 = none; empty: penalty 0 plus a
        range fitted to the training summaries (`engine.penalty_range`).
    progress : called as ``progress(fraction_done, message)``.
    families : (family, l1_ratio) pairs (see `engine.families`); ridge only by default.
    term_sets : index sets of the full design, one per rung (default: one per order,
        `engine.rungs.order.term_sets`).
    statistics : ``SweepResult.statistics`` of an earlier sweep of the same
        rows, plan and basis: the grid follows from them without reading the
        rows again (used to widen a penalty range).

    Returns
    -------
    SweepResult
    """
    check_design_size(basis)
    X = np.asarray(X, float)
    y = np.asarray(y, float)
    pen = np.asarray(penalties, float)
    families = tuple((str(f), float(r)) for f, r in families)
    if term_sets is None:
        term_sets = order_rung.term_sets(basis, orders)
    A, a0 = basis.raw_map()
    if not (np.all(np.isfinite(A)) and np.all(np.isfinite(a0))):
        raise InputProblem(
            f"Raw powers up to order {basis.max_order} of these inputs are too large to "
            "compute in double precision. Rescale the inputs (for example to thousands, or "
            "subtract a reference value) or lower the highest order.", code="values_too_large")
    if plan.loo:
        return _loo_sweep(X, y, basis, term_sets, pen, families, A, a0, progress,
                          plan.description)
    stats = None
    if statistics is None:
        stats = []
        for r, rnd in enumerate(plan.rounds):
            stats.append(piece_statistics(basis, X, y, rnd.pieces, rnd.n_pieces))
            if progress:
                progress(0.8 * (r + 1) / len(plan.rounds), "Summarising rows")
        statistics = split_summaries(stats, plan)
    if pen.size == 0:
        n_t, m_t, M_t = statistics[:3]
        if all(f == "ridge" for f, _ in families):
            pen = np.asarray(data_penalties(n_t, m_t, M_t, A, a0, term_sets), float)
        else:   # the derived range is on ridge's scale; lasso and elastic net keep the default
            from .spec import default_penalties
            pen = np.asarray(default_penalties(), float)
    res = sweep_summaries(statistics, term_sets, A, a0, pen, families,
                          plan.description, progress)
    res.repeats = len(plan.rounds) if plan.kind == "repeated" else 1
    res.pieces = stats
    add_row_errors(res, X, y, basis, plan)
    return res


def add_row_errors(res: SweepResult, X: np.ndarray, y: np.ndarray, basis: PolynomialBasis,
                   plan: FoldPlan) -> None:
    """For a single split, summarise every cell's per-row squared error on its validation rows.

    Fills ``res.row_count``, ``row_sum`` and ``row_comoment`` (the paired rule's
    standard errors); ``X`` must be the rows ``basis`` expands into the full design.
    """
    if res.row_fits is None or plan.loo or plan.n_splits != 1:
        return
    rows = plan.valid_sets[0]
    res.row_count, res.row_sum, res.row_comoment = _row_squared_errors(
        np.asarray(X, float), np.asarray(y, float), basis, rows, res.row_fits)
    res.row_fits = None


def _merge_moments(a: tuple, b: tuple) -> tuple:
    """Pairwise update of (count, mean, centred co-moment) summaries."""
    na, ma, Ma = a
    nb, mb, Mb = b
    if na == 0:
        return b
    n = na + nb
    d = mb - ma
    return n, ma + d * (nb / n), Ma + Mb + (na * nb / n) * np.outer(d, d)


def _row_squared_errors(X: np.ndarray, y: np.ndarray, basis: PolynomialBasis, rows: np.ndarray,
                        fits: list[tuple[np.ndarray, np.ndarray, np.ndarray]],
                        chunk_rows: int = 8192) -> tuple[int, np.ndarray, np.ndarray]:
    """Count, sum and centred co-moment of every cell's squared error over ``rows``.

    ``fits`` holds, per term set, ``(index into the full design (p,), training
    means (p+1,) with the target last, beta_u (p, K))``; cells follow in
    validation-table order. Rows are read in chunks, so only a (cells x cells)
    matrix is kept, never rows x cells.
    """
    C = sum(b.shape[1] for _, _, b in fits)
    acc: tuple = (0, np.zeros(C), np.zeros((C, C)))
    for start in range(0, rows.size, chunk_rows):
        r = rows[start:start + chunk_rows]
        F = basis.expand(X[r])
        cols = []
        for idx, mt, bu in fits:
            e = (y[r] - mt[-1])[:, None] - (F[:, idx] - mt[:-1]) @ bu
            cols.append(e * e)
        Z = np.hstack(cols)
        mz = Z.mean(axis=0)
        Zc = Z - mz
        acc = _merge_moments(acc, (r.size, mz, Zc.T @ Zc))
    n, mean, M = acc
    return int(n), mean * n, M


def split_summaries(stats: list[Moments], plan: FoldPlan) -> tuple[np.ndarray, ...]:
    """Training and validation summaries of every split from per-piece summaries.

    ``stats[r]`` are the piece summaries of round ``r`` of ``plan``. Returns
    ``(n_t, m_t, M_t, n_v, m_v, M_v)`` with one entry per split.
    """
    tr = [combine_batch(stats[r], plan.rounds[r].train[[j for rr, j in plan.split_round if rr == r]])
          for r in range(len(plan.rounds))]
    va = [combine_batch(stats[r], plan.rounds[r].valid[[j for rr, j in plan.split_round if rr == r]])
          for r in range(len(plan.rounds))]
    n_t, m_t, M_t = (np.concatenate([t[i] for t in tr]) for i in range(3))
    n_v, m_v, M_v = (np.concatenate([v[i] for v in va]) for i in range(3))
    return n_t, m_t, M_t, n_v, m_v, M_v


def sweep_summaries(summaries: tuple[np.ndarray, ...], term_sets: list[TermSet], A: np.ndarray,
                    a0: np.ndarray, pen: np.ndarray, families=RIDGE_ONLY, description: str = "",
                    progress: Progress | None = None) -> SweepResult:
    """Every (term set, setting, split) cell from the split summaries of the full design.

    Parameters
    ----------
    summaries : ``(n_t, m_t, M_t, n_v, m_v, M_v)`` of `split_summaries`, the
        target in the last column.
    term_sets : index sets of the full design, one per rung.
    A, a0 : the full design's raw map (`PolynomialBasis.raw_map`).
    pen : penalties; families : (family, l1_ratio) pairs.
    description : the plan's sentence.
    """
    n_t, m_t, M_t, n_v, m_v, M_v = summaries
    S = n_t.shape[0]
    families = tuple((str(f), float(r)) for f, r in families)
    res = _empty_result(term_sets, pen, families, S, description)
    res.n_train[:], res.n_valid[:] = n_t, n_v
    res.statistics = summaries
    one_split = S == 1 and all(np.asarray(ts.index).ndim == 1 for ts in term_sets)
    res.row_fits = [] if one_split else None
    for i, ts in enumerate(term_sets):
        train = TermSummary.select(n_t, m_t, M_t, ts.index)
        valid = TermSummary.select(n_v, m_v, M_v, ts.index)
        raw = RawMap.select(A, a0, ts.index, S)
        fit = fit_settings(train, raw, pen, families)
        res.train_mse[i] = (sse(train, train.mean, fit.beta_u) / n_t[:, None]).T
        sse_v = sse(valid, train.mean, fit.beta_u)
        res.valid_mse[i] = (sse_v / n_v[:, None]).T
        syy = valid.M[:, -1, -1][:, None]
        with np.errstate(divide="ignore", invalid="ignore"):
            res.valid_r2[i] = np.where(syy > 0, 1.0 - sse_v / np.where(syy > 0, syy, 1.0),
                                       np.nan).T
        res.edf[i] = fit.edf.T
        res.coef_std[i][:] = fit.w_std.transpose(2, 0, 1)
        res.coef_raw[i][:] = fit.beta_raw.transpose(2, 0, 1)
        res.intercept_raw[i] = fit.intercept_raw.T
        if res.row_fits is not None:
            res.row_fits.append((np.asarray(ts.index), train.mean[0], fit.beta_u[0]))
        if progress:
            progress(0.8 + 0.2 * (i + 1) / len(term_sets), _fit_message(ts))
    return res


def _fit_message(ts: TermSet) -> str:
    return "Fitting " + ", ".join(f"{k} {v}" for k, v in ts.key.items())


def _empty_result(term_sets: list[TermSet], pen, families, S, desc) -> SweepResult:
    fam, l1, pens = settings_grid(pen, families)
    ps = [ts.n_terms for ts in term_sets]
    O, K = len(term_sets), pens.size
    return SweepResult(
        orders=[int(ts.key.get("order", 0)) for ts in term_sets], penalties=pens,
        parameters=np.array(ps, dtype=int) + 1,
        term_names=[list(ts.names) for ts in term_sets],
        n_train=np.zeros(S), n_valid=np.zeros(S),
        train_mse=np.zeros((O, K, S)), valid_mse=np.zeros((O, K, S)),
        valid_r2=np.zeros((O, K, S)), edf=np.zeros((O, K, S)),
        coef_std=[np.zeros((K, S, p)) for p in ps], coef_raw=[np.zeros((K, S, p)) for p in ps],
        intercept_raw=np.zeros((O, K, S)), plan_description=desc,
        families=fam, l1_ratios=l1, rung_keys=[dict(ts.key) for ts in term_sets])


def _loo_sweep(X, y, basis, term_sets, pen, families, A, a0, progress, desc) -> SweepResult:
    """Exact leave-one-out from the hat-matrix identity, one fit per term set (ridge)."""
    if any(f != "ridge" for f, _ in families):
        raise InputProblem(
            "Leave-one-out is computed exactly only for ridge; for lasso or elastic net "
            "choose shuffled k-fold (for example 10 folds) or leave those families out.",
            code="loo_family")
    n = y.size
    stats = piece_statistics(basis, X, y, np.zeros(n, dtype=np.int64), 1)
    n_t, m_t, M_t = stats.n, stats.mean, stats.comoment      # one set: all rows
    if pen.size == 0:
        pen = np.asarray(data_penalties(n_t, m_t, M_t, A, a0, term_sets), float)
    res = _empty_result(term_sets, pen, families, 1, desc)
    res.loo = True
    res.loo_se = np.zeros((len(term_sets), pen.size))
    res.n_train[0], res.n_valid[0] = n - 1, 1
    F = basis.expand(X)
    Fc = F - m_t[0, :-1]
    yc = y - m_t[0, -1]
    sst = M_t[0, -1, -1]
    flagged = 0
    per_row: list[np.ndarray] = []
    for i, ts in enumerate(term_sets):
        idx = np.asarray(ts.index)
        p = idx.size
        train = TermSummary.select(n_t, m_t, M_t, idx)
        raw = RawMap.select(A, a0, idx, 1)
        fit = ridge.fit(train, raw, pen, keep_leverage=True)
        Fi = Fc[:, idx]
        E = yc[:, None] - Fi @ fit.beta_u[0]          # (n, K) residuals
        H = np.full((n, pen.size), 1.0 / n)
        if p:
            if fit.lev_u is not None:
                du, Q, inv = (v[0] for v in fit.lev_u)
                TQ = (Fi / du) @ Q
                H[:, pen == 0] += ((TQ * TQ) @ inv)[:, None]
            if fit.lev_raw is not None:
                As, ds, Q, lam = (v[0] for v in fit.lev_raw)
                TQ = ((Fi @ As.T) / ds) @ Q
                H[:, pen > 0] += (TQ * TQ) @ (1.0 / (lam[:, None] + pen[pen > 0][None, :]))
        denom = 1.0 - H
        bad = denom < 1e-10
        flagged = max(flagged, int(bad.any(axis=1).sum()))
        R = np.where(bad, np.nan, E / np.where(bad, 1.0, denom))
        sq = R * R
        per_row.append(sq)
        res.valid_mse[i, :, 0] = np.nanmean(sq, axis=0)
        res.loo_se[i] = np.nanstd(sq, axis=0, ddof=1) / np.sqrt(np.sum(~bad, axis=0))
        res.valid_r2[i, :, 0] = 1.0 - np.nansum(sq, axis=0) / sst if sst > 0 else np.nan
        res.train_mse[i, :, 0] = np.mean(E * E, axis=0)
        res.edf[i, :, 0] = fit.edf[0]
        res.coef_std[i][:, 0, :] = fit.w_std[0].T
        res.coef_raw[i][:, 0, :] = fit.beta_raw[0].T
        res.intercept_raw[i, :, 0] = fit.intercept_raw[0]
        if progress:
            progress((i + 1) / len(term_sets), "Leave-one-out, " + _fit_message(ts)[8:])
    Z = np.hstack(per_row)
    del per_row
    res.loo_rows = Z.copy()    # each held-out row's squared error: the per-split table
    clean = np.all(np.isfinite(Z), axis=1)
    if clean.sum() > 1:
        Z = Z[clean]
        mz = Z.mean(axis=0)
        Z -= mz
        res.row_count, res.row_sum, res.row_comoment = int(Z.shape[0]), mz * Z.shape[0], Z.T @ Z
    del Z
    if flagged:
        res.notes.append(f"{flagged} rows have leverage 1 for some model (the model passes "
                         "through them exactly); their leave-one-out error is undefined and "
                         "left out of the mean.")
    if (pen > 0).any():
        res.notes.append("Leave-one-out with a penalty keeps the standardisation of all rows "
                         "fixed, as is usual for the closed-form leave-one-out of ridge.")
    res.notes.append("With leave-one-out the training error shown is that of the fit on all rows.")
    return res
