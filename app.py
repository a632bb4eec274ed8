"""Fitladder dashboard: choose model order and penalty, and show why.

Lays out widgets and calls the engine; all computing happens in `engine`.
Heavy steps are cached (``st.cache_data``; the sweep itself in a small
in-process store so its progress bar can move) keyed on the SHA-256 of the
file's bytes, the roles and the request, so changing only a view does not
recompute.

Uploaded files are kept as ``st.session_state["upload"] = (name, bytes)``:
changing roles or settings never loses them, and tests can put a file there
directly. Uploaded bytes are only ever parsed as data (`engine.loading`).
"""
from __future__ import annotations

import dataclasses
import hashlib
import json
import tempfile
import threading
import time
from concurrent.futures import Future, ThreadPoolExecutor
import traceback
from collections import OrderedDict
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Callable

import numpy as np
import pandas as pd
import streamlit as st

from dashboard.how_sure import band_for, how_sure_panel, sureness
from engine import (SCHEME_HELP, InputProblem, SchemeSpec, SweepSpec, analyse,
                    default_penalties, learning_curve)
from engine import charts as C
from dashboard import paths_section
from dashboard.grid_axes import axes_controls, grid_heatmap, target_choice, targets_control
from engine.labels import PATH_CHARTS, family_text
from engine.spec import FAMILIES
from engine.labels import rung_text
from engine.compare import fit_candidates
from engine.labels import (ERROR_UNITS, number_text, SAMPLES_PER_PARAMETER_HOW, SCHEME_NEEDS, error_in_unit,
                           error_text, reason_in_unit, samples_per_parameter, se_in_unit,
                           se_text)
from engine.labels import (CHARTS, ROW_ORDER_ANSWERS, RULE_NAMES, ROW_ORDER_HELP, SCHEME_NAMES,
                           SCHEMES_WITH_FOLDS, TABLES, column_header, human_headers,
                           option_label, penalty_text)
from engine.roles import default_roles
from engine.loading import DEFAULT_MAX_BYTES, describe_drops, load_table, prepare
from engine.budget import check_request
from engine.markup import escape_text
from engine.spec import (DEFAULT_FOLDS, DEFAULT_GAP, DEFAULT_HOLDOUT_FRACTION, DEFAULT_MAX_ORDER,
                         DEFAULT_PENALTY_COUNT, DEFAULT_PENALTY_HIGH, DEFAULT_PENALTY_LOW,
                         DEFAULT_REPEATS, DEFAULT_SEED)

HERE = Path(__file__).resolve().parent
DEMO_DIR = HERE / "demo_data"
UPLOAD = "upload"

# ---------------------------------------------------------------------------
# demo data sets and their sensible settings
# ---------------------------------------------------------------------------


@dataclass(frozen=True)
class Preset:
    """Default roles and setup for a data set."""

    target: str | None = None
    inputs: tuple[str, ...] = ()
    all_inputs: bool = False
    order_column: str | None = None
    group_column: str | None = None
    split_column: str | None = None
    scheme: str = "kfold"
    notes: tuple[str, ...] = ()          # why these roles (uploaded tables)
    left_out: tuple[str, ...] = ()       # numeric columns kept out of the default inputs
    folds: int = DEFAULT_FOLDS
    repeats: int = DEFAULT_REPEATS
    gap: int = DEFAULT_GAP
    holdout_fraction: float = DEFAULT_HOLDOUT_FRACTION
    max_order: int = DEFAULT_MAX_ORDER
    interactions: bool = False
    pen_low: float = DEFAULT_PENALTY_LOW
    pen_high: float = DEFAULT_PENALTY_HIGH
    pen_count: int = DEFAULT_PENALTY_COUNT
    pen_zero: bool = True
    seed: int = DEFAULT_SEED
    compare_unpenalised: bool = False  # side by side: each order also without a penalty
    families: tuple[str, ...] = ("ridge",)


@dataclass(frozen=True)
class Demo:
    file: str
    title: str
    blurb: str
    preset: Preset = field(default_factory=Preset)


DEMOS: dict[str, Demo] = {
    "demo:calibration": Demo(
        "calibration_curve.csv", "Demo: probe calibration (24 rows)",
        "A temperature probe read against a reference thermometer in a bath. Small table of "
        "independent readings, so leave-one-out fits.",
        Preset(target="bath_temp_C", inputs=("probe_mV",), scheme="loo", max_order=10,
               compare_unpenalised=True)),
    "demo:drift": Demo(
        "drifting_line_sensors.csv", "Demo: reactor line log (3,000 rows)",
        "One reading a minute for two days; neighbouring minutes resemble each other and the "
        "feed changes late on, so folds are contiguous time blocks with a gap.",
        Preset(target="yield_pct", all_inputs=True, order_column="minute", scheme="blocked",
               folds=5, gap=40, max_order=3)),
    "demo:wide": Demo(
        "wide_spectra.csv", "Demo: dye-bath spectra (60 rows, 150 channels)",
        "More inputs than rows: a straight-line fit needs a penalty to hold up on new samples.",
        Preset(target="analyte_mg_L", all_inputs=True, scheme="kfold", folds=5, max_order=1,
               families=("ridge", "lasso"))),
}

PENALTY_STEPS = [10.0 ** k for k in range(-8, 7)]
NONE = "(none)"
VIEW_KEYS = ("heat_x", "heat_y", "view_penalty", "lc_order", "lc_penalty", "cmp_orders", "cmp_penalty",
             "cmp_zero", "coef_order", "coef_penalty", "path_order", "path_setting")
SETUP_KEYS = ("target", "inputs", "all_inputs", "order_column", "group_column", "split_column",
              "scheme", "folds", "repeats", "gap", "holdout_fraction", "max_order",
              "interactions", "pen_fit", "pen_range", "pen_count", "pen_zero", "rule", "seed",
              "rows_time", "families")

# ---------------------------------------------------------------------------
# errors: readable messages, never a traceback
# ---------------------------------------------------------------------------


def md(text: Any) -> str:
    """Text from data or the engine, made literal for Markdown (no marks, maths or links)."""
    return escape_text(text)


def show_problem(exc: BaseException, where: str = "") -> None:
    """Show an exception as a short message (InputProblem: its own words)."""
    if isinstance(exc, InputProblem):
        st.error(md(exc.message), icon=":material/error:")
    else:
        detail = str(exc).strip().splitlines()[0][:300] if str(exc).strip() else ""
        st.error(f"Sorry, something went wrong{(' while ' + where) if where else ''}: "
                 f"{type(exc).__name__}{(': ' + md(detail)) if detail else ''}. "
                 "The rest of the page still works; try other settings or another file.",
                 icon=":material/report:")
        # keep the full story in the server log, not on the page
        print(traceback.format_exc())


def guarded(where: str, fn: Callable[..., Any], *args: Any, **kwargs: Any) -> Any:
    """Run ``fn``; on any error show a message and return None."""
    try:
        return fn(*args, **kwargs)
    except InputProblem as exc:
        show_problem(exc, where)
    except Exception as exc:  # noqa: BLE001 - the page must stay usable
        show_problem(exc, where)
    return None


# ---------------------------------------------------------------------------
# cached engine calls
# ---------------------------------------------------------------------------


@st.cache_data(show_spinner=False, max_entries=4)
def read_demo(file: str) -> bytes:
    return (DEMO_DIR / file).read_bytes()


@st.cache_data(show_spinner=False, max_entries=4, ttl=3600)
def cached_load(digest: str, name: str, _raw: bytes, decimal: str = "."):
    """`engine.loading.load_table` of the bytes whose SHA-256 is ``digest``."""
    return load_table(_raw, name=name, decimal=decimal)


