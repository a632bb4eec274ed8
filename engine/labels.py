"""The one vocabulary of Fitladder: every name a user reads, and how numbers are written.

The page, the meeting pack, ``summary.json`` and the command line all take
their names from here, so a validation scheme, a chart, a table, a column or
an option is called the same everywhere. Whoever adds a scheme, chart, table,
column or option adds its name here.

* Schemes: the machine key (``--scheme`` value, ``summary.json``
  ``validation.scheme``) and one human name (`SCHEME_NAMES`), used in the
  page's menu, in its help sentence (`scheme_help`), in the pack and in
  ``summary.json`` (``validation.scheme_name``).
* Charts and tables: one file stem and one title each (`CHARTS`, `TABLES`);
  the page's download buttons and the pack's files use the same stems.
* Columns: CSV files keep the machine names (documented once, in
  `COLUMNS`); tables shown to a reader get the human headers
  (`human_headers`).
* Numbers: penalties by `penalty_text`, errors by `error_text`, standard
  errors by `se_text`.
"""
from __future__ import annotations

import math
import re
from typing import Any

import numpy as np

# ---------------------------------------------------------------------------
# numbers
# ---------------------------------------------------------------------------


def penalty_text(penalty: float) -> str:
    """Short text of a penalty: ``'none'`` for 0, else 3 significant digits.

    Values from 0.001 to below 10,000 are written plainly (``0.00316``,
    ``31.6``), others in exponent form (``3.16e-4``, ``1.0e4``); 1000 is ``1000``.
    """
    p = float(penalty)
    if p == 0:
        return "none"
    if 1e-3 <= abs(p) < 1e4:  # plainly, never '1e+03'
        return np.format_float_positional(p, precision=3, unique=False, fractional=False,
                                          trim="-")
    return f"{p:.1e}".replace("e-0", "e-").replace("e+0", "e").replace("e+", "e")


def penalty_words(penalty: float) -> str:
    """``'no penalty'`` or ``'ridge penalty 0.00316'``."""
    return "no penalty" if float(penalty) == 0 else f"ridge penalty {penalty_text(penalty)}"


FAMILY_NAMES = {"ridge": "ridge", "lasso": "lasso", "elasticnet": "elastic net"}


def family_text(family: str, l1_ratio: float = 0.0) -> str:
    """Name of a penalty family, e.g. ``'lasso'``, ``'elastic net (l1_ratio 0.5)'``."""
    name = FAMILY_NAMES.get(str(family), str(family))
    if family == "elasticnet":
        return f"{name} (l1_ratio {float(l1_ratio):.3g})"
    return name


def cell_text(order: int, penalty: float, family: str = "ridge", l1_ratio: float = 0.0) -> str:
    """Label of a cell, e.g. ``'order 2, no penalty'``, ``'order 3, penalty 0.1'``,
    ``'order 2, lasso penalty 0.01'`` (ridge cells keep the short form)."""
    p = float(penalty)
    if p == 0:
        return f"order {int(order)}, no penalty"
    kind = "" if family == "ridge" else family_text(family, l1_ratio) + " "
    return f"order {int(order)}, {kind}penalty {penalty_text(p)}"


def rung_text(lags: int | None = None, target_lags: int | None = None,
              inputs_used: int | None = None) -> str:
    """Suffix naming a cell's other axes, e.g. ``', input lags 3, target lags 2'`` ('' for none)."""
    parts = []
    if lags is not None:
        parts.append(f"input lags {int(lags)}")
    if target_lags is not None:
        parts.append(f"target lags {int(target_lags)}")
    if inputs_used is not None:
        parts.append(f"first {int(inputs_used)} input" + ("s" if int(inputs_used) != 1 else ""))
    return "".join(", " + p for p in parts)


def number_text(x: Any, digits: int = 4) -> str:
    """A number to ``digits`` significant digits; ``'n/a'`` for missing or infinite."""
    try:
        f = float(x)
    except (TypeError, ValueError):
        return "n/a"
    if not math.isfinite(f):
        return "n/a"
    return f"{f:.{digits}g}"


def error_text(x: Any) -> str:
    """An error (MSE or RMSE) as written everywhere: 4 significant digits."""
    return number_text(x, 4)


def se_text(x: Any) -> str:
    """A standard error: 2 significant digits."""
    return number_text(x, 2)


#: Error units a user may choose; the page, its sentences and its charts use one,
#: and so do the pack's headline (``build_pack(error_unit=...)``) and ``--errors``.
ERROR_UNITS = {"mse": "MSE", "rmse": "RMSE"}

#: The unit errors are shown in unless the user chooses (page and command line).
DEFAULT_ERROR_UNIT = "mse"


