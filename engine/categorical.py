"""Text inputs with few levels as indicator (one-hot) terms.

A text column with at most `MAX_LEVELS` distinct values becomes one 0/1
column per level except the reference level (the first in sorted order, as
statsmodels' ``C(...)`` treatment coding does), named ``column[level]``. The
polynomial design gives such 0/1 columns only a linear term (``x^k = x`` for
0/1 values) and never multiplies two levels of the same column (their
product is always 0); products with other inputs appear only when
interactions are asked for.
"""
from __future__ import annotations

import re
from dataclasses import dataclass

import numpy as np
import pandas as pd

#: Most distinct values a text column may have to be used as an input.
MAX_LEVELS = 12

_LEVEL_NAME = re.compile(r"^(?P<base>.+)\[(?P<level>[^\[\]]*)\]$")


@dataclass(frozen=True)
class Factor:
    """A text input and its levels: ``reference`` is absorbed in the intercept."""

    column: str
    reference: str
    levels: tuple[str, ...]  # the levels that get a term, in order

    @property
    def names(self) -> list[str]:
        return [f"{self.column}[{lv}]" for lv in self.levels]

    def describe(self) -> str:
        return (f"Text column '{self.column}' enters as {len(self.levels)} indicator "
                f"term{'s' if len(self.levels) != 1 else ''} ({', '.join(self.levels)}); "
                f"reference level '{self.reference}' is absorbed in the intercept.")


def is_text(series: pd.Series) -> bool:
    """True for a column of text values (not numbers, not true/false)."""
    return (pd.api.types.is_object_dtype(series.dtype) or pd.api.types.is_string_dtype(series.dtype)
            or isinstance(series.dtype, pd.CategoricalDtype)) and not \
        pd.api.types.is_bool_dtype(series.dtype)


def _text_values(series: pd.Series) -> pd.Series:
    """Cells as stripped text; empty cells as missing."""
    s = series.astype("string").str.strip()
    return s.mask(s == "")


def levels_of(series: pd.Series) -> list[str]:
    """Distinct non-missing text values, sorted."""
    return sorted(set(_text_values(series).dropna().tolist()))


def usable_factor(series: pd.Series) -> bool:
    """A text column with 2 to `MAX_LEVELS` distinct values, seen on average at least
    twice each (a label that names every row, like an id, is not a usable input)."""
    if not is_text(series):
        return False
    levels = levels_of(series)
    filled = int(_text_values(series).notna().sum())
    return 2 <= len(levels) <= MAX_LEVELS and filled >= 2 * len(levels)


def make_factor(column: str, series: pd.Series) -> Factor:
    levels = levels_of(series)
    return Factor(str(column), levels[0], tuple(levels[1:]))


def indicator_columns(factor: Factor, series: pd.Series) -> dict[str, np.ndarray]:
    """0/1 float columns of the factor's levels; NaN where the cell is empty."""
    text = _text_values(series)
    missing = text.isna().to_numpy()
    out = {}
    for lv, name in zip(factor.levels, factor.names):
        v = (text == lv).fillna(False).to_numpy(dtype=float)
        v[missing] = np.nan
        out[name] = v
    return out


def base_column(name: str, columns) -> str | None:
    """``'origin'`` for an indicator name ``'origin[2]'`` whose base is a column, else None."""
    m = _LEVEL_NAME.match(str(name))
    if m and m.group("base") in list(columns):
        return m.group("base")
    return None