@st.cache_data(show_spinner=False, max_entries=16, ttl=3600)
def cached_prepare(data_key: str, roles: tuple, _frame: pd.DataFrame, more: tuple = ()):
    """`engine.loading.prepare`; ``data_key`` names the bytes AND how they were read.

    ``more``: further targets (`engine.targets.prepare_targets`).
    """
    target, inputs, order_col, group_col, split_col = roles
    if more:
        from engine.targets import prepare_targets
        return prepare_targets(_frame, (target,) + tuple(more), list(inputs),
                               order_column=order_col, group_column=group_col,
                               split_column=split_col)
    return prepare(_frame, target, list(inputs), order_column=order_col,
                   group_column=group_col, split_column=split_col)


@st.cache_resource(show_spinner=False)
def _sweep_store() -> tuple[OrderedDict, threading.Lock]:
    """In-process store of finished sweeps (most recent last)."""
    return OrderedDict(), threading.Lock()


SWEEPS_KEPT = 16


def cached_analysis(data_key: str, roles: tuple, spec_dict: dict, data,
                    progress: Callable[[float, str], None] | None = None):
    """The sweep, keyed on the file hash, the roles and the request.

    Kept in a small in-process store rather than ``st.cache_data`` so that the
    progress bar can be driven from the engine's callback on a first run
    (elements cannot be updated from inside ``st.cache_data``). Analyses are
    never modified after they are made, so sharing them is safe.
    """
    key = (data_key, repr(roles), json.dumps(spec_dict, sort_keys=True, default=str))
    store, lock = _sweep_store()
    with lock:
        if key in store:
            store.move_to_end(key)
            return store[key]
    spec = SweepSpec.from_dict(spec_dict)
    if spec.extra_targets:   # several targets: one analysis each, from one pass
        from engine.analysis import analyse_targets
        result = analyse_targets(data, spec, progress=progress)
    else:
        result = analyse(data, spec, progress=progress)
    with lock:
        store[key] = result
        while len(store) > SWEEPS_KEPT:
            store.popitem(last=False)
    return result


# ---------------------------------------------------------------------------
# data source
# ---------------------------------------------------------------------------


def take_upload() -> None:
    """Callback of the file uploader: keep the bytes in session state."""
    f = st.session_state.get("uploader")
    if f is None:  # the user removed the file from the uploader
        st.session_state.pop(UPLOAD, None)
        st.session_state["source_choice"] = next(iter(DEMOS))
        return
    st.session_state[UPLOAD] = (f.name, f.getvalue())
    st.session_state["source_choice"] = UPLOAD


def upload_cap_mb() -> int:
    try:
        return int(st.get_option("server.maxUploadSize"))
    except Exception:  # noqa: BLE001
        return DEFAULT_MAX_BYTES // (1024 * 1024)


def source_bytes(choice: str) -> tuple[str, bytes] | None:
    """(name, bytes) of the chosen data set."""
    if choice == UPLOAD:
        up = st.session_state.get(UPLOAD)
        return (str(up[0]), up[1]) if up else None
    demo = DEMOS[choice]
    return demo.file, read_demo(demo.file)


def source_label(choice: str) -> str:
    if choice == UPLOAD:
        up = st.session_state.get(UPLOAD)
        return f"Your file: {up[0]}" if up else "Your file"
    return DEMOS[choice].title


# ---------------------------------------------------------------------------
# roles and setup
# ---------------------------------------------------------------------------


def guess_preset(frame: pd.DataFrame, numeric: list[str]) -> Preset:
    """Defaults for an uploaded table, with the reasons (`engine.roles.default_roles`).

    The target is a column of measurements at an end of the table (codes, row
    numbers and clocks passed over); the inputs are the other numeric columns
    less row numbers and columns that reproduce the target; a clock-like
    column that only increases is offered as the order column.
    """
    if not numeric:
        return Preset()
    r = default_roles(frame, numeric)
    pool = [c for c in numeric if c not in (r.target, r.order_column) and c not in r.left_out]
    many = len(pool) > 12
    return Preset(target=r.target, inputs=() if many else r.inputs, all_inputs=many,
                  order_column=r.order_column, scheme="blocked" if r.order_column else "kfold",
                  max_order=1 if many else DEFAULT_MAX_ORDER, notes=tuple(r.sentences()),
                  left_out=tuple(r.left_out))


def apply_preset(p: Preset) -> None:
    """Put a preset into the widget state (used when the data set changes)."""
    ss = st.session_state
    ss["target"] = p.target
    ss["inputs"] = list(p.inputs)
    ss["all_inputs"] = p.all_inputs
    ss["order_column"] = p.order_column or NONE
    ss["group_column"] = p.group_column or NONE
    ss["split_column"] = p.split_column or NONE
    ss["scheme"] = p.scheme
    ss["folds"] = p.folds
    ss["repeats"] = p.repeats
    ss["gap"] = p.gap
    ss["holdout_fraction"] = p.holdout_fraction
    ss["max_order"] = p.max_order
    ss["interactions"] = p.interactions
    ss.pop("pen_range", None)  # a range slider takes its start from ``value=``
    ss["pen_count"] = p.pen_count
    ss["pen_zero"] = p.pen_zero
    ss["seed"] = p.seed
    ss["families"] = list(p.families)
    ss["rows_time"] = next(iter(ROW_ORDER_ANSWERS))
    for k in ("lags_max", "target_lags_max", "nested_inputs", "extra_targets", "target_shown"):
        ss.pop(k, None)
    ss["_preset"] = p


def keep(key: str, default: Any) -> None:
    """Give a widget key a value when it has none (widgets not shown lose theirs)."""
    if key not in st.session_state:
        st.session_state[key] = st.session_state.get("_preset", Preset()).__dict__.get(key, default)


@dataclass
class Choices:
    """What the sidebar asked for."""

    roles: tuple  # (target, inputs, order, group, split)
    spec: SweepSpec | None


def text_input_columns(frame: pd.DataFrame) -> list[str]:
    """Text columns with few levels, usable as inputs (as indicator terms)."""
    from engine.categorical import usable_factor

    return [str(c) for c in frame.columns if usable_factor(frame[c])]