def error_in_unit(mse: float, unit: str) -> float:
    """A mean squared error expressed in ``unit`` (``'mse'`` or ``'rmse'``)."""
    m = float(mse)
    if unit == "rmse":
        return math.sqrt(m) if math.isfinite(m) and m >= 0 else float("nan")
    return m


def se_in_unit(mse: float, mse_se: float, unit: str) -> float:
    """The standard error of an MSE carried into ``unit`` (delta method for RMSE)."""
    if unit != "rmse":
        return float(mse_se)
    r = error_in_unit(mse, "rmse")
    return float(mse_se) / (2.0 * r) if r and math.isfinite(r) and r > 0 else float("nan")


def samples_per_parameter(rows: float, effective_parameters: float) -> float:
    """Samples per parameter, counted one way everywhere.

    Rows used for the fit divided by the effective number of parameters of the
    cell (its effective degrees of freedom, intercept included: the number of
    coefficients without a penalty, fewer with one); never below one parameter.
    """
    return float(rows) / max(float(effective_parameters), 1.0)


SAMPLES_PER_PARAMETER_HOW = ("rows used divided by the effective number of parameters "
                             "(effective degrees of freedom, intercept included)")

# ---------------------------------------------------------------------------
# validation schemes
# ---------------------------------------------------------------------------

#: Human name of each scheme (machine key = command-line value).
SCHEME_NAMES = {
    "kfold": "Shuffled folds",
    "repeated": "Repeated shuffled folds",
    "loo": "Leave-one-out",
    "blocked": "Time blocks with a gap",
    "grouped": "Whole groups held out",
    "holdout": "Later period held out",
    "column": "Your own split column",
}

#: When each scheme fits (one or two sentences, without the name).
SCHEME_WHEN = {
    "kfold": "rows are dealt at random into k folds. Fits rows that are independent of "
             "each other, with no order in time.",
    "repeated": "shuffled folds run several times with fresh shuffles; steadier error "
                "estimates for small tables of independent rows.",
    "loo": "every row is held out once (exact, no refits). For small tables of "
           "independent rows.",
    "blocked": "contiguous blocks along the order/time column, with a gap of rows dropped "
               "from training on each side of the held-out block. Use it when neighbouring "
               "rows resemble each other (time series, sensor logs): shuffling such rows "
               "flatters the model.",
    "grouped": "all rows of a group (batch, subject, site) stay in the same fold, so the "
               "model is judged on groups it never saw.",
    "holdout": "train on the first part along the order/time column and test on the rest: "
               "the honest check when the future may differ from the past.",
    "column": "each distinct value of your split column is one held-out fold, or values "
              "train/test (or train/validation) give one split.",
}

#: Schemes that need a column chosen before they can run, and which.
SCHEME_NEEDS = {"grouped": "group_column", "column": "split_column"}

#: Schemes that take a number of folds.
SCHEMES_WITH_FOLDS = ("kfold", "repeated", "blocked", "grouped")


def scheme_name(kind: str) -> str:
    """Human name of a scheme key (the key itself when unknown)."""
    return SCHEME_NAMES.get(kind, str(kind))


def scheme_help(kind: str) -> str:
    """``'<name>: <when it fits>'``, the help sentence of a scheme."""
    return f"{scheme_name(kind)}: {SCHEME_WHEN.get(kind, '')}"


# ---------------------------------------------------------------------------
# charts, tables and options
# ---------------------------------------------------------------------------

#: Charts: file stem (page download and pack file) -> title (page tab and pack caption).
CHARTS = {
    "validation_curve": "Validation curve",
    "order_penalty_heatmap": "Order × penalty heat map",
    "learning_curve": "Learning curve",
    "order_comparison": "Orders side by side",
    "coefficient_magnitudes": "Coefficient magnitudes",
}

#: Charts of the coefficient paths (page tab; in the pack when lasso or elastic net is swept).
PATH_CHARTS = {
    "coefficient_paths": "Coefficient paths",
    "terms_kept": "How many inputs",
}

#: Tables: file stem (CSV download and pack file) -> title.
TABLES = {
    "coefficient_paths": "Coefficient paths table",
    "lasso_entry_order": "Order of entry along the lasso path",
    "inputs_kept": "Inputs kept by the recommended cell",
    "validation_grid": "Validation table, every cell",
    "validation_per_split": "Errors per split",
    "learning_curve": "Learning-curve table",
    "coefficients": "Coefficients per split",
    "coefficients_cell": "Coefficients of this cell",
    "side_by_side_fits": "Fits side by side",
    "warnings": "Warnings",
    "checks": "Every check, fired or not",
    "model_coefficients": "Model coefficients",
    "nested_cv": "Nested cross-validation",
    "selection_stability": "Selection stability",
    "interval_coverage": "Prediction-interval coverage per split",
    "more_rows": "What more rows would buy, per order",
}

