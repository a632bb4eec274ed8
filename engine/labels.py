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
