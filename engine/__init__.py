"""Fitladder engine: choose model order and penalty under honest validation.

Pure Python (numpy, pandas, scikit-learn); no user-interface code.

The names below are imported from their modules when first used (PEP 562), so
that ``import engine`` (and ``python -m engine``, whose command line starts its
chart-drawing child process before anything heavy is imported) stays cheap.
"""
from __future__ import annotations

import importlib
from typing import TYPE_CHECKING, Any

if TYPE_CHECKING:   # the same names, for type checkers and editors
    from .analysis import (Analysis, ArrayData, LearningCurve, analyse, analyse_targets,
                           fit_cell, learning_curve)
    from .design import PolynomialBasis, polynomial_terms
    from .errors import InputProblem
    from .final_fit import FinalModel, fit_final
    from .lagged import LagSpec
    from .recommend import Cell, Recommendation, recommend
    from .schemes import FoldPlan, make_plan
    from .spec import SCHEME_HELP, SCHEMES, SchemeSpec, SweepSpec, default_penalties
    from .sweep import SweepResult, run_sweep

# public name -> the module that defines it
_WHERE = {
    "Analysis": "analysis", "ArrayData": "analysis", "LearningCurve": "analysis",
    "analyse": "analysis", "analyse_targets": "analysis", "fit_cell": "analysis",
    "learning_curve": "analysis",
    "PolynomialBasis": "design", "polynomial_terms": "design",
    "InputProblem": "errors",
    "FinalModel": "final_fit", "fit_final": "final_fit",
    "LagSpec": "lagged",
    "Cell": "recommend", "Recommendation": "recommend", "recommend": "recommend",
    "FoldPlan": "schemes", "make_plan": "schemes",
    "SCHEME_HELP": "spec", "SCHEMES": "spec", "SchemeSpec": "spec", "SweepSpec": "spec",
    "default_penalties": "spec",
    "SweepResult": "sweep", "run_sweep": "sweep",
}

__all__ = [
    "Analysis", "ArrayData", "LearningCurve", "analyse", "analyse_targets", "LagSpec", "fit_cell", "learning_curve",
    "PolynomialBasis", "polynomial_terms", "InputProblem", "FinalModel", "fit_final",
    "Cell", "Recommendation", "recommend", "FoldPlan", "make_plan", "SCHEME_HELP", "SCHEMES",
    "SchemeSpec", "SweepSpec", "default_penalties", "SweepResult", "run_sweep",
]
__version__ = "0.1.0"


def __getattr__(name: str) -> Any:
    module = _WHERE.get(name)
    if module is None:
        raise AttributeError(f"module 'engine' has no attribute '{name}'")
    value = getattr(importlib.import_module(f".{module}", __name__), name)
    globals()[name] = value     # later look-ups skip this function
    return value


def __dir__() -> list[str]:
    return sorted(set(globals()) | set(__all__))
