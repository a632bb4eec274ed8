"""How far to trust the choice itself: nested cross-validation and selection stability.

A sweep picks the cell with the best validation error, so that error is
slightly optimistic for the picked cell. Nested cross-validation repeats the
whole choice inside each outer training set and scores the chosen model on
outer rows the choice never saw. Selection stability repeats the choice on
fresh shuffles or resamples and counts how often each cell wins.
"""
from __future__ import annotations

import math
from dataclasses import dataclass, field, replace
from typing import Callable

import numpy as np
import pandas as pd

from .analysis import Analysis, ArrayData, DataLike, analyse, data_grid
from .threads import one_thread
from .compare import cell_label
from .schemes import label_codes
from .errors import InputProblem
from .final_fit import fit_final
from .spec import SchemeSpec, SweepSpec

Progress = Callable[[float, str], None]

_SHUFFLED = ("kfold", "repeated", "loo")
_ORDERED = ("blocked", "holdout")
_TRAIN_WORDS = {"train", "training"}
_TEST_WORDS = {"test", "validation", "valid", "holdout"}


# ---------------------------------------------------------------------------
# helpers
# ---------------------------------------------------------------------------
def subset(data: DataLike, rows: np.ndarray) -> ArrayData:
    """The given rows of prepared data, as `ArrayData` (groups, split and order kept)."""
    rows = np.asarray(rows)

    def take(a):
        return None if a is None else np.asarray(a)[rows]

    return ArrayData(X=np.asarray(data.X, float)[rows], y=np.asarray(data.y, float)[rows],
                     inputs=tuple(data.inputs), target=data.target,
                     groups=take(getattr(data, "groups", None)),
                     split=take(getattr(data, "split", None)),
                     order=take(getattr(data, "order", None)))


def _codes(values) -> np.ndarray:
    return label_codes(values)[0]


def _split_words(labels) -> set[str]:
    return {str(v).strip().lower() for v in np.asarray(labels).tolist()}


