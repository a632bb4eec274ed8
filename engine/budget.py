"""The size of a request, known before anything is allocated.

`estimate` counts, from the request and the number of rows alone, the terms
of the highest-order design, the size of the design chunk and of the per-piece
statistics, the number of fits (orders x settings x splits) and a rough time
and peak memory on this machine. `check_request` refuses a request whose
figures pass the stated limits, with the figures and what to do; the limits are
`Limits` (defaults below; ``FITLADDER_MAX_SECONDS`` and
``FITLADDER_MAX_MEMORY_MB`` in the environment change them, as do the
command line's ``--time-limit`` and ``--memory-limit``).

The time model is deliberately simple (common practice for a guard, not a
prediction): one pass over the rows costs about ``n P^2`` multiply-adds, one
eigen-decomposition per (order, split) about ``10 p^3``, one solve per fit
about ``p^2``, at an assumed 2e9 multiply-adds per second, plus fixed costs
per (order, split) and per fit; then the steps after the sweep that repeat
per split (learning curve, intervals, checks), `SECONDS_PER_SPLIT_AFTER` plus
`SECONDS_PER_SPLIT_ROW_AFTER` per row (rows counted up to `SUMMARY_ROWS`,
from where those steps work on cross-product summaries). Reading, charts and
files (a few seconds whatever the request) are not counted.

Calibration (2-core machine, load average 3-8 from other work, whole
``fitladder run --scheme repeated`` wall time, default orders 0-4 and 16
penalty settings): calibration demo (24 rows, 1 input) 9.2 s at 50 splits,
22.4 s at 250, 49.4 s at 1,000; drifting-line demo (3,000 rows, 7 inputs)
19.6 s, 40.2 s and 175 s. Per extra split that is 0.04-0.07 s at 24 rows and
0.10-0.18 s at 3,000 rows, nearly all after the sweep (the learning curve and
the intervals took 10.8 s and 12.1 s of a 36 s run at 500 splits; the sweep
1.9 s). Those steps were then made faster; measured again on that code (load
average 1.6-2.7): calibration demo 6.1 s at 50 splits and 20.5 s at 1,000,
drifting-line demo 8.9 s and 44.8 s, i.e. 0.015 s per split at 24 rows and
0.038 s at 3,000 rows, about 0.015 s plus 7.7e-6 s per row. The constants below
round that up (0.02 s plus 1e-5 s per row and split) for a busy machine; when
those steps change speed again, re-measure as above (``fitladder run DEMO
--scheme repeated --repeats R`` for R = 10 and 200) and update them.
"""
from __future__ import annotations

import math
import os
from dataclasses import dataclass, replace

from .errors import InputProblem
from .spec import SweepSpec

__all__ = ["Budget", "Limits", "check_request", "estimate", "n_terms"]

#: Largest design swept (terms of the highest order, intercept excluded).
MAX_TERMS = 1500
FLOPS_PER_SECOND = 2e9
#: Fixed costs that do not shrink with the design: combining and decomposing per
#: (order, split), and scoring per fit (measured roughly on a 2-core machine).
SECONDS_PER_ORDER_SPLIT = 2e-4
SECONDS_PER_FIT = 2e-6
#: Steps after the sweep that repeat per split (see the calibration in the module notes).
SECONDS_PER_SPLIT_AFTER = 0.02
SECONDS_PER_SPLIT_ROW_AFTER = 1e-5
#: From this many rows the steps after the sweep work on summaries (`engine.summaries`).
SUMMARY_ROWS = 50_000
#: Leave-one-out: the steps after the sweep use the hat matrix, not one refit per row;
#: counted as this many splits (drifting-line demo, 3,000 rows: the intervals took 19 s
#: under leave-one-out against 9.5 s under 5 folds, so about twice 5 splits).
LOO_SPLITS_AFTER = 10
CHUNK_ROWS = 32768


def _env_number(name: str, default: float) -> float:
    try:
        value = float(os.environ.get(name, ""))
    except ValueError:
        return default
    return value if math.isfinite(value) and value > 0 else default


