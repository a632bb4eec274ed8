"""Fitladder engine: choose model order and penalty under honest validation.

Pure Python (numpy, pandas, scikit-learn); no user-interface code.
"""
from .analysis import (Analysis, ArrayData, LearningCurve, analyse, analyse_targets, fit_cell,
                       learning_curve)
from .design import PolynomialBasis, polynomial_terms
from .errors import InputProblem
from .final_fit import FinalModel, fit_final
from .lagged import LagSpec
from .recommend import Cell, Recommendation, recommend
from .schemes import FoldPlan, make_plan
from .spec import SCHEME_HELP, SCHEMES, SchemeSpec, SweepSpec, default_penalties
from .sweep import SweepResult, run_sweep

__all__ = [
    "Analysis", "ArrayData", "LearningCurve", "analyse", "analyse_targets", "LagSpec", "fit_cell", "learning_curve",
    "PolynomialBasis", "polynomial_terms", "InputProblem", "FinalModel", "fit_final",
    "Cell", "Recommendation", "recommend", "FoldPlan", "make_plan", "SCHEME_HELP", "SCHEMES",
    "SchemeSpec", "SweepSpec", "default_penalties", "SweepResult", "run_sweep",
]
__version__ = "0.1.0"
