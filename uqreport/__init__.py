"""uqreport: defensible uncertainty statements for bench kinetics and stirred-tank studies.

The public API, re-exported here:

- input quantities and models: :class:`InputQuantity`, :class:`InputSet`,
  :class:`MeasurementModel`, :func:`columns_model`;
- engines: :func:`propagate_linear` (GUM), :func:`propagate_montecarlo` (JCGM 101),
  :func:`validate_linear` (JCGM 101 section 8), :func:`budgets` (the function for one
  output is ``uqreport.budget.budget``: the module keeps the name ``uqreport.budget``);
- regression: :func:`linear_least_squares`, :func:`nonlinear_least_squares`, :func:`predict`;
- studies: :func:`load_experiment`, :func:`analyze`, :class:`Settings`, :func:`write_results`,
  :func:`write_demo`;
- errors and warnings: :class:`UqreportError`, :class:`InputError`,
  :class:`ExperimentError`, :class:`ModelError`, :class:`ConvergenceWarning`.
"""

from .analysis import Settings, StudyResult, analyze
from .budget import Budget, BudgetEntry, budgets
from .demo import simulate_study, write_demo
from .errors import (
    ConvergenceWarning,
    ExperimentError,
    InputError,
    ModelError,
    UqreportError,
    UqreportWarning,
    ValidationWarning,
)
from .experiment import Experiment, load_experiment
from .inputs import InputQuantity, InputSet
from .model import MeasurementModel, OutputQuantity, columns_model
from .propagation import (
    LinearResult,
    MonteCarloResult,
    coverage_factor,
    propagate_linear,
    propagate_montecarlo,
    validate_linear,
)
from .regression import linear_least_squares, nonlinear_least_squares, predict
from .results import results_dict, write_results

__version__ = "0.1.0"

__all__ = [
    "Budget",
    "BudgetEntry",
    "ConvergenceWarning",
    "Experiment",
    "ExperimentError",
    "InputError",
    "InputQuantity",
    "InputSet",
    "LinearResult",
    "MeasurementModel",
    "ModelError",
    "MonteCarloResult",
    "OutputQuantity",
    "Settings",
    "StudyResult",
    "UqreportError",
    "UqreportWarning",
    "ValidationWarning",
    "__version__",
    "analyze",
    "budgets",
    "columns_model",
    "coverage_factor",
    "linear_least_squares",
    "load_experiment",
    "nonlinear_least_squares",
    "predict",
    "propagate_linear",
    "propagate_montecarlo",
    "results_dict",
    "simulate_study",
    "validate_linear",
    "write_demo",
    "write_results",
]
