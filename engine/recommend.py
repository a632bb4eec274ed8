"""Choosing a cell: the best one and the simplest one the data cannot tell from it.

Two rules, named in every record:

``paired`` (default)
    Every cell is scored on the same validation rows as the best cell, so its
    per-split errors are compared with the best cell's split by split. A cell
    qualifies when the mean of those differences is within one standard error
    *of the differences*. Repeated k-fold uses the Nadeau-Bengio corrected
    variance (Nadeau and Bengio, "Inference for the generalization error",
    Machine Learning 52, 2003): ``(1/J + n_validation/n_training) * s_d^2``
    with ``J`` the number of splits (k * r). Schemes with a single split (a
    later-period holdout, a train/test column) and leave-one-out use the
    per-row squared-error differences on the validation rows instead.
``unpaired``
    The classic one-standard-error rule: a cell qualifies when its mean
    validation error is within one standard error (the spread of the best
    cell's own split errors) of the best.

Among qualifying cells the recommended one has the fewest effective degrees
of freedom; ties go to the larger penalty, then the lower order, then the
first row of the table.
"""
from __future__ import annotations

import math
from dataclasses import asdict, dataclass, field

import numpy as np
import pandas as pd

from .errors import InputProblem
from .labels import cell_text, penalty_text, rung_text
from .spec import SELECTION_RULES as RULES  # names of the rules; the first is the default

#: optional axes of a cell beyond order and penalty (columns of the validation table)
RUNG_FIELDS = ("lags", "target_lags", "inputs_used", "target")

RULE_TEXT = {
    "paired": "paired one-standard-error rule: simplest cell (fewest effective degrees of "
              "freedom) whose mean per-split difference in validation error from the best "
              "cell, on the same validation rows, is within one standard error of those "
              "differences",
    "unpaired": "unpaired one-standard-error rule: simplest cell (fewest effective degrees of "
                "freedom) whose mean validation error is within one standard error of the "
                "best cell's",
}


@dataclass(frozen=True)
class Cell:
    """One cell of the grid with the numbers a reader needs to judge it.

    ``paired_difference`` is the cell's mean validation error minus the best
    cell's (0 for the best); ``paired_difference_se`` its standard error from
    the paired per-split (or per-row) differences; ``rule`` names the rule
    that chose the cell.
    """

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
    paired_difference: float = 0.0
    paired_difference_se: float = float("nan")
    rule: str = "paired"

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
    """The best cell and the recommended cell, with the rule that chose it.

    ``threshold`` is the largest mean validation error the rule accepts for
    the recommended cell (best + one SE). ``rule`` is a sentence,
    ``rule_name`` one of `RULES`, ``se_method`` how the standard errors of
    the differences were formed. ``difference``, ``difference_se`` and
    ``near_best`` are aligned with the rows of the validation table.
    """

    best: Cell
    recommended: Cell
    threshold: float
    rule: str
    rule_name: str = "paired"
    se_method: str = ""
    difference: np.ndarray = field(default_factory=lambda: np.zeros(0), repr=False, compare=False)
    difference_se: np.ndarray = field(default_factory=lambda: np.zeros(0), repr=False, compare=False)
    near_best: np.ndarray = field(default_factory=lambda: np.zeros(0, bool), repr=False, compare=False)

    def to_dict(self) -> dict:
        return {"best": self.best.to_dict(), "recommended": self.recommended.to_dict(),
                "threshold": self.threshold, "rule": self.rule, "rule_name": self.rule_name,
                "se_method": self.se_method,
                "cells_near_best": int(np.sum(self.near_best))}


