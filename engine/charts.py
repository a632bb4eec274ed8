"""Charts of sweep results, built from engine tables (Altair; no user-interface code).

Every public function returns a finished, top-level Altair chart with our own
palette and fonts already configured, so the same object can be shown in the
dashboard, written into a meeting pack, or converted with `chart_to_png` /
`chart_to_svg`. Because the configuration is applied, the returned charts are
not meant to be layered or concatenated further.

Axis titles name the quantity in plain words and, where the column name ends
in a recognised unit (``bath_temp_C``, ``probe_mV``, ``yield_pct``,
``analyte_mg_L``), the unit; pass ``units=`` to state it yourself.
"""
from __future__ import annotations

import math
import re
from types import SimpleNamespace
from typing import Any

import altair as alt
import numpy as np
import pandas as pd

from .labels import cell_text, family_text, penalty_text  # noqa: F401  (part of this module's API)
from .compare import curve_table, prediction_table
from .final_fit import FinalModel
from .recommend import Cell

__all__ = [
    "PALETTE", "MODEL_COLOURS", "STEEP_RATIO", "STEEP_MIN_TERMS", "SCATTER_LIMIT", "column_units", "plain_name",
    "penalty_text", "coefficient_view", "validation_curve_chart", "heatmap_chart",
    "learning_curve_chart", "comparison_chart", "coefficient_chart", "chart_to_png",
    "chart_to_svg", "render_chart", "render_charts",
]

# ---------------------------------------------------------------------------
# look
# ---------------------------------------------------------------------------
#: Named colours of the product (our own choice).
PALETTE = {
    "train": "#2a7f8e",        # lagoon teal
    "validation": "#c2502f",   # brick
    "band": "#e9a98f",         # pale brick, for the one-SE band
    "best": "#d99a00",         # ochre
    "recommended": "#4b2e83",  # aubergine
    "range": "#e7efe4",        # pale sage, training range shading
    "points": "#6b6f76",       # slate grey, data points
    "ink": "#23262b",          # text
    "grid": "#e4e2dc",
    "steep": "#b3261e",        # deep red, steep coefficients
    "calm": "#7f9c8a",         # sage, other coefficients
}
#: Colours for up to eight models side by side.
MODEL_COLOURS = ["#c2502f", "#2a7f8e", "#4b2e83", "#d99a00", "#5c7f2a", "#8a5a44",
                 "#2f4f9e", "#b0467a"]
#: Sequential colour ramp for error heat maps: low error light, high error dark.
#: Glyph on heat-map cells that are statistically indistinguishable from the best.
NEAR_BEST_GLYPH = "≈"
ERROR_RAMP = ["#f6f1de", "#e8c98a", "#d58a4f", "#a8483a", "#5b2338"]
#: A term is "steep" when its standardised magnitude is more than this many
#: times the median magnitude of the other terms of the same cell (cells
#: with at least `STEEP_MIN_TERMS` terms besides the intercept).
STEEP_RATIO = 3.0
STEEP_MIN_TERMS = 3
#: Most data points drawn in one scatter panel; larger tables are sampled.
SCATTER_LIMIT = 1500
#: Most rows of a coefficient-path chart (Vega-Lite inlines its data).
PATH_ROW_LIMIT = 4500
FONT = "DejaVu Sans, Verdana, sans-serif"

_WIDTH = 520
_HEIGHT = 300


def _cell_marks() -> dict:
    """Shape and stroke encodings of the best (diamond) and recommended (circle) markers."""
    domain = ["lowest validation error", "recommended"]
    return {"shape": alt.Shape("mark:N", title=None,
                               scale=alt.Scale(domain=domain, range=["diamond", "circle"]),
                               legend=alt.Legend(orient="bottom")),
            "stroke": alt.Stroke("mark:N", title=None,
                                 scale=alt.Scale(domain=domain, range=[PALETTE["best"],
                                                                       PALETTE["recommended"]]),
                                 legend=alt.Legend(orient="bottom"))}


def _finish(chart: alt.TopLevelMixin) -> alt.TopLevelMixin:
    """Apply the product look to a top-level chart.

    The size is fixed by the chart (``autosize: pad``): titles, legends and
    axes are added around the plotting area, never squeezed into it.
    """
    return chart.properties(autosize=alt.AutoSizeParams(type="pad"), config=_CONFIG)


_CONFIG = alt.Config(
    font=FONT, background="#ffffff",
    view=alt.ViewConfig(stroke=None),
    axis=alt.AxisConfig(labelColor=PALETTE["ink"], titleColor=PALETTE["ink"],
                        gridColor=PALETTE["grid"], domainColor="#9a9a9a", tickColor="#9a9a9a",
                        titleFontWeight="normal", titleFontSize=12, labelFontSize=11),
    legend=alt.LegendConfig(labelColor=PALETTE["ink"], titleColor=PALETTE["ink"],
                            titleFontWeight="normal", orient="bottom", columns=4),
    title=alt.TitleConfig(color=PALETTE["ink"], fontSize=14, subtitleFontSize=11,
                          subtitleColor="#5a5d63", anchor="start"),
    header=alt.HeaderConfig(labelColor=PALETTE["ink"], titleColor=PALETTE["ink"],
                            labelFontSize=12),
)


def _title(text: str, notes: list[str] | None = None) -> alt.TitleParams:
    notes = [n for n in (notes or []) if n]
    return alt.TitleParams(text=text, subtitle=notes) if notes else alt.TitleParams(text=text)


# ---------------------------------------------------------------------------
# names and units
# ---------------------------------------------------------------------------
_UNIT_SUFFIXES = [
    ("_mg_L", "mg/L"), ("_g_L", "g/L"), ("_mol_L", "mol/L"), ("_mmol_L", "mmol/L"),
    ("_L_min", "L/min"), ("_m3_h", "m³/h"), ("_kg_h", "kg/h"), ("_m_s", "m/s"),
    ("_pct", "%"), ("_percent", "%"), ("_degC", "°C"), ("_C", "°C"), ("_F", "°F"),
    ("_K", "K"), ("_mV", "mV"), ("_uV", "µV"), ("_V", "V"), ("_mA", "mA"), ("_A", "A"),
    ("_kPa", "kPa"), ("_MPa", "MPa"), ("_Pa", "Pa"), ("_bar", "bar"), ("_mbar", "mbar"),
    ("_rpm", "rpm"), ("_Hz", "Hz"), ("_kHz", "kHz"), ("_nm", "nm"), ("_um", "µm"),
    ("_mm", "mm"), ("_cm", "cm"), ("_m", "m"), ("_kg", "kg"), ("_g", "g"), ("_mg", "mg"),
    ("_s", "s"), ("_ms", "ms"), ("_min", "min"), ("_h", "h"), ("_W", "W"), ("_kW", "kW"),
    ("_ppm", "ppm"), ("_ppb", "ppb"),
]


def column_units(name: str) -> str | None:
    """Unit read from a column name's suffix (``'bath_temp_C'`` -> ``'°C'``), or None."""
    for suffix, unit in sorted(_UNIT_SUFFIXES, key=lambda s: -len(s[0])):
        if str(name).endswith(suffix) and len(str(name)) > len(suffix):
            return unit
    return None


def plain_name(name: str, units: str | None = None) -> str:
    """Column name for an axis title: underscores to spaces, unit suffix moved to brackets.

    ``plain_name('bath_temp_C')`` gives ``'bath temp (°C)'``.
    """
    name = str(name)
    unit = units if units is not None else column_units(name)
    base = name
    if units is None and unit is not None:
        for suffix, u in sorted(_UNIT_SUFFIXES, key=lambda s: -len(s[0])):
            if name.endswith(suffix) and u == unit:
                base = name[: -len(suffix)]
                break
    base = re.sub(r"_+", " ", base).strip() or name
    return f"{base} ({unit})" if unit else base


