"""Default roles for a table: which column to predict and which to use as inputs.

A user who uploads a table should start from roles they would have picked
themselves, and be told why the defaults are what they are:

* the target is a column of measurements (many distinct values), taken from
  an end of the table: the last numeric column when it holds measurements,
  else the first, else the last such column anywhere; columns of a few whole
  numbers (codes such as a region or a cylinder count), row numbers and clocks
  are passed over, each with its reason;
* the inputs are the other numeric columns, less row numbers, the order
  column, and any column that reproduces the target almost exactly
  (`engine.leakage.find_reproductions`), each left out with its reason.

Only the engine's arrays and pandas are used; the page and the command line
show the reasons.
"""
from __future__ import annotations

import re
from dataclasses import dataclass, field
from typing import Iterable

import numpy as np
import pandas as pd

from . import leakage

#: A column of whole numbers with at most this many distinct values reads as a
#: code or a small count rather than a measurement (chosen here).
CODE_LEVELS = 20
#: Names that say "the quantity to predict" in any trade (exact, case-insensitive).
TARGET_NAMES = ("y", "target", "response", "outcome")
#: Names that read like a clock or a counter.
CLOCK = re.compile(r"(?i)(time|minute|hour|second|date|day|index|seq|step|sample|^t$|^row)")
#: Names a row-number column goes by (whole name, case-insensitive).
ROW_NUMBER_NAMES = re.compile(r"(?i)^\s*(id|#|no\.?|nr|num|number|n|obs|observation|"
                              r"row[ _]?(number|no|nr|id)?|unnamed:?\s*\d*|.*[_ ]id)\s*$")
#: Fewest complete rows on which the leakage screen runs.
SCREEN_MIN_ROWS = 10


@dataclass
class DefaultRoles:
    """Suggested roles and the reasons behind them.

    Attributes
    ----------
    target : the column to predict (None for a table without numeric columns).
    inputs : the input columns, in table order.
    order_column : a clock-like column offered as the order column, or None.
    target_reason : one sentence on why this target.
    passed_over : columns not taken as the target, with the reason.
    left_out : numeric columns left out of the inputs, with the reason.
    """

    target: str | None
    inputs: tuple[str, ...]
    order_column: str | None = None
    target_reason: str = ""
    passed_over: dict[str, str] = field(default_factory=dict)
    left_out: dict[str, str] = field(default_factory=dict)

    def sentences(self) -> list[str]:
        """Plain sentences for the page or the command line."""
        out = [self.target_reason] if self.target_reason else []
        if self.left_out:
            out.append("Left out of the inputs: " + "; ".join(
                f"{c} ({why})" for c, why in self.left_out.items()) + ".")
        return out


def _values(frame: pd.DataFrame, col: str) -> np.ndarray:
    series = frame[col]
    if series.dtype == np.float64:      # already numbers, NaN for missing: no copy (read only)
        return series.to_numpy()
    return pd.to_numeric(series, errors="coerce").to_numpy(dtype=float, na_value=np.nan)


def column_kind(values: np.ndarray, name: str = "") -> str:
    """What a numeric column looks like.

    Returns
    -------
    ``'clock'`` (a clock-like name and values that only increase),
    ``'row_number'`` (0 or 1, then rising by one in every row, under a name
    such as id, no or an unnamed index),
    ``'code'`` (two values, or whole numbers with at most `CODE_LEVELS`
    distinct values repeated on average at least twice),
    ``'measurement'`` otherwise.
    """
    v = np.asarray(values, float)
    v = v[np.isfinite(v)]
    if v.size < 2:
        return "code"
    whole = bool(np.all(v == np.round(v)))
    d = np.diff(v)
    if CLOCK.search(str(name)) and v.size > 2 and np.all(d > 0):
        return "clock"
    if (whole and v.size > 2 and v[0] in (0.0, 1.0) and np.all(d == 1)
            and ROW_NUMBER_NAMES.match(str(name) or "#")):
        return "row_number"
    levels = np.unique(v).size
    if levels <= 2 or (whole and levels <= CODE_LEVELS and levels <= v.size / 2):
        return "code"
    return "measurement"


_KIND_WHY = {
    "row_number": "numbers the rows 1, 2, 3, …: a row number, not a measurement",
    "clock": "a clock or counter that only increases",
    "code": "holds a few whole numbers or two values, like a code or a small count",
}