def roles_and_setup(frame: pd.DataFrame, numeric: list[str]) -> Choices:
    """Sidebar widgets for roles and setup; returns the request."""
    ss = st.session_state
    columns = [str(c) for c in frame.columns]
    st.sidebar.subheader("2 · Roles")
    keep("target", numeric[-1])
    if ss["target"] not in numeric:
        ss["target"] = numeric[-1]
    target = st.sidebar.selectbox(option_label("target"), numeric, key="target")
    others = [c for c in numeric if c != target]
    # text columns with few levels enter as indicator terms (engine.categorical)
    others += [c for c in text_input_columns(frame) if c != target and c not in others]
    more = targets_control(others)
    others = [c for c in others if c not in more]
    keep("all_inputs", False)
    all_inputs = st.sidebar.checkbox(f"Use every other numeric column as an input",
                                     key="all_inputs")
    keep("order_column", NONE)
    if ss["order_column"] not in [NONE] + columns:
        ss["order_column"] = NONE
    preset = ss.get("_preset", Preset())
    left_out = preset.left_out if target == preset.target else ()
    if all_inputs:
        order_pick = ss.get("order_column", NONE)
        inputs = [c for c in others if c != order_pick and c not in left_out]
        st.sidebar.caption(f"{len(inputs)} input columns"
                           + (f" ({len(left_out)} left out, see below)." if left_out else "."))
    else:
        keep("inputs", others[:1])
        current = list(ss["inputs"])
        valid = [c for c in current if c in others]
        # drop inputs that are no longer allowed (e.g. now the target); an emptied
        # list the user made stays empty and gets a message below
        ss["inputs"] = valid or (others[:1] if current else [])
        inputs = st.sidebar.multiselect("Inputs", others, key="inputs")
    if target == preset.target and preset.notes:
        st.sidebar.caption(md(" ".join(preset.notes)))
    order_col = st.sidebar.selectbox(
        "Order / time column (optional)", [NONE] + [c for c in columns if c != target],
        key="order_column", help="Rows are sorted by it; time blocks and the later-period "
                                 "holdout follow it.")
    rows_time = None
    if order_col == NONE:
        keep("rows_time", next(iter(ROW_ORDER_ANSWERS)))
        rows_time = ROW_ORDER_ANSWERS[st.sidebar.radio(
            option_label("rows_in_time_order"), list(ROW_ORDER_ANSWERS), key="rows_time",
            horizontal=True, help=ROW_ORDER_HELP)]
    keep("group_column", NONE)
    keep("split_column", NONE)
    for k in ("group_column", "split_column"):
        if ss[k] not in [NONE] + columns:
            ss[k] = NONE
    group_col = st.sidebar.selectbox("Group column (optional)", [NONE] + columns,
                                     key="group_column",
                                     help="Batch, subject or site labels, for whole-group folds.")
    split_col = ss.get("split_column", NONE)

    st.sidebar.subheader("3 · Validation")
    keep("scheme", "kfold")
    split_pick = ss.get("split_column", NONE)
    chosen = {"group_column": group_col, "split_column": split_pick}
    # a scheme that needs a column is offered once that column is chosen
    offered = [k for k in SCHEME_NAMES
               if k not in SCHEME_NEEDS or chosen[SCHEME_NEEDS[k]] not in (NONE, None)]
    if ss.get("scheme") not in offered:
        if ss.get("scheme") in SCHEME_NEEDS:
            ss["_scheme_note"] = (f"{SCHEME_NAMES[ss['scheme']]} needs a "
                                  f"{SCHEME_NEEDS[ss['scheme']].replace('_', ' ')}; "
                                  f"{SCHEME_NAMES['kfold']} are used until one is chosen.")
        ss["scheme"] = "kfold"
    scheme = st.sidebar.selectbox(option_label("scheme"), offered,
                                  format_func=SCHEME_NAMES.get, key="scheme")
    st.sidebar.caption(SCHEME_HELP[scheme])
    if ss.get("_scheme_note"):
        st.sidebar.warning(ss.pop("_scheme_note"), icon=":material/info:")
    waiting = [SCHEME_NAMES[k] for k in SCHEME_NAMES if k not in offered]
    if waiting:
        st.sidebar.caption(" and ".join(waiting) + " appear once their column is chosen "
                           "(group column above; split column below).")
    folds = repeats = gap = None
    frac = 0.2
    if scheme in SCHEMES_WITH_FOLDS:
        keep("folds", 5)
        top = max(2, min(100, len(frame)))
        if scheme == "grouped":  # never more folds than groups
            top = max(2, int(frame[group_col].dropna().nunique()))
        if int(ss.get("folds", 5)) > top:
            ss["folds"] = top
            st.sidebar.caption(f"Folds set to {top}: there are only {top} "
                               + ("groups." if scheme == "grouped" else "rows."))
        folds = st.sidebar.number_input(option_label("folds"), min_value=2, max_value=top,
                                        step=1, key="folds")
    if scheme == "repeated":
        keep("repeats", 3)
        repeats = st.sidebar.number_input(option_label("repeats"), min_value=1, max_value=50, step=1,
                                          key="repeats")
    if scheme == "blocked":
        keep("gap", 0)
        gap = st.sidebar.number_input(option_label("gap"),
                                      min_value=0, max_value=100000, step=1, key="gap")
    if scheme == "holdout":
        keep("holdout_fraction", 0.2)
        frac = st.sidebar.slider(option_label("holdout_fraction"), 0.05, 0.5, step=0.05,
                                 key="holdout_fraction")
    if scheme in ("blocked", "holdout") and order_col == NONE:
        st.sidebar.caption("No order column chosen: the row order of the file is used.")
    split_col = st.sidebar.selectbox(option_label("split_column") + " (optional)",
                                     [NONE] + columns, key="split_column",
                                     help="Your own fold labels (or train/test), for "
                                          f"{SCHEME_NAMES['column']}.")

    st.sidebar.subheader("4 · Models")
    keep("max_order", 4)
    max_order = st.sidebar.number_input(option_label("max_order"), min_value=0, max_value=30,
                                        step=1, key="max_order")
    keep("interactions", False)
    interactions = st.sidebar.checkbox(option_label("interactions"), key="interactions")
    preset = ss.get("_preset", Preset())
    keep("pen_fit", True)
    pen_fit = st.sidebar.checkbox(
        option_label("penalty_range"), key="pen_fit",
        help="From no penalty to one that leaves about one effective degree of freedom, "
             "widened by itself when the pick lies on its edge. Untick to set the range.")
    pen_range, pen_count, pen_zero = (preset.pen_low, preset.pen_high), 15, True
    if not pen_fit:
        pen_range = st.sidebar.select_slider(option_label("penalties"), PENALTY_STEPS,
                                             value=(preset.pen_low, preset.pen_high),
                                             format_func=penalty_text, key="pen_range")
        keep("pen_count", 15)
        pen_count = st.sidebar.number_input("Penalties in the range (log-spaced)", min_value=1,
                                            max_value=60, step=1, key="pen_count")
        keep("pen_zero", True)
        pen_zero = st.sidebar.checkbox("Also fit without a penalty", key="pen_zero")
    keep("rule", "paired")
    rule = st.sidebar.radio(option_label("rule"), list(RULE_NAMES),
                            format_func=RULE_NAMES.get, key="rule", horizontal=True,
                            help="Paired: each cell's error is compared with the best cell's on "
                                 "the same validation rows; the simplest cell within one standard "
                                 "error of those differences is recommended. Unpaired: the "
                                 "classic one-standard-error rule on each cell's own spread.")
    keep("families", ["ridge"])
    families = st.sidebar.multiselect(option_label("families"), list(FAMILIES),
                                      format_func=family_text, key="families")
    if not families:
        st.sidebar.caption("No family chosen: ridge is used.")
    if any(f != "ridge" for f in families) and scheme == "loo":
        st.sidebar.caption("Lasso and elastic net need folds (leave-one-out is exact only "
                           "for ridge): choose another way to hold data out.")
    keep("seed", 0)
    seed = st.sidebar.number_input(option_label("seed"), min_value=0, max_value=2**31 - 1,
                                   step=1, key="seed")
    keep("metric", "mse")
    st.sidebar.radio("Errors shown as", list(ERROR_UNITS), format_func=ERROR_UNITS.get,
                     key="metric", horizontal=True,
                     help="One unit for the tiles, the sentences and the charts.")

    lags, nested = axes_controls(scheme, int(gap or 0), len(inputs))
    order_c = None if order_col == NONE else order_col
    group_c = None if group_col == NONE else group_col
    split_c = None if split_col in (NONE, None) or scheme != "column" else split_col
    roles = (target, tuple(inputs), order_c, group_c, split_c)
    lo, hi = sorted(float(v) for v in pen_range)
    spec = SweepSpec(
        target=target, inputs=tuple(inputs), max_order=int(max_order),
        interactions=bool(interactions),
        penalties=() if pen_fit else default_penalties(lo, hi, int(pen_count), bool(pen_zero)),
        scheme=SchemeSpec(kind=scheme, folds=int(folds or 5), repeats=int(repeats or 3),
                          gap=int(gap or 0), holdout_fraction=float(frac),
                          order_column=order_c, group_column=group_c, split_column=split_c,
                          rows_in_time_order=rows_time),
        seed=int(seed), lags=lags, nested_inputs=nested, extra_targets=more, rule=str(rule),
        families=tuple(f for f in FAMILIES if f in (families or ["ridge"])))
    return Choices(roles=roles, spec=spec)


