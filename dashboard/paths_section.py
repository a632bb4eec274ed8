"""Page section: coefficient paths, the lasso entry order and the inputs that survive."""
from __future__ import annotations

import numpy as np
import pandas as pd
import streamlit as st

from engine import charts as C
from engine.labels import CHARTS, family_text, human_headers
from engine.paths import coefficient_paths


@st.cache_data(show_spinner=False, max_entries=8)
def _paths(key: str, order: int, _data, _spec, _rec):
    return coefficient_paths(_data, _spec, order, _rec)


def render(key: str, data, full, analysis, target: str, chart_block, table_download,
           md) -> None:
    """Draw the section for the analysis shown (``analysis``: the recommended rung's view;
    ``full``: the whole grid, whose validation table holds every family)."""
    spec = analysis.spec
    rec = analysis.recommendation.recommended
    if all(f == "ridge" for f in spec.families):
        st.caption("Ridge shrinks every coefficient but keeps them all. To see which inputs "
                   "the data select and how many they carry, add lasso or elastic net under "
                   "Models → Penalty families.")
        if not st.toggle("Trace the ridge coefficient paths anyway", key="path_ridge"):
            return
    orders = [o for o in spec.order_list() if o > 0]
    if not orders:
        st.info("Only order 0 was swept: there are no terms to trace.")
        return
    c1, c2 = st.columns([1, 3])
    with c1:
        order = st.selectbox("Order", orders, index=orders.index(rec.order)
                             if rec.order in orders else len(orders) - 1, key="path_order")
    with st.spinner("Tracing the coefficients on all rows…"):
        paths = _paths(key, int(order), data, spec, rec)
    settings = list(dict.fromkeys(paths.table["setting"]))
    lasso_swept = any(f != "ridge" for f in spec.families)
    default = family_text(rec.family, rec.l1_ratio)
    with c2:
        setting = st.radio("Penalty family", settings, horizontal=True, key="path_setting",
                           index=settings.index(default) if default in settings else 0)
    chart = C.coefficient_path_chart(paths.table, setting, order=int(order),
                                     entry=paths.entry, target=target)
    chart_block(chart, "coefficient_paths", [(paths.table, "coefficient_paths")])
    st.caption(md(" ".join(paths.notes)))
    if lasso_swept:
        fam = "lasso" if "lasso" in spec.families else rec.family
        ratio = 1.0 if fam == "lasso" else rec.l1_ratio
        kept = C.terms_kept_chart(full.validation if "family" in full.validation else
                                  analysis.validation, order=int(order), family=fam,
                                  l1_ratio=ratio, recommended=rec, target=target)
        chart_block(kept, "terms_kept")
    left, right = st.columns(2)
    with left:
        st.markdown("**Order of entry along the lasso path** (all rows)")
        st.dataframe(human_headers(paths.entry.head(30)), hide_index=True,
                     column_config={"entry_penalty": st.column_config.NumberColumn(format="%.3g")})
        table_download(paths.entry, "lasso_entry_order")
    with right:
        if paths.survivors.empty:
            st.caption(f"Inputs kept: shown for the recommended order ({rec.order}).")
        else:
            kept_n = int(paths.survivors["kept"].sum())
            st.markdown(f"**Inputs kept by the recommended cell**: {kept_n} of "
                        f"{len(paths.survivors)}")
            st.dataframe(human_headers(paths.survivors), hide_index=True)
            table_download(paths.survivors, "inputs_kept")
