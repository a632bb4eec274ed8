"""Rung types: each builds the term sets (index sets into the full design) of a ladder.

A sweep builds ONE design at the highest complexity (all terms), summarises
it in one pass, and every cell uses an index set of its columns. A rung type
is a small module that turns the request into a list of `TermSet`; today:
`engine.rungs.order` (polynomial order = a leading block of terms).
"""
from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np


@dataclass
class TermSet:
    """The terms of one rung of the ladder.

    Attributes
    ----------
    key : the rung's coordinates as table columns, e.g. ``{"order": 2}``.
    index : (p,) term indices into the full design, or (S, p) when the terms
        are chosen inside each split (same count in every split). Must be
        closed downwards (see `engine.families.base.RawMap`).
    names : term names (for a per-split index, the names of split 0's terms
        are not meaningful; rung types that choose per split give generic names).
    """

    key: dict
    index: np.ndarray
    names: list[str] = field(default_factory=list)

    @property
    def n_terms(self) -> int:
        return int(np.asarray(self.index).shape[-1])


__all__ = ["TermSet"]
