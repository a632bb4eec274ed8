"""Side-by-side candidates: fitted curves past the data and predictions per row."""
from __future__ import annotations

import numpy as np
import pandas as pd

from .analysis import DataLike, checked_range, fit_cell
from .design import PolynomialBasis
from .summaries import LARGE_ROWS, summarise_rows
from .final_fit import FinalModel, attach_text_inputs
from .labels import penalty_text
from .spec import SweepSpec
from .threads import one_thread


def fit_candidates(data: DataLike, spec: SweepSpec, cells: list[tuple[int, float]],
                   family: str = "ridge", l1_ratio: float = 0.0,
                   summary=None) -> dict[tuple[int, float], FinalModel]:
    """Fit each (order, penalty) cell on all rows, all in one penalty family.

    From `engine.summaries.LARGE_ROWS` rows on, every cell is solved from one
    shared pass of cross-product summaries at the highest order asked for
    (`engine.final_fit.fit_final` with ``summary``); below, by QR on the rows.
    ``summary``: all-rows summaries of ``data`` already formed (for example
    `engine.analysis.Analysis.all_rows_summary`), used instead of that pass
    when they reach the highest order asked for.

    Returns
    -------
    dict mapping ``(order, penalty)`` to its `FinalModel`, in the given order.
    """
    out: dict[tuple[int, float], FinalModel] = {}
    keys = list(dict.fromkeys((int(q), float(a)) for q, a in cells))
    with one_thread():
        large = keys and np.asarray(data.y).size >= LARGE_ROWS
        if not large or summary is None or summary.basis.max_order < max(q for q, _ in keys):
            summary = None
        if large and summary is None:
            # one pass over the rows at the highest order serves every candidate
            basis = PolynomialBasis.fit(np.asarray(data.X, float), spec.inputs,
                                        max(q for q, _ in keys), spec.interactions)
            summary = summarise_rows(data.X, data.y, basis)
        x_range = checked_range(data, spec) if len(keys) > 1 else None
        for key in keys:
            out[key] = attach_text_inputs(
                fit_cell(data, spec, key[0], key[1], summary=summary, family=family,
                         l1_ratio=l1_ratio, x_range=x_range), getattr(data, "factors", None))
    return out


def cell_label(order: int, penalty: float) -> str:
    """Short label of a cell, e.g. ``order 3, penalty 0.1``."""
    return f"order {order}" + ("" if penalty == 0 else f", penalty {penalty_text(penalty)}")


def curve_table(models: dict[tuple[int, float], FinalModel], x_min: float, x_max: float,
                extend: float = 0.25, points: int = 241) -> pd.DataFrame:
    """Predictions of one-input models on a grid reaching past the training range.

    Parameters
    ----------
    models : fitted one-input models.
    x_min, x_max : training range of the input.
    extend : how far past each end, as a share of the range.
    points : grid size.

    Returns
    -------
    DataFrame with ``x``, ``prediction``, ``model`` (label), ``order``,
    ``penalty`` and ``inside`` (True within the training range).
    """
    span = x_max - x_min if x_max > x_min else max(abs(x_min), 1.0)
    grid = np.linspace(x_min - extend * span, x_max + extend * span, points)
    grid = np.unique(np.r_[grid, x_min, x_max])
    frames = []
    for (q, a), m in models.items():
        frames.append(pd.DataFrame({
            "x": grid, "prediction": m.predict(grid[:, None]), "model": cell_label(q, a),
            "order": q, "penalty": a, "inside": (grid >= x_min) & (grid <= x_max)}))
    return pd.concat(frames, ignore_index=True) if frames else pd.DataFrame(
        columns=["x", "prediction", "model", "order", "penalty", "inside"])


def prediction_table(models: dict[tuple[int, float], FinalModel], data: DataLike) -> pd.DataFrame:
    """In-sample predictions and residuals of each model on every row.

    Returns
    -------
    DataFrame with ``row``, ``actual``, ``prediction``, ``residual``, ``model``,
    ``order``, ``penalty``.
    """
    frames = []
    y = np.asarray(data.y, float)
    for (q, a), m in models.items():
        pred = m.predict(data.X)
        frames.append(pd.DataFrame({
            "row": np.arange(1, y.size + 1), "actual": y, "prediction": pred,
            "residual": y - pred, "model": cell_label(q, a), "order": q, "penalty": a}))
    return pd.concat(frames, ignore_index=True)
