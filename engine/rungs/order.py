"""Polynomial order as a rung: the terms of order q are the leading block of the design."""
from __future__ import annotations

import numpy as np

from ..design import PolynomialBasis
from . import TermSet


def term_sets(basis: PolynomialBasis, orders: list[int]) -> list[TermSet]:
    """One `TermSet` per order: the first ``basis.n_terms_at(q)`` terms (ordered by degree)."""
    return [TermSet(key={"order": int(q)}, index=np.arange(basis.n_terms_at(q)),
                    names=basis.names(q)) for q in orders]
