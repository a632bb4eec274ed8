"""Several targets from one table: prepared data carrying every column to predict."""
from __future__ import annotations

from dataclasses import replace
from typing import Iterable

import numpy as np
import pandas as pd

from .errors import InputProblem


def prepare_targets(frame: pd.DataFrame, targets: Iterable[str], inputs: Iterable[str] | str,
                    **roles):
    """Like `engine.loading.prepare`, for one or more targets.

    A row missing any target or input is dropped (and counted under that
    column), so every target is judged on the same rows. The result carries
    ``y`` (the first target), ``Y`` (n, T) and ``targets``.

    Parameters
    ----------
    frame : the table.
    targets : names of the columns to predict (at least one).
    inputs : names of the input columns.
    **roles : ``order_column``, ``group_column``, ``split_column`` as for ``prepare``.
    """
    from .loading import prepare

    targets = tuple(targets)
    inputs = (inputs,) if isinstance(inputs, str) else tuple(inputs)
    if not targets:
        raise InputProblem("Choose at least one target column.", code="no_target")
    if len(set(targets)) != len(targets):
        raise InputProblem("A target is listed twice; list each target once.",
                           code="duplicate_target")
    for t in targets[1:]:
        if t in inputs:
            raise InputProblem(f"Column '{t}' is both a target and an input; remove it from "
                               "the inputs.", code="target_is_input", column=str(t))
    data = prepare(frame, targets[0], inputs + targets[1:], **roles)
    d = len(inputs)
    X = np.asarray(data.X, float)
    Y = np.column_stack([np.asarray(data.y, float), X[:, d:]])
    for j, t in enumerate(targets[1:], start=1):
        col = Y[:, j]
        if col.size and np.ptp(col) == 0:
            raise InputProblem(f"Target '{t}' has the same value in every row; there is nothing "
                               "to predict.", code="constant_target", column=str(t))
    out = replace(data, X=np.ascontiguousarray(X[:, :d]), inputs=tuple(data.inputs[:d]))
    out.Y = Y
    out.targets = targets
    return out