# ---------------------------------------------------------------------------
# downloads
# ---------------------------------------------------------------------------


def _csv_safe(frame: pd.DataFrame) -> pd.DataFrame:
    """Text cells that a spreadsheet would run as a formula get a leading quote."""
    out = frame.copy()
    for c in out.columns:
        if out[c].dtype == object or pd.api.types.is_string_dtype(out[c].dtype):
            out[c] = [("'" + v) if isinstance(v, str) and v[:1] in ("=", "+", "-", "@", "\t", "\r")
                      else v for v in out[c]]
    return out


def downloads_row():
    """A horizontal row for download buttons."""
    return st.container(horizontal=True, gap="small")


def table_download(frame: pd.DataFrame, stem: str, what: str | None = None) -> None:
    what = what or TABLES[stem]
    st.download_button(f"{what} (CSV)", data=lambda: _csv_safe(frame).to_csv(index=False),
                       file_name=f"{stem}.csv", mime="text/csv", key=f"csv_{stem}",
                       icon=":material/table:", on_click="ignore")


def roomy(chart, width: int = 760, height: int = 380):
    """A single-panel chart drawn larger on the page (its downloads follow)."""
    import altair as alt

    if isinstance(chart, alt.LayerChart):
        return chart.properties(width=width, height=height)
    return chart


def chart_block(chart, stem: str, tables: list[tuple[pd.DataFrame, str]] = ()
                ) -> Callable[[Any], None]:
    """A chart with its PNG and SVG downloads (rendered only when clicked) and table CSVs.

    ``stem`` is a key of `engine.labels.CHARTS` (the pack's file names are the
    same); tables are ``(frame, stem)`` with stems from `engine.labels.TABLES`.
    Returns a function that replaces the drawn chart (and what its downloads
    render) with a fuller one later in the same run.
    """
    what = CHARTS.get(stem) or PATH_CHARTS[stem]
    shown = {"chart": chart}
    slot = st.empty()
    slot.altair_chart(chart, theme=None, width="content")
    with downloads_row():
        st.download_button(f"{what} (PNG)", data=lambda: C.chart_to_png(shown["chart"]),
                           file_name=f"{stem}.png", mime="image/png", key=f"png_{stem}",
                           icon=":material/image:", on_click="ignore")
        st.download_button(f"{what} (SVG)", data=lambda: C.chart_to_svg(shown["chart"]),
                           file_name=f"{stem}.svg", mime="image/svg+xml", key=f"svg_{stem}",
                           icon=":material/draw:", on_click="ignore")
        for frame, tstem in tables:
            table_download(frame, tstem)

    def replace(fuller) -> None:
        shown["chart"] = fuller
        slot.altair_chart(fuller, theme=None, width="content")

    return replace


def later(fn: Callable[[], Any]) -> None:
    """Run ``fn`` at the end of this page run, after the warnings panel is filled."""
    st.session_state.setdefault("_later", []).append(fn)


def choose(label: str, options: list, default: Any, key: str, *, slider: bool = False,
           fmt: Callable[[Any], str] = str, multi: bool = False, help: str | None = None):
    """A selector whose stored value is reset when it is no longer among the options."""
    ss = st.session_state
    if multi:
        cur = [v for v in ss.get(key, default) if v in options]
        ss[key] = cur or list(default)
        return st.multiselect(label, options, key=key, format_func=fmt, help=help,
                              max_selections=4)
    if ss.get(key) not in options:
        ss[key] = default
    if slider:
        return st.select_slider(label, options, key=key, format_func=fmt, help=help)
    return st.selectbox(label, options, key=key, format_func=fmt, help=help)


# ---------------------------------------------------------------------------
# panels
# ---------------------------------------------------------------------------


def card_figures(analysis, n_rows: int, unit: str) -> dict:
    """Every number the recommendation card shows, computed once in the chosen error unit.

    The tiles, the sentence below them and the charts read from here, so a
    figure shown twice is the same figure (checked in the page tests).
    """
    rec = analysis.recommendation
    r, b = rec.recommended, rec.best
    u = ERROR_UNITS[unit]
    val = error_in_unit(r.validation_mse, unit)
    train = error_in_unit(r.train_mse, unit)
    return {
        "unit": u,
        "validation": error_text(val),
        "validation_se": se_text(se_in_unit(r.validation_mse, r.validation_mse_se, unit)),
        "r2": f"{r.validation_r2:.4f}",
        "samples_per_parameter": f"{samples_per_parameter(n_rows, r.effective_df):.1f}",
        "parameters": int(r.parameters),
        "effective": f"{r.effective_df:.1f}",
        "gap": number_text(val - train, 3),
        "ratio": (f"{val / train:.2f}" if train > 0 else "inf"),
        "best": error_text(error_in_unit(b.validation_mse, unit)),
        "best_se": se_text(se_in_unit(b.validation_mse, b.validation_mse_se, unit)),
        "reason": reason_in_unit(r.reason, r.validation_mse, b.validation_mse,
                                 b.validation_mse_se, unit),
    }


def recommendation_panel(analysis, target: str, n_rows: int | None = None) -> None:
    rec = analysis.recommendation
    r, b = rec.recommended, rec.best
    units = C.column_units(target)
    unit = st.session_state.get("metric", "mse")
    n = int(n_rows if n_rows is not None else round(r.samples_per_parameter * r.parameters))
    f = card_figures(analysis, n, unit)
    st.session_state["_card"] = f  # read by the page tests
    u = f["unit"]
    with st.container(border=True):
        st.markdown(f"#### Recommended: {C.cell_text(r.order, r.penalty, r.family, r.l1_ratio)}"
                    + rung_text(r.lags, r.target_lags, r.inputs_used))
        m1, m2, m3, m4 = st.columns(4)
        shown_units = "" if not units else (f" {units}" if unit == "rmse" else "")
        m1.metric(f"Validation error ({u})", f["validation"] + shown_units,
                  help=f"Mean validation {u} across the splits, ± one standard error"
                       + (" (the MSE's SE carried through the square root)."
                          if unit == "rmse" else "."))
        m1.caption(f"± {f['validation_se']} (one SE) · R² {f['r2']}")
        m2.metric("Samples per parameter", f["samples_per_parameter"],
                  help=f"Samples per parameter: {SAMPLES_PER_PARAMETER_HOW}; the same count "
                       "as in the warnings.")
        m2.caption(f"{f['parameters']} coefficients · {f['effective']} effective")
        m3.metric(f"Train–validation gap ({u})", f["gap"],
                  help=f"Mean validation {u} minus mean training {u}: how much worse the "
                       "model does on rows it did not see.")
        m3.caption(f"validation error is {f['ratio']}× training error")
        m4.metric(f"Lowest validation error ({u})", f["best"])
        m4.caption(f"± {f['best_se']} · {C.cell_text(b.order, b.penalty)}"
                   + rung_text(b.lags, b.target_lags, b.inputs_used))
        st.markdown(md(f["reason"]))
        how = (f" Standard errors {rec.se_method}." if rec.rule_name == "paired"
               and rec.se_method else "")
        st.caption(md(f"{analysis.plan.description} Rule: {rec.rule}.{how}"))
        st.caption("Where this model feeds a safety or compliance decision (a calibration "
                   "used on a plant, say), check it against your own acceptance standards "
                   "and uncertainty budget; this dashboard does not replace them.")