def pick_target(frame: pd.DataFrame, numeric: list[str]) -> tuple[str | None, str, dict[str, str]]:
    """The default target, the reason, and the columns passed over with theirs."""
    if not numeric:
        return None, "", {}
    kinds = {c: column_kind(_values(frame, c), c) for c in numeric}
    good = [c for c in numeric if kinds[c] == "measurement"]
    for c in numeric:
        if str(c).strip().lower() in TARGET_NAMES and kinds[c] == "measurement":
            return c, f"Default target {c}: its name says it is the quantity to predict.", {}
    passed = {c: _KIND_WHY[kinds[c]] for c in numeric if kinds[c] != "measurement"}
    if not good:
        return (numeric[-1], f"Default target {numeric[-1]}: the last numeric column (no column "
                "holds many distinct values; check this choice).", passed)
    if numeric[-1] in good:
        target, where = numeric[-1], "the last numeric column"
    elif numeric[0] in good:
        target, where = numeric[0], "the first numeric column"
    else:
        target, where = good[-1], "the last numeric column"
    why = f"Default target {target}: {where} that holds measurements"
    trailing = numeric[max(numeric.index(c) for c in good) + 1:]
    if trailing:
        why += (f"; {', '.join(trailing)} at the end of the table "
                f"{'holds' if len(trailing) == 1 else 'hold'} codes, counts or row numbers")
    return target, why + ". Choose another above if it is not what you want to predict.", passed


def screen_inputs(frame: pd.DataFrame, target: str, candidates: Iterable[str]
                  ) -> tuple[list[str], dict[str, str]]:
    """Candidate inputs less row numbers and columns that reproduce the target.

    A column that reproduces the target is left out when other inputs remain
    or the relation is exact (the rule of `engine.checks.check_target_leakage`);
    a sole input that tracks the target inexactly (a calibration) stays.

    Returns
    -------
    (inputs, left_out): the kept inputs in the given order and, for each left
    out column, the reason.
    """
    cands = [c for c in candidates if c != target]
    left: dict[str, str] = {}
    for c in cands:
        # only a row-number name can hold a row number: look at the values of those only
        if ROW_NUMBER_NAMES.match(str(c) or "#") and \
                column_kind(_values(frame, c), c) == "row_number":
            left[c] = _KIND_WHY["row_number"]
    rest = [c for c in cands if c not in left]
    if rest:
        y = _values(frame, target)
        columns = [_values(frame, c) for c in rest]     # the frame's own arrays (read only)
        ok = np.isfinite(y)
        for v in columns:
            ok &= np.isfinite(v)
        if ok.all():
            X = columns     # every row complete: the screen reads the columns, no copy
        else:
            X = np.empty((y.size, len(rest)), order="F")     # columns written and read whole
            for j, v in enumerate(columns):
                X[:, j] = v
            X, y = X[ok], y[ok]
        if ok.sum() >= SCREEN_MIN_ROWS and np.ptp(y) > 0:
            found = leakage.find_reproductions(X, y, rest, str(target))
            named = {c for r in found for c in r.columns}
            others = [c for c in rest if c not in named]
            for r in found:
                if not (r.exact or others):   # the only inputs, inexactly: a calibration
                    continue
                for c in r.columns:
                    left.setdefault(c, "it reproduces the target almost exactly: "
                                    + leakage.describe(r, str(target)))
    kept = [c for c in cands if c not in left]
    if not kept:    # never leave nothing: keep the columns and let the checks speak
        kept, left = cands, {}
    return kept, left


def default_roles(frame: pd.DataFrame, numeric: list[str], max_inputs: int = 40) -> DefaultRoles:
    """Roles a user would pick for an uploaded table, with the reasons.

    Parameters
    ----------
    frame : the table (``LoadedTable.frame``).
    numeric : its usable numeric columns, in table order.
    max_inputs : most inputs listed by name.

    Returns
    -------
    DefaultRoles
    """
    numeric = [str(c) for c in numeric]
    target, reason, passed = pick_target(frame, numeric)
    if target is None:
        return DefaultRoles(None, ())
    order_col = None
    if len(numeric) > 2:
        for c in numeric:
            if c != target and column_kind(_values(frame, c), c) == "clock":
                order_col = c
                break
    cands = [c for c in numeric if c not in (target, order_col)]
    inputs, left = screen_inputs(frame, target, cands)
    return DefaultRoles(target, tuple(inputs[:max_inputs]), order_col, reason, passed, left)
