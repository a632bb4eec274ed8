"""Meeting pack: every chart, table and number behind a model choice, in one folder.

`build_pack` runs whatever is missing (sweep, learning curve, checks, the fit of
the recommended cell on all rows) and writes:

* ``summary.html`` (one printed page, images embedded) and ``summary.md``;
* ``summary.json`` (machine-readable results, full precision) and
  ``record.json`` (everything needed to run it again);
* charts as PNG and SVG (validation curve, order x penalty heat map, learning
  curve, side-by-side orders, coefficient magnitudes);
* CSV tables (validation grid, learning curve, coefficients per split,
  warnings) and the recommended model's coefficients in original units;
* ``model.skops``: the recommended model as a scikit-learn pipeline.

The dashboard and the command line both call `build_pack`, so the same
request on the same data gives the same files. `pack_zip_bytes` zips a pack.
"""
from __future__ import annotations

import base64
import datetime as _dt
import html
import io
import json
import math
import platform
import re
import zipfile
from contextlib import ExitStack
from dataclasses import asdict, dataclass, field
from pathlib import Path
from typing import Any, Callable, Iterable, Sequence

import numpy as np
import pandas as pd

from .jsonable import json_ready
from .analysis import Analysis, DataLike, analyse, learning_curve
from .compare import fit_candidates
from .errors import InputProblem
from .final_fit import FinalModel, attach_text_inputs
from .markup import escape_name, escape_text
from .packdir import PackFolder, write_problem
from .record import RECORD_FORMAT, request_fingerprint
from .recommend import Cell
from .render import ChartRenderer
from .labels import (CHARTS, DEFAULT_ERROR_UNIT, ERROR_UNITS, error_in_unit, number_text,
                     penalty_text, penalty_words, reason_in_unit, rung_text, scheme_name,
                     se_in_unit, severity_rank)
from .spec import SCHEME_HELP, SweepSpec

Progress = Callable[[float, str], None]

#: Format tag written into ``summary.json`` and ``record.json``.
SUMMARY_FORMAT = "fitladder-summary/1"

#: Chart files (stem -> title), each written as PNG and SVG; the page uses the same.
CHART_FILES = dict(CHARTS)

#: Every file a pack holds, in the order they are listed and zipped.
PACK_FILES = (
    "summary.html", "summary.md", "summary.json", "record.json",
    *[f"{stem}.{ext}" for stem in CHART_FILES for ext in ("png", "svg")],
    "validation_grid.csv", "validation_per_split.csv", "learning_curve.csv", "coefficients.csv",
    "warnings.csv", "model_coefficients.csv", "interval_coverage.csv", "more_rows.csv", "model.skops",
)

#: several targets: the side-by-side table at the top of the pack
TARGETS_FILE = "targets.csv"

#: More names a pack folder may hold: one folder per extra target.
PACK_NAMES = re.compile(r"target_\d+")

#: Files a pack holds only when their results were computed (on the page, on request).
OPTIONAL_FILES = ("nested_cv.csv", "selection_stability.csv",
                  # with lasso or elastic net in the sweep: paths, entry order, inputs kept
                  "coefficient_paths.png", "coefficient_paths.svg", "terms_kept.png",
                  "terms_kept.svg", "coefficient_paths.csv", "lasso_entry_order.csv",
                  "inputs_kept.csv")

#: Leading characters that make a spreadsheet run a cell as a formula
#: (common practice, after the OWASP "CSV injection" advice).
FORMULA_START = ("=", "+", "-", "@", "\t", "\r", "\n")

#: Types a saved pipeline may contain; anything else is refused on loading.
EXPECTED_MODEL_TYPES = frozenset({
    "sklearn.pipeline.Pipeline", "sklearn.preprocessing._data.StandardScaler",
    "sklearn.preprocessing._polynomial.PolynomialFeatures",
    "sklearn.compose._column_transformer.ColumnTransformer",
    "sklearn.linear_model._base.LinearRegression",
    "sklearn.preprocessing._encoders.OneHotEncoder",
})

_NUMPY_TYPES = frozenset({"numpy.float64", "numpy.int64", "numpy.int32", "numpy.bool_",
                          "numpy.dtype", "numpy.ndarray"})

CAUTION = (
    "Validation error estimates how the model does on rows like the validation rows. It "
    "assumes that future data resemble them: the same instrument and conditions, and "
    "inputs inside the range the model was fitted on. Outside that range nothing here "
    "was checked. Where the model feeds a decision that can hurt someone (for example a "
    "calibration used for safety), your organisation's own standards for validation and "
    "uncertainty govern; this summary does not replace them.")


@dataclass
class PackResult:
    """What `build_pack` wrote.

    Attributes
    ----------
    out_dir : the pack folder.
    files : paths of every file written, in `PACK_FILES` order.
    summary : the content of ``summary.json`` (NaN already turned into ``None``).
    record : the content of ``record.json``.
    analysis : the sweep the pack reports.
    model : the recommended cell fitted on all rows.
    """

    out_dir: Path
    files: list[Path]
    summary: dict
    record: dict = field(default_factory=dict)
    analysis: Analysis | None = None
    model: FinalModel | None = None


# ---------------------------------------------------------------------------
# escaping and plain-data conversion
# ---------------------------------------------------------------------------
def escape_csv_cell(value: Any) -> Any:
    """Prefix a text cell with ``'`` when a spreadsheet would run it as a formula.

    Numbers (including negative ones) are returned unchanged, so they stay numbers.
    """
    if isinstance(value, str) and value.startswith(FORMULA_START):
        return "'" + value
    return value


def safe_csv_frame(frame: pd.DataFrame) -> pd.DataFrame:
    """A copy of ``frame`` with text cells and column names formula-escaped."""
    out = frame.copy()
    for col in out.columns:
        if out[col].dtype == object or pd.api.types.is_string_dtype(out[col].dtype):
            out[col] = out[col].map(escape_csv_cell)
    out.columns = [escape_csv_cell(str(c)) for c in out.columns]
    return out


def write_csv(frame: pd.DataFrame, path: Path) -> Path:
    """Write ``frame`` as UTF-8 CSV, formula-escaped, floats at full precision."""
    safe_csv_frame(frame).to_csv(path, index=False, lineterminator="\n")
    return path


def md_escape(text: Any) -> str:
    """Escape text (engine sentences, names) for Markdown: `engine.markup.escape_text`.

    No emphasis, code, links, bare links, maths, raw HTML, table cells or
    strike-through. The text is always placed after other text on its line,
    so marks that count only at the start of a line need no escape.
    """
    return escape_text(text)


def _h(text: Any) -> str:
    return escape_name(text, "html")


plain = json_ready   # JSON-ready values: NaN and inf become None


def dump_json(obj: Any) -> str:
    """Deterministic JSON text: full-precision floats, no NaN, sorted nothing, UTF-8."""
    return json.dumps(plain(obj), indent=2, ensure_ascii=False, allow_nan=False) + "\n"


# ---------------------------------------------------------------------------
# numbers in words
# ---------------------------------------------------------------------------
_num = number_text
_penalty_words = penalty_words
_penalty_short = penalty_text


# ---------------------------------------------------------------------------
# the recommended model as a scikit-learn pipeline
# ---------------------------------------------------------------------------
def sklearn_pipeline(model: FinalModel):
    """The fitted model as a scikit-learn `Pipeline` that predicts as ``model.predict``.

    Steps: ``encode`` only with text inputs (`text_encoder`: the raw text
    column one-hot encoded, so the pipeline takes the table as the user has it),
    ``scale`` (a `StandardScaler` holding the model's centre and
    half-range), ``terms`` (`PolynomialFeatures`; one per input in a
    `ColumnTransformer` when the model has no products of inputs) and ``fit``
    (`LinearRegression` with the coefficients on scaled-input powers). Terms the
    model does not use get coefficient 0.

    Parameters
    ----------
    model : a `FinalModel`.

    Returns
    -------
    sklearn.pipeline.Pipeline
    """
    from sklearn.compose import ColumnTransformer
    from sklearn.linear_model import LinearRegression
    from sklearn.pipeline import Pipeline
    from sklearn.preprocessing import PolynomialFeatures, StandardScaler

    d = len(model.input_names)
    q = int(model.order)
    dummy = np.zeros((2, d))
    scaler = StandardScaler()
    scaler.fit(dummy)
    scaler.mean_ = np.asarray(model.centre, float).copy()
    scaler.scale_ = np.asarray(model.half_range, float).copy()
    scaler.var_ = scaler.scale_ ** 2
    scaler.n_features_in_ = d
    encode = text_encoder(model)
    if encode is None:
        # predicting from a DataFrame with these columns raises no feature-name warning
        scaler.feature_names_in_ = np.asarray([str(c) for c in model.input_names], dtype=object)
    steps: list[tuple[str, Any]] = ([("encode", encode)] if encode is not None else []) + [
        ("scale", scaler)]
    exps = np.asarray(model.exponents, dtype=np.int64).reshape(-1, d)
    interactions = _has_products(model)
    if q == 0:
        powers = np.zeros((d, d), dtype=np.int64)  # the scaled inputs, with weight 0
        n_out = d
    elif interactions or d == 1:
        terms = PolynomialFeatures(degree=q, include_bias=False)
        terms.fit(dummy)
        powers = terms.powers_
        steps.append(("terms", terms))
        n_out = powers.shape[0]
    else:
        terms = ColumnTransformer(
            [(f"input_{j + 1}", PolynomialFeatures(degree=q, include_bias=False), [j])
             for j in range(d)], remainder="drop", sparse_threshold=0.0)
        terms.fit(dummy)
        powers = np.zeros((d * q, d), dtype=np.int64)
        for j in range(d):
            powers[j * q:(j + 1) * q, j] = np.arange(1, q + 1)
        steps.append(("terms", terms))
        n_out = d * q
    where = {tuple(int(v) for v in row): i for i, row in enumerate(powers)}
    coef = np.zeros(n_out)
    if q > 0:
        for e, b in zip(exps, np.asarray(model.scaled_coefficients, float)):
            key = tuple(int(v) for v in e)
            if key not in where:  # pragma: no cover - the term lists always agree
                raise InputProblem(f"Term with exponents {key} has no pipeline column.",
                                   code="export_failed")
            coef[where[key]] = float(b)
    reg = LinearRegression()
    reg.coef_ = coef
    reg.intercept_ = float(model.scaled_intercept)
    reg.n_features_in_ = n_out
    steps.append(("fit", reg))
    return Pipeline(steps)


def _has_products(model: FinalModel) -> bool:
    """Whether a term of ``model`` multiplies two inputs (one `PolynomialFeatures` then)."""
    exps = np.asarray(model.exponents, dtype=np.int64).reshape(-1, len(model.input_names))
    return bool(np.any((exps > 0).sum(axis=1) > 1)) if exps.size else False


def _text_columns(text: dict) -> dict[str, str]:
    """Input name of each indicator term (``column[level]``) -> its text column, for
    ``FinalModel.text_inputs``."""
    return {f"{col}[{lv}]": col for col, (_, levels) in text.items() for lv in levels}