def _squared(unit: str | None) -> str | None:
    if not unit:
        return None
    return f"{unit}²" if re.fullmatch(r"[A-Za-zµ°%]+", unit) else f"({unit})²"


def _metric_words(metric: str, target: str, units: str | None) -> tuple[str, str]:
    """(short name, axis title) of an error metric."""
    unit = units if units is not None else column_units(target)
    tname = plain_name(target, units if units is not None else None).split(" (")[0]
    if metric == "rmse":
        u = f", in {unit}" if unit else ""
        return "RMSE", f"root mean squared error of {tname}{u}"
    u2 = _squared(unit)
    return "MSE", f"mean squared error of {tname}" + (f", in {u2}" if u2 else "")


def _pick_penalty(table: pd.DataFrame, penalty: float) -> pd.DataFrame:
    sel = table[np.isclose(table["penalty"].astype(float), float(penalty), rtol=1e-9, atol=0)]
    return sel.sort_values("order")


def _same_cell(cell: Cell, order: int, penalty: float) -> bool:
    return int(cell.order) == int(order) and math.isclose(float(cell.penalty), float(penalty),
                                                          rel_tol=1e-9, abs_tol=0)


def _log_ticks(low: float, high: float) -> list[float]:
    """Powers of ten between ``low`` and ``high`` (thinned to at most 7)."""
    if not (low > 0 and high > low):
        return []
    k0, k1 = math.floor(math.log10(low)), math.ceil(math.log10(high))
    ks = list(range(k0, k1 + 1))
    step = max(1, math.ceil(len(ks) / 7))
    return [10.0 ** k for k in ks[::step] if low <= 10.0 ** k <= high]


#: Tick labels of a logarithmic axis: plain from 0.001 to 10,000, else ``1e+5`` style.
LOG_LABELS = ("abs(datum.value) >= 1e5 || abs(datum.value) < 1e-3 ? "
              "replace(format(datum.value, '.0e'), 'e+', 'e') : format(datum.value, '~g')")

#: A learning curve's error axis spans at most this ratio above its lowest error.
LEARNING_SPAN = 1e5


def _log_scale_wanted(values: np.ndarray, ratio: float = 30.0) -> bool:
    v = np.asarray(values, float)
    v = v[np.isfinite(v) & (v > 0)]
    return v.size >= 2 and v.max() / v.min() > ratio


# ---------------------------------------------------------------------------
# validation curve
# ---------------------------------------------------------------------------
def _error_frame(sel: pd.DataFrame, metric: str) -> pd.DataFrame:
    """Long table of training and validation error (and the band) for one penalty."""
    mse = sel["validation_mse"].to_numpy(float)
    se = np.nan_to_num(sel["validation_mse_se"].to_numpy(float), nan=0.0)
    tr = sel["train_mse"].to_numpy(float)
    lo, hi = mse - se, mse + se
    if metric == "rmse":
        val, trv = np.sqrt(mse), np.sqrt(np.clip(tr, 0, None))
        lo, hi = np.sqrt(np.clip(lo, 0, None)), np.sqrt(hi)
    else:
        val, trv = mse, tr
    return pd.DataFrame({"order": sel["order"].to_numpy(int), "validation": val,
                         "training": trv, "low": lo, "high": hi,
                         "se": se, "parameters": sel["parameters"].to_numpy(int),
                         "effective_df": sel["effective_df"].to_numpy(float)})


def validation_curve_chart(validation: pd.DataFrame, penalty: float, best: Cell,
                           recommended: Cell, target: str = "y", metric: str = "mse",
                           *, units: str | None = None) -> alt.TopLevelMixin:
    """Training and validation error against polynomial order at one penalty.

    Parameters
    ----------
    validation : `Analysis.validation` (order, penalty, train_mse, validation_mse,
        validation_mse_se, parameters, effective_df, ...).
    penalty : the penalty to show (a value in the table).
    best, recommended : cells of the recommendation; each is marked when it
        sits at this penalty, otherwise the subtitle says where it is.
    target : name of the target column, for the axis title.
    metric : ``'mse'`` (mean squared error) or ``'rmse'`` (its square root).
    units : unit of the target; read from the name's suffix when None.

    Returns
    -------
    altair chart: validation error with a band of plus/minus one standard
    error across splits, training error, and markers. The error axis is
    logarithmic when the errors span more than a factor of 30.
    """
    if metric not in ("mse", "rmse"):
        raise ValueError("metric must be 'mse' or 'rmse'")
    sel = _pick_penalty(validation, penalty)
    short, ytitle = _metric_words(metric, target, units)
    ptxt = penalty_text(penalty)
    frame = _error_frame(sel, metric)
    finite = frame[np.isfinite(frame["validation"])]
    notes = []
    positive = np.r_[finite["validation"].to_numpy(), finite["high"].to_numpy()]
    use_log = _log_scale_wanted(positive)
    if use_log:
        floor = float(np.nanmin(finite["validation"][finite["validation"] > 0])) / 30.0
        top = float(np.nanmax(finite["high"])) * 1.5
        frame["low"] = frame["low"].clip(lower=floor)
        hidden = (frame["training"] < floor).sum()
        frame["training_drawn"] = frame["training"].clip(lower=floor)
        if hidden:
            notes.append(f"Training error below {floor:.2g} is drawn at the bottom edge "
                         f"({hidden} order{'s' if hidden != 1 else ''}).")
        yscale = alt.Scale(type="log", domain=[floor, top], clamp=True)
        yaxis = alt.Axis(values=_log_ticks(floor, top), labelExpr=LOG_LABELS)
        notes.append("Logarithmic error axis.")
    else:
        frame["training_drawn"] = frame["training"]
        yscale = alt.Scale(zero=False, nice=True)
        yaxis = alt.Axis()
    long = pd.concat([
        frame.assign(set="training", error=frame["training_drawn"], shown=frame["training"]),
        frame.assign(set="validation", error=frame["validation"], shown=frame["validation"]),
    ], ignore_index=True)
    long = long[np.isfinite(long["error"])]
    colour = alt.Color("set:N", title=None,
                       scale=alt.Scale(domain=["training", "validation"],
                                       range=[PALETTE["train"], PALETTE["validation"]]),
                       legend=alt.Legend(orient="bottom"))
    x = alt.X("order:Q", title="polynomial order (highest power of the inputs)",
              axis=alt.Axis(values=[int(o) for o in frame["order"]], format="d"),
              scale=alt.Scale(domain=[float(frame["order"].min()) - 0.2,
                                      float(frame["order"].max()) + 0.2], nice=False))
    tips = [alt.Tooltip("order:Q", title="order"), alt.Tooltip("set:N", title="error on"),
            alt.Tooltip("shown:Q", title=short, format=".4g"),
            alt.Tooltip("se:Q", title="one SE of validation MSE", format=".3g"),
            alt.Tooltip("parameters:Q", title="parameters"),
            alt.Tooltip("effective_df:Q", title="effective degrees of freedom", format=".2f")]
    base = alt.Chart(long)
    band = alt.Chart(finite).mark_area(opacity=0.35, color=PALETTE["band"]).encode(
        x=x, y=alt.Y("low:Q", scale=yscale, title=ytitle, axis=yaxis), y2="high:Q",
        tooltip=[alt.Tooltip("order:Q"), alt.Tooltip("low:Q", title="minus one SE", format=".4g"),
                 alt.Tooltip("high:Q", title="plus one SE", format=".4g")])
    lines = base.mark_line(point=alt.OverlayMarkDef(size=40, filled=True), strokeWidth=2,
                           clip=True).encode(
        x=x, y=alt.Y("error:Q", scale=yscale, title=ytitle, axis=yaxis), color=colour,
        tooltip=tips)
    layers = [band, lines]
    marks = []
    for cell, name in ((best, "lowest validation error"), (recommended, "recommended")):
        if _same_cell(cell, cell.order, penalty):
            row = frame[frame["order"] == int(cell.order)]
            if not row.empty:
                marks.append({"order": int(cell.order), "error": float(row["validation"].iloc[0]),
                              "mark": name, "cell": cell.label})
        else:
            notes.append(f"The {name} cell ({cell.label}) is at another penalty.")
    if marks:
        mdf = pd.DataFrame(marks)
        layers.append(alt.Chart(mdf).mark_point(size=260, strokeWidth=2.5, filled=False).encode(
            x=x, y=alt.Y("error:Q", scale=yscale, title=ytitle, axis=yaxis),
            shape=alt.Shape("mark:N", title=None,
                            scale=alt.Scale(domain=["lowest validation error", "recommended"],
                                            range=["diamond", "circle"])),
            stroke=alt.Stroke("mark:N", title=None,
                              scale=alt.Scale(domain=["lowest validation error", "recommended"],
                                              range=[PALETTE["best"], PALETTE["recommended"]])),
            tooltip=[alt.Tooltip("mark:N", title="marker"), alt.Tooltip("cell:N", title="cell"),
                     alt.Tooltip("error:Q", title=short, format=".4g")]))
    notes.insert(0, f"Penalty {ptxt}. Band: validation error plus/minus one standard error "
                    "across splits.")
    chart = alt.layer(*layers).resolve_scale(color="independent", shape="independent",
                                             stroke="independent").properties(
        width=_WIDTH, height=_HEIGHT,
        title=_title(f"Validation curve: {short} against order", notes))
    return _finish(chart)