@st.cache_resource(show_spinner=False)
def _background() -> tuple[ThreadPoolExecutor, OrderedDict, threading.Lock]:
    """One background worker for slow engine calls, and what it made (most recent last).

    One worker, so jobs run in the order they were asked for: the page asks
    for the side-by-side fits first and the checks second, and draws the
    quick charts meanwhile.
    """
    return ThreadPoolExecutor(max_workers=1, thread_name_prefix="fitladder-work"), \
        OrderedDict(), threading.Lock()


JOBS_KEPT = 48


def run_once(key: tuple, fn: Callable[..., Any], *args: Any) -> Future:
    """Start ``fn(*args)`` in the background unless a job with ``key`` exists; its future.

    Finished results stay in the store (like a cache) for later reruns.
    """
    pool, store, lock = _background()
    with lock:
        fut = store.get(key)
        if fut is None:
            fut = pool.submit(fn, *args)
            store[key] = fut
            while len(store) > JOBS_KEPT:
                store.popitem(last=False)
        else:
            store.move_to_end(key)
    return fut


def run_here(key: tuple, fn: Callable[..., Any], *args: Any) -> Future:
    """Like `run_once`, but a new job runs now, in this thread (kept in the same store)."""
    pool, store, lock = _background()
    with lock:
        fut = store.get(key)
        if fut is not None:
            store.move_to_end(key)
            return fut
    fut = Future()
    try:
        fut.set_result(fn(*args))
    except InputProblem as exc:  # remembered like a result; other errors are not kept
        fut.set_exception(exc)
    with lock:
        store[key] = fut
        while len(store) > JOBS_KEPT:
            store.popitem(last=False)
    return fut


def start_checks(key: str, data, analysis) -> Future | None:
    """Start ``engine.checks.run_checks(data, analysis)`` in the background (once per key).

    Returns None when the checks module is not installed.
    """
    try:
        from engine import checks
    except ImportError:
        return None
    return run_once(("checks", key), checks.run_checks, data, analysis)


def compare_cells(analysis) -> tuple[tuple[int, float], ...]:
    """The cells the side-by-side tab will show (its widgets' values, or the defaults)."""
    ss = st.session_state
    orders = analysis.spec.order_list()
    pens = list(analysis.spec.penalties)
    picked = [q for q in ss.get("cmp_orders", []) if q in orders] or \
        default_compare_orders(analysis)
    a = ss.get("cmp_penalty")
    if a not in pens:
        a = analysis.recommendation.recommended.penalty
    zero = bool(ss.get("cmp_zero", default_compare_zero(analysis))) and 0.0 in pens and a != 0.0
    keep_orders = sorted(picked)[:4]  # at most four orders, each also unpenalised if asked
    cells = [(int(q), float(a)) for q in keep_orders]
    if zero:
        cells += [(int(q), 0.0) for q in keep_orders]
    return tuple(cells)


def default_compare_zero(analysis) -> bool:
    """Show the unpenalised fits too by default for straight lines on wide tables.

    Wide: fewer than 3 training rows per parameter of the recommended cell,
    where the penalty is what keeps the fit honest.
    """
    rec = analysis.recommendation.recommended
    if st.session_state.get("_preset", Preset()).compare_unpenalised:
        return True  # a demo whose story is the unpenalised high orders
    return max(analysis.spec.order_list()) <= 1 and rec.samples_per_parameter < 3.0


def learning_cells(analysis) -> list[tuple[int, float]]:
    """The learning-curve cells: the recommended one and the user's pick (or the default)."""
    ss = st.session_state
    rec = analysis.recommendation.recommended
    orders = analysis.spec.order_list()
    pens = list(analysis.spec.penalties)
    q = ss.get("lc_order") if ss.get("lc_order") in orders else max(orders)
    a = ss.get("lc_penalty") if ss.get("lc_penalty") in pens else pens[0]
    cells = [(int(rec.order), float(rec.penalty))]
    if (int(q), float(a)) != cells[0]:
        cells.append((int(q), float(a)))
    return cells


def learning_job(key: str, data, analysis, cells) -> Future:
    """`engine.analysis.learning_curve` for the orders of ``cells`` (run here, kept)."""
    orders = tuple(sorted({int(c[0]) for c in cells}))
    return run_here(("learning", key, orders), learning_curve, data, analysis.spec,
                    list(orders))


def wait_for(job: Future, message: str):
    """The job's result, with a spinner while it is still running."""
    if job.done():
        return job.result()
    with st.spinner(message):
        return job.result()


def start_fits(key: str, data, analysis, cells: tuple) -> Future:
    """Fit ``cells`` on all rows in the background (`engine.compare.fit_candidates`)."""
    rec = analysis.recommendation.recommended
    return run_once(("fits", key, cells), fit_candidates, data, analysis.spec, list(cells),
                    rec.family, rec.l1_ratio)


def warnings_panel(pending: Future) -> None:
    """Warnings near the recommendation, from `engine.checks`.

    ``pending`` runs ``engine.checks.run_checks(data, analysis)`` (candidates:
    the recommended and the best cell); each finding is shown with its advice.
    """
    try:
        if not pending.done():
            with st.spinner("Checking data and fit for warning signs…"):
                report = pending.result()
        else:
            report = pending.result()
    except InputProblem as exc:
        st.info(f"Checks could not run: {md(exc.message)}")
        return
    except Exception as exc:  # noqa: BLE001
        show_problem(exc, "running the checks")
        return
    findings = list(getattr(report, "findings", []) or [])
    if not findings:
        st.success("No warnings from the checks on data and fit.", icon=":material/check:")
    else:
        serious = sum(str(getattr(f, "severity", "")).lower() == "serious" for f in findings)
        title = f"Warnings ({len(findings)}" + (f", {serious} serious)" if serious else ")")
        with st.expander(title, expanded=bool(serious)):
            for f in findings:
                sev = str(getattr(f, "severity", "info")).lower()
                text = f"**{md(getattr(f, 'message', ''))}**"
                advice = getattr(f, "advice", "")
                if advice:
                    text += f"  \n{md(advice)}"
                if sev in ("serious", "high", "severe", "critical"):
                    st.warning(text, icon=":material/warning:")
                else:
                    st.info(text, icon=":material/info:")
            summary = getattr(report, "tables", {}).get("summary")
            if isinstance(summary, pd.DataFrame) and not summary.empty:
                if st.toggle("Show every check, fired or not", key="show_all_checks"):
                    st.dataframe(human_headers(summary), hide_index=True)
                    table_download(summary, "checks")
    row_order = getattr(report, "row_order", {}) or {}
    if row_order.get("status") in ("assumed", "sorted_by_input", "sorted_by_target", "not_time"):
        st.caption(md(row_order.get("sentence", "")))   # what the row-order checks assumed