#: Options: request field -> (page label, command-line flag).
OPTIONS = {
    "target": ("Target: the column to predict", "--target"),
    "inputs": ("Inputs", "--inputs"),
    "order_column": ("Order / time column", "--order-column"),
    "group_column": ("Group column", "--group-column"),
    "split_column": ("Split column", "--split-column"),
    "scheme": ("How to hold data out", "--scheme"),
    "folds": ("Folds", "--folds"),
    "repeats": ("Repeats", "--repeats"),
    "gap": ("Gap (rows left out on each side of a block)", "--gap"),
    "holdout_fraction": ("Share of rows held out at the end", "--holdout-fraction"),
    "max_order": ("Highest polynomial order", "--max-order"),
    "interactions": ("Products of inputs (interactions)", "--interactions"),
    "penalties": ("Ridge penalty range", "--penalty-range"),
    "penalty_range": ("Penalty range from the data", "--penalty-range"),
    "rule": ("How to pick the recommended cell", "--rule"),
    "seed": ("Seed for the shuffles", "--seed"),
    "rows_in_time_order": ("Are the rows in time order?", "--rows-in-time-order"),
    "error_unit": ("Errors shown as", "--errors"),
}

#: Answers to "are the rows in time order?" (asked when no order column is
#: chosen): page text -> `SchemeSpec.rows_in_time_order`.
ROW_ORDER_ANSWERS = {"Not said": None, "Yes": True, "No": False}
ROW_ORDER_HELP = ("Checks for dependence between neighbouring rows and for a shift between "
                  "earlier and later rows read the row order as time. Not said: they assume "
                  "the file's row order is time order, say so, and their warnings stay at "
                  "caution. No: they are not used.")

#: Selection rules (`engine.recommend`): name -> short label on the page.
RULE_NAMES = {"paired": "paired (default)", "unpaired": "unpaired"}


def option_label(key: str) -> str:
    """The page label of an option."""
    return OPTIONS[key][0]


# ---------------------------------------------------------------------------
# columns
# ---------------------------------------------------------------------------

#: Column of a CSV (machine name) -> header of the same column in a shown table.
#: The CSV files keep the machine names; this table documents them.
COLUMNS = {
    "order": "Order",
    "penalty": "Penalty",
    "parameters": "Coefficients",
    "effective_df": "Effective parameters",
    "train_mse": "Training MSE",
    "train_mse_se": "Training MSE ± SE",
    "validation_mse": "Validation MSE",
    "validation_mse_se": "Validation MSE ± SE",
    "validation_rmse": "Validation RMSE",
    "validation_r2": "Validation R²",
    "folds": "Splits",
    "fold": "Split",
    "n_train": "Training rows",
    "n_validation": "Validation rows",
    "train_size": "Training rows",
    "fraction": "Share of training set",
    "term": "Term",
    "std_mean": "Standardised coefficient (mean)",
    "std_sd": "Standardised coefficient (SD over splits)",
    "raw_mean": "Coefficient in data units (mean)",
    "raw_sd": "Coefficient in data units (SD over splits)",
    "magnitude": "Size (|standardised|)",
    "ratio_to_median": "Times the median size of the other terms",
    "steep": "Steep",
    "model": "Model",
    "r2_on_training_rows": "R² on training rows",
    "residual_sd": "Residual SD",
    "condition_number": "Condition number",
    "code": "Check",
    "fired": "Fired",
    "severity": "Severity",
    "value": "Value",
    "fires_when": "Fires when",
    "note": "Note",
    "train_rows": "Training rows",
    "test_rows": "Test rows",
    "inner_mse": "Sweep's own MSE",
    "outer_mse": "MSE on unseen rows",
    "count": "Times chosen",
    "share": "Share chosen",
    "resample": "Repetition",
    "rows": "Rows",
    "coefficient": "Coefficient",
    "number": "No.",
    "message": "Message",
    "advice": "Advice",
    "role": "Role",
    "lags": "Input lag depth",
    "target_lags": "Target lag depth",
    "inputs_used": "Inputs used",
    "target": "Target",
    "paired_difference": "Difference from best (paired)",
    "paired_difference_se": "Difference from best ± SE",
    "near_best": "Indistinguishable from best",
    "side": "Edge",
    "split": "Split",
    "training_rows": "Training rows",
    "checked_rows": "Rows checked",
    "cvplus_coverage": "Share inside CV+ interval",
    "analytic_coverage": "Share inside analytic interval",
    "status": "Forecast",
    "reason": "Why not",
    "error_now": "Validation MSE now",
    "error_at_2x": "Expected MSE at 2x rows",
    "low_at_2x": "Band low at 2x",
    "high_at_2x": "Band high at 2x",
    "error_at_5x": "Expected MSE at 5x rows",
    "low_at_5x": "Band low at 5x",
    "high_at_5x": "Band high at 5x",
    "a": "Curve a",
    "b": "Curve b (decay)",
    "floor": "Curve floor c",
}

