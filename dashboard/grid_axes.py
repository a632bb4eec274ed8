"""Page sections for grids with more axes than order and penalty.

Sidebar controls for lag depths and nested input sets, and a heat map whose
two axes the user picks while the other axes are held at chosen values.
"""
from __future__ import annotations

import streamlit as st

from engine.charts import grid_heatmap_chart
from engine.labels import GRID_AXES, option_label, penalty_text
from engine.ladder import grid_axes, grid_slice
from engine.lagged import TARGET_LAG_REASON, TIME_SCHEMES, LagSpec

NESTED_CHOICES = {"none": "No: every input in every cell",
                  "lasso": "Yes, ranked by the lasso path inside each split",
                  "given": "Yes, in the order the inputs are listed"}


def axes_controls(scheme: str, gap: int, n_inputs: int) -> tuple[LagSpec | None, str | None]:
    """Sidebar controls: lag depths to compare, and nested input sets.

    Returns the `LagSpec` (None when no lags are asked for) and the input
    ranking (None, ``"lasso"`` or ``"given"``).
    """
    ss = st.session_state
    for key in ("lags_max", "target_lags_max"):
        ss.setdefault(key, 0)
    if ss.get("nested_inputs") not in NESTED_CHOICES:
        ss["nested_inputs"] = "none"
    with st.sidebar.expander("Past values and input sets", expanded=bool(
            ss["lags_max"] or ss["target_lags_max"] or ss["nested_inputs"] != "none")):
        lx = st.number_input(option_label("lags"), min_value=0, max_value=60, step=1,
                             key="lags_max",
                             help="Compares lag depths 0, 1, ... up to this: depth L uses each "
                                  "input's values 0..L rows back (rows in time order).")
        ly = st.number_input(option_label("target_lags"), min_value=0, max_value=60, step=1,
                             key="target_lags_max",
                             help="Compares 0, 1, ... past values of the target as terms.")
        if ly and (scheme not in TIME_SCHEMES or (scheme == "blocked" and gap < ly)):
            st.caption("Past target values need blocked folds with a gap of at least "
                       f"{int(ly)} rows, or a later-period holdout. " + TARGET_LAG_REASON)
        elif ly:
            st.caption(TARGET_LAG_REASON)
        if lx or ly:
            st.caption("Every depth is judged on the same rows: the first rows of the table "
                       "(of each group) that lack the deepest past values are left out.")
        nested = "none"
        if n_inputs > 1:
            nested = st.selectbox(option_label("nested_inputs"), list(NESTED_CHOICES),
                                  format_func=NESTED_CHOICES.get, key="nested_inputs",
                                  help="Answers “how many inputs”: the sweep compares the "
                                       "first 1, 2, ... inputs. A ranking is made on each "
                                       "split's training rows only, never on all rows.")
    lags = None
    if lx or ly:
        lags = LagSpec(depths=tuple(range(int(lx) + 1)), target_depths=tuple(range(int(ly) + 1)))
    return lags, (None if nested == "none" else nested)


def _value_text(axis: str, v) -> str:
    return penalty_text(float(v)) if axis == "penalty" else str(v)


def grid_heatmap(analysis, target: str):
    """Heat map over two chosen axes, the others held fixed (None for an order x penalty grid)."""
    table = analysis.validation
    axes = grid_axes(table)
    if not (set(axes) - {"order", "penalty"}):
        return None
    rec = analysis.recommendation.recommended
    c1, c2 = st.columns(2)
    with c1:
        x = st.selectbox("Across", axes, index=axes.index("lags") if "lags" in axes else 0,
                         format_func=GRID_AXES.get, key="heat_x")
    rest = [a for a in axes if a != x]
    default_y = next((a for a in ("target_lags", "inputs_used", "order") if a in rest), rest[0])
    with c2:
        y = st.selectbox("Down", rest, index=rest.index(default_y), format_func=GRID_AXES.get,
                         key="heat_y")
    held = [a for a in axes if a not in (x, y)]
    fixed = {}
    if held:
        cols = st.columns(len(held))
        for col, a in zip(cols, held):
            values = sorted(table[a].dropna().unique().tolist())
            want = getattr(rec, a, None)
            idx = values.index(want) if want in values else 0
            with col:
                fixed[a] = st.selectbox(f"Hold {GRID_AXES.get(a, a).split(' (')[0]} at",
                                        values, index=idx,
                                        format_func=lambda v, a=a: _value_text(a, v),
                                        key=f"heat_hold_{a}")
    cells = grid_slice(table, x, y, fixed)
    held_text = ", ".join(f"{GRID_AXES.get(a, a).split(' (')[0]} {_value_text(a, v)}"
                          for a, v in fixed.items())
    return grid_heatmap_chart(cells, x, y, analysis.recommendation.best, rec, target, held_text)


def targets_control(candidates: list[str]) -> tuple[str, ...]:
    """Sidebar multiselect of further targets (columns predicted from the same inputs)."""
    ss = st.session_state
    ss["extra_targets"] = [c for c in ss.get("extra_targets", []) if c in candidates]
    more = st.sidebar.multiselect(option_label("extra_targets") + " (optional)", candidates,
                                  key="extra_targets",
                                  help="Each gets its own grid and recommendation; one pass "
                                       "over the rows serves them all.")
    return tuple(more)


def target_choice(analyses: list):
    """Side-by-side table of every target's recommendation; returns the analysis to show."""
    if len(analyses) == 1:
        return analyses[0]
    from engine.labels import human_headers
    from engine.pack import targets_table

    table = targets_table(analyses).drop(columns=["section"], errors="ignore")
    st.markdown("##### Targets side by side")
    st.dataframe(human_headers(table), hide_index=True, width="stretch")
    names = [a.target for a in analyses]
    if st.session_state.get("target_shown") not in names:
        st.session_state["target_shown"] = names[0]
    shown = st.radio("Target shown below", names, key="target_shown", horizontal=True)
    return analyses[names.index(shown)]