def trust_panel(data, analysis, run_key: str = "") -> None:
    """Nested cross-validation and selection stability (from `engine.trust`, when present).

    Both refit the whole sweep many times, so they run only when asked; the
    results are kept for this data and request while the page is open.
    """
    try:
        from engine import trust
    except ImportError:
        return
    ss = st.session_state
    store = ss.setdefault("_trust", {})
    with st.expander("How much to trust the choice (refits the sweep; takes longer)"):
        st.caption("Nested cross-validation repeats the whole choice inside outer folds and "
                   "scores it on rows the choice never saw. Selection stability repeats the "
                   "choice on resampled rows and counts how often each cell wins.")
        if st.button("Run both checks", key="run_trust", icon=":material/replay:"):
            bar = st.empty()
            nested = guarded("running nested cross-validation", trust.nested_cv, data,
                             analysis.spec, 5,
                             lambda f, m: bar.progress(min(1.0, 0.5 * float(f)), text=str(m)),
                             analysis=analysis)
            stab = guarded("repeating the choice", trust.selection_stability, data,
                           analysis.spec, 20, "repeated", None,
                           lambda f, m: bar.progress(min(1.0, 0.5 + 0.5 * float(f)),
                                                     text=str(m)))
            bar.empty()
            store[run_key] = (nested, stab)
        nested, stab = store.get(run_key, (None, None))
        if nested is not None:
            st.markdown(
                f"**Nested cross-validation.** Error of the whole choice on unseen rows: MSE "
                f"{nested.outer_mse:.4g} ± {nested.outer_se:.2g}, against the sweep's own "
                f"estimate {nested.inner_mse:.4g} (ratio {nested.ratio:.2f}; about 1 when "
                "the sweep's estimate holds).")
            st.caption(md(" ".join([nested.description] + list(nested.notes))))
            st.dataframe(human_headers(nested.per_fold), hide_index=True)
            table_download(nested.per_fold, "nested_cv")
        if stab is not None:
            rec = analysis.recommendation.recommended
            t = stab.table
            hit = t[(t["order"] == rec.order) & np.isclose(t["penalty"], rec.penalty)]
            share = float(hit["share"].iloc[0]) if not hit.empty else 0.0
            st.markdown(f"**Selection stability** ({stab.method}, {len(stab.chosen)} "
                        f"repetitions). The recommended cell was chosen in {share:.0%} of them.")
            if stab.notes:
                st.caption(md(" ".join(stab.notes)))
            st.dataframe(human_headers(t), hide_index=True)
            table_download(stab.chosen, "selection_stability")


def use_model_panel(analysis_key: str, data, analysis) -> None:
    """'Use this model' for the recommended cell (its fit on all rows, from the page's fits)."""
    from dashboard.use_model import use_model_section

    rec = analysis.recommendation.recommended
    key = (int(rec.order), float(rec.penalty))
    cells = compare_cells(analysis)
    job = (run_once(("fits", analysis_key, cells), fit_candidates, data, analysis.spec,
                    list(cells)) if key in cells else
           run_once(("fits", analysis_key, (key,)), fit_candidates, data, analysis.spec, [key]))
    models = wait_for(job, "Fitting the recommended model on all rows…")
    use_model_section(models[key])


def pack_request(loaded, source_name: str, data, analysis, spec: SweepSpec,
                 cells: tuple, pending: Future | None, analysis_key: str,
                 work_data=None, view=None) -> dict:
    """Keyword arguments of `engine.pack.build_pack` from what the page computed:
    its sweep, checks, side-by-side fits, learning curve, nested CV and stability."""
    ss = st.session_state
    view = view if view is not None else analysis
    work_data = work_data if work_data is not None else data
    fits = run_once(("fits", analysis_key, cells), fit_candidates, work_data, view.spec,
                    list(cells))
    lc = learning_job(analysis_key, work_data, view, learning_cells(view))
    nested, stab = ss.get("_trust", {}).get(analysis_key, (None, None))
    return dict(loaded=loaded, source_name=source_name, data=data, spec=spec,
                analysis=analysis, checks=pending, compare_orders=list(cells),
                models=fits, learning=lc, trust=(nested, stab),
                sure=run_once(("sureness", analysis_key), sureness, work_data, view),
                error_unit=ss.get("metric", "mse"),
                load_options={"decimal": "," if getattr(loaded.report, "decimal", ".") == ","
                              else None, "sheet": None})


def pack_zip(request: dict) -> bytes:
    """The meeting pack as ZIP bytes (built once per request, then kept)."""
    from engine import pack

    def build() -> bytes:
        kw = dict(request)
        for k in ("checks", "models", "learning", "sure"):  # the page's background work
            if isinstance(kw.get(k), Future):
                try:
                    kw[k] = kw[k].result()
                except Exception:  # noqa: BLE001 - the pack computes it itself then
                    kw[k] = None
        with tempfile.TemporaryDirectory() as tmp:
            out = Path(tmp) / "fitladder_pack"
            pack.build_pack(out, **kw)
            return pack.pack_zip_bytes(out)

    key = ("pack", repr(request["spec"].to_dict()), request["source_name"],
           tuple(request["compare_orders"]), getattr(request["loaded"].report, "sha256", ""),
           tuple(id(t) for t in request["trust"]), request.get("error_unit"))
    try:
        return run_here(key, build).result()
    except InputProblem as exc:
        return _problem_zip(exc.message)
    except Exception as exc:  # noqa: BLE001 - a download must never show a traceback
        print(traceback.format_exc())
        return _problem_zip(f"The pack could not be written ({type(exc).__name__}). "
                            "The page still works; try again or another setting.")


def _problem_zip(message: str) -> bytes:
    import io
    import zipfile

    buf = io.BytesIO()
    with zipfile.ZipFile(buf, "w") as zf:
        zf.writestr("fitladder_pack/PROBLEM.txt", message + "\n")
    return buf.getvalue()


def pack_panel(request: dict) -> None:
    """The meeting pack in one click: a download built, when clicked, from what the
    page already computed (nothing is refitted; nested CV and stability when run)."""
    st.session_state["_pack_request"] = request  # read by the tests and the benchmark
    trust_ran = [t for t in request["trust"] if t is not None]
    st.download_button("Meeting pack (ZIP)", data=lambda: pack_zip(request),
                       file_name="fitladder_pack.zip", mime="application/zip",
                       key="pack_download", icon=":material/folder_zip:", on_click="ignore",
                       help="One-page summary, every chart and table, the model and how to "
                            "use it, from what this page computed"
                            + (", with nested cross-validation and selection stability."
                               if trust_ran else "."))


# ---------------------------------------------------------------------------
# result tabs
# ---------------------------------------------------------------------------


def tab_validation(analysis, target: str) -> None:
    rec = analysis.recommendation
    pens = list(analysis.spec.penalties)
    pen = choose("Penalty shown", pens, rec.recommended.penalty, "view_penalty",
                 slider=len(pens) > 1, fmt=C.penalty_text)
    metric = st.session_state.get("metric", "mse")
    chart = roomy(C.validation_curve_chart(analysis.validation, pen, rec.best, rec.recommended,
                                           target, metric))
    chart_block(chart, "validation_curve", [(analysis.validation, "validation_grid")])
    if analysis.notes:
        st.caption(md(" ".join(analysis.notes)))


def tab_heatmap(analysis, target: str) -> None:
    rec = analysis.recommendation
    chart = grid_heatmap(analysis, target) or C.heatmap_chart(analysis.validation, rec.best,
                                                              rec.recommended, target)
    chart_block(chart, "order_penalty_heatmap",
                [(analysis.sweep.fold_table(), "validation_per_split")])


def tab_learning(analysis_key: str, data, analysis, target: str) -> None:
    rec = analysis.recommendation.recommended
    orders = analysis.spec.order_list()
    pens = list(analysis.spec.penalties)
    st.caption(f"Recommended cell ({C.cell_text(rec.order, rec.penalty)}) and one of your choice.")
    c1, c2 = st.columns([1, 3])
    with c1:
        choose("Order", orders, max(orders), "lc_order")
    with c2:
        choose("Penalty", pens, pens[0], "lc_penalty", slider=len(pens) > 1,
               fmt=C.penalty_text)
    cells = learning_cells(analysis)  # the recommended cell and the two choices above
    lc = learning_job(analysis_key, data, analysis, cells).result()
    chart = C.learning_curve_chart(lc.table, cells, target, note=lc.note)
    chart_block(chart, "learning_curve", [(lc.table, "learning_curve")])