@dataclass(frozen=True)
class SplitErrors:
    """Per-split validation errors of every cell, rows aligned with the validation table.

    Attributes
    ----------
    errors : (cells, splits) validation MSE of each cell on each split.
    n_train, n_valid : (splits,) rows that trained and validated each split.
    repeats : number of repetitions of a k-fold partition (> 1: repeated
        k-fold, whose split differences get the Nadeau-Bengio correction).
    row_count : validation rows behind ``row_sum`` / ``row_comoment`` (one-split
        schemes and leave-one-out), 0 when absent.
    row_sum : (cells,) sum over validation rows of each cell's squared error.
    row_comoment : (cells, cells) centred co-moment matrix of the per-row
        squared errors, ``sum_i (z_i - mean)(z_i - mean)'``; it gives the
        variance of any paired per-row difference without keeping the rows.
    """

    errors: np.ndarray
    n_train: np.ndarray
    n_valid: np.ndarray
    repeats: int = 1
    row_count: int = 0
    row_sum: np.ndarray | None = None
    row_comoment: np.ndarray | None = None

    @classmethod
    def of(cls, errors) -> "SplitErrors":
        """Wrap a plain (cells, splits) array (no training sizes, no per-row sums)."""
        e = np.asarray(errors, dtype=float)
        if e.ndim == 1:
            e = e[:, None]
        s = e.shape[1]
        return cls(e, np.full(s, np.nan), np.full(s, np.nan))

    @property
    def by_rows(self) -> bool:
        """True when differences are taken per validation row (one split or leave-one-out)."""
        return self.row_count > 1 and self.row_sum is not None and self.row_comoment is not None


def nadeau_bengio_variance(differences: np.ndarray, n_train: float, n_valid: float) -> float:
    """Corrected variance of the mean of ``J`` split differences (Nadeau and Bengio 2003).

    ``(1/J + n_valid/n_train) * s^2`` with ``s^2`` the sample variance (ddof 1)
    of the differences; the second term accounts for overlapping training sets.
    """
    d = np.asarray(differences, dtype=float)
    J = d.size
    if J < 2:
        return float("nan")
    return float((1.0 / J + float(n_valid) / float(n_train)) * np.var(d, ddof=1))


def paired_differences(split_errors: SplitErrors, best: int) -> tuple[np.ndarray, np.ndarray, str]:
    """Mean difference of every cell's validation error from cell ``best`` and its SE.

    Returns
    -------
    mean : (cells,) mean difference (cell minus best), 0 for the best.
    se : (cells,) standard error of the mean difference (NaN when it cannot
        be formed: one split and no per-row sums).
    method : one sentence on how ``se`` was formed.
    """
    se_ = split_errors
    E = np.asarray(se_.errors, dtype=float)
    C, S = E.shape
    if se_.by_rows:
        n = float(se_.row_count)
        s = np.asarray(se_.row_sum, float)
        M = np.asarray(se_.row_comoment, float)
        mean = (s - s[best]) / n
        # centred sum of squares of the per-row differences z_c - z_best
        ss = np.diagonal(M) + M[best, best] - 2.0 * M[:, best]
        var = np.clip(ss / (n - 1.0), 0.0, None)
        se = np.sqrt(var / n)
        method = (f"from the per-row differences of squared error on the {int(n)} validation "
                  "rows")
        # the table's means may come from the splits: keep them consistent
        if S == 1 and np.all(np.isfinite(E[:, 0])):
            mean = E[:, 0] - E[best, 0]
        se[best] = 0.0
        return mean, se, method
    D = E - E[best]
    mean = D.mean(axis=1)
    if S < 2:
        return mean, np.full(C, np.nan), "not available (a single split and no per-row errors)"
    if se_.repeats > 1 and np.all(np.isfinite(se_.n_train)) and np.all(se_.n_train > 0):
        ratio = float(np.mean(se_.n_valid) / np.mean(se_.n_train))
        var = (1.0 / S + ratio) * np.var(D, axis=1, ddof=1)
        method = (f"from the {S} paired split differences with the Nadeau-Bengio correction "
                  f"(factor 1/{S} + {ratio:.3g})")
    else:
        var = np.var(D, axis=1, ddof=1) / S
        method = f"from the {S} paired split differences"
    se = np.sqrt(var)
    se[best] = 0.0
    return mean, se, method


def _penalty_text(a: float) -> str:
    return "no penalty" if a == 0 else f"penalty {penalty_text(a)}"


