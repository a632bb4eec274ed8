"""Page section: how sure the recommendation is, and what more rows would buy.

Shows `engine.intervals.how_sure` (error interval, prediction intervals and
their coverage on unseen rows) and `engine.extrapolation.more_rows` (the
learning curve carried to 2x and 5x the rows) for the recommended cell.
"""
from __future__ import annotations

from typing import Any

import numpy as np
import pandas as pd
import streamlit as st

from engine import pack
from engine.intervals import band_table
from engine.labels import human_headers


def sureness(data, analysis) -> tuple[Any, Any, list[str]]:
    """Intervals and outlook of the recommended cell (`engine.pack.sureness`); a part
    that cannot be computed is None, with the reason in the notes."""
    return pack.sureness(analysis, data, analysis.spec)


def band_for(result, data, analysis, models: dict) -> pd.DataFrame | None:
    """The recommended model's band for the side-by-side chart, when that model is drawn."""
    sure = result[0] if result else None
    if sure is None or (sure.order, sure.penalty) not in {(int(q), float(a)) for q, a in models}:
        return None
    return band_table(sure, analysis.working(data, analysis.spec)[0])


def _table(frame: pd.DataFrame) -> pd.DataFrame:
    try:
        return human_headers(frame)
    except Exception:  # noqa: BLE001 - headers are cosmetic
        return frame


def how_sure_panel(result, download=None) -> None:
    """The 'How sure' box: error interval, interval coverage, and the larger-table outlook.

    ``result`` is what `sureness` returned; ``download(frame, stem)`` offers a
    table as CSV (the page's own helper).
    """
    sure, outlook, notes = result
    with st.container(border=True):
        st.markdown("#### How sure, and what would more rows buy?")
        m1, m2, m3 = st.columns(3)
        if sure is not None:
            e, p = sure.error, sure.prediction
            lvl = f"{100 * e.level:.0f}%"
            m1.metric(f"Error on new rows (MSE, {lvl} interval)", f"{e.low:.4g} – {e.high:.4g}",
                      help="Nested cross-validation (Bates, Hastie and Tibshirani 2023): where "
                           "the mean squared error of this model on new rows like these lies. "
                           "For a one-split scheme: the error on the validation rows.")
            m1.caption(f"centre {e.estimate:.4g} · {e.method}")
            m2.metric(f"{lvl} prediction intervals held", f"{p.cvplus_coverage:.0%}",
                      help="Share of rows the intervals never saw that fell inside the CV+ "
                           "interval (Barber et al. 2021); the analytic interval's share is "
                           "below. Near the nominal level means the intervals can be trusted "
                           "on rows like these.")
            m2.caption((f"analytic {p.analytic_coverage:.0%} · " if p.analytic_coverage is not None
                        else "") + f"{p.checked_rows:,} {p.checked_on}")
        else:
            m1.metric("Error on new rows", "not computed")
        if outlook is not None and not outlook.declined:
            r = outlook.recommended
            m3.metric("Expected error at 5x the rows (MSE)", f"{r['error_at_5x']:.4g}",
                      delta=f"{r['error_at_5x'] - r['error_now']:+.3g} against now",
                      delta_color="inverse",
                      help="The learning curve fitted as a·n^(-b) + c and carried forward; "
                           "band from the fits to each split's own curve.")
            m3.caption(f"band {r['low_at_5x']:.4g} – {r['high_at_5x']:.4g}")
        else:
            m3.metric("Expected error at 5x the rows", "no forecast")
        if sure is not None:
            st.markdown(" ".join(sure.sentences()))
        if outlook is not None:
            st.markdown("**More rows or a simpler model?** " + " ".join(outlook.verdict))
        for n in notes:
            st.caption(n)
        with st.expander("How these were computed"):
            if sure is not None:
                st.caption(" ".join(sure.error.notes + sure.prediction.notes))
                st.dataframe(_table(sure.prediction.per_split), hide_index=True)
                if download:
                    download(sure.prediction.per_split, "interval_coverage")
            if outlook is not None:
                st.caption(" ".join(outlook.notes))
                shown = outlook.table.drop(columns=["recommended"], errors="ignore")
                st.dataframe(_table(shown), hide_index=True)
                if download:
                    download(outlook.table, "more_rows")
