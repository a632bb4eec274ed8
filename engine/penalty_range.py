"""A ridge penalty range that fits the data, and whether a pick sits on its edge.

The penalty is scikit-learn ``Ridge`` ``alpha`` on training-standardised terms,
so its effect depends on the eigenvalues ``lam`` of the standardised
cross-product matrix (which grow with the number of rows): effective degrees
of freedom are ``1 + sum lam / (lam + alpha)``. The range derived here spans

- at the low end, the penalty at which the highest order gives up only half a
  degree of freedom (below it every order is as good as unpenalised, and the
  grid holds penalty 0 as well); by interlacing of eigenvalues, lower orders
  give up even less there;
- at the high end, ``10 * trace`` of the highest order's standardised
  cross-product matrix (``10 * p * n``), where every order keeps at most 1.1
  effective degrees of freedom (about one: the intercept).
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

from .families import RawMap, TermSummary
from .families.base import standardise

#: Grid points per decade of penalty (log-spaced) and the most points a derived
#: range may hold (chosen here: fine enough that neighbouring cells differ by
#: about a quarter of a degree of freedom at the steepest; at most as many rows as the
#: earlier fixed grid, so the heat map keeps its size).
PER_DECADE = 3
MAX_POINTS = 15
#: Decades added on one side when a pick lies on an edge, and how many times.
EXTEND_DECADES = 2.0
MAX_EXTENSIONS = 3
#: Degrees of freedom a cell on the upper edge must still carry above the
#: intercept's one, and must still give up below its full count on the lower
#: edge, before the edge counts (otherwise a further penalty changes nothing
#: that matters). Chosen here.
EDGE_DF = 0.5


def _deficit(lam: np.ndarray, alpha: float) -> float:
    return float(np.sum(alpha / (lam + alpha)))


def penalty_bounds(n_t: np.ndarray, m_t: np.ndarray, M_t: np.ndarray, A: np.ndarray,
                   a0: np.ndarray, index: np.ndarray) -> tuple[float, float] | None:
    """Low and high penalty of the data-derived range for the term set ``index``.

    ``n_t`` (S,), ``m_t`` (S, P+1), ``M_t`` (S, P+1, P+1) are training summaries
    of the full design (target last); the first set is used. Returns ``None``
    when the term set is empty or has no positive eigenvalue.
    """
    index = np.asarray(index, dtype=np.int64)
    if index.size == 0:
        return None
    summary = TermSummary.select(n_t[:1], m_t[:1], M_t[:1], index)
    raw = RawMap.select(A, a0, index, 1)
    G = standardise(summary, raw).G[0]
    lam = np.linalg.eigvalsh(G)
    tol = max(float(lam[-1]), 0.0) * max(index.size, 10) * np.finfo(float).eps * 10
    lam = lam[lam > tol]
    if lam.size == 0:
        return None
    high = 10.0 * float(np.sum(lam))
    # smallest alpha at which half a degree of freedom is given up (monotone in alpha)
    lo, hi = float(lam[0]) * 1e-6, float(lam[0]) * 10.0
    lo = max(lo, high * 1e-15)
    for _ in range(60):
        mid = np.sqrt(lo * hi)
        if _deficit(lam, mid) < 0.5:
            lo = mid
        else:
            hi = mid
    low = max(float(np.sqrt(lo * hi)), high * 1e-14)
    return low, high


def log_grid(low: float, high: float, per_decade: int = PER_DECADE,
             max_points: int = MAX_POINTS) -> np.ndarray:
    """Log-spaced penalties from ``low`` to ``high``, ``per_decade`` a decade, at most ``max_points``."""
    decades = max(np.log10(high / low), 0.0)
    count = int(np.clip(np.ceil(decades * per_decade) + 1, 2, max_points))
    return np.logspace(np.log10(low), np.log10(high), count)


def data_penalties(n_t: np.ndarray, m_t: np.ndarray, M_t: np.ndarray, A: np.ndarray,
                   a0: np.ndarray, term_sets) -> tuple[float, ...]:
    """Penalty 0 plus a log-spaced range fitted to the data (see the module docstring).

    The bounds come from the largest term set (the highest order), whose
    eigenvalues bound those of every smaller one.
    """
    sets = [np.asarray(ts.index) for ts in term_sets if np.asarray(ts.index).ndim == 1]
    if not sets:
        return (0.0,)
    largest = max(sets, key=lambda ix: ix.size)
    b = penalty_bounds(n_t, m_t, M_t, A, a0, largest)
    if b is None:
        return (0.0,)
    return (0.0,) + tuple(float(v) for v in log_grid(*b))


@dataclass(frozen=True)
class Edge:
    """A chosen cell on an edge of the penalty range.

    ``side`` is ``"upper"`` (the largest penalty swept) or ``"lower"`` (the
    smallest positive one); ``role`` ``"best"`` or ``"recommended"``.
    """

    side: str
    role: str
    penalty: float
    effective_df: float
    parameters: int


def penalty_edges(penalties, cells: dict) -> list[Edge]:
    """Which of ``cells`` (role -> `engine.recommend.Cell`) lie on a meaningful edge.

    A cell on the upper edge counts when it still carries more than
    `EDGE_DF` degrees of freedom above the intercept (a stronger penalty could
    simplify it further); on the lower edge when it gives up more than
    `EDGE_DF` degrees of freedom (a weaker penalty would fit more). Cells with
    no terms beyond the intercept never count.
    """
    pos = np.asarray([p for p in penalties if p > 0], float)
    if pos.size == 0:
        return []
    out = []
    for role, c in cells.items():
        if c.parameters <= 1 or c.penalty <= 0:
            continue
        if np.isclose(c.penalty, pos.max(), rtol=1e-9) and c.effective_df > 1.0 + EDGE_DF:
            out.append(Edge("upper", role, float(c.penalty), float(c.effective_df),
                            int(c.parameters)))
        elif (np.isclose(c.penalty, pos.min(), rtol=1e-9)
              and c.effective_df < c.parameters - EDGE_DF):
            out.append(Edge("lower", role, float(c.penalty), float(c.effective_df),
                            int(c.parameters)))
    return out


def extend(penalties, sides: set[str], decades: float = EXTEND_DECADES,
           per_decade: int = PER_DECADE) -> tuple[float, ...]:
    """``penalties`` with ``decades`` more decades on each of ``sides`` (same spacing)."""
    pen = sorted(float(p) for p in penalties)
    pos = [p for p in pen if p > 0]
    extra: list[float] = []
    k = max(int(round(decades * per_decade)), 1)
    step = 10 ** (1.0 / per_decade)
    if len(pos) >= 2:
        step = (pos[-1] / pos[0]) ** (1.0 / (len(pos) - 1))
    if "upper" in sides and pos:
        extra += [pos[-1] * step ** (i + 1) for i in range(k)]
    if "lower" in sides and pos:
        extra += [pos[0] / step ** (i + 1) for i in range(k)]
    return tuple(sorted(set(pen + extra)))


def edge_sentence(edge: Edge, low: float, high: float) -> str:
    """Plain words for a pick on an edge, naming the range."""
    from .labels import penalty_text
    where = "largest" if edge.side == "upper" else "smallest positive"
    return (f"The {edge.role} cell has penalty {penalty_text(edge.penalty)}, the {where} penalty "
            f"of the range swept ({penalty_text(low)} to {penalty_text(high)}), with "
            f"{edge.effective_df:.2f} effective degrees of freedom of {edge.parameters}")


def range_of(penalties) -> tuple[float, float]:
    pos = [float(p) for p in penalties if p > 0]
    return (min(pos), max(pos)) if pos else (0.0, 0.0)


def edge_table(edges: list[Edge]) -> pd.DataFrame:
    return pd.DataFrame([e.__dict__ for e in edges],
                        columns=["side", "role", "penalty", "effective_df", "parameters"])
