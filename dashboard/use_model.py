"""The page's "Use this model" section: load the saved pipeline, the formula, the valid range.

The same three lines of Python, formula and input range are written into the
meeting pack (`engine.pack.usage`), so the page and the pack say the same.
"""
from __future__ import annotations

import tempfile
from pathlib import Path

import streamlit as st

from engine.labels import number_text
from engine.markup import escape_text
from engine.pack import save_pipeline, usage


def model_file_bytes(model) -> bytes:
    """``model.skops`` of a fitted model, as bytes."""
    with tempfile.TemporaryDirectory() as tmp:
        path = save_pipeline(model, Path(tmp) / "model.skops")
        return path.read_bytes()


def use_model_section(model) -> None:
    """Three lines of Python, the formula and the input range of the recommended model."""
    u = usage(model)
    st.markdown("**Use this model** — in Python, with pandas, scikit-learn and skops, "
                "after downloading the model file:")
    st.code("\n".join(u["python"]), language="python")
    st.caption(escape_text(u["trust_note"]))
    st.markdown("Formula (7 significant digits; full precision in the pack's "
                "model_coefficients.csv): " + escape_text(u["formula"]))
    ranges = "; ".join(f"{name} {number_text(lo)} to {number_text(hi)}"
                       for name, (lo, hi) in u["input_range"].items())
    st.markdown("Valid for inputs inside the range it was fitted on: " + escape_text(ranges)
                + ". Predictions outside it were not checked.")
    if u.get("text_note"):
        st.caption(escape_text(u["text_note"]))
    st.download_button("Model file (model.skops)", data=lambda: model_file_bytes(model),
                       file_name="model.skops", mime="application/octet-stream",
                       key="model_download", icon=":material/download:", on_click="ignore")