def _kfold_splits(n: int, k: int, seed: int | None = None
                  ) -> list[tuple[np.ndarray, np.ndarray]]:
    """(train rows, test rows) of each of ``k`` folds of ``n`` rows, both sorted.

    The splits of scikit-learn's ``KFold(k, shuffle=True, random_state=seed)``
    (``KFold(k)`` with ``seed=None``): the rows ``0..n-1``, shuffled by
    ``RandomState(seed)`` when a seed is given, cut in order into ``k`` runs
    of ``n // k`` rows, the first ``n % k`` runs one row longer.
    """
    rows = np.arange(n)
    if seed is not None:
        np.random.RandomState(seed).shuffle(rows)
    sizes = np.full(k, n // k, dtype=int)
    sizes[: n % k] += 1
    stops = np.cumsum(sizes)
    out = []
    for start, stop in zip(stops - sizes, stops):
        test = np.sort(rows[start:stop])
        train = np.ones(n, dtype=bool)
        train[test] = False
        out.append((np.flatnonzero(train), test))
    return out


def outer_splits(data: DataLike, spec: SweepSpec, outer_folds: int
                 ) -> tuple[list[tuple[np.ndarray, np.ndarray]], str]:
    """Outer splits for nested cross-validation, following the spec's scheme family.

    Shuffled k-fold for kfold, repeated and leave-one-out; contiguous blocks
    in row order for blocked (with the spec's gap dropped from training on
    each side) and holdout; grouped k-fold for grouped; whole fold labels for
    a split column with fold labels.

    Returns
    -------
    (list of (train rows, test rows), one plain sentence describing them)
    """
    n = int(np.asarray(data.y).size)
    k = int(outer_folds)
    kind = spec.scheme.kind
    idx = np.arange(n)
    if k < 2:
        raise InputProblem(f"Nested cross-validation needs at least 2 outer folds (got {k}).",
                           code="bad_scheme")
    if kind in _SHUFFLED:
        if n < 2 * k:
            raise InputProblem(f"{k} outer folds need at least {2 * k} rows; the data have {n}. "
                               "Use fewer outer folds.", code="too_few_rows")
        return (_kfold_splits(n, k, spec.seed),
                f"Shuffled {k}-fold outer split (seed {spec.seed}).")
    if kind in _ORDERED:
        if n < 2 * k:
            raise InputProblem(f"{k} outer folds need at least {2 * k} rows; the data have {n}. "
                               "Use fewer outer folds.", code="too_few_rows")
        g = int(spec.scheme.gap) if kind == "blocked" else 0
        out = []
        for _, te in _kfold_splits(n, k):
            keep = (idx < te[0] - g) | (idx > te[-1] + g)
            out.append((idx[keep], te))
        gap_txt = f", {g} rows dropped from training on each side" if g else ""
        return out, f"{k} contiguous outer blocks in row order{gap_txt}."
    if kind == "grouped":
        groups = getattr(data, "groups", None)
        if groups is None:
            raise InputProblem("Grouped folds need a group column.", code="bad_scheme")
        codes = _codes(groups)
        n_groups = int(codes.max()) + 1
        kk = min(k, n_groups)
        if kk < 2:
            raise InputProblem("The group column has a single group; nested cross-validation "
                               "needs at least two.", code="too_few_groups",
                               column=spec.scheme.group_column)
        from sklearn.model_selection import GroupKFold   # imported only when groups are used

        sp = list(GroupKFold(n_splits=kk).split(idx, groups=codes))
        return ([(np.sort(a), np.sort(b)) for a, b in sp],
                f"Grouped {kk}-fold outer split: each group is held out whole.")
    # column
    labels = getattr(data, "split", None)
    if labels is None:
        raise InputProblem("A user split needs a split column.", code="bad_scheme")
    words = _split_words(labels)
    if words <= (_TRAIN_WORDS | _TEST_WORDS):
        raise InputProblem(
            "The split column holds a single train/test split, so there is nothing to nest. "
            "Use fold labels in the split column, or choose k-fold or blocked folds for "
            "nested cross-validation.", code="bad_scheme", column=spec.scheme.split_column)
    codes = _codes(labels)
    nu = int(codes.max()) + 1
    if nu < 3:
        raise InputProblem("Nested cross-validation on a split column needs at least three "
                           f"fold labels (got {nu}).", code="bad_scheme",
                           column=spec.scheme.split_column)
    kk = min(k, nu)
    from sklearn.model_selection import GroupKFold   # imported only when labels are used

    sp = list(GroupKFold(n_splits=kk).split(idx, groups=codes))
    return ([(np.sort(a), np.sort(b)) for a, b in sp],
            f"{kk} outer folds made of whole fold labels of the split column.")


# ---------------------------------------------------------------------------
# nested cross-validation
# ---------------------------------------------------------------------------
@dataclass
class NestedResult:
    """Nested cross-validation of the whole choice.

    Attributes
    ----------
    outer_mse : mean squared error on the outer test rows (mean over folds) of
        the model chosen and refitted inside each outer training set.
    outer_se : its standard error across outer folds.
    inner_mse : the sweep's own validation MSE for its recommended cell on all rows.
    per_fold : one row per outer fold: ``fold``, ``order``, ``penalty``,
        ``model``, ``train_rows``, ``test_rows``, ``inner_mse`` (the chosen
        cell's validation MSE inside the fold), ``outer_mse``.
    inner_se : standard error of ``inner_mse``.
    description : the outer splits in one sentence.
    notes : plain sentences on how to read the result.
    """

    outer_mse: float
    outer_se: float
    inner_mse: float
    per_fold: pd.DataFrame
    inner_se: float = float("nan")
    description: str = ""
    notes: list[str] = field(default_factory=list)

    @property
    def ratio(self) -> float:
        """outer_mse / inner_mse (about 1 when the sweep's estimate holds)."""
        return self.outer_mse / self.inner_mse if self.inner_mse > 0 else float("nan")


def nested_cv(data: DataLike, spec: SweepSpec, outer_folds: int = 5,
              progress: Progress | None = None, *,
              analysis: Analysis | None = None) -> NestedResult:
    """Nested cross-validation of the sweep's choice of cell.

    In each outer training set the full sweep of ``spec`` runs (its own
    scheme inside), the one-standard-error rule picks a cell, that cell is
    refitted on the outer training rows (`engine.final_fit.fit_final`) and
    scored on the outer test rows.

    Parameters
    ----------
    data : prepared data (rows in time order when that matters).
    spec : the request, as for `engine.analysis.analyse`.
    outer_folds : number of outer folds (see `outer_splits` for their kind).
    progress : called as ``progress(fraction_done, message)``.
    analysis : the sweep on all rows, if already run (saves one sweep).

    Returns
    -------
    NestedResult
    """
    with one_thread():
        return _nested_cv(data, spec, outer_folds, progress, analysis)


def _nested_cv(data, spec, outer_folds, progress, analysis) -> NestedResult:
    def tick(f, msg):
        if progress:
            progress(f, msg)

    full = analysis if analysis is not None else analyse(data, spec)
    if not spec.penalties:      # a data-fitted range: every inner sweep starts from its grid
        spec = replace(spec, penalties=full.spec.penalties)
    splits, desc = outer_splits(data, spec, outer_folds)
    X, y = np.asarray(data.X, float), np.asarray(data.y, float)
    rows = []
    for i, (tr, te) in enumerate(splits, start=1):
        tick((i - 1) / len(splits), f"Outer fold {i} of {len(splits)}")
        try:
            inner = analyse(subset(data, tr), spec)
        except InputProblem as exc:
            raise InputProblem(f"Outer fold {i} of {len(splits)}: {exc.message}",
                               code=exc.code, column=exc.column) from None
        rec = inner.recommendation.recommended
        model = fit_final(X[tr], y[tr], spec.inputs, rec.order, rec.penalty,
                          spec.interactions, target=spec.target, family=rec.family,
                          l1_ratio=rec.l1_ratio)
        resid = y[te] - model.predict(X[te])
        rows.append({"fold": i, "order": rec.order, "penalty": rec.penalty,
                     "model": cell_label(rec.order, rec.penalty), "train_rows": int(tr.size),
                     "test_rows": int(te.size), "inner_mse": rec.validation_mse,
                     "outer_mse": float(np.mean(resid * resid))})
    per_fold = pd.DataFrame(rows, columns=["fold", "order", "penalty", "model", "train_rows",
                                           "test_rows", "inner_mse", "outer_mse"])
    k = len(per_fold)
    outer = float(per_fold["outer_mse"].mean())
    outer_se = float(per_fold["outer_mse"].std(ddof=1) / math.sqrt(k)) if k > 1 else float("nan")
    rec_all = full.recommendation.recommended
    res = NestedResult(outer_mse=outer, outer_se=outer_se, inner_mse=rec_all.validation_mse,
                       per_fold=per_fold, inner_se=rec_all.validation_mse_se,
                       description=desc)
    n_models = per_fold[["order", "penalty"]].drop_duplicates().shape[0]
    res.notes.append(
        f"Outer error {outer:.4g} ± {outer_se:.2g} against the sweep's own {res.inner_mse:.4g} "
        f"for {rec_all.label} (ratio {res.ratio:.2f}); the outer folds chose "
        f"{n_models} different cell{'s' if n_models != 1 else ''}.")
    res.notes.append("A ratio well above 1 means the sweep's error for its chosen cell is "
                     "optimistic: expect errors nearer the outer figure on new data.")
    tick(1.0, "Nested cross-validation done")
    return res


# ---------------------------------------------------------------------------
# selection stability
# ---------------------------------------------------------------------------
@dataclass
class StabilityResult:
    """How often each cell is chosen when the choice is repeated.

    Attributes
    ----------
    table : one row per chosen cell: ``order``, ``penalty``, ``model``,
        ``count``, ``share`` (of resamples), most frequent first.
    chosen : one row per resample: ``resample``, ``order``, ``penalty``,
        ``model``, ``validation_mse``, ``rows``.
    method : ``'repeated'``, ``'bootstrap'`` or ``'block bootstrap'`` (what ran).
    notes : plain sentences on how the resamples were made.
    """

    table: pd.DataFrame
    chosen: pd.DataFrame
    method: str = "repeated"
    notes: list[str] = field(default_factory=list)


def moving_block_rows(n: int, block_length: int, rng: np.random.Generator) -> np.ndarray:
    """Rows of one moving-block bootstrap resample of ``n`` ordered rows.

    Blocks of ``block_length`` consecutive rows start at uniformly drawn
    positions; enough blocks are drawn to cover ``n`` rows, the blocks are put
    in order of their start (so later rows stay later) and the result is cut
    to ``n`` rows.
    """
    L = int(min(max(block_length, 1), n))
    count = int(math.ceil(n / L))
    starts = np.sort(rng.integers(0, n - L + 1, size=count))
    rows = (starts[:, None] + np.arange(L)[None, :]).ravel()
    return rows[:n]


def selection_stability(data: DataLike, spec: SweepSpec, resamples: int = 20,
                        method: str = "repeated", seed: int | None = None,
                        progress: Progress | None = None, *,
                        block_length: int | None = None) -> StabilityResult:
    """Repeat the choice of cell and count how often each cell wins.

    Parameters
    ----------
    data : prepared data.
    spec : the request.
    resamples : number of repetitions.
    method : ``'repeated'``: the same rows with fresh shuffles of the scheme
        (seeds ``seed, seed + 1, ...``); for schemes without a shuffle
        (leave-one-out, blocked, holdout, grouped, split column) every
        repetition would give the same answer, so the bootstrap runs instead
        (said in ``notes``). ``'bootstrap'``: rows drawn with replacement;
        copies of a row are kept in the same fold (grouped folds on the original
        row) so no row is validated on itself. For ordered data (blocked or
        holdout scheme, or an order column) a moving-block bootstrap keeps
        runs of neighbouring rows together; for grouped data whole groups are
        drawn.
    seed : first seed (default: the spec's seed).
    progress : called as ``progress(fraction_done, message)``.
    block_length : rows per block of the moving-block bootstrap (default
        ``n ** (1/3)`` rounded up, a common choice).

    Returns
    -------
    StabilityResult
    """
    with one_thread():
        return _selection_stability(data, spec, resamples, method, seed, progress, block_length)


def _selection_stability(data, spec, resamples, method, seed, progress, block_length):
    if method not in ("repeated", "bootstrap"):
        raise InputProblem(f"Unknown resampling method '{method}'; use 'repeated' or "
                           "'bootstrap'.", code="bad_method")
    R = int(resamples)
    if R < 1:
        raise InputProblem(f"Use at least one resample (got {resamples}).", code="bad_method")
    seed = int(spec.seed if seed is None else seed)
    if not spec.penalties:      # a data-fitted range: one starting grid for every resample
        spec = replace(spec, penalties=data_grid(data, spec))
    kind = spec.scheme.kind
    notes: list[str] = []
    if method == "repeated" and kind not in ("kfold", "repeated"):
        notes.append(f"The {kind} scheme has no random shuffle, so repeating it would give "
                     "the same choice every time; rows were resampled (bootstrap) instead.")
        method = "bootstrap"
    n = int(np.asarray(data.y).size)
    ordered = kind in _ORDERED or getattr(data, "order", None) is not None
    used = method
    rng = np.random.default_rng(seed)
    L = int(block_length) if block_length else int(math.ceil(n ** (1.0 / 3.0)))
    if method == "bootstrap":
        if kind == "grouped":
            used = "group bootstrap"
            notes.append("Each resample draws whole groups with replacement.")
        elif ordered:
            used = "block bootstrap"
            notes.append(f"Each resample joins blocks of {L} consecutive rows drawn with "
                         "replacement, kept in time order (moving-block bootstrap; block "
                         "length n^(1/3), a common choice).")
        else:
            notes.append("Each resample draws rows with replacement.")
        if kind in _SHUFFLED:
            notes.append("Copies of a row are kept in the same fold (grouped folds on the "
                         "original row), so no row is validated against itself.")
    rows = []
    for i in range(R):
        if progress:
            progress(i / R, f"Resample {i + 1} of {R}")
        if method == "repeated":
            sub_data, sub_spec = data, replace(spec, seed=seed + i)
        else:
            sub_data, sub_spec = _bootstrap_case(data, spec, rng, ordered, L)
        try:
            an = analyse(sub_data, sub_spec)
        except InputProblem as exc:
            raise InputProblem(f"Resample {i + 1} of {R}: {exc.message}", code=exc.code,
                               column=exc.column) from None
        rec = an.recommendation.recommended
        rows.append({"resample": i + 1, "order": rec.order, "penalty": rec.penalty,
                     "model": cell_label(rec.order, rec.penalty),
                     "validation_mse": rec.validation_mse, "rows": int(np.asarray(sub_data.y).size)})
    chosen = pd.DataFrame(rows, columns=["resample", "order", "penalty", "model",
                                         "validation_mse", "rows"])
    table = (chosen.groupby(["order", "penalty", "model"], sort=False).size()
             .rename("count").reset_index())
    table["share"] = table["count"] / R
    table = table.sort_values(["count", "order", "penalty"], ascending=[False, True, False],
                              kind="stable").reset_index(drop=True)
    top = table.iloc[0]
    notes.insert(0, f"{top['model'][:1].upper() + top['model'][1:]} was chosen in "
                    f"{int(top['count'])} of {R} resamples ({100 * top['share']:.0f}%); "
                    + (f"{len(table)} different cells were chosen." if len(table) > 1
                       else "no other cell was chosen."))
    if progress:
        progress(1.0, "Stability done")
    return StabilityResult(table=table, chosen=chosen, method=used, notes=notes)


def _bootstrap_case(data: DataLike, spec: SweepSpec, rng: np.random.Generator,
                    ordered: bool, L: int) -> tuple[ArrayData, SweepSpec]:
    """One bootstrap resample and the spec to sweep it with."""
    n = int(np.asarray(data.y).size)
    kind = spec.scheme.kind
    if kind == "grouped" and getattr(data, "groups", None) is not None:
        codes = _codes(data.groups)
        n_groups = int(codes.max()) + 1
        members = [np.flatnonzero(codes == g) for g in range(n_groups)]
        # redraw until enough distinct groups for the folds
        for _ in range(100):
            pick = rng.integers(0, n_groups, size=n_groups)
            if np.unique(pick).size >= int(spec.scheme.folds):
                break
        rows = np.concatenate([members[g] for g in pick])
        sub = subset(data, rows)
        # copies of a group share the original label, so they stay in one fold
        return sub, spec
    rows = moving_block_rows(n, L, rng) if ordered else np.sort(rng.integers(0, n, size=n))
    sub = subset(data, rows)
    if kind in _SHUFFLED:
        folds = int(spec.scheme.folds) if kind != "loo" else 10
        folds = max(2, min(folds, np.unique(rows).size))
        sub.groups = rows.copy()
        scheme = SchemeSpec("grouped", folds=folds, group_column="(original row)",
                            order_column=spec.scheme.order_column)
        return sub, replace(spec, scheme=scheme)
    return sub, spec