# ---------------------------------------------------------------------------
# heat map
# ---------------------------------------------------------------------------
def heatmap_chart(validation: pd.DataFrame, best: Cell, recommended: Cell, target: str = "y",
                  *, units: str | None = None) -> alt.TopLevelMixin:
    """Order x penalty map of mean validation error, best and recommended cells marked.

    The colour scale is logarithmic when the errors span more than a factor of
    30; cells whose error could not be computed are left blank.
    """
    t = validation.copy()
    t = t[np.isfinite(t["validation_mse"].astype(float))]
    pens = sorted(t["penalty"].astype(float).unique())
    labels = [penalty_text(p) for p in pens]
    lab = {p: penalty_text(p) for p in pens}
    t["penalty_label"] = t["penalty"].astype(float).map(lab)
    t["order_label"] = t["order"].astype(int).astype(str)
    orders = [str(o) for o in sorted(t["order"].astype(int).unique())]
    short, title = _metric_words("mse", target, units)
    use_log = _log_scale_wanted(t["validation_mse"].to_numpy())
    cscale = alt.Scale(type="log" if use_log else "linear", range=ERROR_RAMP,
                       **({} if use_log else {"zero": False}))
    x = alt.X("order_label:O", title="polynomial order", sort=orders,
              axis=alt.Axis(labelAngle=0))
    y = alt.Y("penalty_label:O", title="ridge penalty (on standardised terms)", sort=labels)
    heat = alt.Chart(t).mark_rect(stroke="#ffffff", strokeWidth=0.5).encode(
        x=x, y=y,
        color=alt.Color("validation_mse:Q", scale=cscale,
                        title=f"validation {short}",
                        legend=alt.Legend(orient="right", format=".3g", gradientLength=200)),
        tooltip=[alt.Tooltip("order:Q", title="order"),
                 alt.Tooltip("penalty_label:N", title="penalty"),
                 alt.Tooltip("validation_mse:Q", title=f"validation {short}", format=".4g"),
                 alt.Tooltip("validation_mse_se:Q", title="one SE", format=".3g"),
                 alt.Tooltip("train_mse:Q", title=f"training {short}", format=".4g"),
                 alt.Tooltip("effective_df:Q", title="effective degrees of freedom",
                             format=".2f")])
    marks = pd.DataFrame([
        {"order_label": str(int(c.order)), "penalty_label": penalty_text(c.penalty), "mark": m,
         "cell": c.label, "error": c.validation_mse}
        for c, m in ((best, "lowest validation error"), (recommended, "recommended"))])
    pts = alt.Chart(marks).mark_point(size=200, strokeWidth=2.5, filled=False).encode(
        x=x, y=y,
        **_cell_marks(),
        tooltip=[alt.Tooltip("mark:N", title="marker"), alt.Tooltip("cell:N", title="cell"),
                 alt.Tooltip("error:Q", title=f"validation {short}", format=".4g")])
    notes = [title + (", logarithmic colour scale." if use_log else ".")]
    layers = [heat, pts]
    if "near_best" in t:
        near = t[t["near_best"].astype(bool)
                 & ~t.apply(lambda r: _same_cell(best, r["order"], r["penalty"])
                            or _same_cell(recommended, r["order"], r["penalty"]), axis=1)]
        if len(near):
            layers.append(alt.Chart(near).mark_text(text=NEAR_BEST_GLYPH, fontSize=13,
                                                    fontWeight="bold", color=PALETTE["ink"]
                                                    ).encode(x=x, y=y))
        notes[0] = notes[0][:-1] + f"; {NEAR_BEST_GLYPH}: no different from the best."
    chart = alt.layer(*layers).properties(
        width=max(260, min(_WIDTH, 38 * len(orders))), height=max(200, 18 * len(labels)),
        title=_title("Validation error for every order and penalty", notes))
    return _finish(chart)


def grid_heatmap_chart(cells: pd.DataFrame, x: str, y: str, best: Cell, recommended: Cell,
                       target: str = "y", held: str = "", *,
                       units: str | None = None) -> alt.TopLevelMixin:
    """Map of mean validation error over any two axes of a grid (the others held fixed).

    ``cells`` is a slice of the validation table with one row per (x, y) pair
    (`engine.ladder.grid_slice`); the best and recommended cells are marked
    when they lie in it. ``held`` names the fixed axes for the title.
    """
    from .labels import GRID_AXES

    t = cells.copy()
    t = t[np.isfinite(t["validation_mse"].astype(float))]

    def text(axis: str, v) -> str:
        return penalty_text(float(v)) if axis == "penalty" else (
            str(v) if axis == "family" else f"{float(v):g}")

    for a in (x, y):
        t[f"{a}_label"] = [text(a, v) for v in t[a]]
    sort = {a: [text(a, v) for v in sorted(t[a].unique(), key=lambda v: (str(type(v)), v))]
            for a in (x, y)}
    short, title = _metric_words("mse", target, units)
    use_log = _log_scale_wanted(t["validation_mse"].to_numpy())
    cscale = alt.Scale(type="log" if use_log else "linear", range=ERROR_RAMP,
                       **({} if use_log else {"zero": False}))
    ex = alt.X(f"{x}_label:O", title=GRID_AXES.get(x, x), sort=sort[x],
               axis=alt.Axis(labelAngle=0))
    ey = alt.Y(f"{y}_label:O", title=GRID_AXES.get(y, y), sort=sort[y])
    heat = alt.Chart(t).mark_rect(stroke="#ffffff", strokeWidth=0.5).encode(
        x=ex, y=ey,
        color=alt.Color("validation_mse:Q", scale=cscale, title=f"validation {short}",
                        legend=alt.Legend(orient="right", format=".3g", gradientLength=200)),
        tooltip=[alt.Tooltip(f"{x}_label:N", title=GRID_AXES.get(x, x)),
                 alt.Tooltip(f"{y}_label:N", title=GRID_AXES.get(y, y)),
                 alt.Tooltip("validation_mse:Q", title=f"validation {short}", format=".4g"),
                 alt.Tooltip("validation_mse_se:Q", title="one SE", format=".3g"),
                 alt.Tooltip("effective_df:Q", title="effective degrees of freedom",
                             format=".2f")])
    marks = []
    for c, m in ((best, "lowest validation error"), (recommended, "recommended")):
        hit = t
        for a in cells.columns:
            if a in ("order", "penalty", "lags", "target_lags", "inputs_used") and a not in (x, y):
                v = getattr(c, a, None)
                if v is not None and len(hit) and not np.isclose(float(hit[a].iloc[0]), float(v)):
                    hit = hit.iloc[0:0]
        vx, vy = getattr(c, x, None), getattr(c, y, None)
        if len(hit) and vx is not None and vy is not None:
            marks.append({f"{x}_label": text(x, vx), f"{y}_label": text(y, vy), "mark": m,
                          "cell": c.label, "error": c.validation_mse})
    layers = [heat]
    if marks:
        layers.append(alt.Chart(pd.DataFrame(marks)).mark_point(
            size=200, strokeWidth=2.5, filled=False).encode(
            x=ex, y=ey,
            **_cell_marks(),
            tooltip=[alt.Tooltip("cell:N", title="cell"),
                     alt.Tooltip("error:Q", title=f"validation {short}", format=".4g")]))
    notes = [title + (", logarithmic colour scale." if use_log else ".")]
    if "near_best" in t and t["near_best"].astype(bool).any():
        layers.append(alt.Chart(t[t["near_best"].astype(bool)]).mark_text(
            text=NEAR_BEST_GLYPH, fontSize=13, fontWeight="bold", color=PALETTE["ink"],
            dy=9).encode(x=ex, y=ey))
        notes[0] = notes[0][:-1] + f"; {NEAR_BEST_GLYPH}: no different from the best."
    if held:
        notes.append("Held fixed: " + held + ".")
    chart = alt.layer(*layers).properties(
        width=max(260, min(_WIDTH, 38 * len(sort[x]))), height=max(200, 18 * len(sort[y])),
        title=_title(f"Validation error over {GRID_AXES.get(x, x).split(' (')[0]} and "
                     f"{GRID_AXES.get(y, y).split(' (')[0]}", notes))
    return _finish(chart)