def text_encoder(model: FinalModel):
    """The pipeline's first step for a model with text inputs, else None.

    A `ColumnTransformer` that takes the table as the user has it (a DataFrame
    with the raw text column, e.g. ``site`` = ``'north'``) and gives the model's
    input columns in order: each text column through a `OneHotEncoder` whose
    categories are the reference level and the levels with a term, dropping the
    reference (treatment coding, as the fit), other columns unchanged. A
    level the model never saw raises scikit-learn's error (``handle_unknown=
    'error'``): the model has no term for it. Text is compared as written
    (the engine strips spaces at the ends of cells before choosing levels).
    """
    from sklearn.compose import ColumnTransformer
    from sklearn.preprocessing import OneHotEncoder, StandardScaler

    text = dict(getattr(model, "text_inputs", None) or {})
    if not text:
        return None
    owner = _text_columns(text)
    parts: list[tuple[str, Any, list[str]]] = []
    columns: list[str] = []
    for name in (str(c) for c in model.input_names):
        col = owner.get(name)
        if col is None:
            if parts and parts[-1][0].startswith("numbers"):
                parts[-1][2].append(name)
            else:   # unchanged: an identity scaler (a "passthrough" would be saved as a
                    # FunctionTransformer, a type that can carry any function)
                parts.append((f"numbers_{len(parts) + 1}",
                              StandardScaler(with_mean=False, with_std=False), [name]))
            columns.append(name)
        elif not (parts and parts[-1][2] == [col] and parts[-1][0].startswith("text")):
            ref, levels = text[col]
            if col in columns:  # pragma: no cover - a factor's terms are always adjacent
                raise InputProblem(f"The terms of text input '{col}' are not adjacent.",
                                   code="export_failed")
            parts.append((f"text_{len(parts) + 1}",
                          OneHotEncoder(categories=[[ref, *levels]], drop=[ref],
                                        handle_unknown="error", sparse_output=False,
                                        dtype=np.float64), [col]))
            columns.append(col)
    # fitted on a table of the levels (the encoder learns nothing else from it)
    rows = max(len(levels) + 1 for _, levels in text.values())
    frame = {}
    for c in columns:
        if c in text:
            cycle = [text[c][0], *text[c][1]]
            frame[c] = [cycle[i % len(cycle)] for i in range(rows)]
        else:
            frame[c] = np.zeros(rows)
    encode = ColumnTransformer(parts, remainder="drop", sparse_threshold=0.0,
                               verbose_feature_names_out=False)
    encode.fit(pd.DataFrame(frame))
    return encode


def pipeline_types(model: FinalModel) -> list[str]:
    """The scikit-learn types the saved pipeline of ``model`` holds, in step order.

    The "Use this model" snippet passes them to ``skops.io.load(trusted=...)`` as an
    explicit allow-list (each is one of `EXPECTED_MODEL_TYPES`, which
    `load_pipeline` checks). Read from the model's fields as `sklearn_pipeline`
    and `text_encoder` read them, without building the pipeline (or importing
    scikit-learn): each step's type, then the types of its column parts, each
    name once.
    """
    columns = "sklearn.compose._column_transformer.ColumnTransformer"
    scaler = "sklearn.preprocessing._data.StandardScaler"
    one_hot = "sklearn.preprocessing._encoders.OneHotEncoder"
    powers = "sklearn.preprocessing._polynomial.PolynomialFeatures"
    out = ["sklearn.pipeline.Pipeline"]
    text = dict(getattr(model, "text_inputs", None) or {})
    if text:        # encode: a part per run of number inputs or per text input
        owner = _text_columns(text)
        out += [columns] + [one_hot if str(c) in owner else scaler for c in model.input_names]
    out.append(scaler)                                                          # scale
    if int(model.order) > 0:                                                    # terms
        if not (_has_products(model) or len(model.input_names) == 1):
            out.append(columns)
        out.append(powers)
    out.append("sklearn.linear_model._base.LinearRegression")                   # fit
    return list(dict.fromkeys(out))


def warm() -> None:
    """Import what writing a pack needs (skops, scikit-learn) ahead of the first pack."""
    import skops.io  # noqa: F401
    import sklearn.pipeline  # noqa: F401


def save_pipeline(model: FinalModel, path: Path) -> Path:
    """Save `sklearn_pipeline(model)` with skops."""
    import skops.io as sio

    sio.dump(sklearn_pipeline(model), str(path))
    return Path(path)


def _skops_for_saving() -> None:
    """Import ``skops.io`` for saving only: without the lists of types it trusts when loading.

    As it is imported, ``skops.io`` lists every scikit-learn estimator (which
    imports every scikit-learn module) and finds the module of every scipy ufunc
    (a search through all loaded modules for each one): 0.6 to 1 s of CPU,
    more than the rest of writing the model file, for lists that only loading
    consults. The model-file child process, which saves one pipeline and ends,
    puts empty lists in their place before importing ``skops.io``; the file it
    writes is the same (tests/test_pack_use.py compares it with one written the
    ordinary way). Never call this in a process that may load a file.
    """
    import sys
    import types

    if "skops.io" in sys.modules:
        return
    lists = types.ModuleType("skops.io._trusted_types")

    def empty_list(name: str) -> list:
        if name.isupper():          # the module's constants: lists of type names
            return []
        raise AttributeError(name)

    lists.__getattr__ = empty_list
    sys.modules["skops.io._trusted_types"] = lists


def _save_in_child(model: FinalModel, path: Path) -> None:
    """Child-process body: save the model; any failure only sets the exit status."""
    import os

    try:
        _skops_for_saving()
        save_pipeline(model, path)
    except BaseException:  # the parent writes the file itself then
        os._exit(1)


class _ModelFileWriter:
    """Write ``model.skops`` in a forked child process while the pack goes on.

    Importing scikit-learn and skops costs more than everything else in a
    small pack; a child process forked from a single-threaded parent does it
    on another core, and the parent does not import them for it (a shuffled
    k-fold run's main process never imports scikit-learn). The parent checks
    the child's exit status and writes the file itself if the child failed.
    Without fork (or with other threads running, where forking is unsafe) the
    file is written in this process.
    """

    def __init__(self, model: FinalModel, path: Path, background: bool) -> None:
        import multiprocessing as mp
        import threading

        self.model, self.path, self.proc = model, Path(path), None
        if background and threading.active_count() == 1 and "fork" in mp.get_all_start_methods():
            import gc

            # scikit-learn is imported by the child alone (this process does not need
            # it). scipy.stats, which both need (the checks' two-sample test here,
            # scikit-learn there), is imported once, before the fork. The objects made
            # so far are frozen out of the garbage collector's way: the child's
            # collections (its imports make many) do not traverse them or copy their
            # pages (Python's advice before a fork)
            gc.freeze()
            import scipy.stats  # noqa: F401
            gc.freeze()
            self.proc = mp.get_context("fork").Process(target=_save_in_child,
                                                       args=(model, self.path), daemon=True)
            self.proc.start()
            gc.unfreeze()   # a longer-lived caller (tests, a server) collects them as before

    def finish(self) -> Path:
        """Wait for the file; write it here when the child did not."""
        if self.proc is not None:
            self.proc.join()
            if self.proc.exitcode == 0 and self.path.is_file():
                return self.path
        return save_pipeline(self.model, self.path)


def load_pipeline(path: str | Path):
    """Load a pipeline saved by `save_pipeline`, refusing anything else.

    skops lists the types in the file that it does not trust by default; only
    the estimators a pack writes (`EXPECTED_MODEL_TYPES`) and plain numpy
    number types are accepted. After loading, every step must be one of
    those estimators.

    Raises
    ------
    InputProblem
        When the file holds other types (it may not come from Fitladder, and
        loading it could run code), or is not a pipeline of the expected steps.
    """
    import skops.io as sio
    from sklearn.pipeline import Pipeline

    name = Path(path).name
    untrusted = list(sio.get_untrusted_types(file=str(path)))
    unexpected = [t for t in untrusted if t not in EXPECTED_MODEL_TYPES | _NUMPY_TYPES]
    if unexpected:
        raise InputProblem(f"'{name}' holds types a Fitladder model does not use "
                           f"({', '.join(unexpected)}); it was not loaded.",
                           code="untrusted_model")
    pipe = sio.load(str(path), trusted=untrusted)

    def kind(obj: Any) -> str:
        return f"{type(obj).__module__}.{type(obj).__qualname__}"

    parts = []
    if isinstance(pipe, Pipeline):
        for _, step in pipe.steps:
            parts.append(step)
            for _, inner, _ in getattr(step, "transformers", []) or []:
                parts.append(inner)
    if not isinstance(pipe, Pipeline) or any(
            kind(p) not in EXPECTED_MODEL_TYPES and p != "drop" for p in parts):
        raise InputProblem(f"'{name}' is not a Fitladder model pipeline; it was not used.",
                           code="untrusted_model")
    return pipe


# ---------------------------------------------------------------------------
# the pieces of a pack
# ---------------------------------------------------------------------------
def _cell_key(order: int, penalty: float) -> tuple[int, float]:
    return int(order), float(penalty)


def default_compare_orders(analysis: Analysis) -> list[int]:
    """Orders shown side by side when none are chosen: the straight line (order 1),
    the recommended order and the highest order of the sweep (the same rule as the
    dashboard's default)."""
    orders = analysis.spec.order_list()
    rec = analysis.recommendation.recommended.order
    pick = sorted({min(1, max(orders)), rec, max(orders)} & set(orders))
    if len(pick) < 2 and len(orders) > 1:
        pick = sorted(set(orders[-2:]) | {rec})
    return pick[:4]


def compare_cells(analysis: Analysis,
                  compare_orders: Iterable[int | tuple[int, float]] | None = None
                  ) -> list[tuple[int, float]]:
    """The (order, penalty) cells shown side by side.

    Plain orders are taken at the recommended penalty, so the comparison
    isolates the effect of the order; ``(order, penalty)`` pairs are taken as
    given. Without ``compare_orders``: `default_compare_orders`. The
    recommended cell always comes first.
    """
    rec = analysis.recommendation.recommended
    orders = analysis.spec.order_list()
    cells: list[tuple[int, float]] = [_cell_key(rec.order, rec.penalty)]
    wanted = list(default_compare_orders(analysis) if compare_orders is None
                  else compare_orders)
    for w in wanted:
        if isinstance(w, (tuple, list)):
            key = _cell_key(w[0], w[1])
        else:
            key = _cell_key(int(w), rec.penalty)
        if key[0] not in orders:
            raise InputProblem(f"Order {key[0]} is not in this sweep (orders "
                               f"{', '.join(str(o) for o in orders)}); choose one of those.",
                               code="bad_compare_order")
        # raises InputProblem for a penalty outside the grid
        analysis.cell_row(*key, rec.family, rec.l1_ratio)
        if key not in cells:
            cells.append(key)
    return cells


def _role_words(c: dict) -> str:
    """A candidate's role, with its lag depths / inputs used when the grid has them."""
    more = rung_text(c.get("lags"), c.get("target_lags"), c.get("inputs_used")).lstrip(", ")
    return "; ".join(v for v in (more, c["role"]) if v)


def _rung_of(x) -> tuple:
    """(lags, target_lags, inputs_used) of a table row or a `Cell` (None where absent)."""
    out = []
    for k in ("lags", "target_lags", "inputs_used"):
        v = x.get(k) if isinstance(x, pd.Series) else getattr(x, k, None)
        out.append(None if v is None or pd.isna(v) else int(v))
    return tuple(out)


def _full_key(x) -> tuple:
    if isinstance(x, pd.Series):
        return _cell_key(x["order"], x["penalty"]) + _rung_of(x)
    return _cell_key(x.order, x.penalty) + _rung_of(x)


def leading_candidates(analysis: Analysis, top: int = 5) -> pd.DataFrame:
    """The ``top`` cells by mean validation error, plus the recommended cell.

    Cells whose validation numbers are identical to a listed cell of the same
    order and rung (a penalty too small to change anything) are listed once.
    In a grid over lag depths or input counts a cell is also told apart by them.
    """
    t = analysis.validation.copy()
    t = t[np.isfinite(t["validation_mse"])]
    t = t.sort_values(["validation_mse", "effective_df", "penalty"], kind="stable")
    rec = analysis.recommendation.recommended
    best = analysis.recommendation.best
    rows = []
    seen: set[tuple] = set()
    for _, r in t.iterrows():
        sig = (int(r["order"]), float(r["validation_mse"]), round(float(r["effective_df"]), 9),
               _rung_of(r))
        if sig in seen:
            continue
        seen.add(sig)
        rows.append(r)
        if len(rows) >= top:
            break
    def rkey(r):
        return _full_key(r) + (r.get("family", "ridge"), round(float(r.get("l1_ratio", 0.0)), 12))

    def ckey(c):
        return _full_key(c) + (c.family, round(float(c.l1_ratio), 12))

    keys = {rkey(r) for r in rows}
    for c in (best, rec):
        if ckey(c) not in keys:
            rows.append(analysis.cell_row(c.order, c.penalty, c.family, c.l1_ratio, **dict(zip(
                ("lags", "target_lags", "inputs_used"), _rung_of(c)))))
            keys.add(ckey(c))
    out = pd.DataFrame(rows).reset_index(drop=True)
    out["role"] = [("recommended" if rkey(r) == ckey(rec) else "") +
                   (" best" if rkey(r) == ckey(best) else "")
                   for _, r in out.iterrows()]
    out["role"] = out["role"].str.strip().str.replace(" ", ", ")
    return out