def _f(row: pd.Series, key: str, default: float = float("nan")) -> float:
    v = row.get(key, default)
    try:
        return float(v)
    except (TypeError, ValueError):
        return default


def _rung_fields(row: pd.Series) -> dict:
    out = {}
    for k in RUNG_FIELDS:
        v = row.get(k) if hasattr(row, "get") else None
        if v is None or (not isinstance(v, str) and pd.isna(v)):
            continue
        out[k] = str(v) if k == "target" else int(v)
    return out


def _cell(row: pd.Series, n_train: float, reason: str, diff: float, diff_se: float,
          rule: str) -> Cell:
    params = int(row["parameters"])
    return Cell(order=int(row["order"]), penalty=float(row["penalty"]),
                validation_mse=float(row["validation_mse"]),
                validation_mse_se=_f(row, "validation_mse_se"),
                train_mse=float(row["train_mse"]), validation_r2=_f(row, "validation_r2"),
                parameters=params, effective_df=float(row["effective_df"]),
                samples_per_parameter=float(n_train / params) if params else float("nan"),
                reason=reason, paired_difference=float(diff), paired_difference_se=float(diff_se),
                rule=rule, family=str(row.get("family", "ridge")),
                l1_ratio=float(row.get("l1_ratio", 0.0)), **_rung_fields(row))


def _g(v: float, digits: int = 2) -> str:
    return f"{v:.{digits}g}" if math.isfinite(v) else "not available"


def _simplest(t: pd.DataFrame, ok: np.ndarray) -> int:
    """Row position of the simplest qualifying cell (generic over key columns)."""
    near = t[ok].copy()
    near["_edf"] = near["effective_df"].round(9)
    near["_pos"] = np.flatnonzero(ok)
    keys, asc = ["_edf"], [True]
    for col, up in (("penalty", False), ("order", True)):
        if col in near:
            keys.append(col)
            asc.append(up)
    keys.append("_pos")
    asc.append(True)
    return int(near.sort_values(keys, ascending=asc, kind="stable")["_pos"].iloc[0])