@dataclass(frozen=True)
class Limits:
    """Limits a request must stay within.

    Attributes
    ----------
    max_terms : terms of the highest-order design.
    max_seconds : estimated computing time.
    max_memory_mb : estimated peak memory of the sweep.
    """

    max_terms: int = MAX_TERMS
    max_seconds: float = 600.0
    max_memory_mb: float = 4096.0

    @classmethod
    def from_environment(cls, max_seconds: float | None = None,
                         max_memory_mb: float | None = None) -> "Limits":
        """Defaults, changed by the environment, then by explicit values."""
        return cls(max_seconds=max_seconds or _env_number("FITLADDER_MAX_SECONDS", 600.0),
                   max_memory_mb=max_memory_mb or _env_number("FITLADDER_MAX_MEMORY_MB", 4096.0))


@dataclass(frozen=True)
class Budget:
    """The figures of one request (see module notes for the time model)."""

    rows: int
    inputs: int
    max_order: int
    interactions: bool
    terms: int
    orders: int
    settings: int
    splits: int
    fits: int
    design_mb: float
    statistics_mb: float
    memory_mb: float
    seconds: float
    rows_estimated: bool | str = False
    folds: int = 0
    repeats: int = 0

    def text(self) -> str:
        """One plain sentence with the figures."""
        how = (self.rows_estimated if isinstance(self.rows_estimated, str)
               else "about" if self.rows_estimated else "")
        rows = f"{how} {self.rows:,} rows".lstrip()
        return (f"{self.terms:,} terms at order {self.max_order} from {self.inputs:,} input"
                f"{'s' if self.inputs != 1 else ''}"
                f"{' with interactions' if self.interactions else ''}; {rows}; "
                f"{self.fits:,} fits ({self.orders} orders x {self.settings} penalty settings x "
                f"{self.splits:,} splits"
                + (f" = {self.folds} folds x {self.repeats:,} repeats" if self.repeats else "")
                + f"); about {_mb(self.memory_mb)} of memory and "
                f"{_seconds(self.seconds)} on this machine (rough estimate)")


def _mb(mb: float) -> str:
    return f"{mb / 1024:,.1f} GB" if mb >= 1024 else f"{mb:.0f} MB"


def _seconds(s: float) -> str:
    if s < 1:
        return "under a second"
    if s < 120:
        return f"{s:.0f} s"
    if s < 7200:
        return f"{s / 60:.0f} min"
    return f"{s / 3600:,.1f} h"


def n_terms(n_inputs: int, order: int, interactions: bool) -> int:
    """Terms of a polynomial design (intercept excluded), counted without building it."""
    d, q = int(n_inputs), int(order)
    if q <= 0 or d <= 0:
        return 0
    return math.comb(d + q, q) - 1 if interactions else d * q


def _splits(spec: SweepSpec, rows: int) -> tuple[int, int]:
    """(splits, pieces) of the scheme; the pieces hold the per-piece statistics."""
    sc = spec.scheme
    kind = sc.kind
    k = max(int(sc.folds), 1)
    if kind == "repeated":
        return k * int(sc.repeats), k * int(sc.repeats)
    if kind == "loo":
        return rows, 1  # one fit per model through the hat matrix
    if kind == "holdout":
        return 1, 2
    if kind == "column":
        return k, k  # not known before the labels are read; folds as a stand-in
    return k, k