#: Axes of a grid (validation-table column -> axis title in charts and page).
GRID_AXES = {
    "order": "polynomial order",
    "penalty": "ridge penalty (on standardised terms)",
    "lags": "input lag depth (rows back)",
    "target_lags": "target lag depth (rows back)",
    "inputs_used": "inputs used (first k of the ranking)",
    "family": "penalty family",
    "l1_ratio": "lasso share of the penalty (l1 ratio)",
}

#: Options of the newer axes: request field -> (page label, command-line flag).
OPTIONS.update({
    "lags": ("Deepest input lag to compare", "--lags"),
    "target_lags": ("Deepest target lag to compare", "--target-lags"),
    "nested_inputs": ("Compare the first k inputs", "--rank-inputs"),
    "extra_targets": ("More targets", "--more-targets"),
    "families": ("Penalty families", "--families"),
    "l1_ratios": ("Elastic-net lasso shares (l1 ratio)", "--l1-ratios"),
})


def column_header(name: str) -> str:
    """The shown header of a machine column name (the name itself when unknown)."""
    return COLUMNS.get(str(name), str(name))


def human_headers(frame):
    """A copy of a table with human headers (for display; CSVs keep machine names)."""
    return frame.rename(columns={c: column_header(c) for c in frame.columns})


# ---------------------------------------------------------------------------
# severity
# ---------------------------------------------------------------------------

#: Severities of warnings, most severe first.
SEVERITY_ORDER = ("serious", "caution", "note", "info")


def severity_rank(severity: Any) -> int:
    """0 for the most severe; unknown severities last."""
    s = str(severity or "").lower()
    return SEVERITY_ORDER.index(s) if s in SEVERITY_ORDER else len(SEVERITY_ORDER)


def _number(text: str) -> float:
    try:
        return float(text)
    except ValueError:
        return float("nan")


def reason_in_unit(reason: str, cell_mse: float, best_mse: float, best_se: float,
                   unit: str, diff_se: float | None = None) -> str:
    """A recommendation's reason with its errors written in ``unit``.

    The rule works on mean squared errors; for ``'rmse'`` the cell's and the
    best cell's errors are written as their roots; the unpaired rule's bound as
    the root of (best + SE); a paired difference ``a - b`` as ``√a - √b`` with
    its standard error ``diff_se`` (read from the sentence when not given)
    divided by the same factor ``√a + √b``, so the difference is still that
    many standard errors from zero and the sentence's verdict still holds; a
    best cell's ``MSE m ± s`` as ``RMSE √m ± s / (2√m)`` (delta method).
    Sentences whose numbers cannot be found are returned with "(errors in MSE)"
    marked, never mixed silently.
    """
    if unit != "rmse":
        return reason
    out = reason
    ra, rb = error_in_unit(cell_mse, "rmse"), error_in_unit(best_mse, "rmse")
    bound = f"{float(best_mse):.4g} + {float(best_se):.2g}"
    hit = False
    if bound in out:
        out = out.replace(bound, f"{error_text(rb)}; bound "
                                 f"{error_text(error_in_unit(best_mse + best_se, 'rmse'))}")
        hit = True
    paired = re.search(r"is (\S+) ± (.+?) above the best", out)
    if paired:
        s = _number(paired.group(2)) if diff_se is None else float(diff_se)
        scale = ra + rb
        d_txt = number_text(ra - rb, 3)
        s_txt = (se_text(s / scale) if math.isfinite(s) and scale > 0 else "not available")
        out = out[:paired.start()] + f"is {d_txt} ± {s_txt} above the best" + out[paired.end():]
    for v in (cell_mse, best_mse):
        r = error_in_unit(v, "rmse")
        spread = re.search(re.escape(f"MSE {float(v):.4g} ± ") + r"(\S+?)(?=[ )]|$)", out)
        if spread:
            se = _number(spread.group(1))
            out = out.replace(spread.group(0), f"RMSE {error_text(r)} ± "
                              f"{se_text(se / (2.0 * r)) if r > 0 else 'not available'}")
            hit = True
        old = f"({float(v):.4g})"
        if old in out:
            out = out.replace(old, f"({error_text(r)})")
            hit = True
        old = f"MSE {float(v):.4g}"
        if old in out:
            out = out.replace(old, f"RMSE {error_text(r)}")
            hit = True
    if not hit:
        if re.search(r"\d", out):
            return reason + " (errors in MSE)"
        return reason
    return out.replace("validation error (", "validation RMSE (")