def _cell_dict(cell: Cell, row: pd.Series | None = None) -> dict:
    d = {"order": int(cell.order), "penalty": float(cell.penalty),
         "validation_mse": cell.validation_mse, "validation_mse_se": cell.validation_mse_se,
         "validation_rmse": math.sqrt(cell.validation_mse)
         if math.isfinite(cell.validation_mse) and cell.validation_mse >= 0 else None,
         "validation_r2": cell.validation_r2, "train_mse": cell.train_mse,
         "parameters": int(cell.parameters), "effective_df": cell.effective_df,
         "samples_per_parameter": cell.samples_per_parameter, "reason": cell.reason,
         "family": cell.family, "l1_ratio": float(cell.l1_ratio),
         "paired_difference": getattr(cell, "paired_difference", None),
         "paired_difference_se": getattr(cell, "paired_difference_se", None)}
    for k in RUNG_KEYS:   # the cell's other axes, when the grid has them
        v = getattr(cell, k, None)
        if v is not None:
            d[k] = v
    return d


_GRID_KEYS = ("order", "penalty", "parameters", "effective_df", "train_mse", "train_mse_se",
              "validation_mse", "validation_mse_se", "validation_rmse", "validation_r2", "folds",
              "family", "l1_ratio")
#: keys of grid rows for the other axes (lag depths, inputs used, target), present when swept
RUNG_KEYS = ("lags", "target_lags", "inputs_used", "target")


def _grid_keys(table: pd.DataFrame) -> tuple[str, ...]:
    return _GRID_KEYS + tuple(k for k in RUNG_KEYS if k in table.columns)


def _axes_dict(full: Analysis) -> dict:
    """The request's axes beyond order and penalty, for summary.json."""
    spec = full.spec
    out: dict = {}
    if spec.lags is not None:
        out["lags"] = {**spec.lags.to_dict(), "rows_left_out": int(full.rows_left_out)}
    if spec.nested_inputs is not None:
        out["inputs_ranked"] = spec.nested_inputs
    if spec.extra_targets:
        out["targets"] = list(spec.targets)
    if out:
        out["target"] = full.target
        out["chosen_columns"] = list(full.model_spec.inputs)
    return out


_PAIRED_KEYS = ("paired_difference", "paired_difference_se", "near_best")


def _finding_dicts(checks: Any) -> list[dict]:
    if checks is None:
        return []
    findings = getattr(checks, "findings", checks)
    out = []
    for i, f in enumerate(findings, start=1):
        d = f.to_dict() if hasattr(f, "to_dict") else dict(f)
        out.append({"number": i, "code": d.get("code"), "severity": d.get("severity"),
                    "message": d.get("message"), "value": d.get("value"),
                    "advice": d.get("advice"), "details": d.get("details", {})})
    return out


def _check_facts(checks: Any) -> dict:
    """How the checks read the row order, and which were computed but not used."""
    return {"row_order": dict(getattr(checks, "row_order", {}) or {}),
            "skipped": [dict(x) for x in (getattr(checks, "skipped", []) or [])],
            "notes": list(getattr(checks, "notes", []) or [])}


def _check_note_lines(s: dict) -> list[str]:
    """Plain sentences under the warnings: skipped checks and the row-order assumption."""
    c = s.get("checks") or {}
    out = []
    skipped = c.get("skipped") or []
    if skipped:
        names = " and ".join(x["code"].replace("_", " ") for x in skipped)
        reasons = list(dict.fromkeys(x["reason"] for x in skipped))
        out.append(f"Not used as warnings: {names}. " + " ".join(reasons))
    elif (c.get("row_order") or {}).get("status") in ("assumed", "time_scheme", "stated"):
        out.append("Row order: " + c["row_order"]["sentence"])
    return out


def _roles(data: DataLike, spec: SweepSpec) -> dict:
    sc = spec.scheme
    return {"target": spec.target, "inputs": list(spec.inputs),
            "order_column": sc.order_column, "group_column": sc.group_column,
            "split_column": sc.split_column}


def _data_facts(data: DataLike, loaded: Any, source_name: str) -> dict:
    rep = getattr(loaded, "report", None)
    n = int(len(np.asarray(data.y)))
    rows_in = int(getattr(data, "rows_in", n))
    return {
        "file": source_name,
        "sha256": getattr(rep, "sha256", None),
        "size_bytes": getattr(rep, "size_bytes", None),
        "file_format": getattr(rep, "file_format", None),
        "rows_read": getattr(rep, "rows_read", rows_in),
        "rows_in": rows_in,
        "rows_used": n,
        "rows_dropped": int(getattr(data, "rows_dropped", rows_in - n)),
        "drop_counts": dict(getattr(data, "drop_counts", {}) or {}),
        "drop_reasons": dict(getattr(data, "drop_reasons", {}) or {}),
        "ignored_columns": list(getattr(rep, "ignored_columns", []) or []),
        "notes": list(getattr(rep, "notes", []) or []) + list(getattr(data, "notes", []) or []),
        "text_inputs": {c: {"reference": f.reference, "levels": list(f.levels)}
                        for c, f in (getattr(data, "factors", {}) or {}).items()},
    }


def summary_dict(analysis: Analysis, model: FinalModel, data_facts: dict, roles: dict,
                 findings: list[dict], cells: list[tuple[int, float]],
                 candidates: pd.DataFrame, lc_note: str = "", full: Analysis | None = None) -> dict:
    """The content of ``summary.json`` (plain data; NaN turned into None).

    ``full`` is the whole many-axis analysis when ``analysis`` is its view at
    the recommended rung (`Analysis.view`): its grid, axes and notes are used.
    """
    rec = analysis.recommendation
    full = analysis if full is None else full
    spec = full.spec
    keys = _grid_keys(full.validation) + tuple(
        k for k in _PAIRED_KEYS if k in full.validation)
    grid = [{k: (None if pd.isna(r[k]) else r[k]) if k in RUNG_KEYS else r[k] for k in keys}
            for _, r in full.validation.iterrows()]
    cand = [{**{k: (None if k in RUNG_KEYS and pd.isna(r[k]) else r[k])
                for k in _grid_keys(candidates)}, "role": r["role"]}
            for _, r in candidates.iterrows()]
    out = {
        "format": SUMMARY_FORMAT,
        "data": data_facts,
        "roles": roles,
        "validation": {"scheme": spec.scheme.kind, "scheme_name": scheme_name(spec.scheme.kind),
                       "description": analysis.plan.description,
                       "splits": int(analysis.plan.n_splits),
                       "settings": asdict(spec.scheme),
                       "when_to_use": SCHEME_HELP.get(spec.scheme.kind, "")},
        "sweep": {"orders": spec.order_list(), "penalties": list(spec.penalties),
                  "interactions": bool(spec.interactions), "seed": int(spec.seed),
                  "cells": int(len(full.validation)), "notes": list(full.notes)},
        "rule": rec.rule,
        "rule_name": getattr(rec, "rule_name", None),
        "rule_se_method": getattr(rec, "se_method", None),
        "threshold": rec.threshold,
        "best": _cell_dict(rec.best),
        "recommended": _cell_dict(rec.recommended),
        "candidates": cand,
        "grid": grid,
        "coefficients": {"order": int(model.order), "penalty": float(model.penalty),
                         "family": model.family, "l1_ratio": float(model.l1_ratio),
                         "terms": list(model.terms), "values": list(model.coefficients)},
        "final_fit": {"rows": int(model.n_rows), "r2": model.r2,
                      "residual_sd": model.residual_sd, "train_mse": model.train_mse,
                      "effective_df": model.effective_df,
                      "condition_number": model.condition_number,
                      "input_range": {name: [float(lo), float(hi)] for name, lo, hi in
                                      zip(model.input_names, model.x_min, model.x_max)},
                      "notes": list(model.notes)},
        "compared_cells": [{"order": q, "penalty": a} for q, a in cells],
        "learning_curve_note": lc_note,
        "warnings": findings,
        "caution": CAUTION,
    }
    axes = _axes_dict(full)
    if axes:
        out["sweep"]["axes"] = axes
        out["roles"] = {**roles, "target": full.target}
    return plain(out)


def _nested_dict(nested: Any) -> dict | None:
    """Nested cross-validation for ``summary.json`` (None when it did not run)."""
    if nested is None:
        return None
    return {"outer_mse": nested.outer_mse, "outer_se": nested.outer_se,
            "inner_mse": nested.inner_mse, "inner_se": getattr(nested, "inner_se", None),
            "ratio": nested.ratio, "folds": int(len(nested.per_fold)),
            "description": nested.description, "notes": list(nested.notes)}


def _stability_dict(stability: Any, analysis: Analysis) -> dict | None:
    """Selection stability for ``summary.json`` (None when it did not run)."""
    if stability is None:
        return None
    rec = analysis.recommendation.recommended
    t = stability.table
    hit = t[(t["order"] == rec.order) & np.isclose(t["penalty"], rec.penalty)]
    return {"method": stability.method, "repetitions": int(len(stability.chosen)),
            "recommended_share": float(hit["share"].iloc[0]) if not hit.empty else 0.0,
            "cells": [{"order": int(r["order"]), "penalty": float(r["penalty"]),
                       "count": int(r["count"]), "share": float(r["share"])}
                      for _, r in t.iterrows()],
            "notes": list(stability.notes)}


def model_formula(model: FinalModel, digits: int = 7, max_terms: int = 12) -> str:
    """The fitted model as a formula in the raw inputs, e.g. ``y = 1.5 + 2·x - 0.3·x^2``.

    Coefficients are written to ``digits`` significant digits (full precision in
    ``model_coefficients.csv``); beyond ``max_terms`` terms the rest is elided.
    """
    parts = []
    for i, (term, v) in enumerate(zip(model.terms, np.asarray(model.coefficients, float))):
        if i > max_terms:
            parts.append(f" + … ({len(model.terms) - i} more terms in model_coefficients.csv)")
            break
        num = f"{abs(v):.{digits}g}"
        sign = "-" if v < 0 else "+"
        body = num if term == "intercept" else f"{num}·{term}"
        parts.append((("-" if v < 0 else "") + body) if not parts else f" {sign} {body}")
    return f"{model.target} = " + ("".join(parts) if parts else "0")


def usage(model: FinalModel, file: str = "model.skops") -> dict:
    """How to use the recommended model elsewhere: three lines of Python, the
    formula and the input range it was fitted on."""
    # the middle of each input's range; a text input (column[level] terms) at its
    # reference level, as the column is written in the table
    text = dict(getattr(model, "text_inputs", None) or {})
    owner = _text_columns(text)
    example: dict[str, list] = {}
    for name, lo, hi in zip(model.input_names, model.x_min, model.x_max):
        col = owner.get(str(name))
        if col is not None:
            example.setdefault(col, [text[col][0]])
        else:
            example[name] = [float(np.round((lo + hi) / 2, 6))]
    if len(example) <= 4 or text:
        frame = ", ".join(f"{name!r}: {vals!r}" for name, vals in list(example.items())[:4])
        if len(example) > 4:
            frame += ", ..."
        predict = f"model.predict(pd.DataFrame({{{frame}}}))"
    else:   # many inputs: one row at the middle of every input's range (the scaler's centre)
        predict = "model.predict(pd.DataFrame([model[0].mean_], columns=model.feature_names_in_))"
    python = ["import pandas as pd, skops.io as sio",
              f"model = sio.load({file!r}, trusted={pipeline_types(model)!r})",
              predict]
    return {"python": python,
            "trust_note": f"Load only the {file} of this pack. The list names the scikit-learn "
                          "types this model is made of; loading refuses any other type the "
                          "file might hold. engine.pack.load_pipeline checks the same.",
            "formula": model_formula(model),
            "input_range": {name: [float(lo), float(hi)] for name, lo, hi in
                            zip(model.input_names, model.x_min, model.x_max)},
            "text_inputs": {c: {"reference": ref, "levels": [ref, *levels]}
                            for c, (ref, levels) in text.items()},
            "text_note": " ".join(
                f"Text input {c} takes the values {', '.join([ref, *levels])} as written; "
                "any other value stops predict with an error (the model has no term for it)."
                for c, (ref, levels) in text.items())}


