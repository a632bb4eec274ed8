"""Past values as terms: lagged inputs and autoregressive target terms.

With rows in time order (sorted by the order/time column, or in file order),
lag ``l`` of a column is its value ``l`` rows earlier; with a group column the
lags are taken inside each group, so one batch never borrows values from
another. The design is built once at the deepest lag of the request; every
shallower depth is a subset of its columns, so one pass of statistics serves
every depth. To keep the rows comparable across depths, the first ``L_max``
rows of each group (they lack ``L_max`` past values) are left out at every
depth, and the count is reported.
"""
from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from .errors import InputProblem

#: schemes that keep later rows out of the fit of earlier ones (needed with target lags)
TIME_SCHEMES = ("blocked", "holdout")

TARGET_LAG_REASON = (
    "With past values of the target as terms, each row carries the targets of the rows "
    "just before it. Shuffled or grouped folds would then train on rows whose terms are "
    "the very targets being validated, and the validation error would flatter the model. "
    "Only blocked folds with a gap at least as wide as the deepest target lag, or a "
    "later-period holdout, keep those rows apart.")


def lag_name(column: str, lag: int) -> str:
    """Name of the term holding ``column`` ``lag`` rows back (``x_lag2``)."""
    return str(column) if lag == 0 else f"{column}_lag{int(lag)}"


@dataclass(frozen=True)
class LagSpec:
    """Which past values become terms, and which depths the sweep compares.

    Parameters
    ----------
    inputs : inputs whose past values become terms; empty means every input.
    depths : input lag depths to compare; depth ``L`` uses lags ``0..L`` of
        each lagged input (0 = the current value only).
    target_depths : target lag depths to compare; depth ``L`` adds the
        target's lags ``1..L`` (autoregressive terms; 0 = none).
    """

    inputs: tuple[str, ...] = ()
    depths: tuple[int, ...] = (0,)
    target_depths: tuple[int, ...] = (0,)

    def __post_init__(self) -> None:
        object.__setattr__(self, "inputs", tuple(str(v) for v in self.inputs))
        object.__setattr__(self, "depths", tuple(sorted({int(v) for v in self.depths})))
        object.__setattr__(self, "target_depths",
                           tuple(sorted({int(v) for v in self.target_depths})))

    @property
    def max_input_depth(self) -> int:
        return max(self.depths) if self.depths else 0

    @property
    def max_target_depth(self) -> int:
        return max(self.target_depths) if self.target_depths else 0

    @property
    def max_depth(self) -> int:
        """Rows each group loses at its start (the deepest lag of any kind)."""
        return max(self.max_input_depth, self.max_target_depth)

    def validate(self, inputs: tuple[str, ...], scheme) -> None:
        """Raise `InputProblem` for depths or a scheme that cannot be used."""
        if not self.depths or not self.target_depths:
            raise InputProblem("Give at least one lag depth for the inputs and one for the "
                               "target (0 = no past values).", code="bad_lags")
        for v in self.depths + self.target_depths:
            if v < 0 or v > 200:
                raise InputProblem(f"Lag depths must be whole numbers from 0 to 200 (got {v}).",
                                   code="bad_lags")
        for name in self.inputs:
            if name not in inputs:
                raise InputProblem(f"Column '{name}' is chosen for lags but is not one of the "
                                   "inputs; add it to the inputs or drop it from the lags.",
                                   code="bad_lags", column=name)
        if (self.max_depth > 0 and getattr(scheme, "rows_in_time_order", None) is False
                and not scheme.order_column):
            raise InputProblem("Past values need rows in time order: choose an order/time "
                               "column, or say that the file's rows are in time order.",
                               code="lags_need_order")
        if self.max_target_depth > 0:
            kind = scheme.kind
            if kind not in TIME_SCHEMES:
                raise InputProblem(
                    f"Past values of the target cannot be validated with the '{kind}' scheme. "
                    + TARGET_LAG_REASON + " Choose blocked folds or a later-period holdout, "
                    "or set the target lag depths to 0.", code="lags_need_time_scheme")
            if kind == "blocked" and int(scheme.gap) < self.max_target_depth:
                raise InputProblem(
                    f"Blocked folds need a gap of at least {self.max_target_depth} rows (the "
                    f"deepest target lag); the gap is {int(scheme.gap)}. " + TARGET_LAG_REASON,
                    code="lags_need_time_scheme")

    def to_dict(self) -> dict:
        return {"inputs": list(self.inputs), "depths": list(self.depths),
                "target_depths": list(self.target_depths)}

    @classmethod
    def from_dict(cls, d: dict | None) -> "LagSpec | None":
        if d is None:
            return None
        return cls(inputs=tuple(d.get("inputs", ())), depths=tuple(d.get("depths", (0,))),
                   target_depths=tuple(d.get("target_depths", (0,))))