# ---------------------------------------------------------------------------
# learning curve
# ---------------------------------------------------------------------------
def learning_curve_chart(lc_table: pd.DataFrame, cells: list[tuple[int, float]],
                         target: str = "y", *, units: str | None = None,
                         note: str = "") -> alt.TopLevelMixin:
    """Training and validation error against training-set size, one panel per cell.

    Parameters
    ----------
    lc_table : `LearningCurve.table` (order, penalty, train_size, train_mse,
        validation_mse, validation_mse_se, ...).
    cells : (order, penalty) pairs to draw; pairs missing from the table are
        listed in the subtitle.
    target, units : for the axis title.
    note : extra sentence for the subtitle (e.g. `LearningCurve.note`).
    """
    short, ytitle = _metric_words("mse", target, units)
    frames, missing = [], []
    for q, a in cells:
        sel = lc_table[(lc_table["order"].astype(int) == int(q))
                       & np.isclose(lc_table["penalty"].astype(float), float(a), rtol=1e-9, atol=0)]
        if sel.empty:
            missing.append(cell_text(int(q), float(a)))
            continue
        sel = sel.sort_values("train_size")
        se = np.nan_to_num(sel["validation_mse_se"].to_numpy(float), nan=0.0)
        label = cell_text(int(q), float(a))
        common = {"cell": label, "train_size": sel["train_size"].to_numpy(int)}
        frames.append(pd.DataFrame({**common, "set": "training",
                                    "error": sel["train_mse"].to_numpy(float),
                                    "low": np.nan, "high": np.nan}))
        v = sel["validation_mse"].to_numpy(float)
        frames.append(pd.DataFrame({**common, "set": "validation", "error": v,
                                    "low": v - se, "high": v + se}))
    notes = [n for n in [note] if n]
    if missing:
        notes.append("Not in the learning-curve table: " + "; ".join(missing) + ".")
    if not frames:
        empty = alt.Chart(pd.DataFrame({"text": ["No learning-curve rows for these cells."]})
                          ).mark_text(size=14).encode(text="text:N")
        return _finish(empty.properties(width=_WIDTH, height=80,
                                        title=_title("Learning curve", notes)))
    long = pd.concat(frames, ignore_index=True)
    long = long[np.isfinite(long["error"])]
    use_log = _log_scale_wanted(long.loc[long["set"] == "validation", "error"].to_numpy())
    long["shown"] = long["error"]
    if use_log:
        vals = long.loc[(long["set"] == "validation") & (long["error"] > 0), "error"]
        floor = float(vals.min()) / 30.0
        if (long["error"] < floor).any():
            notes.append(f"Errors below {floor:.2g} are drawn at the bottom edge.")
        long["error"] = long["error"].clip(lower=floor)
        long["low"] = long["low"].clip(lower=floor)
        top = float(np.nanmax(np.r_[long["high"].to_numpy(float), long["error"].to_numpy(float)]))
        top *= 1.5
        if top > 30.0 * floor * LEARNING_SPAN:  # tiny training sets of a high order explode
            top = 30.0 * floor * LEARNING_SPAN
            notes.append(f"Errors above {top:.0e} are drawn at the top edge."
                         .replace("e+0", "e").replace("e+", "e"))
            long["error"] = long["error"].clip(upper=top)
            long["high"] = long["high"].clip(upper=top)
        yscale = alt.Scale(type="log", domain=[floor, top], clamp=True)
        yaxis = alt.Axis(values=_log_ticks(floor, top), labelExpr=LOG_LABELS)
        notes.append("Logarithmic error axis.")
    else:
        yscale = alt.Scale(zero=False, nice=True)
        yaxis = alt.Axis()
    notes.insert(0, "Band: validation error plus/minus one standard error across splits.")
    x = alt.X("train_size:Q", title="training rows per fit")
    colour = alt.Color("set:N", title=None,
                       scale=alt.Scale(domain=["training", "validation"],
                                       range=[PALETTE["train"], PALETTE["validation"]]),
                       legend=alt.Legend(orient="bottom"))
    band = alt.Chart().mark_area(opacity=0.3, color=PALETTE["band"]).transform_filter(
        alt.datum.set == "validation").encode(x=x, y=alt.Y("low:Q", scale=yscale, title=ytitle, axis=yaxis),
                                              y2="high:Q")
    lines = alt.Chart().mark_line(point=alt.OverlayMarkDef(size=40, filled=True),
                                  strokeWidth=2, clip=True).encode(
        x=x, y=alt.Y("error:Q", scale=yscale, title=ytitle, axis=yaxis), color=colour,
        tooltip=[alt.Tooltip("cell:N"), alt.Tooltip("set:N", title="error on"),
                 alt.Tooltip("train_size:Q", title="training rows"),
                 alt.Tooltip("shown:Q", title=short, format=".4g")])
    order = list(dict.fromkeys(long["cell"]))
    chart = alt.layer(band, lines, data=long).properties(
        width=max(220, _WIDTH // max(1, len(order)) - 20), height=260
    ).facet(column=alt.Column("cell:N", title=None, sort=order)).properties(
        title=_title("Learning curve: error as the training set grows", notes))
    return _finish(chart)


# ---------------------------------------------------------------------------
# side by side
# ---------------------------------------------------------------------------
def _sample_rows(n: int, limit: int = SCATTER_LIMIT, seed: int = 0) -> np.ndarray:
    if n <= limit:
        return np.arange(n)
    return np.sort(np.random.default_rng(seed).choice(n, size=limit, replace=False))


def _model_order(models: dict) -> list[str]:
    return [cell_text(int(q), float(a)) for q, a in models]


def _relabel(table: pd.DataFrame) -> pd.DataFrame:
    """Replace the engine's model labels by `cell_text` labels."""
    table = table.copy()
    table["model"] = [cell_text(int(q), float(a)) for q, a in zip(table["order"], table["penalty"])]
    return table


def _segments(curves: pd.DataFrame, lo: float, hi: float) -> pd.DataFrame:
    """Split each curve into below / inside / above the training range.

    The end points ``lo`` and ``hi`` are repeated in the neighbouring outside
    segment, so the dashed parts meet the solid part without a gap.
    """
    parts = []
    for model, g in curves.groupby("model", sort=False):
        below = g[g["x"] <= lo].assign(inside=False, segment=f"{model} below")
        inside = g[(g["x"] >= lo) & (g["x"] <= hi)].assign(inside=True,
                                                           segment=f"{model} inside")
        above = g[g["x"] >= hi].assign(inside=False, segment=f"{model} above")
        parts += [below, inside, above]
    return pd.concat(parts, ignore_index=True)


def _band_note(band: pd.DataFrame) -> str:
    where = ("about the line of perfect agreement (median interval offsets)"
             if band["layout"].iloc[0] == "diagonal" else "")
    dotted = "; dotted: analytic interval" if band["analytic_low"].notna().any() else ""
    return (f"Band: prediction interval (CV+) of {band['model'].iloc[0]}"
            + (f" {where}" if where else "") + dotted + ".")


def _band_layers(band: pd.DataFrame, xscale, yscale, order: list[str]) -> list:
    """Shaded CV+ band and dotted analytic bounds, cut off at the panel's edges.

    The marks are clipped as drawn (a bound cut at a value instead would bend
    the band's straight edges where it leaves the panel): the band spans every
    row's values, the panel's axes only the rows drawn.
    """
    colour = MODEL_COLOURS[order.index(band["model"].iloc[0]) % len(MODEL_COLOURS)]
    b = band
    out = [alt.Chart(b).mark_area(opacity=0.16, color=colour, clip=True).encode(
        x=alt.X("x:Q", scale=xscale), y=alt.Y("cvplus_low:Q", scale=yscale),
        y2="cvplus_high:Q")]
    if b["analytic_low"].notna().any():
        for c in ("analytic_low", "analytic_high"):
            out.append(alt.Chart(b).mark_line(color=colour, strokeDash=[2, 2], strokeWidth=1,
                                              opacity=0.9, clip=True).encode(
                x=alt.X("x:Q", scale=xscale), y=alt.Y(f"{c}:Q", scale=yscale)))
    return out


def comparison_chart(data: Any, models: dict[tuple[int, float], FinalModel],
                     target: str = "y", *, units: str | None = None,
                     input_units: str | None = None,
                     scatter_limit: int = SCATTER_LIMIT,
                     band: pd.DataFrame | None = None) -> alt.TopLevelMixin:
    """Candidate models side by side.

    With one input: the data as points, each model's fitted curve over them,
    the training range shaded and the curves drawn a quarter of the range past
    each end (`engine.compare.curve_table`). The vertical axis follows the
    data, so curves that swing far away are cut at the edge (said in the
    subtitle). With several inputs: predicted against actual (with the line
    of perfect agreement) and residuals against predicted, one column per
    model (`engine.compare.prediction_table`).

    Tables with more than ``scatter_limit`` rows are drawn from a random
    sample of rows (fixed seed), said in the subtitle; the curves use all rows.

    ``band`` (`engine.intervals.band_table`) adds the recommended model's
    prediction intervals: the CV+ interval shaded, the analytic one dotted —
    along the curve with one input, about the line of perfect agreement in the
    model's own panel with several.
    """
    if not models:
        raise ValueError("comparison_chart needs at least one model")
    X = np.asarray(data.X, float)
    y = np.asarray(data.y, float)
    n = y.size
    keep = _sample_rows(n, scatter_limit)
    order = _model_order(models)
    mcol = alt.Color("model:N", title=None, sort=order,
                     scale=alt.Scale(domain=order, range=MODEL_COLOURS[:len(order)]),
                     legend=alt.Legend(orient="bottom"))
    sample_note = (f"Points: a random sample of {keep.size:,} of {n:,} rows." if keep.size < n
                   else "")
    tname = plain_name(target, units)
    if X.shape[1] == 1:
        xname = getattr(data, "inputs", ("x",))[0]
        xtitle = plain_name(xname, input_units)
        lo, hi = float(X[:, 0].min()), float(X[:, 0].max())
        curves = _segments(_relabel(curve_table(models, lo, hi)), lo, hi)
        span = float(y.max() - y.min()) or 1.0
        ylo, yhi = float(y.min()) - 0.35 * span, float(y.max()) + 0.35 * span
        cut = curves[(curves["prediction"] < ylo) | (curves["prediction"] > yhi)]
        notes = ["Shaded: range of the training data; curves continue past it."]
        if not cut.empty:
            notes.append("Curves leaving the plotted range are cut at the edge: "
                         + "; ".join(dict.fromkeys(cut["model"])) + ".")
        if sample_note:
            notes.append(sample_note)
        pts = pd.DataFrame({"x": X[keep, 0], "y": y[keep]})
        xscale = alt.Scale(domain=[float(curves["x"].min()), float(curves["x"].max())], nice=False)
        yscale = alt.Scale(domain=[ylo, yhi], nice=False)
        shade = alt.Chart(pd.DataFrame({"lo": [lo], "hi": [hi]})).mark_rect(
            color=PALETTE["range"], opacity=0.9).encode(
            x=alt.X("lo:Q", scale=xscale, title=xtitle), x2="hi:Q")
        scatter = alt.Chart(pts).mark_circle(size=42, opacity=0.95, color=PALETTE["points"],
                                             stroke="#ffffff", strokeWidth=1.0).encode(
            x=alt.X("x:Q", scale=xscale, title=xtitle),
            y=alt.Y("y:Q", scale=yscale, title=tname),
            tooltip=[alt.Tooltip("x:Q", title=xtitle, format=".4g"),
                     alt.Tooltip("y:Q", title=tname, format=".4g")])
        curve = alt.Chart(curves).mark_line(strokeWidth=2.2, clip=True).encode(
            x=alt.X("x:Q", scale=xscale, title=xtitle),
            y=alt.Y("prediction:Q", scale=yscale, title=tname),
            color=mcol, detail="segment:N",
            strokeDash=alt.StrokeDash("inside:N", title=None,
                                      scale=alt.Scale(domain=[True, False], range=[[1, 0], [5, 3]]),
                                      legend=None),
            tooltip=[alt.Tooltip("model:N"), alt.Tooltip("x:Q", title=xtitle, format=".4g"),
                     alt.Tooltip("prediction:Q", title=f"predicted {tname}", format=".4g"),
                     alt.Tooltip("inside:N", title="inside training range")])
        # data points drawn last, above the fitted curves and the band
        layers = [shade]
        if band is not None and not band.empty and band["model"].iloc[0] in order:
            layers += _band_layers(band, xscale, yscale, order)
            notes.append(_band_note(band))
        chart = alt.layer(*layers, curve, scatter).properties(
            width=_WIDTH + 60, height=_HEIGHT + 40,
            title=_title("Fitted curves over the data", notes))
        return _finish(chart)

    # predict only the rows drawn: the models are evaluated on the sample, not the table
    sample = SimpleNamespace(X=X[keep], y=y[keep])
    table = _relabel(prediction_table(models, sample))
    table["row"] = (keep + 1)[table["row"].to_numpy() - 1]
    nm = len(order)
    notes = ["Top: predicted against actual (line: perfect agreement). Bottom: residual "
             "(actual minus predicted) against predicted. In-sample, fitted on all rows."]
    if sample_note:
        notes.append(sample_note)
    w = max(170, min(300, (_WIDTH + 200) // nm))
    lo = float(min(table["actual"].min(), table["prediction"].min()))
    hi = float(max(table["actual"].max(), table["prediction"].max()))
    ascale = alt.Scale(domain=[lo, hi], nice=True)
    tips = [alt.Tooltip("model:N"), alt.Tooltip("row:Q", title="row"),
            alt.Tooltip("actual:Q", format=".4g"), alt.Tooltip("prediction:Q", format=".4g"),
            alt.Tooltip("residual:Q", format=".4g")]
    ident = pd.DataFrame({"a": [lo, hi], "b": [lo, hi]})
    pscale = alt.Scale(domain=[float(table["prediction"].min()),
                               float(table["prediction"].max())], nice=True, zero=False)
    rmax = float(table["residual"].abs().max()) or 1.0
    rscale = alt.Scale(domain=[-rmax, rmax], nice=True)
    top_panels, bottom_panels = [], []
    for m in order:
        sub = table[table["model"] == m]
        pv = alt.Chart(sub).mark_circle(size=22, opacity=0.6).encode(
            x=alt.X("actual:Q", title=f"actual {tname}", scale=ascale),
            y=alt.Y("prediction:Q", title=f"predicted {tname}", scale=ascale),
            color=mcol, tooltip=tips)
        line = alt.Chart(ident).mark_line(color=PALETTE["ink"], strokeDash=[4, 3],
                                          strokeWidth=1).encode(
            x=alt.X("a:Q", scale=ascale), y=alt.Y("b:Q", scale=ascale))
        extra = []
        if band is not None and not band.empty and band["model"].iloc[0] == m:
            extra = _band_layers(band, ascale, ascale, order)
            if _band_note(band) not in notes:
                notes.append(_band_note(band))
        top_panels.append(alt.layer(*extra, line, pv).properties(width=w, height=w, title=m))
        rv = alt.Chart(sub).mark_circle(size=22, opacity=0.6).encode(
            x=alt.X("prediction:Q", title=f"predicted {tname}", scale=pscale),
            y=alt.Y("residual:Q", title="residual (actual minus predicted)", scale=rscale),
            color=mcol, tooltip=tips)
        zero = alt.Chart(pd.DataFrame({"z": [0.0]})).mark_rule(color=PALETTE["ink"],
                                                               strokeDash=[4, 3]).encode(
            y=alt.Y("z:Q", scale=rscale))
        bottom_panels.append(alt.layer(zero, rv).properties(width=w, height=int(w * 0.6)))
    chart = alt.vconcat(alt.hconcat(*top_panels), alt.hconcat(*bottom_panels)).properties(
        title=_title("Candidates side by side: predictions and residuals", notes))
    return _finish(chart)


# ---------------------------------------------------------------------------
# coefficients
# ---------------------------------------------------------------------------
def coefficient_view(coef_table: pd.DataFrame, order: int, penalty: float) -> pd.DataFrame:
    """Coefficients of one cell with their standardised magnitude and the steep flag.

    Parameters
    ----------
    coef_table : `SweepResult.coefficient_table()` (order, penalty, term,
        std_mean, std_sd, raw_mean, raw_sd); a table already limited to one
        cell (without order/penalty columns) is accepted too.
    order, penalty : the cell.

    Returns
    -------
    DataFrame with term, std_mean, std_sd, raw_mean, raw_sd (when present),
    magnitude (= |std_mean|), ratio_to_median (magnitude over the median
    magnitude of the other terms) and steep (ratio above `STEEP_RATIO`, in
    cells with at least `STEEP_MIN_TERMS` terms besides the intercept),
    largest magnitude first. The intercept is left out (it has no
    standardised value).
    """
    t = coef_table
    if "order" in t.columns and "penalty" in t.columns:
        t = t[(t["order"].astype(int) == int(order))
              & np.isclose(t["penalty"].astype(float), float(penalty), rtol=1e-9, atol=0)]
    t = t[t["term"] != "intercept"].copy()
    t = t[np.isfinite(t["std_mean"].astype(float))]
    mag = t["std_mean"].astype(float).abs().to_numpy()
    ratio = np.full(mag.size, np.nan)
    for i in range(mag.size):
        others = np.delete(mag, i)
        med = float(np.median(others)) if others.size else float("nan")
        ratio[i] = mag[i] / med if med > 0 else (np.inf if mag[i] > 0 and others.size else np.nan)
    t["magnitude"] = mag
    t["ratio_to_median"] = ratio
    t["steep"] = (np.nan_to_num(ratio, nan=0.0) > STEEP_RATIO) & (mag.size >= STEEP_MIN_TERMS)
    cols = [c for c in ["term", "std_mean", "std_sd", "raw_mean", "raw_sd", "magnitude",
                        "ratio_to_median", "steep"] if c in t.columns]
    return t[cols].sort_values("magnitude", ascending=False, kind="stable").reset_index(drop=True)


def coefficient_chart(coef_table: pd.DataFrame, order: int, penalty: float,
                      *, target: str | None = None, units: str | None = None,
                      limit: int = 40) -> alt.TopLevelMixin:
    """Bar chart of standardised coefficient magnitudes of one cell, steep terms highlighted.

    A term is steep when its magnitude is more than `STEEP_RATIO` times the
    median magnitude of the cell's other terms (our rule of thumb for a model
    that leans hard on a few terms, often by cancelling large opposite-signed
    coefficients). Standardised: the change in the target for one standard
    deviation of the term. Whiskers show the spread (SD) of the coefficient
    across the validation splits when the table has it. At most ``limit``
    terms (largest first) are drawn; the subtitle says so when more exist.
    """
    v = coefficient_view(coef_table, order, penalty)
    notes = [f"Steep (highlighted): magnitude more than {STEEP_RATIO:g} times the median "
             f"magnitude of the other terms (cells with {STEEP_MIN_TERMS} or more terms)."]
    unit = units if units is not None else (column_units(target) if target else None)
    xtitle = ("|coefficient| per standard deviation of the term"
              + (f" ({unit})" if unit else ""))
    if v.empty:
        empty = alt.Chart(pd.DataFrame({"text": ["No terms besides the intercept."]})
                          ).mark_text(size=14).encode(text="text:N")
        return _finish(empty.properties(width=_WIDTH, height=60, title=_title(
            f"Coefficients of {cell_text(int(order), float(penalty))}", notes)))
    if len(v) > limit:
        notes.append(f"Showing the {limit} largest of {len(v)} terms.")
        v = v.head(limit)
    v = v.copy()
    v["kind"] = np.where(v["steep"], "steep", "other")
    v["sign"] = np.where(v["std_mean"] >= 0, "positive", "negative")
    has_sd = "std_sd" in v.columns and (v["std_sd"].astype(float).fillna(0) > 0).any()
    use_log = _log_scale_wanted(v["magnitude"].to_numpy(), ratio=300.0)
    positive = v["magnitude"][v["magnitude"] > 0]
    if use_log:
        floor = float(positive.min()) / 3.0
        top = float(v["magnitude"].max() + (v["std_sd"].fillna(0).max() if has_sd else 0)) * 1.5
        xscale = alt.Scale(type="log", domain=[floor, top], clamp=True)
        xaxis = alt.Axis(values=_log_ticks(floor, top), labelExpr=LOG_LABELS)
        v["base"] = floor
        notes.append("Magnitudes span a wide range: logarithmic axis, drawn as stems.")
    else:
        xscale = alt.Scale(zero=True)
        xaxis = alt.Axis(tickCount=6, labelOverlap=True)
        v["base"] = 0.0
    y = alt.Y("term:N", sort=list(v["term"]), title=None)
    tips = [alt.Tooltip("term:N"), alt.Tooltip("std_mean:Q", title="standardised", format=".4g"),
            alt.Tooltip("ratio_to_median:Q", title="times median of others", format=".3g"),
            alt.Tooltip("sign:N"), alt.Tooltip("kind:N", title="class")]
    if "raw_mean" in v.columns:
        tips.append(alt.Tooltip("raw_mean:Q", title="raw units", format=".4g"))
    colour = alt.Color("kind:N", title=None,
                       scale=alt.Scale(domain=["steep", "other"],
                                       range=[PALETTE["steep"], PALETTE["calm"]]),
                       legend=alt.Legend(orient="bottom"))
    x = alt.X("magnitude:Q", title=xtitle, scale=xscale, axis=xaxis)
    if use_log:
        stems = alt.Chart(v).mark_rule(strokeWidth=3).encode(
            x=alt.X("base:Q", title=xtitle, scale=xscale, axis=xaxis), x2="magnitude:Q", y=y,
            color=colour, tooltip=tips)
        heads = alt.Chart(v).mark_circle(size=70, opacity=1).encode(
            x=x, y=y, color=colour, tooltip=tips)
        layers = [stems, heads]
    else:
        layers = [alt.Chart(v).mark_bar(height={"band": 0.7}).encode(
            x=x, y=y, color=colour, tooltip=tips)]
    if has_sd:
        v["lo"] = (v["magnitude"] - v["std_sd"].fillna(0)).clip(lower=float(v["base"].iloc[0]))
        v["hi"] = v["magnitude"] + v["std_sd"].fillna(0)
        layers.append(alt.Chart(v).mark_rule(color=PALETTE["ink"], strokeWidth=1).encode(
            x=alt.X("lo:Q", scale=xscale, title=xtitle, axis=xaxis), x2="hi:Q", y=y,
            tooltip=[alt.Tooltip("term:N"),
                     alt.Tooltip("std_sd:Q", title="SD across splits", format=".3g")]))
        notes.append("Whiskers: spread (SD) across the validation splits.")
    chart = alt.layer(*layers).properties(
        width=_WIDTH - 60, height=max(60, 18 * len(v)),
        title=_title(f"Coefficients of {cell_text(int(order), float(penalty))}, "
                     "standardised", notes))
    return _finish(chart)


# ---------------------------------------------------------------------------
# export
# ---------------------------------------------------------------------------
def coefficient_path_chart(path_table: pd.DataFrame, setting: str, *, order: int,
                           entry: pd.DataFrame | None = None, target: str | None = None,
                           highlight: int = 8) -> alt.TopLevelMixin:
    """Standardised coefficient of every term against the penalty, for one family setting.

    ``path_table`` is `engine.paths.CoefficientPaths.table`; ``setting`` one of
    its ``setting`` values. The first ``highlight`` terms to enter the lasso
    path (``entry``; else the largest at the smallest penalty) are coloured,
    the rest drawn thin and grey. The recommended penalty, when it belongs to
    this setting, is a vertical rule.
    """
    t = path_table[path_table["setting"] == setting].copy()
    if t.empty:
        empty = alt.Chart(pd.DataFrame({"text": [f"No path for {setting}."]})
                          ).mark_text(size=14).encode(text="text:N")
        return _finish(empty.properties(width=_WIDTH, height=60))
    rec_rows = t[t["recommended"] & (t["std_coef"] != 0)]
    lead_kind = "entry"
    if not rec_rows.empty:
        # the terms the recommended cell keeps, largest first
        lead = list(rec_rows.assign(m=rec_rows["std_coef"].abs()).sort_values(
            "m", ascending=False)["term"][:highlight])
        lead_kind = "kept"
    elif entry is not None and len(entry):
        lead = [v for v in entry["term"] if v in set(t["term"])][:highlight]
    else:
        small = t[t["penalty"] == t["penalty"].min()]
        lead = list(small.assign(m=small["std_coef"].abs()).sort_values(
            "m", ascending=False)["term"][:highlight])
    t["shown"] = np.where(t["term"].isin(lead), t["term"], "other terms")
    t = t[["term", "shown", "penalty", "std_coef", "recommended"]]
    # grey terms: those that are ever non-zero, largest first, within a row budget
    peak = t.assign(m=t["std_coef"].abs()).groupby("term")["m"].max()
    others = [v for v in peak.sort_values(ascending=False).index
              if v not in lead and peak[v] > 0]
    per_term = max(1, int(t["penalty"].nunique()))
    others = others[:max(0, PATH_ROW_LIMIT // per_term - len(lead))]
    t = t[t["term"].isin(lead + others)]
    notes = [f"Order {int(order)}, fitted on all rows; coefficient per standard deviation "
             "of each term."]
    n_terms = int(peak.size)
    if n_terms > len(lead):
        what = (f"the {len(lead)} terms of the recommended penalty with the largest coefficients"
                if lead_kind == "kept" else
                f"the first {len(lead)} of {n_terms} terms to enter the lasso path")
        notes.append(f"Coloured: {what}; {len(others)} others in grey"
                     + ("." if len(others) + len(lead) == n_terms else
                        " (terms that stay at zero, or the smallest, not drawn)."))
    lo_p, hi_p = float(t["penalty"].min()), float(t["penalty"].max())
    x = alt.X("penalty:Q", title="penalty (alpha, log scale)",
              scale=alt.Scale(type="log", domain=[lo_p, hi_p], nice=False),
              axis=alt.Axis(format="~g", values=_log_ticks(lo_p, hi_p)))
    y = alt.Y("std_coef:Q", title="standardised coefficient"
              + (f" ({column_units(target)})" if target and column_units(target) else ""))
    domain = lead + (["other terms"] if n_terms > len(lead) else [])
    rng = (MODEL_COLOURS * 2)[:len(lead)] + (["#c9c6bd"] if n_terms > len(lead) else [])
    colour = alt.Color("shown:N", title=None, scale=alt.Scale(domain=domain, range=rng),
                       legend=alt.Legend(orient="right"))
    tips = [alt.Tooltip("term:N"), alt.Tooltip("penalty:Q", format=".3g"),
            alt.Tooltip("std_coef:Q", title="standardised", format=".4g")]
    grey = alt.Chart(t[t["shown"] == "other terms"]).mark_line(strokeWidth=0.8, opacity=0.6).encode(
        x=x, y=y, detail="term:N", color=colour, tooltip=tips)
    lines = alt.Chart(t[t["shown"] != "other terms"]).mark_line(strokeWidth=2).encode(
        x=x, y=y, detail="term:N", color=colour, tooltip=tips)
    layers = [grey, lines]
    rec = t[t["recommended"]]
    if not rec.empty:
        pen = float(rec["penalty"].iloc[0])
        layers.append(alt.Chart(pd.DataFrame({"penalty": [pen], "label": ["recommended"]}))
                      .mark_rule(color=PALETTE["recommended"], strokeDash=[5, 3], strokeWidth=2)
                      .encode(x=x, tooltip=[alt.Tooltip("penalty:Q", format=".3g"), "label:N"]))
        notes.append(f"Dashed line: the recommended penalty ({penalty_text(pen)}).")
    chart = alt.layer(*layers).properties(
        width=_WIDTH, height=_HEIGHT, title=_title(f"Coefficient paths: {setting}", notes))
    return _finish(chart)


def terms_kept_chart(validation: pd.DataFrame, *, order: int, family: str = "lasso",
                     l1_ratio: float = 1.0, recommended: Cell | None = None,
                     target: str = "y") -> alt.TopLevelMixin:
    """Validation error against the number of non-zero terms, along the lasso penalties.

    One point per penalty of ``order`` in ``family``: x is the mean number of
    non-zero terms across the splits (effective degrees of freedom minus the
    intercept), y the mean validation MSE with one standard error.
    """
    t = validation[(validation["order"] == order) & (validation["penalty"] > 0)]
    if "family" in t:
        t = t[(t["family"] == family) & np.isclose(t["l1_ratio"].astype(float), l1_ratio)]
    t = t.assign(terms_kept=t["effective_df"] - 1.0,
                 low=t["validation_mse"] - t["validation_mse_se"].fillna(0),
                 high=t["validation_mse"] + t["validation_mse_se"].fillna(0))
    tname = plain_name(target)
    word = "inputs" if int(order) == 1 else "terms"
    x = alt.X("terms_kept:Q", title=f"{word} kept (non-zero coefficients, mean over splits)")
    y = alt.Y("validation_mse:Q", title=f"validation MSE of {tname}", scale=alt.Scale(zero=False))
    tips = [alt.Tooltip("penalty:Q", format=".3g"), alt.Tooltip("terms_kept:Q", format=".1f"),
            alt.Tooltip("validation_mse:Q", format=".4g"),
            alt.Tooltip("validation_mse_se:Q", title="SE", format=".2g")]
    bars = alt.Chart(t).mark_rule(color=PALETTE["band"]).encode(x=x, y="low:Q", y2="high:Q")
    line = alt.Chart(t).mark_line(point=alt.OverlayMarkDef(color=PALETTE["validation"]),
                                  color=PALETTE["validation"]).encode(
        x=x, y=y, tooltip=tips)
    layers = [bars, line]
    notes = [f"Order {int(order)}, {family_text(family, l1_ratio)}; bars: ± one standard error."]
    if recommended is not None and recommended.family == family and int(recommended.order) == int(order):
        r = t[np.isclose(t["penalty"], recommended.penalty, rtol=1e-12, atol=0)]
        if not r.empty:
            layers.append(alt.Chart(r).mark_point(size=160, shape="diamond", filled=True,
                                                  color=PALETTE["recommended"]).encode(
                x=x, y=y, tooltip=tips))
            notes.append(f"Diamond: the recommended cell, {float(r['terms_kept'].iloc[0]):.1f} "
                         f"{word} kept (mean over splits).")
    chart = alt.layer(*layers).properties(width=_WIDTH, height=_HEIGHT,
                                          title=_title(f"How many {word} the data carry", notes))
    return _finish(chart)


def chart_to_png(chart: alt.TopLevelMixin, scale: float = 2) -> bytes:
    """Render a chart to PNG bytes (vl-convert; no browser needed)."""
    import vl_convert as vlc

    return vlc.vegalite_to_png(chart.to_json(), scale=scale)


def warm_renderer() -> None:
    """Start the chart renderer once (its first call pays a start-up cost)."""
    from .render import warm

    warm()


#: Font sizes of charts printed at about 90 mm wide (the meeting pack's summary):
#: about 7 pt on paper.
_PRINT_FONTS = {"axis": (15, 15), "legend": (15, 14), "title": (18, 12), "header": 15}


def for_print(chart: alt.TopLevelMixin, height: int = 200,
              min_width: int = 460) -> alt.TopLevelMixin:
    """A copy of a chart for a printed page: larger type, plots at most ``height`` px tall
    and at least ``min_width`` px wide (so every chart prints at one type size)."""
    c = chart.copy(deep=True)
    ax, lg, ti, hd = (_PRINT_FONTS[k] for k in ("axis", "legend", "title", "header"))
    cfg = _CONFIG.copy(deep=True)
    cfg.axis.labelFontSize, cfg.axis.titleFontSize = ax
    cfg.legend.labelFontSize, cfg.legend.titleFontSize = lg
    cfg.legend.symbolSize = 120
    cfg.title.fontSize, cfg.title.subtitleFontSize = ti
    cfg.header.labelFontSize = hd

    def shorten(part: Any, limit: float) -> None:
        h = part._kwds.get("height", alt.Undefined) if hasattr(part, "_kwds") else alt.Undefined
        if isinstance(h, (int, float)) and h > limit:
            part["height"] = int(limit)

    if isinstance(c, (alt.Chart, alt.LayerChart)):  # narrow charts would be printed larger
        w0 = c._kwds.get("width", alt.Undefined)
        if isinstance(w0, (int, float)) and w0 < min_width:
            c["width"] = min_width

    def shorten_all(part: Any, limit: float) -> None:
        shorten(part, limit)
        for key in ("layer", "hconcat", "vconcat", "concat"):
            subs = part._kwds.get(key, alt.Undefined) if hasattr(part, "_kwds") else alt.Undefined
            for sub in (subs if isinstance(subs, list) else []):
                # rows stacked in a column share the height
                shorten_all(sub, limit * 0.6 if key == "vconcat" else limit)

    if isinstance(c, alt.FacetChart):
        shorten_all(c.spec, height)
        inner = c.spec
    else:
        shorten_all(c, height)
        inner = c
    w = getattr(inner, "width", alt.Undefined)
    width = float(w) if isinstance(w, (int, float)) else float(_WIDTH)
    if isinstance(c, alt.FacetChart):
        width = max(width * 2, _WIDTH)
    title = getattr(c, "title", alt.Undefined)
    if isinstance(title, alt.TitleParams) and title.subtitle is not alt.Undefined:
        lines = [title.subtitle] if isinstance(title.subtitle, str) else list(title.subtitle)
        chars = max(30, int((width + 80) / (0.52 * ti[1])))  # about 0.52 em per character
        title.subtitle = [part for line in lines for part in _wrap(str(line), chars)]
    _wrap_axis_titles(c, max(20, int(height / (0.55 * ax[1]))))
    cfg.axis.labelOverlap = "greedy"
    cfg.legend.labelLimit = 300
    cfg.legend.columns = 2
    cfg.header.labelPadding = 2
    cfg.facet = alt.CompositionConfig(spacing=14)
    c.config = cfg
    return c


def _wrap_axis_titles(part: Any, chars: int) -> None:
    """Break long y-axis titles into lines that fit along a short plot."""
    enc = getattr(part, "encoding", alt.Undefined)
    if enc is not alt.Undefined and enc is not None:
        for name in ("y", "y2"):
            ch = enc._kwds.get(name, alt.Undefined)
            title = ch._kwds.get("title", alt.Undefined) if hasattr(ch, "_kwds") else alt.Undefined
            if isinstance(title, str) and len(title) > chars:
                ch["title"] = _wrap(title, chars)
    for key in ("layer", "hconcat", "vconcat", "concat"):
        subs = part._kwds.get(key, alt.Undefined) if hasattr(part, "_kwds") else alt.Undefined
        for sub in (subs if isinstance(subs, list) else []):
            _wrap_axis_titles(sub, chars)
    inner = getattr(part, "spec", alt.Undefined)
    if inner is not alt.Undefined and inner is not None and not isinstance(inner, dict):
        _wrap_axis_titles(inner, chars)


def _wrap(text: str, width: int) -> list[str]:
    """Break a line of text at spaces into lines of at most ``width`` characters."""
    import textwrap

    return textwrap.wrap(text, width) or [""]


def chart_to_svg(chart: alt.TopLevelMixin) -> str:
    """Render a chart to an SVG document (vl-convert; no browser needed)."""
    import vl_convert as vlc

    return vlc.vegalite_to_svg(chart.to_json())


def render_chart(chart: alt.TopLevelMixin, scale: float = 2) -> tuple[bytes, str]:
    """Render a chart once to SVG and turn that SVG into PNG.

    The chart is laid out once (one Vega-Lite specification, one Vega run);
    the PNG is rasterised from the same SVG, so both files show the same
    drawing.

    Returns
    -------
    ``(png_bytes, svg_text)``
    """
    from .render import render_spec

    return render_spec(chart.to_dict(), scale)


def render_charts(charts: dict[str, alt.TopLevelMixin], scale: float = 2):
    """Start rendering charts in a background thread (`engine.render.ChartRenderer`).

    Returns
    -------
    A future whose result is ``{stem: (png_bytes, svg_text)}``. The caller can
    do other work meanwhile and collect the result when needed.
    """
    from .render import ChartRenderer

    renderer = ChartRenderer()
    future = renderer.submit(charts, scale)
    renderer.close()    # the thread finishes this batch, then ends
    return future