def _versions() -> dict:
    from importlib.metadata import version   # scikit-learn's version without importing it

    from . import __version__
    return {"fitladder": __version__, "python": platform.python_version(),
            "numpy": np.__version__, "pandas": pd.__version__,
            "scikit-learn": version("scikit-learn")}


def _recorded_load_options(load_options: dict | None) -> dict:
    """How the data were read, as a re-run needs it (streamed packs also say so)."""
    opts = load_options or {}
    out = {"decimal": opts.get("decimal"), "sheet": opts.get("sheet")}
    if opts.get("stream"):
        out.update(stream=True, sample_rows=opts.get("sample_rows"))
    return out


def record_dict(spec: SweepSpec, data_facts: dict, roles: dict, cells: list[tuple[int, float]],
                load_options: dict | None, source_path: str | None,
                error_unit: str = DEFAULT_ERROR_UNIT) -> dict:
    """The content of ``record.json``: what is needed to run the pack again."""
    rec = plain({
        "format": RECORD_FORMAT,
        "created_utc": _dt.datetime.now(_dt.timezone.utc).replace(microsecond=0).isoformat(),
        "spec": spec.to_dict(),
        "seed": int(spec.seed),
        "data": {"file": data_facts["file"], "path": source_path, "sha256": data_facts["sha256"],
                 "size_bytes": data_facts["size_bytes"], "rows_in": data_facts["rows_in"],
                 "rows_used": data_facts["rows_used"],
                 "rows_dropped": data_facts["rows_dropped"]},
        "load_options": _recorded_load_options(load_options),
        "roles": roles,
        "compare_cells": [[q, a] for q, a in cells],
        "error_unit": error_unit,
        "versions": _versions(),
    })
    rec["request_sha256"] = request_fingerprint(rec)  # lets a re-run notice hand edits
    return rec


# ---------------------------------------------------------------------------
# charts
# ---------------------------------------------------------------------------
def learning_cells(cells: list[tuple[int, float]]) -> list[tuple[int, float]]:
    """Cells drawn in the learning curve: the recommended one (first) and the most
    complex compared cell, whose gap between training and validation error shows
    what more flexibility costs at this amount of data."""
    out = [cells[0]]
    others = [c for c in cells[1:] if c[0] > cells[0][0]]
    if others:
        out.append(max(others, key=lambda c: (c[0], -c[1])))
    return out


def _coefficient_paths(data: DataLike, analysis: Analysis, full: Analysis):
    """Coefficient paths of the recommended order, when lasso or elastic net was swept."""
    spec = analysis.spec
    if all(f == "ridge" for f in spec.families):
        return None
    from .paths import coefficient_paths
    rec = analysis.recommendation.recommended
    order = int(rec.order) if rec.order > 0 else max(spec.order_list())
    if order == 0:
        return None
    return coefficient_paths(data, spec, order, rec)


def _paths_dict(paths) -> dict:
    kept = paths.survivors[paths.survivors["kept"]] if len(paths.survivors) else paths.survivors
    return {"order": paths.order,
            "entry_order": [{"rank": int(r["rank"]), "term": r["term"],
                             "entry_penalty": float(r["entry_penalty"])}
                            for _, r in paths.entry.head(30).iterrows()],
            "inputs_kept": [str(v) for v in kept.get("input", [])],
            "inputs_total": int(len(paths.survivors)),
            "notes": list(paths.notes)}


def _write_paths(folder: Path, paths, analysis: Analysis, full: Analysis,
                 drawn: dict | None = None) -> None:
    """Coefficient-path charts and tables (lasso or elastic net swept).

    ``drawn``: the charts of `_paths_charts` already rendered (``{stem: (png, svg)}``).
    """
    from . import charts
    if drawn is None:
        drawn = {stem: charts.render_chart(chart)
                 for stem, chart in _paths_charts(paths, analysis, full).items()}
    for stem, (png, svg) in drawn.items():
        (folder / f"{stem}.png").write_bytes(png)
        (folder / f"{stem}.svg").write_text(svg, encoding="utf-8", newline="\n")
    write_csv(paths.table, folder / "coefficient_paths.csv")
    write_csv(paths.entry, folder / "lasso_entry_order.csv")
    write_csv(paths.survivors, folder / "inputs_kept.csv")


def _paths_charts(paths, analysis: Analysis, full: Analysis) -> dict:
    from . import charts
    from .labels import family_text
    rec = analysis.recommendation.recommended
    target = analysis.spec.target
    out = {"coefficient_paths": charts.coefficient_path_chart(
        paths.table, family_text(rec.family, rec.l1_ratio) if rec.family != "ridge" else
        ("lasso" if "lasso" in analysis.spec.families else paths.table["setting"].iloc[0]),
        order=paths.order, entry=paths.entry, target=target)}
    fam = "lasso" if "lasso" in analysis.spec.families else rec.family
    ratio = 1.0 if fam == "lasso" else rec.l1_ratio
    out["terms_kept"] = charts.terms_kept_chart(full.validation, order=paths.order, family=fam,
                                                l1_ratio=ratio, recommended=rec, target=target)
    return out


#: Charts drawn from the sweep alone (no learning curve, fits on all rows or intervals).
SWEEP_CHARTS = ("validation_curve", "order_penalty_heatmap", "coefficient_magnitudes")


def make_charts(analysis: Analysis, lc_table: pd.DataFrame | None, models: dict | None,
                data: DataLike | None, cells: list[tuple[int, float]], lc_note: str = "",
                band: pd.DataFrame | None = None, stems: Sequence[str] | None = None) -> dict:
    """Altair charts of the pack, keyed by the stems of `CHART_FILES`.

    ``stems``: only these charts (`SWEEP_CHARTS` need only ``analysis``).
    """
    from . import charts

    rec = analysis.recommendation.recommended
    best = analysis.recommendation.best
    target = analysis.spec.target
    makers = {
        "validation_curve": lambda: charts.validation_curve_chart(analysis.validation,
                                                                  rec.penalty, best, rec, target),
        "order_penalty_heatmap": lambda: charts.heatmap_chart(analysis.validation, best, rec,
                                                              target),
        "learning_curve": lambda: charts.learning_curve_chart(lc_table, learning_cells(cells),
                                                              target, note=lc_note),
        "order_comparison": lambda: charts.comparison_chart(data, models, target, band=band),
        "coefficient_magnitudes": lambda: charts.coefficient_chart(
            analysis.sweep.coefficient_table(), rec.order, rec.penalty),
    }
    return {stem: make() for stem, make in makers.items() if stems is None or stem in stems}


# ---------------------------------------------------------------------------
# summary.md and summary.html
# ---------------------------------------------------------------------------
def _drop_words(facts: dict, esc: Callable[[Any], str] = str) -> str:
    """Rows dropped and why: empty cells apart from cells that were not numbers."""
    if not facts["rows_dropped"]:
        return "none"
    parts = []
    for c, n in facts["drop_counts"].items():
        why = (facts.get("drop_reasons") or {}).get(c) or {"empty": n}
        if why.get("empty"):
            parts.append(f"{why['empty']} with {esc(c)} empty")
        if why.get("not a number"):
            parts.append(f"{why['not a number']} with {esc(c)} not a number")
    return f"{facts['rows_dropped']} ({'; '.join(parts)})" if parts else str(facts["rows_dropped"])


def _drop_words_md(facts: dict) -> str:
    return _drop_words(facts, escape_name)


def _grid_words(s: dict) -> str:
    orders = s["sweep"]["orders"]
    pens = s["sweep"]["penalties"]
    o = (f"orders {orders[0]}–{orders[-1]}" if orders == list(range(orders[0], orders[-1] + 1))
         and len(orders) > 2 else "orders " + ", ".join(str(v) for v in orders))
    nz = [p for p in pens if p > 0]
    if not nz:
        p = "no penalty"
    elif len(nz) > 3:
        p = (f"{len(nz)} ridge penalties {min(nz):.3g}–{max(nz):.3g}"
             + (" and none" if 0.0 in pens else ""))
    else:
        p = "penalties " + ", ".join(_penalty_short(v) for v in pens)
    inter = ", with products of inputs" if s["sweep"]["interactions"] else ""
    ax = s["sweep"].get("axes") or {}
    more = ""
    if "lags" in ax:
        more += (f" × {len(ax['lags']['depths'])} input lag depths"
                 f" × {len(ax['lags']['target_depths'])} target lag depths")
    if "inputs_ranked" in ax:
        more += f" × {len(s['roles']['inputs'])} input counts"
    return f"{o} × {p}{inter}{more} = {s['sweep']['cells']} cells"


def _mse_words(c: dict, se_name: str = "") -> str:
    """``0.926 ± 0.22 (1 SE)``, or a note that one split gives no standard error."""
    if c.get("validation_mse_se") is None:
        return f"{_num(c['validation_mse'])}, one split so no standard error"
    tail = f" ({se_name})" if se_name else ""
    return f"{_num(c['validation_mse'])} ± {_num(c['validation_mse_se'], 2)}{tail}"


def _error_words(c: dict, unit: str, se_name: str = "") -> str:
    """`_mse_words` in ``unit``: ``0.9397 ± 0.12 (1 SE)`` for RMSE (delta-method SE)."""
    v, se = _cell_error(c, unit)
    if se is None:
        return f"{_num(v)}, one split so no standard error"
    tail = f" ({se_name})" if se_name else ""
    return f"{_num(v)} ± {_num(se, 2)}{tail}"


def _cell_error(c: dict, unit: str) -> tuple[float, float | None]:
    """A candidate's validation error and its standard error in ``unit`` (delta method)."""
    se = c.get("validation_mse_se")
    return (error_in_unit(c["validation_mse"], unit),
            None if se is None else se_in_unit(c["validation_mse"], se, unit))


def _check_error_unit(unit: str) -> None:
    if unit not in ERROR_UNITS:
        raise InputProblem(f"Unknown error unit '{unit}'; choose one of "
                           f"{', '.join(ERROR_UNITS)}.", code="bad_error_unit")


def headline_dict(s: dict, unit: str = DEFAULT_ERROR_UNIT) -> dict:
    """The headline of the summary with every error in one unit (``'mse'`` or ``'rmse'``).

    ``summary.json`` carries it as ``headline``; ``summary.md`` and ``summary.html``
    write their headline sentence and figures from it, so all three agree.
    """
    _check_error_unit(unit)
    r, b = s["recommended"], s["best"]
    name = ERROR_UNITS[unit]
    b_se = b.get("validation_mse_se")
    reason = reason_in_unit(r["reason"], r["validation_mse"], b["validation_mse"],
                            b_se if b_se is not None else float("nan"), unit,
                            diff_se=r.get("paired_difference_se"))
    figures = (f"Validation {name} {_error_words(r, unit, 'one standard error')}; "
               f"validation R² {_num(r['validation_r2'])}; "
               f"{_num(r['effective_df'], 3)} effective parameters")
    best = (f"Best cell: order {b['order']}, {_penalty_words(b['penalty'])}"
            f"{rung_text(b.get('lags'), b.get('target_lags'), b.get('inputs_used'))}: "
            f"validation {name} {_error_words(b, unit)}")
    (err, err_se), (best_err, best_se) = _cell_error(r, unit), _cell_error(b, unit)
    return {"unit": unit, "unit_name": name,
            "validation_error": err, "validation_error_se": err_se,
            "best_error": best_err, "best_error_se": best_se,
            "sentence": f"Recommended: {_headline(s)}. {figures}.",
            "figures": figures, "reason": reason, "best": best}