@dataclass
class LaggedDesign:
    """The design at the deepest lag, on the rows every depth shares.

    Attributes
    ----------
    X : (m, c) current and past values of the inputs, and past values of the
        targets, on the kept rows (still in time order).
    columns : name of each column of ``X``.
    source : per column, the input index it comes from, or ``-(t + 1)`` for
        target ``t``.
    lag : per column, how many rows back.
    Y : (m, T) the targets on the kept rows.
    kept : positions of the kept rows in the prepared rows.
    rows_dropped : rows left out at the start of the groups.
    groups_dropped : groups shorter than the deepest lag plus one row.
    note : one plain sentence on the rows left out.
    """

    X: np.ndarray
    columns: tuple[str, ...]
    source: np.ndarray
    lag: np.ndarray
    Y: np.ndarray
    kept: np.ndarray
    rows_dropped: int
    groups_dropped: int = 0
    n_groups: int = 1
    note: str = ""
    extra: dict = field(default_factory=dict)

    def columns_for(self, input_depth: int, target_depth: int, target: int = 0,
                    lagged: np.ndarray | None = None) -> np.ndarray:
        """Column positions of one (input depth, target depth) cell for ``target``.

        ``lagged`` marks the inputs whose past values are used (others keep
        only their current value).
        """
        src, lag = self.source, self.lag
        is_input = src >= 0
        if lagged is None:
            lagged = np.ones(int(src[is_input].max()) + 1 if is_input.any() else 0, bool)
        use_lag = np.zeros(src.shape, bool)
        use_lag[is_input] = lagged[src[is_input]]
        keep_in = is_input & ((lag == 0) | (use_lag & (lag <= input_depth)))
        keep_y = (src == -(target + 1)) & (lag <= target_depth)
        return np.flatnonzero(keep_in | keep_y)


def build_lagged_design(X: np.ndarray, Y: np.ndarray, inputs: tuple[str, ...],
                        targets: tuple[str, ...], lags: LagSpec,
                        groups: np.ndarray | None = None) -> LaggedDesign:
    """Current and past values of the inputs and targets, per group.

    Parameters
    ----------
    X : (n, d) inputs, rows in time order.
    Y : (n,) or (n, T) targets, same rows.
    inputs, targets : names.
    lags : which columns get past values and how deep.
    groups : group label per row; lags never cross groups.

    Returns
    -------
    LaggedDesign
        Columns: every input's current value, then lags 1..L of each lagged
        input, then lags 1..L of each target. Rows: all but the first ``L``
        of each group, with ``L`` the deepest lag of the request.
    """
    X = np.asarray(X, float)
    X = X[:, None] if X.ndim == 1 else X
    Y = np.asarray(Y, float)
    Y = Y[:, None] if Y.ndim == 1 else Y
    n, d = X.shape
    L = lags.max_depth
    lag_in = [j for j, name in enumerate(inputs) if not lags.inputs or name in lags.inputs]
    if groups is None:
        codes, n_groups = np.zeros(n, dtype=np.int64), 1
    else:
        from .schemes import label_codes
        codes, n_groups = label_codes(groups)
    # position of each row within its group, and the row l steps back in the same group
    order = np.argsort(codes, kind="stable")
    sc = codes[order]
    starts = np.r_[0, np.flatnonzero(np.diff(sc)) + 1]
    pos_sorted = np.arange(n) - np.repeat(starts, np.diff(np.r_[starts, n]))
    pos = np.empty(n, dtype=np.int64)
    pos[order] = pos_sorted

    def back(col: np.ndarray, l: int) -> np.ndarray:
        out = np.full(n, np.nan)
        if l < n:
            src_sorted = col[order]
            shifted = np.full(n, np.nan)
            shifted[l:] = src_sorted[:n - l]
            shifted[pos_sorted < l] = np.nan
            out[order] = shifted
        return out

    cols, names, source, lag = [], [], [], []
    for j in range(d):
        cols.append(X[:, j]), names.append(str(inputs[j])), source.append(j), lag.append(0)
    for j in lag_in:
        for l in range(1, lags.max_input_depth + 1):
            cols.append(back(X[:, j], l)), names.append(lag_name(inputs[j], l))
            source.append(j), lag.append(l)
    if lags.max_target_depth > 0:
        for t in range(Y.shape[1]):
            for l in range(1, lags.max_target_depth + 1):
                cols.append(back(Y[:, t], l)), names.append(lag_name(targets[t], l))
                source.append(-(t + 1)), lag.append(l)
    keep = pos >= L
    kept = np.flatnonzero(keep)
    sizes = np.bincount(codes, minlength=n_groups)
    groups_dropped = int(np.sum(sizes <= L))
    dropped = int(n - kept.size)
    if kept.size == 0:
        raise InputProblem(
            f"A lag depth of {L} leaves no rows: every {'group' if groups is not None else 'table'} "
            f"has at most {int(sizes.max()) if sizes.size else 0} rows. Choose smaller lag depths.",
            code="too_few_rows")
    if L == 0:
        note = ""
    elif groups is None:
        note = (f"The first {L} rows lack {L} past values and are left out at every lag depth "
                "(so that every depth is judged on the same rows).")
    else:
        note = (f"{dropped} rows left out: the first {L} rows of each of {n_groups} groups lack "
                f"{L} past values (lags never cross groups); they are left out at every lag "
                "depth so that every depth is judged on the same rows.")
        if groups_dropped:
            note += f" {groups_dropped} groups have no more than {L} rows and are left out whole."
    Z = np.column_stack(cols)[kept]
    return LaggedDesign(X=Z, columns=tuple(names), source=np.array(source, dtype=np.int64),
                        lag=np.array(lag, dtype=np.int64), Y=Y[kept], kept=kept,
                        rows_dropped=dropped, groups_dropped=groups_dropped, n_groups=n_groups,
                        note=note)
