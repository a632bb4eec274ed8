"""Validation schemes: which rows train and which rows validate each fit."""
from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from .labels import scheme_name
from .errors import InputProblem
from .spec import SchemeSpec

MIN_TRAIN_ROWS = 3


@dataclass
class Round:
    """Splits that share one partition of the rows into pieces.

    ``pieces[i]`` is the piece of row i (-1: no split of this round uses it).
    ``train[s]`` and ``valid[s]`` are 0/1 vectors over pieces.
    """

    pieces: np.ndarray
    n_pieces: int
    train: np.ndarray  # (S, n_pieces)
    valid: np.ndarray  # (S, n_pieces)


@dataclass
class FoldPlan:
    """All splits of a scheme, grouped into rounds.

    Attributes
    ----------
    kind : scheme name.
    n_rows : rows in the data.
    rounds : piece partitions for the one-pass statistics.
    split_round : per split, ``(round, split within round)``.
    loo : True for exact leave-one-out (no explicit splits are built).
    description : one plain sentence on the scheme as run.
    train_sets, valid_sets : per split, the row indices (ascending), built on
        first use from the rounds.
    """

    kind: str
    n_rows: int
    rounds: list[Round] = field(default_factory=list)
    split_round: list[tuple[int, int]] = field(default_factory=list)
    loo: bool = False
    description: str = ""
    _sets: tuple[list[np.ndarray], list[np.ndarray]] | None = field(default=None, repr=False)

    @property
    def n_splits(self) -> int:
        return self.n_rows if self.loo else len(self.split_round)

    def _index_sets(self) -> tuple[list[np.ndarray], list[np.ndarray]]:
        if self._sets is None:
            tr_l, va_l = [], []
            for r, j in self.split_round:
                rnd = self.rounds[r]
                tr_l.append(np.flatnonzero(np.isin(rnd.pieces, np.flatnonzero(rnd.train[j]))))
                va_l.append(np.flatnonzero(np.isin(rnd.pieces, np.flatnonzero(rnd.valid[j]))))
            self._sets = (tr_l, va_l)
        return self._sets

    @property
    def train_sets(self) -> list[np.ndarray]:
        return self._index_sets()[0]

    @property
    def valid_sets(self) -> list[np.ndarray]:
        return self._index_sets()[1]


def _partition_round(labels: np.ndarray, n_folds: int) -> Round:
    """A round where each fold label is one piece and fold k validates on piece k."""
    eye = np.eye(n_folds, dtype=np.int8)
    return Round(labels.astype(np.int64), n_folds, (1 - eye).astype(np.int8), eye)


