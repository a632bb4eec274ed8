"""Validation schemes: which rows train and which rows validate each fit."""
from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
from sklearn.model_selection import GroupKFold, KFold, RepeatedKFold

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
    train_sets, valid_sets : per split, the row indices (ascending).
    rounds : piece partitions for the one-pass statistics.
    loo : True for exact leave-one-out (no explicit splits are built).
    description : one plain sentence on the scheme as run.
    """

    kind: str
    n_rows: int
    train_sets: list[np.ndarray] = field(default_factory=list)
    valid_sets: list[np.ndarray] = field(default_factory=list)
    rounds: list[Round] = field(default_factory=list)
    split_round: list[tuple[int, int]] = field(default_factory=list)
    loo: bool = False
    description: str = ""

    @property
    def n_splits(self) -> int:
        return self.n_rows if self.loo else len(self.valid_sets)


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
        uniq, pieces = np.unique(code, return_inverse=True)
        rep = np.array([np.flatnonzero(pieces == k)[0] for k in range(uniq.size)])
    else:
        uniq_cols, pieces = np.unique(sig.T, axis=0, return_inverse=True)
        pieces = pieces.ravel()
        rep = np.array([np.flatnonzero(pieces == k)[0] for k in range(uniq_cols.shape[0])])
    used = sig.any(axis=0)
    pieces = np.where(used, pieces, -1)
    n_pieces = int(rep.size)
    train = (sig[:, rep] == 1).astype(np.int8)
    valid = (sig[:, rep] == 2).astype(np.int8)
    return Round(pieces.astype(np.int64), n_pieces, train, valid)


def _check_splits(kind: str, train_sets, valid_sets, n_terms_needed: int = MIN_TRAIN_ROWS) -> None:
    for s, (tr, va) in enumerate(zip(train_sets, valid_sets)):
        if len(va) == 0:
            raise InputProblem(f"Fold {s + 1} of the {kind} scheme has no rows to validate on; "
                               "use fewer folds or more rows.", code="too_few_rows")
        if len(tr) < n_terms_needed:
            raise InputProblem(
                f"Fold {s + 1} of the {kind} scheme leaves only {len(tr)} training rows; "
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
                        description=f"Leave-one-out over {n} rows (exact, from one fit per model).")

    if kind in ("kfold", "repeated", "blocked") and n < k:
        raise InputProblem(f"{k} folds need at least {k} rows; the data have {n}. "
                           "Use fewer folds.", code="too_few_rows")
    rounds_sets: list[tuple[list, list]] = []
    if kind == "kfold":
        sp = list(KFold(n_splits=k, shuffle=True, random_state=seed).split(idx))
        rounds_sets.append(([a for a, _ in sp], [b for _, b in sp]))
        desc = f"Shuffled {k}-fold cross-validation (seed {seed})."
    elif kind == "repeated":
        r = int(scheme.repeats)
        sp = list(RepeatedKFold(n_splits=k, n_repeats=r, random_state=seed).split(idx))
        for i in range(r):
            chunk = sp[i * k:(i + 1) * k]
            rounds_sets.append(([a for a, _ in chunk], [b for _, b in chunk]))
        desc = f"Shuffled {k}-fold cross-validation repeated {r} times (seed {seed})."
    elif kind == "blocked":
        g = int(scheme.gap)
        tr_list, va_list = [], []
        for _, va in KFold(n_splits=k, shuffle=False).split(idx):
            lo, hi = va[0], va[-1]
            keep = (idx < lo - g) | (idx > hi + g)
            tr_list.append(idx[keep])
            va_list.append(va)
        rounds_sets.append((tr_list, va_list))
        desc = (f"{k} contiguous blocks in time order, {g} rows dropped from training on "
                "each side of the held-out block.")
    elif kind == "grouped":
        if groups is None:
            raise InputProblem("Grouped folds need a group column.", code="bad_scheme")
        g_codes, g_uniq = _codes(groups)
        if g_uniq < k:
            raise InputProblem(f"The group column has {g_uniq} distinct groups, fewer than the "
                               f"{k} folds asked for. Use at most {g_uniq} folds.",
                               code="too_few_groups", column=scheme.group_column)
        sp = list(GroupKFold(n_splits=k).split(idx, groups=g_codes))
        rounds_sets.append(([np.sort(a) for a, _ in sp], [np.sort(b) for _, b in sp]))
        desc = f"Grouped {k}-fold: each of {g_uniq} groups held out whole."
    elif kind == "holdout":
        f = float(scheme.holdout_fraction)
        n_test = int(round(n * f))
        n_test = min(max(n_test, 1), n - MIN_TRAIN_ROWS)
        rounds_sets.append(([idx[:n - n_test]], [idx[n - n_test:]]))
        desc = (f"Later-period holdout: trained on the first {n - n_test} rows in time order, "
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
            desc = f"Your split column: {len(tr)} training rows, {len(va)} test rows."
        else:
            codes, nu = _codes(labels)
            if nu < 2:
                raise InputProblem("The split column has a single value; it needs at least two "
                                   "fold labels, or the values train and test.",
                                   code="bad_split_column", column=scheme.split_column)
            tr_l = [idx[codes != c] for c in range(nu)]
            va_l = [idx[codes == c] for c in range(nu)]
            rounds_sets.append((tr_l, va_l))
            desc = f"Your split column: {nu} folds, one per distinct value."
    else:  # pragma: no cover - validate() rejects it
        raise InputProblem(f"Unknown scheme {kind}.", code="bad_scheme")

    plan = FoldPlan(kind, n, description=desc)
    for r, (trs, vas) in enumerate(rounds_sets):
        _check_splits(kind, trs, vas)
        rnd = _round_from_splits(n, trs, vas)
        for s, (tr, va) in enumerate(zip(trs, vas)):
            plan.train_sets.append(np.asarray(tr, dtype=np.int64))
            plan.valid_sets.append(np.asarray(va, dtype=np.int64))
            plan.split_round.append((r, s))
        plan.rounds.append(rnd)
    return plan


def _codes(values) -> tuple[np.ndarray, int]:
    arr = np.asarray(values)
    _, inv = np.unique(arr.astype(str) if arr.dtype == object else arr, return_inverse=True)
    inv = inv.ravel()
    return inv, int(inv.max()) + 1 if inv.size else 0
