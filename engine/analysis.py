"""Public entry points: run a sweep request on prepared data."""
from __future__ import annotations

from dataclasses import dataclass, field, replace
from typing import Protocol

import numpy as np
import pandas as pd

from .design import PolynomialBasis
from .errors import InputProblem
from .final_fit import FinalModel, fit_final
from .moments import combine_batch
from .recommend import Recommendation, recommend
from .schemes import FoldPlan, make_plan
from .spec import SchemeSpec, SweepSpec
from .sweep import Progress, SweepResult, _fit_penalties, _sse, check_design_size, piece_statistics, run_sweep


class DataLike(Protocol):
    """What the engine needs of prepared data (see `engine.loading.PreparedData`)."""

    X: np.ndarray
    y: np.ndarray
    inputs: tuple[str, ...]
    target: str
    groups: np.ndarray | None
    split: np.ndarray | None


@dataclass
class ArrayData:
    """Prepared data from plain arrays (rows already in time order if that matters)."""

    X: np.ndarray
    y: np.ndarray
    inputs: tuple[str, ...] = ("x",)
    target: str = "y"
    groups: np.ndarray | None = None
    split: np.ndarray | None = None
    order: np.ndarray | None = None

    def __post_init__(self) -> None:
        self.X = np.asarray(self.X, dtype=float)
        if self.X.ndim == 1:
            self.X = self.X[:, None]
        self.y = np.asarray(self.y, dtype=float)
        if len(self.inputs) != self.X.shape[1]:
            self.inputs = tuple(f"x{j + 1}" for j in range(self.X.shape[1]))

    @property
    def n_rows(self) -> int:
        return int(self.y.size)


@dataclass
class Analysis:
    """Everything a sweep produced, ready for charts, packs and warnings.

    Attributes
    ----------
    spec : the request.
    sweep : per-split results (`engine.sweep.SweepResult`).
    validation : validation-curve table, one row per (order, penalty).
    recommendation : best and recommended cells.
    basis, plan : the design and the splits used.
    n_rows : rows used.
    notes : plain sentences about how the numbers were computed.
    """

    spec: SweepSpec
    sweep: SweepResult
    validation: pd.DataFrame
    recommendation: Recommendation
    basis: PolynomialBasis
    plan: FoldPlan
    n_rows: int
    notes: list[str] = field(default_factory=list)

    def cell_row(self, order: int, penalty: float) -> pd.Series:
        t = self.validation
        m = t[(t["order"] == order) & np.isclose(t["penalty"], penalty, rtol=1e-12, atol=0)]
        if m.empty:
            raise InputProblem(f"No cell with order {order} and penalty {penalty} in this sweep.",
                               code="unknown_cell")
        return m.iloc[0]


def _check_data(data: DataLike, spec: SweepSpec) -> None:
    X, y = np.asarray(data.X), np.asarray(data.y)
    if X.ndim != 2 or X.shape[0] != y.shape[0]:
        raise InputProblem("Inputs and target must have the same number of rows.",
                           code="shape_mismatch")
    if X.shape[1] != len(spec.inputs):
        raise InputProblem(f"The request names {len(spec.inputs)} inputs but the data have "
                           f"{X.shape[1]} input columns.", code="shape_mismatch")
    for j, name in enumerate(spec.inputs):
        if not np.all(np.isfinite(X[:, j])):
            bad = int(np.flatnonzero(~np.isfinite(X[:, j]))[0])
            raise InputProblem(f"Column '{name}' has a missing or infinite value in row {bad + 1}; "
                               "remove or fix it.", code="infinite", column=name, row=bad + 1)
    if not np.all(np.isfinite(y)):
        bad = int(np.flatnonzero(~np.isfinite(y))[0])
        raise InputProblem(f"Target '{spec.target}' has a missing or infinite value in row "
                           f"{bad + 1}; remove or fix it.", code="infinite",
                           column=spec.target, row=bad + 1)
    if y.size and np.ptp(y) == 0:
        raise InputProblem(f"Target '{spec.target}' has the same value in every row; there is "
                           "nothing to predict.", code="constant_target", column=spec.target)


def make_basis(data: DataLike, spec: SweepSpec) -> PolynomialBasis:
    """The design at the highest order of ``spec``."""
    basis = PolynomialBasis.fit(data.X, spec.inputs, max(spec.order_list()), spec.interactions)
    check_design_size(basis)
    return basis


def plan_for(data: DataLike, scheme: SchemeSpec, seed: int) -> FoldPlan:
    """The splits of ``scheme`` on ``data``."""
    return make_plan(scheme, len(data.y), seed=seed, groups=getattr(data, "groups", None),
                     split_labels=getattr(data, "split", None))


def analyse(data: DataLike, spec: SweepSpec, progress: Progress | None = None) -> Analysis:
    """Sweep every (order, penalty) cell of ``spec`` and recommend one.

    Parameters
    ----------
    data : prepared data (`engine.loading.prepare` or `ArrayData`).
    spec : the request.
    progress : called as ``progress(fraction_done, message)``.

    Returns
    -------
    Analysis

    Raises
    ------
    InputProblem
        For a request or data that cannot be swept, with a message naming the
        problem and what to do.
    """
    try:
        spec.validate()
        _check_data(data, spec)
        basis = make_basis(data, spec)
        plan = plan_for(data, spec.scheme, spec.seed)
        res = run_sweep(data.X, data.y, basis, plan, spec.order_list(), spec.penalties, progress)
    except InputProblem:
        raise
    except (ValueError, np.linalg.LinAlgError, MemoryError) as exc:  # pragma: no cover
        raise InputProblem(f"The sweep could not be computed: {exc}", code="sweep_failed") from exc
    table = res.validation_table()
    rec = recommend(table, float(np.mean(res.n_train)))
    return Analysis(spec=spec, sweep=res, validation=table, recommendation=rec, basis=basis,
                    plan=plan, n_rows=int(len(data.y)), notes=list(res.notes))


