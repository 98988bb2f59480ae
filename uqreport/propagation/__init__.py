"""Propagation engines over one measurement model: linear (JCGM 100) and Monte Carlo (JCGM 101)."""

from .coverage import coverage_factor, numerical_tolerance
from .linear import LinearEstimate, LinearResult, numerical_jacobian, propagate_linear
from .montecarlo import (
    MonteCarloEstimate,
    MonteCarloResult,
    ValidationResult,
    coverage_interval,
    propagate_montecarlo,
    shortest_interval,
    validate_linear,
)

__all__ = [
    "LinearEstimate",
    "LinearResult",
    "MonteCarloEstimate",
    "MonteCarloResult",
    "ValidationResult",
    "coverage_factor",
    "coverage_interval",
    "numerical_jacobian",
    "numerical_tolerance",
    "propagate_linear",
    "propagate_montecarlo",
    "shortest_interval",
    "validate_linear",
]