def _se_method_words(s: dict) -> str:
    """``; standard errors from ...`` for the paired rule, else nothing."""
    m = s.get("rule_se_method")
    return f"; standard errors {m}" if s.get("rule_name") == "paired" and m else ""


def _headline(s: dict) -> str:
    r = s["recommended"]
    fam = r.get("family", "ridge")
    if fam != "ridge" and r["penalty"] != 0:
        from .labels import family_text
        return (f"order {r['order']}, {family_text(fam, r.get('l1_ratio', 1.0))} "
                f"penalty {penalty_text(r['penalty'])}"
                + rung_text(r.get("lags"), r.get("target_lags"), r.get("inputs_used")))
    return (f"order {r['order']}, {_penalty_words(r['penalty'])}"
            + rung_text(r.get("lags"), r.get("target_lags"), r.get("inputs_used")))


def _axes_words(s: dict) -> list[str]:
    """Sentences on the grid's other axes (lag depths, ranked inputs), for both summaries."""
    ax = s["sweep"].get("axes")
    if not ax:
        return []
    out = []
    if "lags" in ax:
        lg = ax["lags"]
        out.append("Lag depths compared: inputs " + ", ".join(str(v) for v in lg["depths"])
                   + "; target " + ", ".join(str(v) for v in lg["target_depths"]) + ".")
    out += [n for n in s["sweep"]["notes"] if "past values" in n or "ranked" in n
            or "first k inputs" in n or "lag depth or number of inputs" in n]
    if ax.get("chosen_columns"):
        out.append("Columns of the recommended model: " + ", ".join(ax["chosen_columns"]) + ".")
    return out


def _large_table_words(s: dict) -> list[str]:
    """How a streamed or cluster run read the rows and which steps used a sample."""
    return [n for n in s["sweep"].get("notes", [])
            if "record batches" in n or "Dask cluster" in n or "use a seeded sample" in n]


def _input_range_words(s: dict, esc: Callable[[Any], str]) -> str:
    return "; ".join(f"{esc(k)} {_num(v[0])} to {_num(v[1])}"
                     for k, v in s["final_fit"]["input_range"].items())


def render_markdown(s: dict) -> str:
    """``summary.md`` from the summary dict (user text Markdown-escaped)."""
    d, roles = s["data"], s["roles"]
    tgt = escape_name(roles["target"])
    lines = [f"# Model choice for {tgt}", ""]
    h = s.get("headline") or headline_dict(s)
    lines += [f"**Recommended: {_headline(s)}.** {h['figures']}.", "",
              f"Why: {md_escape(h['reason'])}", "",
              f"{h['best']}. "
              f"Rule: {md_escape(s['rule'])}{_se_method_words(s)}.", ""]
    lines += ["## Data", "",
              f"- File: {escape_name(d['file'])}",
              f"- SHA-256: `{d['sha256'] or 'not from a file'}`",
              f"- Rows used: {d['rows_used']} of {d['rows_in']}; dropped: {_drop_words_md(d)}"
              + (f"; {d['rows_left_out_for_lags']} more left out at the start for lags"
                 if d.get("rows_left_out_for_lags") else ""),
              f"- Target: {tgt}",
              f"- Inputs: {', '.join(md_escape(c) for c in roles['inputs'])}"]
    for key, label in (("order_column", "Order column"), ("group_column", "Group column"),
                       ("split_column", "Split column")):
        if roles.get(key):
            lines.append(f"- {label}: {escape_name(roles[key])}")
    lines += [f"- Validation: {md_escape(s['validation']['description'])}",
              f"- Grid: {_grid_words(s)}"]
    lines += [f"- {md_escape(w)}" for w in _axes_words(s)]
    lines += [f"- Rows: {md_escape(w)}" for w in _large_table_words(s)]
    lines += [""]
    if s.get("targets"):
        lines += ["## Targets side by side", "",
                  "| target | recommended | validation MSE | ± SE | validation R² | section |",
                  "|---|---|---:|---:|---:|---|"]
        for t in s["targets"]:
            lines.append(f"| {escape_name(t['target'])} | {md_escape(t['recommended'])} | "
                         f"{_num(t['validation_mse'])} | {_num(t['validation_mse_se'], 2)} | "
                         f"{_num(t['validation_r2'])} | {md_escape(t.get('section', ''))} |")
        lines += [""]
    unit = h.get("unit", DEFAULT_ERROR_UNIT)
    lines += ["## Leading candidates", "",
              f"| order | penalty | validation {ERROR_UNITS[unit]} | ± SE | validation R² | "
              "eff. parameters | role |",
              "|---:|---:|---:|---:|---:|---:|---|"]
    for c in s["candidates"]:
        c = {**c, "role": _role_words(c)}
        err, se = _cell_error(c, unit)
        lines.append(f"| {int(c['order'])} | {_penalty_short(c['penalty'])} | "
                     f"{_num(err)} | {_num(se, 2)} | "
                     f"{_num(c['validation_r2'])} | {_num(c['effective_df'], 3)} | {c['role']} |")
    lines += ["", "## Recommended model fitted on all rows", "",
              f"R² {_num(s['final_fit']['r2'])}, residual SD {_num(s['final_fit']['residual_sd'])}, "
              f"condition number {_num(s['final_fit']['condition_number'], 3)}. Fitted on: "
              f"{_input_range_words(s, md_escape)}.", ""]
    co = s["coefficients"]
    if len(co["terms"]) <= 16:
        lines += ["| term | coefficient |", "|---|---:|"]
        lines += [f"| {md_escape(t)} | {v!r} |" for t, v in zip(co["terms"], co["values"])]
    else:
        lines.append(f"{len(co['terms'])} coefficients: see model_coefficients.csv.")
    cp = s.get("coefficient_paths")
    if cp:
        kept = cp.get("inputs_kept") or []
        lines += ["", "## Which inputs the penalty keeps", "",
                  f"- Inputs with a non-zero term in the recommended cell: {len(kept)} of "
                  f"{cp.get('inputs_total', 0)}"
                  + (": " + ", ".join(escape_name(v) for v in kept[:30]) if kept else "")
                  + (" …" if len(kept) > 30 else "") + ".",
                  "- First terms to enter the lasso path (order "
                  f"{int(cp['order'])}, all rows): "
                  + ", ".join(escape_name(e["term"]) for e in cp["entry_order"][:10]) + ".",
                  "- " + md_escape(" ".join(cp.get("notes", []))),
                  "- Files: coefficient_paths.png/.csv, terms_kept.png, lasso_entry_order.csv, "
                  "inputs_kept.csv."]
    lines += [""] + _sureness_md(s)
    lines += ["## Warnings", ""]
    if s["warnings"]:
        for w in s["warnings"]:
            val = "" if w.get("value") is None else f" (value: {md_escape(_value_words(w['value']))})"
            adv = f" {md_escape(w['advice'])}" if w.get("advice") else ""
            lines.append(f"{w['number']}. **{md_escape(w.get('severity') or 'note')}** "
                         f"{md_escape(w['message'])}{val}{adv}")
    else:
        lines.append("No warnings.")
    for line in _check_note_lines(s):
        lines += ["", md_escape(line)]
    lines += ["", "## Caution", "", CAUTION, "",
              "Charts: " + ", ".join(f"{stem}.png" for stem in CHART_FILES) + ". Tables: "
              "validation_grid.csv, validation_per_split.csv, learning_curve.csv, coefficients.csv, "
              "warnings.csv, model_coefficients.csv, interval_coverage.csv, more_rows.csv. Model: "
              "model.skops (scikit-learn pipeline).", ""]
    return "\n".join(lines)


def sureness(analysis: Analysis, data: DataLike, spec: SweepSpec,
             learning: Any | None = None) -> tuple[Any, Any, list[str]]:
    """Intervals (`engine.intervals.how_sure`) and the larger-table outlook
    (`engine.extrapolation.more_rows`) of the recommended cell; a part that cannot be
    computed is None, with the reason in the returned notes. ``learning``: a learning
    curve of every order already made, reused by the outlook."""
    from .intervals import how_sure
    notes: list[str] = []
    sure = None
    try:
        sure = how_sure(analysis, data, spec)
    except InputProblem as exc:
        notes.append(f"Intervals not computed: {exc.message}")
    outlook, more_notes = _outlook(analysis, data, spec, learning)
    return sure, outlook, notes + more_notes


def _intervals(analysis: Analysis, data: DataLike) -> tuple[Any, list[str]]:
    """The intervals of `sureness`, or None and the reason."""
    from .intervals import how_sure
    try:
        return how_sure(analysis, data, analysis.spec), []
    except InputProblem as exc:
        return None, [f"Intervals not computed: {exc.message}"]


def _outlook(analysis: Analysis, data: DataLike, spec: SweepSpec,
             learning: Any | None = None) -> tuple[Any, list[str]]:
    """The larger-table outlook of `sureness`, or None and the reason."""
    from .extrapolation import more_rows
    try:
        return more_rows(analysis, data, spec, learning=learning), []
    except InputProblem as exc:
        return None, [f"Larger-table outlook not computed: {exc.message}"]


def sureness_dict(sure: Any, outlook: Any, notes: list[str]) -> dict:
    """The ``how_sure`` and ``more_rows`` entries of ``summary.json``."""
    return plain({"how_sure": sure.to_dict() if sure is not None else {"notes": notes},
                  "more_rows": outlook.to_dict() if outlook is not None else {"notes": notes}})


def _sureness_md(s: dict) -> list[str]:
    """The 'How sure' and 'More rows or a simpler model?' sections of summary.md."""
    hs, mr = s.get("how_sure") or {}, s.get("more_rows") or {}
    lines = ["## How sure", ""]
    lines += [md_escape(t) for t in hs.get("summary", [])] or ["Not computed."]
    extra = (hs.get("error_interval") or {}).get("notes", []) + \
        (hs.get("prediction_intervals") or {}).get("notes", []) + \
        ([] if hs.get("summary") else hs.get("notes", []))
    if extra:
        lines += [""] + [f"- {md_escape(t)}" for t in extra]
    lines += ["", "## More rows or a simpler model?", ""]
    lines += [md_escape(t) for t in mr.get("verdict", [])] or ["Not computed."]
    if mr.get("notes"):
        lines += [""] + [f"- {md_escape(t)}" for t in mr["notes"]]
    return lines + [""]


def _sureness_html(s: dict) -> str:
    """One compact paragraph for summary.html: error interval, interval coverage, more rows."""
    hs, mr = s.get("how_sure") or {}, s.get("more_rows") or {}
    parts = []
    e, p = hs.get("error_interval"), hs.get("prediction_intervals")
    if e:
        parts.append(f"error on new rows MSE {_num(e['low'])} to {_num(e['high'])} "
                     f"({100 * e['level']:.0f}%, {_h(e['method'])})")
    if p:
        held = (f"{100 * p['analytic_coverage']:.0f}% analytic, "
                if p.get("analytic_coverage") is not None else "")
        parts.append(f"{100 * p['level']:.0f}% prediction intervals held for {held}"
                     f"{100 * p['cvplus_coverage']:.0f}% CV+ of {p['checked_rows']:,} unseen "
                     f"{'later-period ' if p['checked_on'] == 'later period' else ''}rows")
    r = mr.get("recommended") or {}
    if mr and not mr.get("declined") and r.get("error_at_5x") is not None:
        q = (mr.get("supported_order") or {}).get("5x")
        parts.append(f"at 5x the rows MSE about {_num(r['error_at_5x'])}"
                     + (f", supporting order {q}" if q is not None else ""))
    elif mr:
        parts.append("no forecast for more rows (see summary.md)")
    if not parts:
        return ""
    text = "; ".join(parts)
    return f"<p style=\"margin:1mm 0 0 0\"><b>How sure:</b> {text[0].upper() + text[1:]}.</p>"


