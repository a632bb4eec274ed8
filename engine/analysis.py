"""Public entry points: run a sweep request on prepared data."""
from __future__ import annotations

from dataclasses import dataclass, field, replace
from typing import Protocol

import numpy as np
import pandas as pd

from .design import PolynomialBasis
from .errors import InputProblem
from .final_fit import FinalModel, fit_final
from .moments import Moments, combine_batch
from .labels import penalty_text
from .penalty_range import MAX_EXTENSIONS, extend, penalty_edges, range_of
from .recommend import Recommendation, recommend
from .schemes import FoldPlan, make_plan
from .spec import SchemeSpec, SweepSpec, default_penalties
from .ladder import RUNG_COLUMNS
from .threads import one_thread
from .sweep import (Progress, SweepResult, _fit_penalties, _sse, add_row_errors, check_design_size,
                    piece_statistics, run_sweep, split_summaries)
from .summaries import LARGE_ROWS


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
    Y: np.ndarray | None = None
    targets: tuple[str, ...] | None = None

    def __post_init__(self) -> None:
        self.X = np.asarray(self.X, dtype=float)
        if self.X.ndim == 1:
            self.X = self.X[:, None]
        self.y = np.asarray(self.y, dtype=float)
        if self.y.ndim == 2:   # several targets: the first is ``y``
            self.Y, self.y = self.y, self.y[:, 0].copy()
        if self.Y is not None:
            self.Y = np.asarray(self.Y, dtype=float).reshape(len(self.y), -1)
            if self.targets is None or len(self.targets) != self.Y.shape[1]:
                self.targets = (self.target,) + tuple(f"y{t + 1}" for t in
                                                      range(1, self.Y.shape[1]))
            self.target = self.targets[0]
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
    spec : the request as run: with a data-fitted penalty range
        (``penalty_range="data"``) its ``penalties`` are the grid the sweep
        ended with.
    sweep : per-split results (`engine.sweep.SweepResult`).
    validation : validation-curve table, one row per (order, penalty).
    recommendation : best and recommended cells.
    basis, plan : the design and the splits used.
    n_rows : rows used.
    notes : plain sentences about how the numbers were computed.
    request : the request exactly as given (``spec`` before the penalty grid
        was filled in); ``None`` when it equals ``spec``.
    penalty_edges : `engine.penalty_range.Edge` of each chosen cell still on
        an edge of the penalty range after any widening.
    """

    spec: SweepSpec
    sweep: SweepResult
    validation: pd.DataFrame
    recommendation: Recommendation
    basis: PolynomialBasis
    plan: FoldPlan
    n_rows: int
    notes: list[str] = field(default_factory=list)
    model_data: object | None = None
    model_spec: SweepSpec | None = None
    rows_left_out: int = 0
    rankings: np.ndarray | None = None
    request: SweepSpec | None = None
    penalty_edges: list = field(default_factory=list)
    pieces: list | None = field(default=None, repr=False)
    learning_pieces: "LearningPieces | None" = field(default=None, repr=False)
    row_groups: "RowGroups | None" = field(default=None, repr=False)

    def all_rows_summary(self):
        """Summaries of every row at the sweep's full design, merged from the sweep's
        piece summaries (no pass over the rows); None when they do not cover every row
        or the analysis has rung axes.

        Returns
        -------
        `engine.summaries.RowSummary` or None
        """
        if not self.pieces or self.model_spec is not None or not self.plan.rounds:
            return None
        from .summaries import RowSummary
        if np.any(self.plan.rounds[0].pieces < 0):
            return None
        st = self.pieces[0]
        n, m, M = combine_batch(st, np.ones((1, st.n_sets), dtype=np.int8))
        return RowSummary(self.basis, float(n[0]), m[0], M[0])

    def fold_summaries(self):
        """Training summaries of the first round's splits at the sweep's full design, from
        the sweep's piece summaries (as `engine.summaries.fold_summaries` forms them in a
        pass over the rows); None without them."""
        if not self.pieces or self.model_spec is not None or not self.plan.rounds:
            return None
        from .summaries import FoldSummaries
        plan = self.plan
        js = [j for r, j in plan.split_round if r == 0]
        splits = [(np.asarray(plan.train_sets[i]), np.asarray(plan.valid_sets[i]))
                  for i, (r, _) in enumerate(plan.split_round) if r == 0]
        n_t, m_t, M_t = combine_batch(self.pieces[0], plan.rounds[0].train[js])
        return FoldSummaries(self.basis, splits, n_t, m_t, M_t)

    @property
    def target(self) -> str:
        """The column this analysis predicts."""
        return self.model_spec.target if self.model_spec is not None else self.spec.target

    @property
    def axes(self) -> list[str]:
        """Axes of the grid with more than one value (of order, penalty and the rungs)."""
        t = self.validation
        out = [k for k in ("order", "penalty") if t[k].nunique() > 1]
        return out + [k for k in RUNG_COLUMNS[:3] if k in t and t[k].nunique(dropna=True) > 1]

    def working(self, data, spec: SweepSpec):
        """The data and request of the recommended cell's columns, for final fits and checks.

        For a grid over lag depths or input counts these are the chosen
        cell's columns (current and past values) as a plain request; otherwise
        ``data`` and ``spec`` themselves.
        """
        if self.model_data is None:
            return data, spec
        return self.model_data, self.model_spec

    def view(self) -> "Analysis":
        """This analysis at the recommended cell's rung, as a plain (order x penalty) one.

        Its request and columns are those of the recommended cell (current and
        past values as ordinary inputs), so final fits, checks, comparisons and
        learning curves run on it unchanged; the recommendation is the one of
        the whole grid. Without rung axes: the analysis itself.
        """
        if self.model_spec is None:
            return self
        from .ladder import subset_sweep
        rec = self.recommendation.recommended
        keep = [i for i, k in enumerate(self.sweep.rung_keys)
                if all(k.get(n) == getattr(rec, n, None) for n in RUNG_COLUMNS[:3])]
        sweep = subset_sweep(self.sweep, keep)
        return Analysis(spec=self.model_spec, sweep=sweep, validation=sweep.validation_table(),
                        recommendation=self.recommendation, basis=self.basis, plan=self.plan,
                        n_rows=self.n_rows, notes=list(self.notes),
                        rows_left_out=self.rows_left_out)

    def at_rung(self, cell=None) -> pd.DataFrame:
        """Rows of the validation table that share the rung (lag depths, inputs used) of ``cell``.

        ``cell`` defaults to the recommended cell; without rung axes this is
        the whole table.
        """
        cell = self.recommendation.recommended if cell is None else cell
        t = self.validation
        keep = np.ones(len(t), bool)
        for k in RUNG_COLUMNS[:3]:
            if k in t:
                v = getattr(cell, k, None) if not hasattr(cell, "get") else cell.get(k)
                col = t[k]
                if v is None or pd.isna(v):
                    keep &= col.isna().to_numpy()
                else:
                    keep &= (col == int(v)).fillna(False).to_numpy()
        return t[keep]

    def at_family(self, family: str | None = None, l1_ratio: float | None = None) -> "Analysis":
        """This analysis restricted to one penalty family (default: the recommended cell's).

        Charts of order x penalty read one family at a time; the recommendation
        stays the one of the whole grid. With one family swept: the analysis itself.
        """
        fams = set(self.sweep.families or ["ridge"])
        ratios = set(np.round(np.asarray(self.sweep.l1_ratios, float), 12))
        if len(fams) <= 1 and len(ratios) <= 1:
            return self
        rec = self.recommendation.recommended
        family = rec.family if family is None else family
        l1_ratio = rec.l1_ratio if l1_ratio is None else l1_ratio
        keep = [k for k, (f, r) in enumerate(zip(self.sweep.families, self.sweep.l1_ratios))
                if f == family and abs(float(r) - float(l1_ratio)) < 1e-12]
        if not keep:
            raise InputProblem(f"No {family} cells with l1_ratio {l1_ratio} in this sweep.",
                               code="unknown_cell")
        sweep = self.sweep.at_settings(keep)
        return replace(self, sweep=sweep, validation=sweep.validation_table())

    def cell_row(self, order: int, penalty: float, family: str | None = None,
                 l1_ratio: float | None = None, **rung) -> pd.Series:
        """The validation-table row of a cell; rung axes default to the recommended cell's."""
        rec = self.recommendation.recommended
        ref = {k: rung.get(k, getattr(rec, k, None)) for k in RUNG_COLUMNS[:3]}
        t = self.at_rung(ref)
        sel = (t["order"] == order) & np.isclose(t["penalty"], penalty, rtol=1e-12, atol=0)
        if family is not None and "family" in t:
            sel &= t["family"] == family
        if l1_ratio is not None and "l1_ratio" in t:
            sel &= np.isclose(t["l1_ratio"], l1_ratio, rtol=0, atol=1e-12)
        m = t[sel]
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
    # one pass over the whole array; the columns are looked at one by one only to name a bad one
    for j, name in enumerate(spec.inputs if not np.isfinite(X).all() else ()):
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
    from .budget import check_request
    check_request(spec, len(data.y), np.shape(data.X)[1])  # before anything is allocated
    basis = PolynomialBasis.fit(data.X, spec.inputs, max(spec.order_list()), spec.interactions)
    check_design_size(basis)
    return basis


def plan_for(data: DataLike, scheme: SchemeSpec, seed: int) -> FoldPlan:
    """The splits of ``scheme`` on ``data``."""
    return make_plan(scheme, len(data.y), seed=seed, groups=getattr(data, "groups", None),
                     split_labels=getattr(data, "split", None))


def analyse(data: DataLike, spec: SweepSpec, progress: Progress | None = None) -> Analysis:
    """Sweep every cell of ``spec`` and recommend one (the first target's analysis).

    See `analyse_targets` for every target of a several-target request.
    """
    if spec.has_rungs:
        return analyse_targets(data, spec, progress)[0]
    return _analyse_plain(data, spec, progress)


def _analyse_plain(data: DataLike, spec: SweepSpec, progress: Progress | None = None) -> Analysis:
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
        shared = None
        if len(data.y) >= LARGE_ROWS and not plan.loo:
            # large tables: one pass per round serves the sweep and the learning curve
            shared = sweep_learning_pieces(basis, data, plan, spec, progress)
        with one_thread():   # many small factorisations; the row pass picks its own
            if shared is None:
                res = run_sweep(data.X, data.y, basis, plan, spec.order_list(), spec.penalties,
                                progress, families=spec.family_pairs())
            else:
                res = run_sweep(data.X, data.y, basis, plan, spec.order_list(), spec.penalties,
                                progress, families=spec.family_pairs(),
                                statistics=split_summaries(shared[0], plan))
                res.pieces = shared[0]
            pieces = res.pieces
            table, rec = _table_and_pick(res, spec)
            notes: list[str] = []
            edges = _edges(res, rec)
            if spec.penalty_range == "data":
                first = range_of(_grid(res))
                for _ in range(MAX_EXTENSIONS):
                    if not edges:
                        break
                    wider = extend(_grid(res), {e.side for e in edges})
                    res = run_sweep(data.X, data.y, basis, plan, spec.order_list(), wider, None,
                                    families=spec.family_pairs(),
                                    statistics=res.statistics)
                    table, rec = _table_and_pick(res, spec)
                    edges = _edges(res, rec)
                if range_of(_grid(res)) != first:
                    lo, hi = range_of(_grid(res))
                    notes.append(f"The penalty range fitted to the data ({penalty_text(first[0])} to "
                                 f"{penalty_text(first[1])}) was widened to {penalty_text(lo)} to "
                                 f"{penalty_text(hi)} because a chosen cell lay on its edge.")
    except InputProblem:
        raise
    except (ValueError, np.linalg.LinAlgError, MemoryError) as exc:  # pragma: no cover
        raise InputProblem(f"The sweep could not be computed: {exc}", code="sweep_failed") from exc
    ran = spec
    if spec.penalty_range == "data":
        ran = replace(spec, penalties=_grid(res))
    return Analysis(spec=ran, sweep=res, validation=table, recommendation=rec, basis=basis,
                    plan=plan, n_rows=int(len(data.y)), notes=list(res.notes) + notes,
                    request=spec if ran != spec else None, penalty_edges=edges,
                    pieces=pieces, learning_pieces=shared[1] if shared else None,
                    row_groups=shared[2] if shared else None)


def _grid(res: SweepResult) -> tuple[float, ...]:
    """The distinct penalties of a sweep, ascending."""
    return tuple(sorted({float(p) for p in np.asarray(res.penalties, float)}))


def _table_and_pick(res: SweepResult, spec: SweepSpec) -> tuple[pd.DataFrame, Recommendation]:
    table = res.validation_table()
    rec = _pick(table, res, spec)
    return with_paired_columns(table, rec), rec


def _edges(res: SweepResult, rec: Recommendation) -> list:
    return penalty_edges(_grid(res), {"best": rec.best, "recommended": rec.recommended})


def with_paired_columns(table: pd.DataFrame, rec: Recommendation) -> pd.DataFrame:
    """Add the comparison with the best cell to a validation table.

    Columns: ``paired_difference`` (mean validation error minus the best
    cell's, on the same rows), ``paired_difference_se`` (its standard error)
    and ``near_best`` (within one standard error of the best under the rule
    used: the data cannot tell the cell from the best).
    """
    t = table.copy()
    if rec.difference.size == len(t):
        t["paired_difference"] = rec.difference
        t["paired_difference_se"] = rec.difference_se
        t["near_best"] = rec.near_best.astype(bool)
    return t


def data_grid(data: DataLike, spec: SweepSpec, basis: PolynomialBasis | None = None,
              orders: list[int] | None = None) -> tuple[float, ...]:
    """Penalty 0 plus the range fitted to all rows of ``data`` (`engine.penalty_range`).

    For callers that need one fixed starting grid before any sweep (resampling
    studies, learning curves of a request not yet analysed).
    """
    from .penalty_range import data_penalties
    from .rungs import order as order_rung
    orders = spec.order_list() if orders is None else list(orders)
    if basis is None:
        basis = PolynomialBasis.fit(data.X, spec.inputs, max(orders), spec.interactions)
    A, a0 = basis.raw_map()
    st = piece_statistics(basis, data.X, data.y, np.zeros(len(data.y), dtype=np.int64), 1)
    return data_penalties(st.n, st.mean, st.comoment, A, a0, order_rung.term_sets(basis, orders))


def fit_cell(data: DataLike, spec: SweepSpec, order: int, penalty: float,
             summary=None, family: str = "ridge", l1_ratio: float = 0.0,
             x_range: tuple | None = None) -> FinalModel:
    """Fit one cell on all rows (see `engine.final_fit.fit_final`; ``summary``:
    all-rows summaries to solve from, `engine.summaries.summarise_rows`;
    ``x_range``: the inputs' minima and maxima from `checked_range`, which has
    checked the data already)."""
    if x_range is None:
        _check_data(data, spec)
    return fit_final(data.X, data.y, spec.inputs, order, penalty, spec.interactions,
                     target=spec.target, summary=summary, family=family,
                     l1_ratio=l1_ratio, x_range=x_range)


def checked_range(data: DataLike, spec: SweepSpec) -> tuple[np.ndarray, np.ndarray]:
    """The data checked as `fit_cell` checks them, and each input's minimum and maximum:
    several cells fitted on the same rows (`fit_cell` with ``x_range``) look once."""
    _check_data(data, spec)
    X = np.asarray(data.X, float)
    if X.ndim == 1:
        X = X[:, None]
    return X.min(axis=0), X.max(axis=0)


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

    def covers(self, orders, penalties) -> bool:
        """True when every order and every penalty given has rows here."""
        have = np.asarray(sorted(set(self.table["penalty"].astype(float))), float)
        pens = np.asarray(list(penalties), float)
        return (set(int(q) for q in orders) <= set(int(q) for q in self.table["order"])
                and all(np.isclose(have, a, rtol=1e-12, atol=0).any() for a in pens))

    def restrict(self, orders=None, penalties=None) -> "LearningCurve":
        """The rows of some orders and penalties (each row is computed on its own, so
        the values are those of a curve run for just these)."""
        def keep(t: pd.DataFrame) -> pd.DataFrame:
            sel = np.ones(len(t), dtype=bool)
            if orders is not None:
                sel &= t["order"].isin([int(q) for q in orders]).to_numpy()
            if penalties is not None:
                pv = t["penalty"].to_numpy(float)
                sel &= np.isclose(pv[:, None], np.asarray(list(penalties), float)[None, :],
                                  rtol=1e-12, atol=0).any(axis=1)
            return t[sel].reset_index(drop=True)
        return LearningCurve(folds=keep(self.folds), table=keep(self.table), note=self.note)


def learning_curve(data: DataLike, spec: SweepSpec, orders: list[int] | None = None,
                   plan: FoldPlan | None = None,
                   pieces: "LearningPieces | None" = None) -> LearningCurve:
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
    pieces : the (round piece, row block) summaries the sweep of this data and
        request already formed (`Analysis.learning_pieces`); used, with no pass
        over the rows, when they were made for the same scheme, seed, learning
        sizes, row count and inputs, and reach the highest order asked for.
    """
    with one_thread():
        return _learning_curve(data, spec, orders, plan, pieces)


def _learning_blocks(plan: FoldPlan, r: int, sizes, n: int):
    """Row blocks of round ``r`` for the learning curve: bounded by every split's cut rows.

    Returns ``(members, cut_rows, B, nb)``: the round's splits, per split
    ``(cuts, boundary rows)``, the block bounds and the number of blocks.
    """
    members = [i for i, (rr, _) in enumerate(plan.split_round) if rr == r]
    cut_rows = {}
    bounds = {0, n}
    for i in members:
        tr = plan.train_sets[i]
        cuts = [min(int(c), len(tr)) for c in sizes]
        b = [int(tr[c - 1]) + 1 if c > 0 else 0 for c in cuts]
        cut_rows[i] = (cuts, b)
        bounds.update(b)
    B = np.array(sorted(bounds))
    return members, cut_rows, B, len(B) - 1


def _learning_labels(plan: FoldPlan, r: int, B: np.ndarray, n: int) -> np.ndarray:
    """Piece of every row for round ``r``'s learning curve: (round piece, row block)."""
    rnd = plan.rounds[r]
    nb = len(B) - 1
    # B rises strictly from 0 to n: block j holds rows B[j] to B[j+1] - 1
    label = rnd.pieces * nb
    label += np.repeat(np.arange(nb, dtype=label.dtype), np.diff(B))
    label[rnd.pieces < 0] = -1
    return label


#: Most bytes of (round piece x row block) summaries held for a learning curve.
LEARNING_PIECE_BYTES = 1.5e9


@dataclass
class LearningPieces:
    """Summaries of every (round piece, row block) of a plan at a basis's full design,
    formed by the sweep's pass so that the learning curve needs no pass of its own.

    ``key`` records what they were made for: (scheme, seed, learning sizes, rows,
    highest order, interactions).
    """

    key: tuple
    stats: list   # per round: `engine.moments.Moments`
    basis: PolynomialBasis
    plan: FoldPlan


def learning_key(spec: SweepSpec, n: int, basis: PolynomialBasis) -> tuple:
    return (spec.scheme, int(spec.seed), tuple(spec.learning_sizes), int(n),
            int(basis.max_order), bool(basis.interactions), tuple(basis.input_names))


def _learning_statistics(basis: PolynomialBasis, data: DataLike, plan: FoldPlan, sizes,
                         pieces: list | None = None):
    """Per split: training summaries of the first ``size`` training rows (row order)
    for every size, and the validation summary.

    One pass over the rows per round of splits: rows are cut into pieces by
    (round piece, row block), the blocks bounded by every split's cut rows, so
    each prefix of each split's training rows is a union of pieces. Falls back
    to one pass per split when those pieces would not fit in memory.
    ``pieces``: per round, those piece summaries already formed (no pass).

    Yields ``(split, cuts, (n_t, m_t, M_t), (n_v, m_v, M_v))``.
    """
    n = len(data.y)
    q = basis.n_terms + 1
    for r in range(len(plan.rounds)):
        rnd = plan.rounds[r]
        members, cut_rows, B, nb = _learning_blocks(plan, r, sizes, n)
        if not members:
            continue
        L = rnd.n_pieces * nb
        st = pieces[r] if pieces is not None else None
        if st is None and L * q * q * 8 > LEARNING_PIECE_BYTES:   # one pass per split
            for i in members:
                yield (i, *_split_learning_statistics(basis, data, plan, i, sizes))
            continue
        if st is None:
            st = piece_statistics(basis, data.X, data.y, _learning_labels(plan, r, B, n), L)
        for i in members:
            j = plan.split_round[i][1]
            cuts, b = cut_rows[i]
            train = rnd.train[j] > 0
            sel = np.stack([np.outer(train, np.arange(nb) < np.searchsorted(B, bz)).ravel()
                            for bz in b])
            valid = np.outer(rnd.valid[j] > 0, np.ones(nb, bool)).ravel()[None, :]
            yield i, cuts, combine_batch(st, sel), combine_batch(st, valid)


#: Shuffled schemes, large tables: random subgroups of each fold piece summarised by the
#: sweep's pass, so that the nested cross-validation's repetitions can reshuffle groups.
SUBGROUPS = 8


@dataclass
class RowGroups:
    """Summaries of random groups of rows at the sweep's full design (target last).

    Group ``g`` of fold piece ``p`` is ``p * per_piece + g``; rows were dealt
    into the ``per_piece`` subgroups of every piece at random with ``seed``.
    ``label`` is each row's group (-1: none).
    """

    stats: Moments
    label: np.ndarray
    per_piece: int
    seed: int
    basis: PolynomialBasis

    @property
    def n_groups(self) -> int:
        return int(self.stats.n_sets)


def deal_rows(n: int, n_groups: int, seed) -> np.ndarray:
    """Rows dealt at random (``seed``) into ``n_groups`` groups of equal size (one row apart)."""
    group = np.empty(n, dtype=np.int64)
    group[np.random.default_rng(seed).permutation(n)] = np.arange(n) % n_groups
    return group


def sweep_learning_pieces(basis: PolynomialBasis, data: DataLike, plan: FoldPlan,
                          spec: SweepSpec, progress=None):
    """One pass per round giving both the sweep's piece summaries and the learning curve's.

    Rows are summarised by (round piece, row block) as `_learning_statistics`
    cuts them; merging the blocks of each piece gives the sweep's per-piece
    summaries exactly as its own pass would (up to rounding).

    For shuffled k-fold schemes the first round's rows are also dealt at random
    (seed ``spec.seed``) into `SUBGROUPS` subgroups per fold piece, summarised in
    the same pass: the nested cross-validation of the intervals reshuffles
    those groups (`engine.intervals.error_interval`).

    Returns ``(sweep pieces per round, LearningPieces, RowGroups or None)``;
    None when a round would need more than `LEARNING_PIECE_BYTES` of summaries.
    The inputs are scaled chunk by chunk as the pass gathers them (no scaled copy).
    """
    n = len(data.y)
    q = basis.n_terms + 1
    sizes = train_sizes(spec.learning_sizes, len(plan.train_sets[0]))
    fine, coarse = [], []
    groups = None
    for r, rnd in enumerate(plan.rounds):
        _, _, B, nb = _learning_blocks(plan, r, sizes, n)
        P = rnd.n_pieces
        L = P * nb
        if L * q * q * 8 > LEARNING_PIECE_BYTES:
            return None
        labels = _learning_labels(plan, r, B, n)
        m = SUBGROUPS if (r == 0 and plan.kind in ("kfold", "repeated")
                          and L * SUBGROUPS * q * q * 8 <= LEARNING_PIECE_BYTES
                          and np.all(rnd.pieces >= 0)) else 1
        if m > 1:
            sub = deal_rows(n, m, int(spec.seed))
            labels *= m             # (in place: the labels are this pass's own)
            labels += sub
            st = piece_statistics(basis, data.X, data.y, labels, L * m)
            grp = np.zeros((P * m, L * m), dtype=np.int8)   # (piece, subgroup), every block
            for p_ in range(P):
                for g in range(m):
                    grp[p_ * m + g, (p_ * nb + np.arange(nb)) * m + g] = 1
            groups = RowGroups(Moments(*combine_batch(st, grp)), rnd.pieces * m + sub, m,
                               int(spec.seed), basis)
            st = Moments(*combine_batch(st, np.kron(np.eye(L, dtype=np.int8),
                                                    np.ones((1, m), dtype=np.int8))))
        else:
            st = piece_statistics(basis, data.X, data.y, labels, L)
        sel = np.kron(np.eye(P, dtype=np.int8), np.ones((1, nb), dtype=np.int8))
        coarse.append(Moments(*combine_batch(st, sel)))
        fine.append(st)
        if progress:
            progress(0.8 * (r + 1) / len(plan.rounds), "Summarising rows")
    return coarse, LearningPieces(learning_key(spec, n, basis), fine, basis, plan), groups


def _split_learning_statistics(basis, data, plan, i, sizes):
    """`_learning_statistics` for one split, by its own pass over the rows."""
    tr, va = plan.train_sets[i], plan.valid_sets[i]
    cuts = [min(int(c), len(tr)) for c in sizes]
    labels = np.full(len(data.y), -1, dtype=np.int64)
    prev = 0
    for j, c in enumerate(cuts):
        labels[tr[prev:c]] = j
        prev = max(prev, c)
    labels[va] = len(cuts)
    st = piece_statistics(basis, data.X, data.y, labels, len(cuts) + 1)
    # cumulative training sets: prefixes of the chunks, all sizes at once
    sel = np.tril(np.ones((len(cuts), len(cuts) + 1)))
    sel[:, -1] = 0
    return cuts, combine_batch(st, sel), (st.n[-1:], st.mean[-1:], st.comoment[-1:])


def _learning_curve(data: DataLike, spec: SweepSpec, orders: list[int] | None,
                    plan: FoldPlan | None, pieces=None) -> LearningCurve:
    spec.validate()
    _check_data(data, spec)
    note = ""
    orders = spec.order_list() if orders is None else sorted(set(int(o) for o in orders))
    basis = None
    if (pieces is not None and plan is None and spec.scheme.kind != "loo"
            and max(orders) <= pieces.basis.max_order
            and pieces.key == learning_key(spec, len(data.y), pieces.basis)):
        plan, basis = pieces.plan, pieces.basis     # the sweep's pass (no pass here)
    else:
        pieces = None
    if plan is None:
        scheme = spec.scheme
        if scheme.kind == "loo":
            scheme = replace(scheme, kind="kfold", folds=min(10, len(data.y)))
            note = "Learning curve on shuffled 10-fold splits (the sweep used leave-one-out)."
        plan = plan_for(data, scheme, spec.seed)
    if basis is None:
        basis = PolynomialBasis.fit(data.X, spec.inputs, max(orders), spec.interactions)
    check_design_size(basis)
    A, a0 = basis.raw_map()
    pen = np.asarray(spec.penalties, float)
    if pen.size == 0:       # a data-fitted range not yet run: the base range of all rows
        pen = np.asarray(data_grid(data, spec, basis, orders), float)
    sizes = train_sizes(spec.learning_sizes, len(plan.train_sets[0]))
    rows = []
    for s, cuts, (n_t, m_t, M_t), (n_v, m_v, M_v) in _learning_statistics(
            basis, data, plan, sizes, pieces.stats if pieces is not None else None):
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
    keys = ["order", "penalty", "train_size"]
    g = folds.groupby(keys, sort=True)
    S = plan.n_splits

    def se(v):
        return float(np.std(v, ddof=1) / np.sqrt(len(v))) if len(v) > 1 else float("nan")

    sizes_g = g.size().to_numpy()
    if len(folds) and sizes_g.min() == sizes_g.max() > 1:
        # every group has the same number of splits: the standard errors of all groups
        # at once, each over its rows in table order (as the grouping takes them)
        at = np.lexsort([folds[k].to_numpy() for k in reversed(keys)])
        table = g.agg(train_mse=("train_mse", "mean"),
                      validation_mse=("validation_mse", "mean")).reset_index()
        for col in ("train_mse", "validation_mse"):
            v = folds[col].to_numpy(float)[at].reshape(len(sizes_g), -1)
            table.insert(table.columns.get_loc(col) + 1, f"{col}_se",
                         np.std(v, axis=1, ddof=1) / np.sqrt(v.shape[1]))
    else:
        table = g.agg(train_mse=("train_mse", "mean"), train_mse_se=("train_mse", se),
                      validation_mse=("validation_mse", "mean"),
                      validation_mse_se=("validation_mse", se)).reset_index()
    table["fraction"] = table["train_size"] / len(plan.train_sets[0])
    table["folds"] = S
    return LearningCurve(folds=folds, table=table, note=note)


def _pick(table: pd.DataFrame, res: SweepResult, spec: SweepSpec) -> Recommendation:
    """The recommendation of a sweep (one place for every kind of grid).

    ``table`` rows are aligned with ``res.validation_errors()`` (cells x splits).
    """
    return recommend(table, res.split_errors(), float(np.mean(res.n_train)), spec.rule)


def target_matrix(data, spec: SweepSpec) -> np.ndarray:
    """(n, T) values of every target of ``spec`` (``data.Y`` for several targets)."""
    if not spec.extra_targets:
        return np.asarray(data.y, float)[:, None]
    Y = getattr(data, "Y", None)
    names = tuple(getattr(data, "targets", None) or ())
    if Y is None or names[:len(spec.targets)] != spec.targets:
        raise InputProblem(f"The data hold no columns for the targets {', '.join(spec.targets)}; "
                           "prepare the data with every target.", code="shape_mismatch")
    return np.asarray(Y, float)[:, :len(spec.targets)]


def analyse_targets(data: DataLike, spec: SweepSpec,
                    progress: Progress | None = None) -> list[Analysis]:
    """Sweep a grid with lag depths, input counts or several targets; one analysis per target.

    One pass over the rows builds the statistics of the full design (every
    column at the deepest lag) for every target at once; each cell is an index
    set of it. Each target gets its own recommendation.

    Parameters
    ----------
    data : prepared data; with several targets it carries ``Y`` (n, T) and
        ``targets`` (see `engine.ladder_data.prepare_targets`).
    spec : the request (``lags``, ``nested_inputs``, ``extra_targets``).
    progress : called as ``progress(fraction_done, message)``.

    Returns
    -------
    list of Analysis, one per target in ``spec.targets`` order.
    """
    from .ladder import full_design, run_ladder

    spec.validate()
    _check_data(data, spec)
    Y = target_matrix(data, spec)
    for t, name in enumerate(spec.targets):
        col = Y[:, t]
        if not np.all(np.isfinite(col)):
            bad = int(np.flatnonzero(~np.isfinite(col))[0])
            raise InputProblem(f"Target '{name}' has a missing or infinite value in row "
                               f"{bad + 1}; remove or fix it.", code="infinite",
                               column=name, row=bad + 1)
        if col.size and np.ptp(col) == 0:
            raise InputProblem(f"Target '{name}' has the same value in every row; there is "
                               "nothing to predict.", code="constant_target", column=name)
    if spec.scheme.kind == "loo" and spec.lags is None and spec.nested_inputs is None:
        # leave-one-out has no pieces to share: one exact sweep per target
        out = []
        for t, name in enumerate(spec.targets):
            one = replace(spec, target=name, extra_targets=())
            one_data = ArrayData(data.X, Y[:, t], spec.inputs, name,
                                 getattr(data, "groups", None), getattr(data, "split", None))
            a = _analyse_plain(one_data, one, progress)
            a.spec = replace(spec, penalties=a.spec.penalties)
            a.request = spec if a.spec != spec else None
            a.validation = a.validation.assign(target=name)
            a.model_data, a.model_spec = one_data, one
            out.append(a)
        return out
    groups = getattr(data, "groups", None)
    split = getattr(data, "split", None)
    try:
        design = full_design(data.X, Y, spec.inputs, spec.targets, spec.lags, groups)
        orders = spec.order_list()
        basis = PolynomialBasis.fit(design.X, design.columns, max(orders), spec.interactions)
        check_design_size(basis)
        kept = design.kept
        sub = ArrayData(design.X, design.Y[:, 0], design.columns, spec.target,
                        None if groups is None else np.asarray(groups)[kept],
                        None if split is None else np.asarray(split)[kept])
        plan = plan_for(sub, spec.scheme, spec.seed)
        # grids over lags or input sets sweep the fixed default penalties when none are given
        ran = spec if spec.penalties else replace(spec, penalties=default_penalties())
        ladders = run_ladder(design, basis, plan, spec.targets, spec.inputs, orders,
                             ran.penalties, spec.lags, spec.nested_inputs,
                             families=spec.family_pairs(), progress=progress)
    except InputProblem:
        raise
    except (ValueError, np.linalg.LinAlgError, MemoryError) as exc:  # pragma: no cover
        raise InputProblem(f"The sweep could not be computed: {exc}", code="sweep_failed") from exc
    out = []
    for t, (res, info) in enumerate(ladders):
        add_row_errors(res, design.X, design.Y[:, t], basis, plan)   # one split: per-row SEs
        table = res.validation_table()
        res.repeats = len(plan.rounds) if plan.kind == "repeated" else 1
        rec = _pick(table, res, spec)
        table = with_paired_columns(table, rec)
        cols = _final_columns(design, basis, info, rec.recommended, t, spec)
        names = tuple(design.columns[c] for c in cols)
        mdata = ArrayData(design.X[:, cols], design.Y[:, t], names, spec.targets[t],
                          sub.groups, sub.split)
        mspec = replace(ran, target=spec.targets[t], inputs=names, lags=None,
                        nested_inputs=None, extra_targets=())
        mbasis = PolynomialBasis.fit(mdata.X, names, max(orders), spec.interactions)
        out.append(Analysis(spec=ran, sweep=res, validation=table, recommendation=rec,
                            basis=mbasis, plan=plan, n_rows=int(design.X.shape[0]),
                            notes=list(info.notes) + _axes_cautions(data, spec) + list(res.notes),
                            model_data=mdata,
                            model_spec=mspec, rows_left_out=int(design.rows_dropped),
                            rankings=info.rankings, request=spec if ran != spec else None))
    return out


def _axes_cautions(data, spec: SweepSpec) -> list[str]:
    """Plain sentences on what a lag-depth or input-count grid does not cover."""
    out = []
    if spec.lags is not None or spec.nested_inputs is not None:
        out.append("Nested cross-validation and selection stability, where shown, repeat the "
                   "order and penalty choice on the recommended columns only; they do not "
                   "repeat the choice of lag depth or number of inputs.")
    dropped = int(getattr(data, "rows_dropped", 0) or 0)
    if spec.lags is not None and spec.lags.max_depth > 0 and dropped:
        out.append(f"{dropped} rows with missing values were dropped before the past values "
                   "were taken, so a lag reaches across each gap they leave.")
    return out


def _final_columns(design, basis, info, cell, t: int, spec: SweepSpec) -> np.ndarray:
    """Design columns of ``cell``'s rung for the final fit on all rows.

    For inputs ranked by the lasso path the ranking is redone on all rows (the
    final model is fitted on all rows anyway; every validation error used the
    ranking of its own split's training rows).
    """
    key = (cell.lags, cell.target_lags, cell.inputs_used)
    cols = info.rung_columns[key][0]
    if cell.inputs_used is None or info.ranking_method != "lasso":
        return cols
    from .ladder import rank_inputs_by_lasso
    from .moments import chunk_moments
    d = len(spec.inputs)
    n, mean, M = chunk_moments(np.column_stack([design.X[:, :d], design.Y[:, t]]))
    ranking = rank_inputs_by_lasso(n, mean, M, np.arange(d))
    use = np.isin(np.arange(d), ranking[:cell.inputs_used])
    every = np.arange(len(design.columns))
    if cell.lags is not None:
        every = design.columns_for(cell.lags, cell.target_lags, t)
    src = design.source[every]
    return every[(src < 0) | use[np.clip(src, 0, None)]]