def fit_cell(data: DataLike, spec: SweepSpec, order: int, penalty: float) -> FinalModel:
    """Fit one cell on all rows (see `engine.final_fit.fit_final`)."""
    _check_data(data, spec)
    return fit_final(data.X, data.y, spec.inputs, order, penalty, spec.interactions,
                     target=spec.target)


def train_sizes(fractions, n_max: int) -> np.ndarray:
    """Absolute training sizes from fractions, as scikit-learn's ``learning_curve`` forms them."""
    sizes = (np.asarray(fractions, float) * n_max).astype(int)
    return np.unique(np.clip(sizes, 1, n_max))


@dataclass
class LearningCurve:
    """Learning-curve results.

    ``folds``: one row per (order, penalty, train_size, split);
    ``table``: mean and standard error across splits.
    """

    folds: pd.DataFrame
    table: pd.DataFrame
    note: str = ""


def learning_curve(data: DataLike, spec: SweepSpec, orders: list[int] | None = None,
                   plan: FoldPlan | None = None) -> LearningCurve:
    """Train and validation error as the training set grows, for every penalty.

    Within each split the first ``size`` training rows (in row order, as
    scikit-learn's ``learning_curve`` takes them) train the model; summaries of
    consecutive chunks of the training rows are combined cumulatively, so each
    size costs one combination, not a refit on the rows.

    Parameters
    ----------
    data : prepared data.
    spec : the request; its ``learning_sizes`` are fractions of the largest
        training set.
    orders : orders to include (default: all of the spec).
    plan : splits to use (default: the spec's scheme; leave-one-out is replaced
        by shuffled 10-fold, as a learning curve per left-out row is not useful).
    """
    spec.validate()
    _check_data(data, spec)
    note = ""
    if plan is None:
        scheme = spec.scheme
        if scheme.kind == "loo":
            scheme = replace(scheme, kind="kfold", folds=min(10, len(data.y)))
            note = "Learning curve on shuffled 10-fold splits (the sweep used leave-one-out)."
        plan = plan_for(data, scheme, spec.seed)
    orders = spec.order_list() if orders is None else sorted(set(int(o) for o in orders))
    basis = PolynomialBasis.fit(data.X, spec.inputs, max(orders), spec.interactions)
    check_design_size(basis)
    A, a0 = basis.raw_map()
    pen = np.asarray(spec.penalties, float)
    sizes = train_sizes(spec.learning_sizes, len(plan.train_sets[0]))
    rows = []
    for s, (tr, va) in enumerate(zip(plan.train_sets, plan.valid_sets)):
        cuts = [min(int(c), len(tr)) for c in sizes]
        labels = np.full(len(data.y), -1, dtype=np.int64)
        prev = 0
        for j, c in enumerate(cuts):
            labels[tr[prev:c]] = j
            prev = max(prev, c)
        labels[va] = len(cuts)
        st = piece_statistics(basis, data.X, data.y, labels, len(cuts) + 1)
        n_v, m_v, M_v = st.n[-1:], st.mean[-1:], st.comoment[-1:]
        # cumulative training sets: prefixes of the chunks, all sizes at once
        sel = np.tril(np.ones((len(cuts), len(cuts) + 1)))
        sel[:, -1] = 0
        n_t, m_t, M_t = combine_batch(st, sel)
        last = M_t.shape[1] - 1
        for q in orders:
            p = basis.n_terms_at(q)
            idx = np.r_[np.arange(p), last]
            mt, Mt = m_t[:, idx], M_t[:, idx][:, :, idx]
            Z = len(cuts)
            mv = np.repeat(m_v[:, idx], Z, axis=0)
            Mv = np.repeat(M_v[:, idx][:, :, idx], Z, axis=0)
            fit = _fit_penalties(n_t, mt, Mt, p, A, a0, pen)
            tr_mse = _sse(n_t, mt, Mt, p, mt, fit.beta_u) / n_t[:, None]
            va_mse = _sse(np.repeat(n_v, Z), mv, Mv, p, mt, fit.beta_u) / n_v[0]
            for j in range(Z):
                for k, a in enumerate(pen):
                    rows.append((q, float(a), int(sizes[j]), int(n_t[j]), s + 1,
                                 float(tr_mse[j, k]), float(va_mse[j, k])))
    folds = pd.DataFrame(rows, columns=["order", "penalty", "train_size", "rows_used", "fold",
                                        "train_mse", "validation_mse"])
    g = folds.groupby(["order", "penalty", "train_size"], sort=True)
    S = plan.n_splits

    def se(v):
        return float(np.std(v, ddof=1) / np.sqrt(len(v))) if len(v) > 1 else float("nan")

    table = g.agg(train_mse=("train_mse", "mean"), train_mse_se=("train_mse", se),
                  validation_mse=("validation_mse", "mean"),
                  validation_mse_se=("validation_mse", se)).reset_index()
    table["fraction"] = table["train_size"] / len(plan.train_sets[0])
    table["folds"] = S
    return LearningCurve(folds=folds, table=table, note=note)
