"""Requests: what to sweep and how to validate it."""
from __future__ import annotations

from dataclasses import asdict, dataclass, field
from typing import Any

import numpy as np

from .errors import InputProblem
from .lagged import LagSpec
from .labels import scheme_help

FAMILIES = ("ridge", "lasso", "elasticnet")
DEFAULT_L1_RATIOS = (0.1, 0.5, 0.9)

SCHEMES = ("kfold", "repeated", "loo", "blocked", "grouped", "holdout", "column")

#: Help sentence of each scheme, beginning with its one human name (`engine.labels`).
SCHEME_HELP = {k: scheme_help(k) for k in SCHEMES}

#: Defaults shared by the page and the command line.
DEFAULT_MAX_ORDER = 4
DEFAULT_FOLDS = 5
DEFAULT_REPEATS = 3
DEFAULT_GAP = 0
DEFAULT_HOLDOUT_FRACTION = 0.2
DEFAULT_PENALTY_LOW = 1e-4
DEFAULT_PENALTY_HIGH = 1e3
DEFAULT_PENALTY_COUNT = 15
DEFAULT_SEED = 0

#: Selection rules (see `engine.recommend`); the first is the default.
SELECTION_RULES = ("paired", "unpaired")
#: How the penalty range is set: fitted to the data (and extended at an edge), or given.
PENALTY_RANGES = ("data", "given")


@dataclass(frozen=True)
class SchemeSpec:
    """How rows are split into training and validation sets.

    Parameters
    ----------
    kind : one of ``SCHEMES``.
    folds : number of folds (kfold, repeated, blocked, grouped).
    repeats : number of repetitions (repeated).
    gap : rows dropped from training on each side of a validation block (blocked).
    holdout_fraction : share of rows, at the end of the order, held out (holdout).
    order_column : column giving the order of rows in time (blocked, holdout);
        when absent the row order of the table is used.
    group_column : column of group labels (grouped).
    split_column : column of fold labels (column).
    rows_in_time_order : without an order column, whether the file's row order
        is time order: True (yes), False (no) or None (not said; the checks
        that read the row order as time then assume it and say so).
    """

    kind: str = "kfold"
    folds: int = DEFAULT_FOLDS
    repeats: int = DEFAULT_REPEATS
    gap: int = DEFAULT_GAP
    holdout_fraction: float = DEFAULT_HOLDOUT_FRACTION
    order_column: str | None = None
    group_column: str | None = None
    split_column: str | None = None
    rows_in_time_order: bool | None = None

    def validate(self) -> None:
        if self.kind not in SCHEMES:
            raise InputProblem(
                f"Unknown validation scheme '{self.kind}'. Choose one of: {', '.join(SCHEMES)}.",
                code="bad_scheme")
        if self.kind in ("kfold", "repeated", "blocked", "grouped") and int(self.folds) < 2:
            raise InputProblem(f"The number of folds must be at least 2 (got {self.folds}).",
                               code="bad_scheme")
        if self.kind == "repeated" and int(self.repeats) < 1:
            raise InputProblem(f"The number of repeats must be at least 1 (got {self.repeats}).",
                               code="bad_scheme")
        if int(self.gap) < 0:
            raise InputProblem(f"The gap must be zero or more rows (got {self.gap}).",
                               code="bad_scheme")
        if self.kind == "holdout" and not (0.0 < float(self.holdout_fraction) < 1.0):
            raise InputProblem(
                f"The holdout fraction must lie strictly between 0 and 1 (got {self.holdout_fraction}).",
                code="bad_scheme")
        if self.kind == "grouped" and not self.group_column:
            raise InputProblem("Grouped folds need a group column: choose the column that "
                               "labels batches, subjects or sites.", code="bad_scheme")
        if self.kind == "column" and not self.split_column:
            raise InputProblem("A user split needs a split column: choose the column that "
                               "holds the fold labels.", code="bad_scheme")