def _value_words(v: Any) -> str:
    if isinstance(v, float):
        return _num(v)
    return str(v)


_CSS = """
@page { margin: 5mm 10mm; }
* { box-sizing: border-box; }
html { -webkit-print-color-adjust: exact; print-color-adjust: exact; }
body { font-family: "DejaVu Sans", "Helvetica Neue", Arial, sans-serif; font-size: 7.0pt;
       line-height: 1.25; color: #1d2330; margin: 0; }
.page { width: 190mm; margin: 0 auto; display: flex; flex-direction: column; }
.page > * { flex: 0 0 auto; }
h1 { font-size: 13pt; margin: 0 0 .6mm 0; color: #17324d; }
h2 { font-size: 8pt; margin: 0 0 1mm 0; color: #17324d; text-transform: uppercase;
     letter-spacing: .04em; border-bottom: 0.6pt solid #b8c4d2; padding-bottom: .4mm; }
.sub { color: #4a5566; margin-bottom: 1.1mm; }
.top { display: grid; grid-template-columns: 1.12fr 1fr; gap: 3.5mm; margin-bottom: 1.4mm; }
.verdict { background: #eef4fa; border-left: 2.2mm solid #2f6f9f; padding: 1.8mm 3mm; }
.verdict .big { font-size: 11pt; font-weight: bold; color: #17324d; margin-bottom: .6mm; }
.verdict .fig { font-size: 7.8pt; margin-bottom: .6mm; }
dl { display: grid; grid-template-columns: auto 1fr; gap: .2mm 2.5mm; margin: 0; }
dt { color: #4a5566; white-space: nowrap; } dd { margin: 0; overflow-wrap: anywhere; }
.page > .charts { display: grid; grid-template-columns: 1fr 1fr; gap: 1.0mm 3.5mm;
          margin-bottom: 1.2mm; align-items: start; }
figure { margin: 0; break-inside: avoid; }
figure.chart { border: 0.4pt solid #d5dbe3; }
figure.chart img { width: 100%; height: auto; display: block; }
figcaption { font-weight: bold; color: #17324d; margin-bottom: .4mm; }
table { border-collapse: collapse; width: 100%; font-size: 7.2pt; }
th, td { padding: .3mm 1.2mm; text-align: right; border-bottom: 0.4pt solid #d5dbe3; }
th { color: #4a5566; font-weight: normal; border-bottom: 0.8pt solid #8a97a8; }
td.l, th.l { text-align: left; }
tr.rec td { background: #e1eef8; font-weight: bold; }
ol.warn { margin: 0 0 1.5mm 0; padding-left: 4.5mm; columns: 2; column-gap: 6mm;
          font-size: 6.8pt; line-height: 1.22; }
ol.warn li { margin-bottom: .6mm; break-inside: avoid; }
ol.warn .adv { color: #4a5566; }
.sev { display: inline-block; font-weight: bold; text-transform: uppercase; font-size: 6pt;
       line-height: 1.15; padding: 0 .7mm; border-radius: .6mm; vertical-align: .2pt;
       border: 0.5pt solid #6b7685; color: #4a5566; background: #fff; }
.sev.sev-serious { background: #a61b1b; border-color: #a61b1b; color: #fff; }
.sev.sev-caution { border-color: #a86400; color: #8a5200; background: #fff; }
.use { border: 0.5pt solid #b8c4d2; padding: .6mm 2mm; margin-bottom: 1.2mm; font-size: 6.6pt;
       line-height: 1.2; }
.use pre { margin: .2mm 0; font-size: 5.8pt; line-height: 1.12; white-space: pre-wrap;
           overflow-wrap: anywhere; }
.beforeuse { border: 0.6pt solid #c9a227; background: #fbf6e4; padding: .6mm 2mm;
             font-size: 6.3pt; line-height: 1.18; }
.foot { color: #6b7685; font-size: 6.2pt; margin-top: .8mm; }
code { font-size: 6.6pt; overflow-wrap: anywhere; }
@media screen { body { padding: 6mm 0; background: #f3f5f8; }
                .page { background: #fff; padding: 6mm 8mm; width: 206mm; } }
@media print { .page { zoom: var(--fit, 1); } }
"""

#: Height (mm) the page content may take: a Letter page (279.4 mm) less the
#: 9 mm top and bottom margins, less 3 mm of slack; A4 is taller.
PAGE_BUDGET_MM = 258.0

#: Height (mm) the printed content may take on either paper: a US Letter page
#: (279.4 mm, the shorter of Letter and A4) less the 5 mm top and bottom margins,
#: less 3 mm of slack. The page names no paper size, so the printer's paper is used.
PRINT_HEIGHT_MM = 266.0

# The charts take whatever height the text leaves. Only if the content is taller
# than a Letter page holds (long warnings, a long snippet) is the printed page
# shrunk to fit (CSS zoom, print only). Measures only; touches no user text.
_FIT_SCRIPT = """<script>
(function () {
  function fit() {
    var page = document.querySelector('.page');
    if (!page) { return; }
    var mm = 96 / 25.4, cs = getComputedStyle(page);
    var h = (page.getBoundingClientRect().height - parseFloat(cs.paddingTop)
             - parseFloat(cs.paddingBottom)) / mm;
    if (window.matchMedia('print').matches) {   // already zoomed: the natural height
      h /= parseFloat(getComputedStyle(document.documentElement).getPropertyValue('--fit')) || 1;
    }
    var f = h > %BUDGET% ? Math.max(0.5, %BUDGET% / h) : 1;
    document.documentElement.style.setProperty('--fit', f.toFixed(4));
  }
  if (document.readyState === 'complete') { fit(); } else { window.addEventListener('load', fit); }
  window.addEventListener('beforeprint', fit);
})();
</script>"""


def _warnings_height_mm(warnings: list[dict]) -> float:
    """Rough printed height (mm) of the warning list set in two columns."""
    if not warnings:
        return 6.0
    lines = 0.0
    for w in warnings:
        chars = len(str(w.get("message") or "")) + len(str(w.get("advice") or "")) + 30
        lines += math.ceil(chars / 66.0) + 0.2
    return 5.0 + 3.2 * (lines / 2.0 + 0.6)


def chart_layout(s: dict) -> str:
    """``'two'`` (3 rows of 2) or ``'three'`` (2 rows of 3) chart columns.

    The charts get the height the text leaves; when little is left (many
    warnings) three narrower columns show each chart larger than three short
    rows would. Charts are about 1.5 times as wide as tall.
    """
    free = (PAGE_BUDGET_MM - 95.0 - _warnings_height_mm(s["warnings"])
            - 7.0 * len(_check_note_lines(s)))
    two = min(92.0, 1.5 * (free / 3.0))
    three = min(60.0, 1.5 * (free / 2.0))
    return "three" if three > two else "two"


def _sorted_warnings(warnings: list[dict]) -> list[dict]:
    """Warnings most severe first (serious, caution, note), keeping their numbers."""
    return sorted(warnings, key=lambda w: (severity_rank(w.get("severity")), w.get("number", 0)))


#: Printed height (mm) left for the warnings on the one-page summary.
WARNINGS_ROOM_MM = 28.0


def _warnings_html(s: dict, room_mm: float = WARNINGS_ROOM_MM) -> str:
    """The warnings, most severe first; those that do not fit the page are named only."""
    ws = _sorted_warnings(s["warnings"])
    if not ws:
        return "<p style=\"margin:0 0 1.5mm 0\">No warnings.</p>"
    room_mm -= 6.0 * len(_check_note_lines(s))
    items, total, tallest, rest = [], 0.0, 0.0, []
    for w in ws:
        chars = len(str(w.get("message") or "")) + len(str(w.get("advice") or "")) + 34
        h = math.ceil(chars / 60.0) * 2.9 + 0.7  # lines of about 60 characters at 6.8 pt
        # two balanced columns: about half the total, plus at most half the tallest item
        if items and (total + h) / 2.0 + max(tallest, h) / 2.0 > room_mm:
            rest.append(w)
            continue
        total, tallest = total + h, max(tallest, h)
        sev = str(w.get("severity") or "note")
        val = "" if w.get("value") is None else f" <i>(value: {_h(_value_words(w['value']))})</i>"
        adv = f" <span class=\"adv\">{_h(w['advice'])}</span>" if w.get("advice") else ""
        items.append(f"<li value=\"{int(w.get('number') or 0)}\"><span class=\"sev "
                     f"sev-{_h(sev.lower())}\">{_h(sev)}</span> {_h(w['message'])}{val}{adv}</li>")
    more = ""
    if rest:
        more = ("<p style=\"margin:0 0 1.5mm 0\">Also (full text in summary.md): "
                + "; ".join(f"{int(w.get('number') or 0)}. {_h(w.get('severity') or 'note')}: "
                            f"{_h(w.get('code'))}" for w in rest) + ".</p>")
    return f"<ol class=\"warn\">{''.join(items)}</ol>{more}"


def _text_inputs_html(d: dict) -> str:
    """Text inputs and their reference levels (absorbed in the intercept)."""
    return "".join(f"<dt>Text input</dt><dd>{_h(c)}: reference level {_h(f['reference'])}; "
                   f"terms for {_h(', '.join(f['levels']))}</dd>"
                   for c, f in (d.get("text_inputs") or {}).items())


def _trust_html(s: dict) -> str:
    """Nested cross-validation and selection stability, when they ran."""
    out = []
    n = s.get("nested_cv")
    if n:
        out.append(f"Nested cross-validation: error of the whole choice on unseen rows MSE "
                   f"{_num(n['outer_mse'])} ± {_num(n['outer_se'], 2)} against the sweep's "
                   f"{_num(n['inner_mse'])} (ratio {_num(n['ratio'], 3)}; about 1 when the "
                   "sweep's estimate holds).")
    st = s.get("selection_stability")
    if st:
        out.append(f"Selection stability ({_h(st['method'])}, {st['repetitions']} "
                   f"repetitions): the recommended cell was chosen in "
                   f"{st['recommended_share']:.0%} of them.")
    if not out:
        return ("<p style=\"margin:1mm 0 0 0;color:#4a5566\">Nested cross-validation and "
                "selection stability were not run for this pack.</p>")
    return "".join(f"<p style=\"margin:1mm 0 0 0\">{t}</p>" for t in out)


def _use_html(s: dict) -> str:
    """'Use this model': three lines of Python, the formula, the input range."""
    u = s.get("use")
    if not u:
        return ""
    code = html.escape("\n".join(u["python"]), quote=True)  # code, kept as written
    ranges = "; ".join(f"{_h(k)} {_num(v[0])} to {_num(v[1])}"
                       for k, v in list(u["input_range"].items())[:6])
    if len(u["input_range"]) > 6:
        ranges += f"; … {len(u['input_range']) - 6} more in summary.json"
    return (f"<div class=\"use\"><b>Use this model.</b> In Python, with pandas, scikit-learn "
            f"and skops:<pre>{code}</pre><b>Formula</b> (7 significant digits; full precision "
            f"in model_coefficients.csv): {_h(u['formula'])}. <b>Valid for</b> inputs inside "
            f"the range it was fitted on: {ranges}. Predictions outside it were not checked."
            + (f" {_h(u['text_note'])}" if u.get("text_note") else "") + "</div>")


