"""Penalty families: one small solver module per family, all on the same statistics.

Every family exposes ``fit(summary, raw, penalties, ...) -> FamilyFit``
(see `engine.families.base`). `fit_family` dispatches by name.
"""
from __future__ import annotations

import numpy as np

from . import lasso, ridge
from .base import FamilyFit, RawMap, TermSummary, sse

FAMILIES: tuple[str, ...] = ("ridge", "lasso", "elasticnet")
DEFAULT_L1_RATIOS: tuple[float, ...] = (0.1, 0.5, 0.9)


def fit_family(family: str, summary: TermSummary, raw: RawMap, penalties: np.ndarray,
               l1_ratio: float = 0.0, keep_leverage: bool = False) -> FamilyFit:
    """Fit one term set for every penalty of one family (and mixing parameter)."""
    if family == "ridge":
        return ridge.fit(summary, raw, penalties, keep_leverage=keep_leverage)
    if family == "lasso":
        return lasso.fit(summary, raw, penalties, l1_ratio=1.0)
    if family == "elasticnet":
        return lasso.fit(summary, raw, penalties, l1_ratio=l1_ratio)
    raise ValueError(f"unknown penalty family {family!r}")


__all__ = ["FAMILIES", "FamilyFit", "RawMap", "TermSummary", "fit_family", "sse"]