def default_penalties(low: float = DEFAULT_PENALTY_LOW, high: float = DEFAULT_PENALTY_HIGH,
                      count: int = DEFAULT_PENALTY_COUNT,
                      include_zero: bool = True) -> tuple[float, ...]:
    """Log-spaced ridge penalties from ``low`` to ``high``, with 0 first if asked."""
    if count < 1:
        grid: list[float] = []
    elif count == 1:
        grid = [float(low)]
    else:
        grid = [float(v) for v in np.logspace(np.log10(low), np.log10(high), count)]
    return tuple(([0.0] if include_zero else []) + grid)


@dataclass(frozen=True)
class SweepSpec:
    """Everything that defines one sweep; with the data it fixes every number.

    Parameters
    ----------
    target : name of the column to predict.
    inputs : names of the input columns.
    max_order : highest polynomial order in the sweep (1 = straight line).
    orders : explicit orders to report (subset of 0..max_order); ``None`` means
        every order from 0 to ``max_order``. Order 0 is the intercept-only model.
    interactions : include all products of inputs up to the order, not only
        per-input powers.
    penalties : ridge penalties (scikit-learn ``alpha`` on training-standardised
        terms); 0 means no penalty. Empty (the default): penalty 0 plus a range
        fitted to the data (`engine.penalty_range`), extended when the best or
        recommended cell lies on its edge.
    penalty_range : ``"data"`` (the range follows the data and widens itself;
        given ``penalties`` are the starting grid, as in the ``spec`` of a
        data-fitted analysis) or
        ``"given"`` (exactly ``penalties``; a pick on an edge draws a warning).
        Left empty it is ``"data"`` without penalties and ``"given"`` with them.
    scheme : the validation scheme.
    seed : seed for every random choice (shuffles).
    learning_sizes : fractions of each training set for the learning curve.
    lags : past values of inputs and target as terms, and the depths to
        compare (`engine.lagged.LagSpec`); ``None`` for none.
    nested_inputs : ``"lasso"`` ranks the inputs by the order they enter the
        lasso path on each split's training rows, ``"given"`` keeps the order of
        ``inputs``; the sweep then compares the first 1, 2, ... inputs.
        ``None``: every input in every cell.
    extra_targets : more columns to predict from the same inputs, each with
        its own grid and recommendation, from one pass over the rows.
    families : penalty families swept side by side: ``"ridge"``, ``"lasso"``
        (scikit-learn ``Lasso`` ``alpha``), ``"elasticnet"`` (``ElasticNet``
        ``alpha`` with each of ``l1_ratios``); every family uses ``penalties``.
    l1_ratios : mixing parameters of the elastic net, each in [0, 1]
        (1 = lasso, 0 = a ridge-type penalty on scikit-learn's ElasticNet scale).
    rule : how the recommended cell is chosen, one of `engine.recommend.RULES`:
        ``"paired"`` (differences from the best cell on the same validation
        rows) or ``"unpaired"`` (the classic one-standard-error rule). Records
        written before the rule was recorded used the unpaired rule.
    """

    target: str
    inputs: tuple[str, ...]
    max_order: int = DEFAULT_MAX_ORDER
    orders: tuple[int, ...] | None = None
    interactions: bool = False
    penalties: tuple[float, ...] = ()
    scheme: SchemeSpec = field(default_factory=SchemeSpec)
    seed: int = DEFAULT_SEED
    learning_sizes: tuple[float, ...] = (0.1, 0.325, 0.55, 0.775, 1.0)
    lags: LagSpec | None = None
    nested_inputs: str | None = None
    extra_targets: tuple[str, ...] = ()
    families: tuple[str, ...] = ("ridge",)
    l1_ratios: tuple[float, ...] = DEFAULT_L1_RATIOS
    rule: str = "paired"
    penalty_range: str = ""

    def __post_init__(self) -> None:
        object.__setattr__(self, "inputs", tuple(self.inputs))
        object.__setattr__(self, "extra_targets", tuple(str(t) for t in self.extra_targets))
        if isinstance(self.lags, dict):
            object.__setattr__(self, "lags", LagSpec.from_dict(self.lags))
        fam = (self.families,) if isinstance(self.families, str) else self.families
        object.__setattr__(self, "families", tuple(str(f) for f in fam))
        object.__setattr__(self, "l1_ratios", tuple(float(r) for r in self.l1_ratios))
        object.__setattr__(self, "penalties", tuple(float(p) for p in self.penalties))
        if self.penalty_range not in PENALTY_RANGES:
            object.__setattr__(self, "penalty_range", "given" if self.penalties else "data")
        if self.orders is not None:
            object.__setattr__(self, "orders", tuple(sorted({int(o) for o in self.orders})))
            object.__setattr__(self, "max_order", max(self.orders) if self.orders else 0)

    @property
    def targets(self) -> tuple[str, ...]:
        """Every column to predict: ``target`` first, then ``extra_targets``."""
        return (self.target,) + tuple(self.extra_targets)

    @property
    def has_rungs(self) -> bool:
        """True when the grid has axes beyond order and penalty, or several targets."""
        return self.lags is not None or self.nested_inputs is not None or bool(self.extra_targets)

    def order_list(self) -> list[int]:
        """The orders to report, ascending."""
        if self.orders is not None:
            return list(self.orders)
        return list(range(0, int(self.max_order) + 1))

    def family_pairs(self) -> tuple[tuple[str, float], ...]:
        """The (family, l1_ratio) pairs of the settings axis, in sweep order."""
        out: list[tuple[str, float]] = []
        for f in self.families:
            if f == "ridge":
                out.append(("ridge", 0.0))
            elif f == "lasso":
                out.append(("lasso", 1.0))
            elif f == "elasticnet":
                out += [("elasticnet", float(r)) for r in self.l1_ratios]
        return tuple(out)

    def validate(self) -> None:
        """Raise `InputProblem` for a request that cannot be run."""
        self.scheme.validate()
        if not self.families:
            raise InputProblem("Choose at least one penalty family (ridge, lasso, elasticnet).",
                               code="bad_family")
        for f in self.families:
            if f not in FAMILIES:
                raise InputProblem(f"Unknown penalty family '{f}'. Choose from: "
                                   f"{', '.join(FAMILIES)}.", code="bad_family")
        if len(set(self.families)) != len(self.families):
            raise InputProblem("A penalty family is listed twice; list each once.",
                               code="bad_family")
        if "elasticnet" in self.families:
            if not self.l1_ratios:
                raise InputProblem("The elastic net needs at least one mixing parameter "
                                   "(l1_ratio), for example 0.5.", code="bad_l1_ratio")
            for r in self.l1_ratios:
                if not (np.isfinite(r) and 0.0 <= r <= 1.0):
                    raise InputProblem(f"Elastic-net mixing parameters (l1_ratio) lie in [0, 1] "
                                       f"(got {r}).", code="bad_l1_ratio")
            if len(set(self.l1_ratios)) != len(self.l1_ratios):
                raise InputProblem("An elastic-net mixing parameter is listed twice.",
                                   code="bad_l1_ratio")
        if self.scheme.kind == "loo" and any(f != "ridge" for f in self.families):
            raise InputProblem("Leave-one-out is computed exactly only for ridge. For lasso or "
                               "elastic net choose shuffled k-fold (for example 10 folds), or "
                               "sweep ridge alone.", code="loo_family")
        if not self.inputs:
            raise InputProblem("Choose at least one input column.", code="no_inputs")
        if self.target in self.inputs:
            raise InputProblem(f"Column '{self.target}' is both the target and an input; "
                               "remove it from the inputs.", code="target_is_input",
                               column=self.target)
        if len(set(self.inputs)) != len(self.inputs):
            raise InputProblem("An input column is listed twice; list each input once.",
                               code="duplicate_input")
        if int(self.max_order) < 0 or int(self.max_order) > 30:
            raise InputProblem(f"The maximum order must be between 0 and 30 (got {self.max_order}).",
                               code="bad_order")
        if self.orders is not None and (not self.orders or min(self.orders) < 0):
            raise InputProblem("Orders must be whole numbers of 0 or more.", code="bad_order")
        if not self.penalties and self.penalty_range == "given":
            raise InputProblem("Give at least one penalty (0 for none).", code="bad_penalty")
        for p in self.penalties:
            if not np.isfinite(p) or p < 0:
                raise InputProblem(f"Penalties must be finite and 0 or more (got {p}).",
                                   code="bad_penalty")
        for t in self.extra_targets:
            if t == self.target or t in self.inputs:
                raise InputProblem(f"Column '{t}' is listed as a target twice or as both a target "
                                   "and an input; list each column in one role.",
                                   code="target_is_input", column=t)
        if len(set(self.extra_targets)) != len(self.extra_targets):
            raise InputProblem("A target is listed twice; list each target once.",
                               code="duplicate_target")
        if self.nested_inputs not in (None, "lasso", "given"):
            raise InputProblem(f"Input ranking must be 'lasso' or 'given' (got {self.nested_inputs}).",
                               code="bad_nested_inputs")
        if self.lags is not None:
            self.lags.validate(self.inputs, self.scheme)
        if self.rule not in SELECTION_RULES:
            raise InputProblem(f"Unknown selection rule '{self.rule}'. Choose one of: "
                               f"{', '.join(SELECTION_RULES)}.", code="bad_rule")
        for f in self.learning_sizes:
            if not (0.0 < f <= 1.0):
                raise InputProblem(f"Learning-curve sizes are fractions in (0, 1] (got {f}).",
                                   code="bad_learning_sizes")

    def to_dict(self) -> dict[str, Any]:
        """Plain-data form, for records and re-runs."""
        d = asdict(self)
        d["inputs"] = list(self.inputs)
        d["penalties"] = list(self.penalties)
        d["orders"] = list(self.orders) if self.orders is not None else None
        d["learning_sizes"] = list(self.learning_sizes)
        # keys of the newer axes appear only when used, so older records read the same
        for key in ("lags", "nested_inputs"):
            if d[key] is None:
                del d[key]
        if self.lags is not None:
            d["lags"] = self.lags.to_dict()
        if self.extra_targets:
            d["extra_targets"] = list(self.extra_targets)
        else:
            del d["extra_targets"]
        if self.families != ("ridge",) or self.l1_ratios != DEFAULT_L1_RATIOS:
            d["families"] = list(self.families)
            d["l1_ratios"] = list(self.l1_ratios)
        else:
            del d["families"], d["l1_ratios"]
        return d

    @classmethod
    def from_dict(cls, d: dict[str, Any]) -> "SweepSpec":
        """Inverse of `to_dict`."""
        d = dict(d)
        d["scheme"] = SchemeSpec(**d.get("scheme", {}))
        d["inputs"] = tuple(d["inputs"])
        d["penalties"] = tuple(d["penalties"])
        if d.get("orders") is not None:
            d["orders"] = tuple(d["orders"])
        d["learning_sizes"] = tuple(d.get("learning_sizes", (0.1, 0.325, 0.55, 0.775, 1.0)))
        d["lags"] = LagSpec.from_dict(d.get("lags"))
        d["extra_targets"] = tuple(d.get("extra_targets", ()))
        # records written before penalty families existed: ridge only
        d["families"] = tuple(d.get("families", ("ridge",)))
        d["l1_ratios"] = tuple(d.get("l1_ratios", DEFAULT_L1_RATIOS))
        # records written before the rule was recorded were chosen by the unpaired rule
        d.setdefault("rule", "unpaired")
        return cls(**d)
