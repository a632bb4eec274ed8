"""Short texts for cells and penalties, shared by charts, tables and reasons."""
from __future__ import annotations


def penalty_text(penalty: float) -> str:
    """Short text of a penalty: ``'none'`` for 0, else 3 significant digits."""
    p = float(penalty)
    if p == 0:
        return "none"
    if 1e-3 <= abs(p) < 1e4:
        return f"{p:.3g}"
    return f"{p:.1e}".replace("e-0", "e-").replace("e+0", "e")


def cell_text(order: int, penalty: float) -> str:
    """Label of a cell, e.g. ``'order 2, no penalty'``, ``'order 3, penalty 0.1'``."""
    p = float(penalty)
    return f"order {int(order)}, " + ("no penalty" if p == 0 else f"penalty {penalty_text(p)}")


def rung_text(lags: int | None = None, target_lags: int | None = None,
              inputs_used: int | None = None) -> str:
    """Suffix naming a cell's other axes, e.g. ``', input lags 3, target lags 2'`` ('' for none)."""
    parts = []
    if lags is not None:
        parts.append(f"input lags {int(lags)}")
    if target_lags is not None:
        parts.append(f"target lags {int(target_lags)}")
    if inputs_used is not None:
        parts.append(f"first {int(inputs_used)} input" + ("s" if int(inputs_used) != 1 else ""))
    return "".join(", " + p for p in parts)