def _shuffled_fold_labels(n: int, k: int, rs: np.random.RandomState) -> np.ndarray:
    """Fold of each row, dealt exactly as scikit-learn's ``KFold(shuffle=True)``."""
    indices = np.arange(n)
    rs.shuffle(indices)
    sizes = np.full(k, n // k, dtype=int)
    sizes[: n % k] += 1
    labels = np.empty(n, dtype=np.int64)
    labels[indices] = np.repeat(np.arange(k), sizes)
    return labels


def _round_from_splits(n: int, train_sets, valid_sets) -> Round:
    """Partition rows by their role in each split (train / validate / unused)."""
    S = len(train_sets)
    sig = np.zeros((S, n), dtype=np.int8)
    for s, (tr, va) in enumerate(zip(train_sets, valid_sets)):
        sig[s, tr] = 1
        sig[s, va] = 2
    if S <= 39:
        code = np.zeros(n, dtype=np.int64)
        for s in range(S):
            code = code * 3 + sig[s]
        uniq, rep, pieces = np.unique(code, return_index=True, return_inverse=True)
    else:
        uniq_cols, rep, pieces = np.unique(sig.T, axis=0, return_index=True, return_inverse=True)
        pieces = pieces.ravel()
    # number pieces by first appearance in row order, so that contiguous row
    # ranges (blocks in time) are contiguous piece ranges (cheap combinations)
    first = np.argsort(rep, kind="stable")
    renumber = np.empty_like(first)
    renumber[first] = np.arange(first.size)
    pieces = renumber[np.asarray(pieces).ravel()]
    rep = rep[first]
    used = sig.any(axis=0)
    pieces = np.where(used, pieces, -1)
    n_pieces = int(rep.size)
    train = (sig[:, rep] == 1).astype(np.int8)
    valid = (sig[:, rep] == 2).astype(np.int8)
    return Round(pieces.astype(np.int64), n_pieces, train, valid)


def _check_counts(kind: str, train_counts, valid_counts,
                  n_terms_needed: int = MIN_TRAIN_ROWS) -> None:
    for s, (tr, va) in enumerate(zip(train_counts, valid_counts)):
        if va == 0:
            raise InputProblem(f"Fold {s + 1} of the {kind} scheme has no rows to validate on; "
                               "use fewer folds or more rows.", code="too_few_rows")
        if tr < n_terms_needed:
            raise InputProblem(
                f"Fold {s + 1} of the {kind} scheme leaves only {tr} training rows; "
                f"at least {n_terms_needed} are needed. Use fewer folds, a smaller gap, "
                "or more rows.", code="too_few_rows")


def make_plan(scheme: SchemeSpec, n_rows: int, *, seed: int = 0,
              groups: np.ndarray | None = None,
              split_labels: np.ndarray | None = None) -> FoldPlan:
    """Build the splits of ``scheme`` for ``n_rows`` rows in their given order.

    Rows are assumed sorted along the order/time column when the scheme needs
    an order (blocked, holdout); `engine.loading.prepare` sorts them.

    Parameters
    ----------
    scheme : the scheme request.
    n_rows : number of rows.
    seed : seed of the shuffles (kfold, repeated).
    groups : group label per row (grouped).
    split_labels : fold label per row (column).

    Returns
    -------
    FoldPlan
    """
    scheme.validate()
    n = int(n_rows)
    kind = scheme.kind
    k = int(scheme.folds)
    idx = np.arange(n)
    if n < MIN_TRAIN_ROWS + 1:
        raise InputProblem(f"Only {n} usable rows: at least {MIN_TRAIN_ROWS + 1} are needed to "
                           "train and validate a model.", code="too_few_rows")
    if kind == "loo":
        return FoldPlan("loo", n, loo=True,
                        description=f"{scheme_name('loo')}: each of {n} rows held out once (exact, from one fit per model).")

    if kind in ("kfold", "repeated", "blocked") and n < k:
        raise InputProblem(f"{k} folds need at least {k} rows; the data have {n}. "
                           "Use fewer folds.", code="too_few_rows")
    rounds_sets: list[tuple[list, list]] = []
    if kind in ("kfold", "repeated"):
        # the same folds as scikit-learn's KFold(shuffle=True) / RepeatedKFold with this seed
        r = 1 if kind == "kfold" else int(scheme.repeats)
        rs = np.random.RandomState(seed)
        plan = FoldPlan(kind, n, description=(
            f"{scheme_name(kind)}: {k} folds dealt at random (seed {seed})." if r == 1 else
            f"{scheme_name(kind)}: {k} folds dealt at random, {r} times (seed {seed})."))
        for i in range(r):
            labels = _shuffled_fold_labels(n, k, rs)
            counts = np.bincount(labels, minlength=k)
            _check_counts(kind, n - counts, counts)
            plan.rounds.append(_partition_round(labels, k))
            plan.split_round.extend((i, j) for j in range(k))
        return plan
    elif kind == "blocked":
        g = int(scheme.gap)
        tr_list, va_list = [], []
        # contiguous blocks sized as scikit-learn's KFold(shuffle=False) sizes them
        sizes = np.full(k, n // k, dtype=int)
        sizes[: n % k] += 1
        for start, stop in zip(np.r_[0, np.cumsum(sizes)[:-1]], np.cumsum(sizes)):
            va = idx[start:stop]
            lo, hi = va[0], va[-1]
            keep = (idx < lo - g) | (idx > hi + g)
            tr_list.append(idx[keep])
            va_list.append(va)
        rounds_sets.append((tr_list, va_list))
        desc = (f"{scheme_name(kind)}: {k} contiguous blocks in time order, {g} rows dropped from training on "
                "each side of the held-out block.")
    elif kind == "grouped":
        if groups is None:
            raise InputProblem("Grouped folds need a group column.", code="bad_scheme")
        g_codes, g_uniq = label_codes(groups)
        if g_uniq < k:
            raise InputProblem(f"The group column has {g_uniq} distinct groups, fewer than the "
                               f"{k} folds asked for. Use at most {g_uniq} folds.",
                               code="too_few_groups", column=scheme.group_column)
        from sklearn.model_selection import GroupKFold   # imported only when groups are used

        sp = list(GroupKFold(n_splits=k).split(idx, groups=g_codes))
        rounds_sets.append(([np.sort(a) for a, _ in sp], [np.sort(b) for _, b in sp]))
        desc = f"{scheme_name(kind)}: {k} folds; each of {g_uniq} groups held out whole."
    elif kind == "holdout":
        f = float(scheme.holdout_fraction)
        n_test = int(round(n * f))
        n_test = min(max(n_test, 1), n - MIN_TRAIN_ROWS)
        rounds_sets.append(([idx[:n - n_test]], [idx[n - n_test:]]))
        desc = (f"{scheme_name(kind)}: trained on the first {n - n_test} rows in time order, "
                f"tested on the last {n_test}.")
    elif kind == "column":
        if split_labels is None:
            raise InputProblem("A user split needs a split column.", code="bad_scheme")
        labels = np.asarray(split_labels)
        text = np.array([str(v).strip().lower() for v in labels])
        vals = set(text.tolist())
        train_words, test_words = {"train", "training"}, {"test", "validation", "valid", "holdout"}
        if vals <= (train_words | test_words) and vals & train_words and vals & test_words:
            tr = idx[np.isin(text, list(train_words))]
            va = idx[np.isin(text, list(test_words))]
            rounds_sets.append(([tr], [va]))
            desc = f"{scheme_name(kind)}: {len(tr)} training rows, {len(va)} test rows."
        else:
            codes, nu = label_codes(labels)
            if nu < 2:
                raise InputProblem("The split column has a single value; it needs at least two "
                                   "fold labels, or the values train and test.",
                                   code="bad_split_column", column=scheme.split_column)
            tr_l = [idx[codes != c] for c in range(nu)]
            va_l = [idx[codes == c] for c in range(nu)]
            rounds_sets.append((tr_l, va_l))
            desc = f"{scheme_name(kind)}: {nu} folds, one per distinct value."
    else:  # pragma: no cover - validate() rejects it
        raise InputProblem(f"Unknown scheme {kind}.", code="bad_scheme")

    plan = FoldPlan(kind, n, description=desc)
    for r, (trs, vas) in enumerate(rounds_sets):
        _check_counts(kind, [len(t) for t in trs], [len(v) for v in vas])
        plan.rounds.append(_round_from_splits(n, trs, vas))
        plan.split_round.extend((r, j) for j in range(len(trs)))
    plan._sets = ([np.asarray(t, dtype=np.int64) for trs, _ in rounds_sets for t in trs],
                  [np.asarray(v, dtype=np.int64) for _, vas in rounds_sets for v in vas])
    return plan


def label_codes(values) -> tuple[np.ndarray, int]:
    """Integer code 0..k-1 of each label (any type) and the number k of distinct labels."""
    arr = np.asarray(values)
    _, inv = np.unique(arr.astype(str) if arr.dtype == object else arr, return_inverse=True)
    inv = inv.ravel()
    return inv, int(inv.max()) + 1 if inv.size else 0
