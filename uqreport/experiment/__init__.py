"""The experiment file: one TOML file plus CSV tables describing a whole study.

:func:`load_experiment` (alias :func:`check_experiment`) reads and checks the file and its
tables, converts every number to internal units and returns an :class:`Experiment`; every
problem found is reported at once in one :class:`~uqreport.errors.ExperimentError`.  The
format is described in ``docs/experiment-file.md``.
"""

from __future__ import annotations

from ..tables import Table
from .chains import (
    BatchRun,
    BatchSection,
    Feed,
    Pump,
    TankRun,
    TankSection,
    TracerRun,
    TracerSection,
    Vessel,
)
from .loader import FORMAT_VERSION, Experiment, check_experiment, load_experiment
from .quantities import QuantitySpec
from .sections import (
    Blank,
    Chemistry,
    Correlation,
    Cuvette,
    Glassware,
    Solution,
    Spectrophotometer,
    Stopwatch,
    Study,
    Timing,
)

__all__ = [
    "FORMAT_VERSION",
    "BatchRun",
    "BatchSection",
    "Blank",
    "Chemistry",
    "Correlation",
    "Cuvette",
    "Experiment",
    "Feed",
    "Glassware",
    "Pump",
    "QuantitySpec",
    "Solution",
    "Spectrophotometer",
    "Stopwatch",
    "Study",
    "Table",
    "TankRun",
    "TankSection",
    "Timing",
    "TracerRun",
    "TracerSection",
    "Vessel",
    "check_experiment",
    "load_experiment",
]