def estimate(spec: SweepSpec, rows: int, n_inputs: int | None = None) -> Budget:
    """The figures of ``spec`` on ``rows`` rows, from counts alone (nothing allocated).

    Parameters
    ----------
    spec : the request.
    rows : rows that will be swept.
    n_inputs : columns of the design (default ``len(spec.inputs)``; lags add more).

    Returns
    -------
    Budget
    """
    d = int(n_inputs if n_inputs is not None else len(spec.inputs))
    lags = getattr(spec, "lags", None)
    if lags is not None:
        lagged = len(lags.inputs) or d
        d += lagged * max(lags.depths or (0,)) + len(spec.targets) * max(lags.target_depths or (0,))
    q = max(spec.order_list())
    P = n_terms(d, q, spec.interactions)
    orders = len(spec.order_list())
    pairs = spec.family_pairs() if hasattr(spec, "family_pairs") else [("ridge", 0.0)]
    # no penalties given: a range fitted to the data, at most MAX_POINTS values and 0
    from .penalty_range import MAX_POINTS
    settings = max(1, len(pairs)) * (len(spec.penalties) or MAX_POINTS + 1)
    splits, pieces = _splits(spec, rows)
    targets = len(spec.targets)
    fits = orders * settings * splits * targets
    width = P + 1 + targets
    design_mb = min(rows, CHUNK_ROWS) * width * 8 / 2**20
    statistics_mb = (pieces + 2) * width * width * 8 / 2**20
    # per (order, split): a copy of the leading block and its eigenvectors
    solve_mb = 3 * width * width * 8 / 2**20
    memory_mb = 150.0 + 2 * design_mb + statistics_mb + solve_mb + rows * (d + 2) * 8 / 2**20
    flops = (rows * width * width
             + sum(10.0 * n_terms(d, o, spec.interactions) ** 3 for o in spec.order_list())
             * splits * targets
             + fits * float(P) ** 2)
    after_splits = LOO_SPLITS_AFTER if spec.scheme.kind == "loo" else splits
    after = (after_splits * targets
             * (SECONDS_PER_SPLIT_AFTER + SECONDS_PER_SPLIT_ROW_AFTER * min(rows, SUMMARY_ROWS)))
    repeated = spec.scheme.kind == "repeated"
    return Budget(rows=int(rows), inputs=d, max_order=q, interactions=bool(spec.interactions),
                  terms=P, orders=orders, settings=settings, splits=splits, fits=fits,
                  design_mb=design_mb, statistics_mb=statistics_mb, memory_mb=memory_mb,
                  seconds=flops / FLOPS_PER_SECOND
                  + SECONDS_PER_ORDER_SPLIT * orders * splits * targets + SECONDS_PER_FIT * fits
                  + after,
                  folds=int(spec.scheme.folds) if repeated else 0,
                  repeats=int(spec.scheme.repeats) if repeated else 0)


def _fitting_repeats(b: Budget, limits: Limits) -> int:
    """About how many repeats fit the time limit, all else equal (the time is close
    to linear in the splits)."""
    per_split = max(b.seconds, 1e-9) / max(b.splits, 1)
    fit = int(limits.max_seconds / per_split) // max(b.folds, 1)
    return max(1, min(fit, b.repeats - 1))


def check_request(spec: SweepSpec, rows: int, n_inputs: int | None = None,
                  limits: Limits | None = None, rows_estimated: bool | str = False) -> Budget:
    """`estimate`, refused with the figures and what to do when over ``limits``.

    ``rows_estimated``: ``rows`` comes from a sample of the file (said so in the text:
    "about", or the word given, e.g. "at least").

    Raises
    ------
    InputProblem
        ``code='too_many_terms'``, ``'too_slow'`` or ``'too_much_memory'``.
    """
    limits = limits or Limits.from_environment()
    b = estimate(spec, rows, n_inputs)
    if rows_estimated:
        b = replace(b, rows_estimated=rows_estimated)
    fewer = ("Lower the highest order, choose fewer inputs"
             + (", switch off interaction terms" if b.interactions else ""))
    if b.terms > limits.max_terms:
        raise InputProblem(
            f"The request is too large to sweep: {b.text()}. The design may hold at most "
            f"{limits.max_terms:,} terms. {fewer}.", code="too_many_terms")
    if b.memory_mb > limits.max_memory_mb:
        raise InputProblem(
            f"The request would need more memory than allowed: {b.text()}; the limit is "
            f"{_mb(limits.max_memory_mb)}. {fewer}, or use fewer rows; or raise the limit "
            "(--memory-limit MB on the command line, FITLADDER_MAX_MEMORY_MB).",
            code="too_much_memory")
    if b.seconds > limits.max_seconds:
        raise InputProblem(
            f"The request would take longer than allowed: {b.text()}; the limit is "
            f"{_seconds(limits.max_seconds)}. Use fewer splits ("
            + (f"--repeats {_fitting_repeats(b, limits)} or fewer, or fewer folds"
               if b.repeats else "fewer folds or repeats")
            + "), fewer penalties or orders; or raise the limit (--time-limit SECONDS on the "
            "command line, FITLADDER_MAX_SECONDS).", code="too_slow")
    return b