def default_compare_orders(analysis) -> list[int]:
    orders = analysis.spec.order_list()
    rec = analysis.recommendation.recommended.order
    pick = sorted({min(1, max(orders)), rec, max(orders)} & set(orders))
    if (max(orders) == 1 and rec == 1 and analysis.recommendation.recommended.penalty > 0
            and default_compare_zero(analysis)):
        return [1]  # straight lines only: compare with and without the penalty instead
    if len(pick) < 2 and len(orders) > 1:
        pick = sorted(set(orders[-2:]) | {rec})
    return pick[:4]


def tab_compare(analysis_key: str, data, analysis, target: str) -> list[int]:
    rec = analysis.recommendation.recommended
    orders = analysis.spec.order_list()
    pens = list(analysis.spec.penalties)
    c1, c2 = st.columns([2, 2])
    with c1:
        picked = choose("Orders side by side (2 to 4)", orders, default_compare_orders(analysis),
                        "cmp_orders", multi=True)
    with c2:
        a = choose("Penalty for all of them", pens, rec.penalty, "cmp_penalty",
                   slider=len(pens) > 1, fmt=C.penalty_text)
    if a != 0.0 and 0.0 in pens:
        if "cmp_zero" not in st.session_state:
            st.session_state["cmp_zero"] = default_compare_zero(analysis)
        st.checkbox("Also show each order without a penalty", key="cmp_zero")
    if not picked:
        st.info("Pick at least one order.")
        return []
    cells = compare_cells(analysis)
    models = wait_for(start_fits(analysis_key, data, analysis, cells),
                      "Fitting the chosen orders on all rows…")
    # the prediction band comes from the intervals, which may still be running: the
    # chart is drawn at once without it and redrawn with it when they are done
    sure_job = run_once(("sureness", analysis_key), sureness, data, analysis)

    def with_band():
        band = guarded("drawing the prediction band", band_for,
                       wait_for(sure_job, "Computing prediction intervals…"), data, analysis,
                       models)
        return roomy(C.comparison_chart(data, models, target, band=band), 800, 420)

    if sure_job.done():
        chart_block(with_band(), "order_comparison")
    else:
        replace = chart_block(roomy(C.comparison_chart(data, models, target), 800, 420),
                              "order_comparison")
        later(lambda: replace(with_band()))
    st.caption("Fitted on all rows and drawn in-sample: a model that reproduces every row "
               "here can still fail on rows it never saw; the validation curve is the judge.")
    rows = []
    for (q, p), m in models.items():
        rows.append({"model": C.cell_text(q, p), "order": q, "penalty": p,
                     "r2_on_training_rows": m.r2, "residual_sd": m.residual_sd,
                     "effective_df": m.effective_df, "condition_number": m.condition_number})
    summary = pd.DataFrame(rows)
    shown = summary.assign(condition_number=[f"{v:.3g}" for v in summary["condition_number"]])
    shown = shown.assign(penalty=[penalty_text(v) for v in shown["penalty"]])
    st.dataframe(human_headers(shown), hide_index=True, column_config={
        column_header(c): st.column_config.NumberColumn(format="%.4g") for c in
        ("r2_on_training_rows", "residual_sd", "effective_df")})
    table_download(summary, "side_by_side_fits")
    return [int(q) for q in sorted(picked)]


def tab_coefficients(analysis, target: str) -> None:
    rec = analysis.recommendation.recommended
    orders = [o for o in analysis.spec.order_list() if o > 0] or analysis.spec.order_list()
    pens = list(analysis.spec.penalties)
    c1, c2 = st.columns([1, 3])
    with c1:
        q = choose("Order", orders, rec.order if rec.order in orders else orders[-1], "coef_order")
    with c2:
        a = choose("Penalty", pens, rec.penalty, "coef_penalty", slider=len(pens) > 1,
                   fmt=C.penalty_text)
    coef = analysis.sweep.coefficient_table()
    view = C.coefficient_view(coef, q, a)
    chart = C.coefficient_chart(coef, q, a, target=target)
    chart_block(chart, "coefficient_magnitudes")
    st.caption(f"Standardised: change in {md(target)} for one standard deviation of the term, "
               "averaged over the validation splits. Steep: more than "
               f"{C.STEEP_RATIO:g} times the median magnitude of the other terms, in cells "
               f"with {C.STEEP_MIN_TERMS} or more terms.")
    st.dataframe(human_headers(view), hide_index=True, column_config={
        column_header(c): st.column_config.NumberColumn(format="%.4g") for c in
        ("std_mean", "std_sd", "raw_mean", "raw_sd", "magnitude", "ratio_to_median")})
    table_download(view, "coefficients_cell")


def tab_data(loaded, data) -> None:
    rep = loaded.report
    st.markdown(f"**{md(rep.source_name)}** · {rep.rows_read:,} rows × {rep.columns_read:,} columns "
                f"read as {rep.file_format.upper()} · {len(rep.numeric_columns)} numeric.")
    used = f"{data.n_rows:,} rows used"
    if data.rows_dropped:
        st.warning(f"{used}. {md(describe_drops(data))}", icon=":material/filter_alt:")
    else:
        st.caption(f"{used}; no rows dropped.")
    if rep.ignored_columns:
        st.caption("Not usable for modelling: " + "; ".join(
            md(f"{c} ({rep.ignored_reasons.get(c, '')})") for c in rep.ignored_columns[:20])
            + ("…" if len(rep.ignored_columns) > 20 else ""))
    for note in list(rep.notes) + list(data.notes):
        st.caption(md(note))
    st.dataframe(loaded.frame.head(500), height=320)
    st.caption(f"First {min(500, len(loaded.frame))} rows. SHA-256 {rep.sha256[:16]}…")


# ---------------------------------------------------------------------------
# page
# ---------------------------------------------------------------------------


def digest_of(raw: bytes) -> str:
    """SHA-256 of the bytes, remembered for the same bytes object during the session."""
    memo = st.session_state.get("_digest_memo")
    if memo and memo[0] is raw:
        return memo[1]
    digest = hashlib.sha256(raw).hexdigest()
    st.session_state["_digest_memo"] = (raw, digest)
    return digest


def mark(name: str) -> None:
    """Record when a stage of the page finished (read by benchmarks/dashboard_latency.py)."""
    st.session_state.setdefault("_marks", {})[name] = time.perf_counter()


def sidebar_data() -> tuple[str, tuple[str, bytes] | None]:
    ss = st.session_state
    st.sidebar.subheader("1 · Data")
    choices = list(DEMOS) + ([UPLOAD] if ss.get(UPLOAD) else [])
    up = ss.get(UPLOAD)
    if up:  # a file that arrived since the last run is shown at once
        tag = (str(up[0]), len(up[1]), digest_of(up[1]))
        if ss.get("_upload_seen") != tag:
            ss["_upload_seen"] = tag
            ss["source_choice"] = UPLOAD
    if ss.get("source_choice") not in choices:
        ss["source_choice"] = choices[0]
    labels = {c: source_label(c) for c in choices}
    choice = st.sidebar.selectbox("Data set", choices, format_func=labels.get,
                                  key="source_choice")
    cap = upload_cap_mb()
    st.sidebar.file_uploader(f"Or upload your own table (up to {cap} MB)",
                             type=["csv", "tsv", "txt", "xlsx", "parquet"], key="uploader",
                             on_change=take_upload)
    if choice in DEMOS:
        st.sidebar.caption(DEMOS[choice].blurb)
    else:
        st.sidebar.checkbox("Numbers use a decimal comma (1,5 = one and a half)",
                            key="decimal_comma",
                            help="For text files written with a decimal comma; columns are "
                                 "then separated by semicolons or tabs.")
    return choice, source_bytes(choice)