def recommend(table: pd.DataFrame, split_errors: SplitErrors | np.ndarray | None = None,
              mean_train_rows: float = float("nan"), rule: str = "paired") -> Recommendation:
    """Pick the best and the recommended cell of a validation table.

    Parameters
    ----------
    table : `SweepResult.validation_table` output (one row per cell; at least
        ``order``, ``penalty``, ``parameters``, ``effective_df``, ``train_mse``,
        ``validation_mse``; other key columns are carried along).
    split_errors : per-split validation errors with rows aligned with
        ``table`` (`SweepResult.split_errors`), or a plain (cells, splits)
        array. Needed for ``rule="paired"``; without it the paired rule falls
        back to the unpaired one.
    mean_train_rows : average number of training rows per split (for samples
        per parameter).
    rule : ``"paired"`` (default) or ``"unpaired"``, see the module docstring.

    Returns
    -------
    Recommendation
        ``best``: lowest mean validation error (ties: fewer effective degrees
        of freedom). ``recommended``: the simplest cell within one standard
        error under ``rule``; ties go to the larger penalty, then the lower
        order.
    """
    if rule not in RULES:
        raise InputProblem(f"Unknown selection rule '{rule}'. Choose one of: {', '.join(RULES)}.",
                           code="bad_rule")
    if isinstance(split_errors, (int, float, np.integer, np.floating)):
        # the earlier call form recommend(table, mean_train_rows): no per-split errors
        mean_train_rows, split_errors = float(split_errors), None
    t = table.reset_index(drop=True)
    vm = t["validation_mse"].to_numpy(float)
    finite = np.isfinite(vm)
    if not finite.any():
        raise InputProblem("No cell of the sweep has a finite validation error; check the data "
                           "for constant or extreme columns.", code="no_finite_cell")
    edf = t["effective_df"].to_numpy(float)
    order_idx = np.lexsort((np.arange(len(t)), np.where(finite, edf, np.inf),
                            np.where(finite, vm, np.inf)))
    b = int(order_idx[0])
    se_b = _f(t.iloc[b], "validation_mse_se")
    se_b = se_b if math.isfinite(se_b) else 0.0
    if split_errors is not None and not isinstance(split_errors, SplitErrors):
        split_errors = SplitErrors.of(split_errors)
    if split_errors is not None and split_errors.errors.shape[0] != len(t):
        raise InputProblem(f"The per-split errors have {split_errors.errors.shape[0]} rows but "
                           f"the validation table has {len(t)}; they must be aligned.",
                           code="misaligned_errors")
    if split_errors is not None:
        diff, dse, method = paired_differences(split_errors, b)
    else:
        diff, dse, method = vm - vm[b], np.full(len(t), np.nan), "not available"
    used = rule
    if rule == "paired" and split_errors is not None:
        d_ok = np.where(np.isfinite(dse), dse, 0.0)
        ok = finite & np.isfinite(diff) & (diff <= d_ok * (1 + 1e-12) + 1e-15 * abs(vm[b]))
    else:
        used = "unpaired"
        ok = finite & (vm <= (vm[b] + se_b) * (1 + 1e-12))
    ok[b] = True
    r = _simplest(t, ok)
    rb, rr = t.iloc[b], t.iloc[r]
    if used == "paired":
        threshold = float(vm[b] + (dse[r] if math.isfinite(dse[r]) else 0.0))
    else:
        threshold = float(vm[b] + se_b)
    best_reason = (f"Lowest mean validation error of all {len(t)} cells: "
                   f"MSE {vm[b]:.4g} ± {se_b:.2g} (one standard error).")
    if r == b:
        rec_reason = ("It has the lowest validation error, and no simpler cell comes within "
                      "one standard error of it.")
    else:
        if used == "paired":
            within = (f"Its validation error ({vm[r]:.4g}) is {diff[r]:.3g} ± {_g(dse[r])} "
                      f"above the best ({vm[b]:.4g}) on the same rows, within one standard "
                      "error")
        else:
            within = (f"Its validation error ({vm[r]:.4g}) is within one standard "
                      f"error of the best ({vm[b]:.4g} + {se_b:.2g})")
        if _rung_fields(rr) != _rung_fields(rb):
            fb = _rung_fields(rb)
            rec_reason = (f"{within}, and it uses {rr['effective_df']:.2f} effective degrees of "
                          f"freedom against {rb['effective_df']:.2f} for the best cell ("
                          f"{cell_text(int(rb['order']), float(rb['penalty']))}"
                          f"{rung_text(fb.get('lags'), fb.get('target_lags'), fb.get('inputs_used'))}): "
                          "the simpler model is as good as the data can tell.")
        elif "order" in t and int(rr["order"]) == int(rb["order"]):
            rec_reason = (f"{within}, with the same order and a stronger penalty "
                          f"({_penalty_text(float(rr['penalty']))} against "
                          f"{_penalty_text(float(rb['penalty']))}), which leaves "
                          f"{rr['effective_df']:.2f} effective degrees of freedom against "
                          f"{rb['effective_df']:.2f}: the data cannot tell them apart, so the "
                          "more restrained fit is preferred.")
        else:
            rec_reason = (f"{within}, and it uses {rr['effective_df']:.2f} effective degrees of "
                          f"freedom against {rb['effective_df']:.2f} for order {int(rb['order'])}: "
                          "the simpler model is as good as the data can tell.")
    near = np.asarray(ok, dtype=bool)
    return Recommendation(
        best=_cell(rb, mean_train_rows, best_reason, 0.0, 0.0, used),
        recommended=_cell(rr, mean_train_rows, rec_reason, diff[r], dse[r], used),
        threshold=threshold, rule=RULE_TEXT[used], rule_name=used,
        se_method=(method if used == "paired" else
                   "one standard error of the best cell's split errors"),
        difference=np.asarray(diff, float), difference_se=np.asarray(dse, float),
        near_best=near)