def render_html(s: dict, pngs: dict[str, bytes], generated: str = "") -> str:
    """``summary.html``: one printed page; charts embedded as base64 PNG; user text escaped."""
    d, roles, r = s["data"], s["roles"], s["recommended"]
    hd = s.get("headline") or headline_dict(s)
    hd_se = (", one split so no standard error" if hd["validation_error_se"] is None
             else f" ± {_num(hd['validation_error_se'], 2)} (1 SE)")
    tgt = _h(roles["target"])
    inputs = ", ".join(_h(c) for c in roles["inputs"])
    if len(roles["inputs"]) > 8:
        inputs = (", ".join(_h(c) for c in roles["inputs"][:6])
                  + f" … and {len(roles['inputs']) - 6} more")
    extra_roles = "".join(
        f"<dt>{label}</dt><dd>{_h(roles[key])}</dd>"
        for key, label in (("order_column", "Order column"), ("group_column", "Group column"),
                           ("split_column", "Split column")) if roles.get(key))
    warn_html = _warnings_html(s)
    warn_html += "".join(f"<p class=\"adv\" style=\"margin:0 0 1.2mm 0;font-size:6.4pt\">"
                         f"{_h(line)}</p>"
                         for line in _check_note_lines(s))
    rows = []
    shown = [c for c in s["candidates"] if c["role"]]  # recommended and best always
    shown = [c for c in s["candidates"] if c in shown or
             len([x for x in s["candidates"][:s["candidates"].index(c)] if not x["role"]]) < 2]
    for c in shown:
        cls = " class=\"rec\"" if "recommended" in c["role"] else ""
        err, se = _cell_error(c, hd.get("unit", DEFAULT_ERROR_UNIT))
        rows.append(f"<tr{cls}><td>{int(c['order'])}</td><td>{_penalty_short(c['penalty'])}</td>"
                    f"<td>{_num(err)}</td><td>{_num(se, 2)}</td>"
                    f"<td>{_num(c['validation_r2'])}</td><td>{_num(c['effective_df'], 3)}</td>"
                    f"<td class=\"l\">{_h(_role_words(c))}</td></tr>")
    figs = []
    for stem, title in CHART_FILES.items():
        if stem in pngs:
            b64 = base64.b64encode(pngs[stem]).decode("ascii")
            # the trust results sit under the last chart, beside the candidates table
            tail = f"</figure><div>{_sureness_html(s)}</div>" if stem == "coefficient_magnitudes" \
                else "</figure>"
            figs.append(f"<div><figure class=\"chart\"><img alt=\"{_h(title)}\" "
                        f"src=\"data:image/png;base64,{b64}\">{tail}</div>")
    ff = s["final_fit"]
    figs.append("<figure><figcaption>Leading candidates (by mean validation error)</figcaption>"
                "<table><tr><th>order</th><th>penalty</th>"
                f"<th>val. {ERROR_UNITS[hd.get('unit', DEFAULT_ERROR_UNIT)]}</th><th>± SE</th>"
                "<th>val. R²</th><th>eff. par.</th><th class=\"l\">role</th></tr>"
                + "".join(rows) + "</table>"
                f"<p style=\"margin:1mm 0 0 0\">Recommended model refitted on all {ff['rows']} "
                f"rows: R² {_num(ff['r2'])}, residual SD {_num(ff['residual_sd'])}, condition "
                f"number {_num(ff['condition_number'], 3)}.</p>{_trust_html(s)}</figure>")
    use_html = _use_html(s)
    css = _CSS.replace("PAGE_H", f"{PAGE_BUDGET_MM:g}")
    sha = d["sha256"] or "not from a file"
    script = _FIT_SCRIPT.replace("%BUDGET%", f"{PRINT_HEIGHT_MM:g}")
    return f"""<!DOCTYPE html>
<html lang="en"><head><meta charset="utf-8">
<meta name="viewport" content="width=device-width, initial-scale=1">
<title>Model choice for {tgt}</title>
<style>{css}</style></head>
<body><div class="page">
<h1>Model choice for {tgt}</h1>
<div class="sub">{_h(d['file'])} · {d['rows_used']} rows used · {_h(s['validation'].get('scheme_name', ''))}</div>
<div class="top">
 <div class="verdict">
  <div class="big">Recommended: {_h(_headline(s))}</div>
  <div class="fig">Validation {_h(hd['unit_name'])} <b>{_num(hd['validation_error'])}</b>{hd_se} ·
   R² {_num(r['validation_r2'])} · {_num(r['effective_df'], 3)} effective parameters</div>
  <div>{_h(hd['reason'])}</div>
  <div style="margin-top:.8mm">{_h(hd['best'])}.
   Chosen by the {_h(s['rule'].split(':')[0].replace('one-standard-error', 'one-SE'))}.</div>
 </div>
 <div>
  <h2>Data and request</h2>
  <dl>
   <dt>File</dt><dd>{_h(d['file'])}</dd>
   <dt>SHA-256</dt><dd><code>{_h(sha)}</code></dd>
   <dt>Rows</dt><dd>{d['rows_used']} used of {d['rows_in']}; dropped: {_h(_drop_words(d))}{f"; {d['rows_left_out_for_lags']} more left out at the start for lags" if d.get("rows_left_out_for_lags") else ""}</dd>
   <dt>Target</dt><dd>{tgt}</dd>
   <dt>Inputs</dt><dd>{inputs}</dd>{extra_roles}{_text_inputs_html(d)}
   <dt>Validation</dt><dd>{_h(s['validation']['description'])}</dd>{"".join(f"<dt>Rows</dt><dd>{_h(w)}</dd>" for w in _large_table_words(s))}
   <dt>Grid</dt><dd>{_h(_grid_words(s))}</dd>{"".join(f"<dt>Target</dt><dd>{_h(t['target'])}: {_h(t['recommended'])}, validation MSE {_h(_num(t['validation_mse']))} (folder {_h(t.get('section', ''))})</dd>" for t in s.get("targets") or [])}{"".join(f"<dt>Axes</dt><dd>{_h(w)}</dd>" for w in _axes_words(s))}
  </dl>
 </div>
</div>
<div class="charts">{''.join(figs)}</div>
{use_html}
<h2>Warnings ({len(s['warnings'])})</h2>{warn_html}
<div class="beforeuse"><b>Before relying on this model.</b> {_h(CAUTION)}</div>
<div class="foot">Fitladder {_h(generated)} · full numbers in summary.json and the CSV tables ·
 model.skops reproduces the recommended model in scikit-learn.</div>
</div>{script}</body></html>
"""


# ---------------------------------------------------------------------------
# public entry points
# ---------------------------------------------------------------------------
def _stage(progress: Progress | None, lo: float, hi: float) -> Progress | None:
    if progress is None:
        return None
    return lambda f, msg: progress(lo + (hi - lo) * float(f), msg)


def targets_table(analyses: list[Analysis], folders: list[str] | None = None) -> pd.DataFrame:
    """One row per target: its recommended cell side by side with the others'."""
    rows = []
    for i, a in enumerate(analyses):
        r = a.recommendation.recommended
        rows.append({"target": a.target, "recommended": r.label, "order": r.order,
                     "penalty": r.penalty, "lags": r.lags, "target_lags": r.target_lags,
                     "inputs_used": r.inputs_used, "validation_mse": r.validation_mse,
                     "validation_mse_se": r.validation_mse_se,
                     "validation_r2": r.validation_r2, "effective_df": r.effective_df,
                     "section": (folders[i] if folders else "")})
    t = pd.DataFrame(rows)
    return t.dropna(axis=1, how="all")


def _build_target_packs(out_dir, *, data, spec, analyses, progress, overwrite=False,
                        **kw) -> PackResult:
    """A pack per target: the first at the top, the others in folders ``target_2``, ...

    Every pack shows the side-by-side table of all targets (``targets.csv``). All
    are made in one hidden sibling folder and moved into place together.
    """
    from .analysis import analyse_targets
    opened = out_dir if isinstance(out_dir, PackFolder) else None
    out = opened.out if opened is not None else Path(out_dir)
    if analyses is None:
        analyses = analyse_targets(data, spec, progress=_stage(progress, 0.0, 0.3))
    folders = ["."] + [f"target_{i}" for i in range(2, len(analyses) + 1)]
    table = targets_table(analyses, folders)
    first = None
    with ExitStack() as stack:
        folder = opened if opened is not None else stack.enter_context(
            pack_folder(out, overwrite))
        work = folder.work
        for i, (a, sub) in enumerate(zip(analyses, folders)):
            lo = 0.3 + 0.7 * i / len(analyses)
            res = build_pack(_Direct(work / sub), data=data, spec=spec, analysis=a,
                             targets=table,
                             progress=_stage(progress, lo, lo + 0.7 / len(analyses)), **kw)
            first = first or res
        try:
            write_csv(table, work / TARGETS_FILE)
            folder.commit()
        except OSError as exc:
            raise write_problem(out, exc) from None
    first.out_dir = out
    first.files = [out / Path(p).relative_to(work) for p in first.files] + [out / TARGETS_FILE]
    return first


class _Direct:
    """A folder inside a pack being made: written straight into (sub-packs)."""

    def __init__(self, path: Path) -> None:
        self.path = Path(path)


def pack_folder(out: "str | Path", overwrite: bool = False) -> PackFolder:
    """The guarded folder for a pack at ``out`` (see `engine.packdir.PackFolder`)."""
    return PackFolder(out, PACK_FILES + OPTIONAL_FILES + (TARGETS_FILE,), overwrite=overwrite,
                      also=PACK_NAMES)


def _write_files(work: Path, summary: dict, record: dict, pngs: dict[str, bytes],
                 svgs: dict[str, str], full: Analysis, lc: Any, findings: list[dict],
                 model: FinalModel) -> None:
    """Every pack file but ``summary.json`` into ``work`` (the caller writes it last)."""
    def put_text(name: str, text: str) -> None:
        (work / name).write_text(text, encoding="utf-8", newline="\n")

    stamp = f"{_versions()['fitladder']} · made {record['created_utc']}"
    put_text("summary.html", render_html(summary, pngs, stamp))
    put_text("summary.md", render_markdown(summary))
    put_text("record.json", dump_json(record))
    for stem in CHART_FILES:
        (work / f"{stem}.png").write_bytes(pngs[stem])
        put_text(f"{stem}.svg", svgs[stem])
    write_csv(full.validation, work / "validation_grid.csv")
    # one row per (cell, split); leave-one-out: one row per (cell, held-out row)
    write_csv(full.sweep.fold_table(), work / "validation_per_split.csv")
    write_csv(lc.table, work / "learning_curve.csv")
    write_csv(full.sweep.coefficient_table(), work / "coefficients.csv")
    write_csv(pd.DataFrame(findings, columns=["number", "code", "severity", "message", "value",
                                              "advice"]).astype(object), work / "warnings.csv")
    write_csv(pd.DataFrame({"term": list(model.terms),
                            "coefficient": np.asarray(model.coefficients, float)}),
              work / "model_coefficients.csv")
    if not (work / "model.skops").is_file():  # written beforehand by `_ModelFileWriter`
        save_pipeline(model, work / "model.skops")