def main() -> None:
    st.set_page_config(page_title="Fitladder", page_icon=":material/stairs:", layout="wide")
    st.session_state["_marks"] = {"start": time.perf_counter()}
    st.session_state["_later"] = []
    st.markdown(
        "<style>div[data-testid='stMetricValue']{font-size:1.45rem;}</style>",
        unsafe_allow_html=True)
    st.title("Fitladder")
    st.caption("How complex a model can your data carry, and how hard to penalise it — "
               "judged on rows the fit never saw.")
    choice, src = guarded("choosing the data", sidebar_data) or ("", None)
    if src is None:
        st.info("Choose a demo data set or upload a table in the sidebar.")
        return
    name, raw = src
    digest = digest_of(raw)
    decimal = "," if (choice not in DEMOS and st.session_state.get("decimal_comma")) else "."
    try:
        loaded = cached_load(digest, name, raw, decimal)
        mark("loaded")
    except Exception as exc:  # noqa: BLE001
        show_problem(exc, "reading the file")
        if choice not in DEMOS and decimal == "." and "decimal" in str(exc).lower():
            st.info("If this file writes numbers with a decimal comma, tick “Numbers use a "
                    "decimal comma” under the upload in the sidebar.")
        st.info("Pick a demo data set or upload another file in the sidebar.")
        return
    numeric = list(loaded.report.numeric_columns)
    # everything that changes the rows read: the bytes and the decimal mark
    data_key = f"{digest}:{decimal}"
    dataset_id = f"{choice}:{data_key}"
    if st.session_state.get("_dataset") != dataset_id:
        preset = DEMOS[choice].preset if choice in DEMOS else guess_preset(loaded.frame, numeric)
        apply_preset(preset)
        st.session_state["_dataset"] = dataset_id
    choices = guarded("reading the settings", roles_and_setup, loaded.frame, numeric)
    if choices is None:
        return
    roles, spec = choices.roles, choices.spec
    try:
        data = cached_prepare(data_key, roles, loaded.frame, spec.extra_targets)
        if tuple(data.inputs) != tuple(spec.inputs):  # text inputs became indicator terms
            spec = dataclasses.replace(spec, inputs=tuple(data.inputs))
        spec_dict = spec.to_dict()
        # the size of the request, refused over the limits before anything is allocated
        budget = check_request(spec, data.n_rows, np.shape(data.X)[1])
        if budget.seconds > 2:
            st.caption(md(f"Request: {budget.text()}."))
        bar = st.empty()
        try:
            analysis = cached_analysis(
                data_key, roles, spec_dict, data,
                lambda f, msg: bar.progress(min(1.0, max(0.0, float(f))), text=str(msg)))
        finally:  # no progress bar outlives its run, also when the sweep fails
            bar.empty()
    except Exception as exc:  # noqa: BLE001
        show_problem(exc, "running the sweep")
        with st.expander("Data", expanded=True):
            guarded("showing the data", st.dataframe, loaded.frame.head(200))
        return

    analysis_key = f"{data_key}|{roles!r}|{spec_dict!r}"
    if st.session_state.get("_analysis_key") != analysis_key:
        # a new result: the views start again from its recommendation
        for k in VIEW_KEYS:
            st.session_state.pop(k, None)
        st.session_state["_analysis_key"] = analysis_key
    analysis = target_choice(analysis if isinstance(analysis, list) else [analysis])
    target = analysis.target
    if spec.extra_targets:   # background fits and checks belong to the target shown
        analysis_key = f"{analysis_key}|target={target}"
    drop = (f" · {data.rows_dropped:,} dropped (see below and Data)" if data.rows_dropped
            else "")
    st.caption(md(f"{loaded.report.source_name} · {data.n_rows:,} of {data.rows_in:,} rows used"
                  f"{drop} · target {target} from {len(spec.inputs)} input"
                  f"{'s' if len(spec.inputs) != 1 else ''}"))
    if data.rows_dropped:
        st.warning(md(describe_drops(data)), icon=":material/filter_alt:")
    # lag depths / input counts: the page's per-cell views use the recommended rung's columns
    full, data_all = analysis, data
    analysis = full.view().at_family()   # per-cell views: the recommended cell's family
    data, _ = full.working(data_all, spec)
    if full.model_spec is not None and full.model_spec.inputs != spec.inputs:
        st.caption(md("Columns of the recommended model: " + ", ".join(full.model_spec.inputs)
                      + (f" · {full.rows_left_out:,} rows at the start left out for lags"
                         if full.rows_left_out else "")))
    mark("sweep")
    guarded("showing the recommendation", recommendation_panel, analysis, target, data.n_rows)
    # slow engine calls run in the background, in this order, while the quick
    # charts are drawn: side-by-side fits, then checks. The warnings panel sits
    # here and is filled at the end.
    guarded("starting the fits", start_fits, analysis_key, data, analysis,
            compare_cells(analysis))
    pending = guarded("starting the checks", start_checks, analysis_key, data, analysis)
    warn_slot = st.empty()
    # replaces the previous data set's warnings at once (they would stay, greyed, until
    # the new checks finish)
    warn_slot.caption("Checking data and fit for warning signs…")
    sure_job = guarded("starting the intervals", run_once, ("sureness", analysis_key),
                       sureness, data, analysis)
    sure_slot = st.empty()
    guarded("checking the choice", trust_panel, data, analysis, analysis_key)
    tabs = st.tabs([CHARTS["validation_curve"], CHARTS["order_penalty_heatmap"],
                    CHARTS["learning_curve"], CHARTS["order_comparison"],
                    CHARTS["coefficient_magnitudes"], "Data", PATH_CHARTS["coefficient_paths"]])
    with tabs[0]:
        guarded("drawing the validation curve", tab_validation, analysis, target)
    with tabs[1]:
        guarded("drawing the heat map", tab_heatmap, full.at_family(), target)
    with tabs[4]:
        guarded("drawing the coefficients", tab_coefficients, analysis, target)
    with tabs[2]:
        guarded("drawing the learning curve", tab_learning, analysis_key, data, analysis,
                target)
    with tabs[5]:
        guarded("showing the data", tab_data, loaded, data_all)
    with tabs[6]:
        guarded("tracing the coefficients", paths_section.render, analysis_key, data, full,
                analysis, target, chart_block, table_download, md)
    mark("quick tabs")
    with tabs[3]:  # last: it fits models on all rows
        compare_orders = guarded("comparing orders", tab_compare, analysis_key, data,
                                 analysis, target) or default_compare_orders(analysis)
    mark("charts")
    with st.container(border=True):
        guarded("showing how to use the model", use_model_panel, analysis_key, data, analysis)
    if pending is not None:
        with warn_slot.container():
            guarded("running the checks", warnings_panel, pending)
    else:
        warn_slot.empty()
    mark("checks")
    if sure_job is not None:
        with sure_slot.container():
            guarded("showing how sure", how_sure_panel,
                    wait_for(sure_job, "Computing intervals and the larger-table outlook…"),
                    table_download)
    for fn in st.session_state.get("_later", []):
        guarded("finishing the charts", fn)
    st.session_state["_later"] = []
    mark("done")
    with st.sidebar:
        st.subheader("5 · Meeting pack")
        request = guarded("preparing the pack", pack_request, loaded, name, data_all, full,
                          spec, compare_cells(analysis), pending, analysis_key, data, analysis)
        if request:
            guarded("preparing the pack", pack_panel, request)


main()
