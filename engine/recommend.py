"""Choosing a cell: the best one and the simplest one within one standard error."""
from __future__ import annotations

from dataclasses import asdict, dataclass

import numpy as np
import pandas as pd

from .labels import cell_text, penalty_text, rung_text

#: optional axes of a cell beyond order and penalty (columns of the validation table)
RUNG_FIELDS = ("lags", "target_lags", "inputs_used", "target")


@dataclass(frozen=True)
class Cell:
    """One (order, penalty) cell with the numbers a reader needs to judge it."""

    order: int
    penalty: float
    validation_mse: float
    validation_mse_se: float
    train_mse: float
    validation_r2: float
    parameters: int
    effective_df: float
    samples_per_parameter: float
    reason: str
    lags: int | None = None
    target_lags: int | None = None
    inputs_used: int | None = None
    target: str | None = None
    family: str = "ridge"
    l1_ratio: float = 0.0

    def to_dict(self) -> dict:
        d = asdict(self)
        for k in RUNG_FIELDS:   # keys of the newer axes only when the grid has them
            if d[k] is None:
                del d[k]
        return d

    @property
    def label(self) -> str:
        return (cell_text(self.order, self.penalty, self.family, self.l1_ratio)
                + rung_text(self.lags, self.target_lags, self.inputs_used))


@dataclass(frozen=True)
class Recommendation:
    """The best cell and the recommended (simplest within one SE) cell."""

    best: Cell
    recommended: Cell
    threshold: float
    rule: str

    def to_dict(self) -> dict:
        return {"best": self.best.to_dict(), "recommended": self.recommended.to_dict(),
                "threshold": self.threshold, "rule": self.rule}


def _penalty_text(a: float) -> str:
    return "no penalty" if a == 0 else f"penalty {penalty_text(a)}"


def _rung_fields(row: pd.Series) -> dict:
    out = {}
    for k in RUNG_FIELDS:
        v = row.get(k) if hasattr(row, "get") else None
        if v is None or (not isinstance(v, str) and pd.isna(v)):
            continue
        out[k] = str(v) if k == "target" else int(v)
    return out


def _cell(row: pd.Series, n_train: float, reason: str) -> Cell:
    params = int(row["parameters"])
    return Cell(order=int(row["order"]), penalty=float(row["penalty"]),
                validation_mse=float(row["validation_mse"]),
                validation_mse_se=float(row["validation_mse_se"]),
                train_mse=float(row["train_mse"]), validation_r2=float(row["validation_r2"]),
                parameters=params, effective_df=float(row["effective_df"]),
                samples_per_parameter=float(n_train / params), reason=reason,
                family=str(row.get("family", "ridge")), l1_ratio=float(row.get("l1_ratio", 0.0)),
                **_rung_fields(row))


def recommend(table: pd.DataFrame, mean_train_rows: float) -> Recommendation:
    """Apply the one-standard-error rule to a validation table.

    Parameters
    ----------
    table : `SweepResult.validation_table` output.
    mean_train_rows : average number of training rows per split.

    Returns
    -------
    Recommendation
        ``best``: lowest mean validation error. ``recommended``: among cells
        whose mean validation error is within one standard error of the best,
        the one with the fewest effective degrees of freedom; ties go to the
        larger penalty, then the lower order.
    """
    t = table.reset_index(drop=True)
    finite = t[np.isfinite(t["validation_mse"])]
    b = finite.sort_values(["validation_mse", "effective_df"], kind="stable").iloc[0]
    se = float(b["validation_mse_se"]) if np.isfinite(b["validation_mse_se"]) else 0.0
    threshold = float(b["validation_mse"]) + se
    near = finite[finite["validation_mse"] <= threshold * (1 + 1e-12)].copy()
    near["_edf"] = near["effective_df"].round(9)
    r = near.sort_values(["_edf", "penalty", "order"], ascending=[True, False, True],
                         kind="stable").iloc[0]
    best_reason = (f"Lowest mean validation error of all {len(t)} cells: "
                   f"MSE {b['validation_mse']:.4g} ± {se:.2g} (one standard error).")
    if r.name == b.name:   # the same row of the table (cells may differ in more than order)
        rec_reason = ("It has the lowest validation error, and no simpler cell comes within "
                      "one standard error of it.")
    else:
        within = (f"Its validation error ({r['validation_mse']:.4g}) is within one standard "
                  f"error of the best ({b['validation_mse']:.4g} + {se:.2g})")
        if _rung_fields(r) != _rung_fields(b):
            rb = _rung_fields(b)
            rec_reason = (f"{within}, and it uses {r['effective_df']:.2f} effective degrees of "
                          f"freedom against {b['effective_df']:.2f} for the best cell ("
                          f"{cell_text(int(b['order']), float(b['penalty']))}"
                          f"{rung_text(rb.get('lags'), rb.get('target_lags'), rb.get('inputs_used'))}): "
                          "the simpler model is as good as the data can tell.")
        elif int(r["order"]) == int(b["order"]):
            rec_reason = (f"{within}, with the same order and a stronger penalty "
                          f"({_penalty_text(float(r['penalty']))} against "
                          f"{_penalty_text(float(b['penalty']))}), which leaves "
                          f"{r['effective_df']:.2f} effective degrees of freedom against "
                          f"{b['effective_df']:.2f}: the data cannot tell them apart, so the "
                          "more restrained fit is preferred.")
        else:
            rec_reason = (f"{within}, and it uses {r['effective_df']:.2f} effective degrees of "
                          f"freedom against {b['effective_df']:.2f} for order {int(b['order'])}: "
                          "the simpler model is as good as the data can tell.")
    return Recommendation(best=_cell(b, mean_train_rows, best_reason),
                          recommended=_cell(r, mean_train_rows, rec_reason),
                          threshold=threshold,
                          rule="one-standard-error rule: simplest cell (fewest effective "
                               "degrees of freedom) within one standard error of the best")