def build_pack(out_dir: "str | Path | PackFolder", *, loaded: Any | None, source_name: str,
               data: DataLike,
               spec: SweepSpec, analysis: Analysis | None = None, checks: Any | None = None,
               compare_orders: Sequence[int | tuple[int, float]] | None = None,
               progress: Progress | None = None, load_options: dict | None = None,
               source_path: str | None = None, renderer: ChartRenderer | None = None,
               model_file_in_background: bool = False, analyses: list[Analysis] | None = None,
               targets: pd.DataFrame | None = None, models: dict | None = None,
               learning: Any | None = None, trust: tuple | None = None,
               overwrite: bool = False, sure: tuple | None = None,
               error_unit: str = DEFAULT_ERROR_UNIT) -> PackResult:
    """Write the meeting pack for one request into ``out_dir``.

    Whatever the caller already computed (the dashboard: its sweep, checks,
    side-by-side fits, learning curve, nested cross-validation and selection
    stability) is reused as it is; only what is missing is computed here.

    Parameters
    ----------
    out_dir : folder to write into, or an open `engine.packdir.PackFolder`
        (the command line opens it before computing). The pack is made in a
        hidden temporary sibling and moved into place when complete; a
        folder holding anything but an earlier pack is refused unless
        ``overwrite``.
    loaded : the `engine.loading.LoadedTable` the data came from (for the
        file's SHA-256 and read notes), or None for data not read from a file.
    source_name : file name to show.
    data : prepared data (`engine.loading.prepare` or `ArrayData`).
    spec : the request.
    analysis : a finished sweep of ``spec`` on ``data``; run here when None.
    checks : a `CheckReport` from `engine.checks.run_checks`; run here when None.
    compare_orders : orders (taken at the recommended penalty) or
        ``(order, penalty)`` cells to show side by side; see `compare_cells`.
    progress : called as ``progress(fraction_done, message)``.
    load_options : how the file was read (``decimal``, ``sheet``), for re-runs.
    source_path : where the file was read from, for re-runs.
    model_file_in_background : write ``model.skops`` and draw the charts in forked
        child processes while the rest of the pack is computed (for the command
        line; a server with threads writes the file in-process and draws in a
        thread).
    renderer : an `engine.render.ChartRenderer` started earlier (the command line
        starts it first thing, so vl-convert is ready when the charts are); one
        is started here when None.
    models : ``{(order, penalty): FinalModel}`` fits on all rows already made
        (`engine.compare.fit_candidates`); cells missing from it are fitted.
    learning : a `LearningCurve` already made; used when it covers the orders
        drawn, else computed.
    trust : ``(NestedResult or None, StabilityResult or None)`` from
        `engine.trust`, written to the pack when given.
    overwrite : replace the pack files of a folder that holds other files too
        (those are kept).
    sure : ``(HowSure or None, RowsOutlook or None, notes)`` as `sureness`
        returns it (or a future of it), already computed for this analysis;
        computed when None.
    error_unit : ``'mse'`` or ``'rmse'`` (`engine.labels.ERROR_UNITS`): the one unit
        of every error in the headline of ``summary.md``, ``summary.html`` and
        ``summary.json`` (``headline``); the page's choice or ``--errors``.

    Returns
    -------
    PackResult

    Raises
    ------
    InputProblem
        For a request or data that cannot be analysed, or a compare order
        outside the sweep.
    """
    _check_error_unit(error_unit)  # before anything is computed
    direct = isinstance(out_dir, _Direct)
    opened = out_dir if isinstance(out_dir, PackFolder) else None
    out = out_dir.path if direct else opened.out if opened is not None else Path(out_dir)
    if not direct and opened is None:
        pack_folder(out, overwrite).check()  # refuse a folder before computing anything
    if spec.extra_targets and targets is None:
        return _build_target_packs(opened or out, data=data, spec=spec, analyses=analyses,
                                   progress=progress, loaded=loaded, source_name=source_name,
                                   checks=checks, compare_orders=compare_orders, renderer=renderer,
                                   load_options=load_options, source_path=source_path,
                                   model_file_in_background=model_file_in_background,
                                   overwrite=overwrite, error_unit=error_unit)
    if analysis is None:
        analysis = analyse(data, spec, progress=_stage(progress, 0.0, 0.55))
    elif (getattr(analysis, "request", None) or analysis.spec) != spec:
        raise InputProblem("The analysis given was run for another request; run it again "
                           "for this one.", code="stale_analysis")
    # a grid over lag depths, input counts or targets: the recommended rung's columns
    # stand in for the inputs in every step that fits or checks one cell
    full = analysis
    analysis = full.view().at_family()    # per-cell charts: the recommended cell's family
    source_data = data
    data, _ = full.working(data, spec)
    cells = compare_cells(analysis, compare_orders)
    rec = analysis.recommendation.recommended
    if progress:
        progress(0.56, "Fitting the compared cells on all rows")
    given = {_cell_key(*k): m for k, m in (models or {}).items()}
    missing = [c for c in cells if c not in given]
    if missing:
        given.update(fit_candidates(data, analysis.spec, missing, family=rec.family,
                                    l1_ratio=rec.l1_ratio, summary=analysis.all_rows_summary()))
    models = {c: given[c] for c in cells}
    for m in models.values():   # fits made elsewhere: the text inputs for the saved pipeline
        if not m.text_inputs:
            attach_text_inputs(m, getattr(source_data, "factors", None))
    model = models[_cell_key(rec.order, rec.penalty)]
    # the pack is made in a hidden sibling of `out` and moved into place when complete
    with ExitStack() as stack:
        if direct:
            folder = None
            work = out
            try:
                work.mkdir(parents=True, exist_ok=True)
            except OSError as exc:
                raise write_problem(out, exc) from None
        else:
            folder = opened if opened is not None else stack.enter_context(
                pack_folder(out, overwrite))
            work = folder.work
        if renderer is None:  # a forked child starts vl-convert now and draws meanwhile
            renderer = stack.enter_context(ChartRenderer(fork=model_file_in_background))
        model_writer = _ModelFileWriter(model, work / "model.skops", model_file_in_background)
        from .fingerprint import in_background
        ahead = None
        if checks is None:
            # the checks' passes over the rows that need only the data and this model run
            # in a thread beside the learning curve, the intervals and the charts (started
            # after the model file's child is forked: a fork beside threads is unsafe)
            from .checks import checks_ahead
            ahead = in_background(checks_ahead, data, analysis, model, name="fitladder-checks")
        if sure is not None and hasattr(sure, "result"):  # the page's background job
            try:
                sure = sure.result()
            except Exception:  # noqa: BLE001 - computed here instead
                sure = None
        # the intervals (mostly array arithmetic, which lets other threads run) in a
        # thread beside the charts' imports and building and the learning curve's thread
        # (the page passes all three of `sureness`, computed in its background job)
        intervals = (in_background(_intervals, analysis, data, name="fitladder-intervals")
                     if sure is None else None)
        lc_orders = sorted({q for q, _ in learning_cells(cells)})
        lc = learning
        lc_job = None
        if lc is None or not set(lc_orders) <= {int(q) for q in lc.table["order"]}:
            # every order at once (one pass): the larger-table outlook reads the same
            # curve; in a third thread, so that the side-by-side chart, the costliest to
            # draw, is sent as soon as the intervals are ready
            lc_job = in_background(learning_curve, data, analysis.spec,
                                   sorted(set(analysis.spec.order_list()) | set(lc_orders)),
                                   None, analysis.learning_pieces, name="fitladder-learning")
        from . import charts as _charts

        def draw(chart_objs: dict):
            """Send charts to the renderer at print size; returns its pending job."""
            return renderer.submit({stem: _charts.for_print(ch, 75)
                                    for stem, ch in chart_objs.items()})

        # the sweep's charts need nothing more: drawn while the rest is computed
        drawing = [draw(make_charts(analysis, None, None, None, cells, stems=SWEEP_CHARTS))]
        if intervals is not None:
            if progress:
                progress(0.62, "Intervals")
            (sure, sure_notes), outlook = intervals(), None
        else:
            sure, outlook, sure_notes = sure
        band = None
        if sure is not None and (sure.order, sure.penalty) in {_cell_key(q, a) for q, a in cells}:
            from .intervals import band_table
            band = band_table(sure, data)
        if progress:
            progress(0.66, "Drawing charts")
        drawing.append(draw(make_charts(analysis, None, models, data, cells, band=band,
                                        stems=[s for s in CHART_FILES if s not in SWEEP_CHARTS
                                               and s != "learning_curve"])))
        if progress:
            progress(0.68, "Learning curve")
        lc_all = None
        if lc_job is not None:
            lc_all = lc_job()
            lc = lc_all.restrict(orders=lc_orders)
        drawing.append(draw(make_charts(analysis, lc.table, None, None, cells, lc.note,
                                        stems=("learning_curve",))))
        if intervals is not None:
            if progress:
                progress(0.70, "Outlook for a larger table")
            outlook, more_notes = _outlook(analysis, data, analysis.spec, lc_all)
            sure_notes += more_notes
        if checks is None:
            if progress:
                progress(0.72, "Checks")
            from .checks import run_checks
            shared = (sure.prediction.oof if sure is not None and (sure.order, sure.penalty)
                      == _cell_key(rec.order, rec.penalty) else None)
            checks = run_checks(data, analysis, cells, progress=_stage(progress, 0.72, 0.76),
                                models=models, oof=shared, ahead=ahead)
        findings = _finding_dicts(checks)
        facts = _data_facts(source_data, loaded, source_name)
        if full.rows_left_out:
            facts["rows_used"] = int(full.n_rows)
            facts["rows_left_out_for_lags"] = int(full.rows_left_out)
        roles = _roles(source_data, spec)
        candidates = leading_candidates(full)
        summary = summary_dict(analysis, model, facts, roles, findings, cells, candidates, lc.note,
                               full=full)
        summary["checks"] = plain(_check_facts(checks))
        paths = _coefficient_paths(data, analysis, full)
        paths_drawing = (renderer.submit(_paths_charts(paths, analysis, full))
                         if paths is not None else None)
        if paths is not None:
            summary["coefficient_paths"] = plain(_paths_dict(paths))
        if targets is not None:
            summary["targets"] = plain(targets.to_dict(orient="records"))
        nested, stability = (tuple(trust) + (None, None))[:2] if trust else (None, None)
        summary.update(plain({"nested_cv": _nested_dict(nested),
                              "selection_stability": _stability_dict(stability, analysis),
                              "use": usage(model)}))
        summary.update(sureness_dict(sure, outlook, sure_notes))
        summary["headline"] = plain(headline_dict(summary, error_unit))
        record = record_dict(spec, facts, roles, cells, load_options, source_path, error_unit)
        if progress:
            progress(0.90, "Writing files")
        try:
            # the model file first: its imports (scikit-learn, skops) overlap the drawing
            model_writer.finish()
            drawn = {stem: d for job in drawing for stem, d in job.result().items()}
            pngs = {stem: png for stem, (png, _) in drawn.items()}
            svgs = {stem: svg for stem, (_, svg) in drawn.items()}
            _write_files(work, summary, record, pngs, svgs, full, lc, findings, model)
            write_csv(sure.prediction.per_split if sure is not None else pd.DataFrame(),
                      work / "interval_coverage.csv")
            write_csv(outlook.table if outlook is not None else pd.DataFrame(),
                      work / "more_rows.csv")
            if paths is not None:
                _write_paths(work, paths, analysis, full, paths_drawing.result())
            if nested is not None:
                write_csv(nested.per_fold, work / "nested_cv.csv")
            if stability is not None:
                write_csv(stability.chosen, work / "selection_stability.csv")
            # summary.json last: it marks a finished pack
            (work / "summary.json").write_text(dump_json(summary), encoding="utf-8",
                                               newline="\n")
            if folder is not None:
                folder.commit()
        except OSError as exc:
            raise write_problem(out, exc) from None
    if progress:
        progress(1.0, "Pack written")
    return PackResult(out_dir=out, files=[out / n for n in PACK_FILES + OPTIONAL_FILES
                                          if (out / n).is_file()],
                      summary=summary, record=record, analysis=full, model=model)


def pack_zip_bytes(out_dir: str | Path) -> bytes:
    """The pack files in ``out_dir`` as a .zip (inside a folder named like ``out_dir``).

    Only the files a pack writes (`PACK_FILES`) are included.
    """
    out = Path(out_dir)
    buf = io.BytesIO()
    top = out.name or "fitladder_pack"
    with zipfile.ZipFile(buf, "w", compression=zipfile.ZIP_DEFLATED) as zf:
        for name in PACK_FILES + OPTIONAL_FILES:
            p = out / name
            if p.is_file():
                zf.write(p, arcname=f"{top}/{name}")
        # several targets: the side-by-side table and one section (folder) per further target
        if (out / TARGETS_FILE).is_file():
            zf.write(out / TARGETS_FILE, arcname=f"{top}/{TARGETS_FILE}")
            for sub in sorted(out.glob("target_*")):
                for name in PACK_FILES:
                    if (sub / name).is_file():
                        zf.write(sub / name, arcname=f"{top}/{sub.name}/{name}")
    return buf.getvalue()
