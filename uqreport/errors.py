"""Exceptions and warnings raised by uqreport.

Every exception derives from :class:`UqreportError` and from the builtin it refines, so that
callers can catch either.  Messages name the file, row, column or key, the bad value and the
fix.  A problem the command line reports to the user as an input error (exit code 2) is an
:class:`InputError` or one of its subclasses.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

__all__ = [
    "ConvergenceWarning",
    "ExperimentError",
    "InputError",
    "ModelError",
    "Problem",
    "UqreportError",
    "UqreportWarning",
    "ValidationWarning",
]


class UqreportError(Exception):
    """Base class of every error raised by uqreport."""


class InputError(UqreportError, ValueError):
    """Bad user input: a value, a file, a key or a table that cannot be used as given."""


class ModelError(UqreportError, RuntimeError):
    """A measurement model could not be evaluated (non-finite output, failed fit)."""


@dataclass(frozen=True)
class Problem:
    """One problem found while checking an experiment file or a table.

    Attributes
    ----------
    where:
        The file and the key path or row/column, e.g. ``"experiment.toml: study.date"`` or
        ``"run1.csv, row 4, column 'time [s]'"``.
    message:
        What is wrong, including the bad value.
    fix:
        What the user should do about it.
    """

    where: str
    message: str
    fix: str = ""

    def __str__(self) -> str:
        text = f"{self.where}: {self.message}"
        if self.fix:
            text += f" Fix: {self.fix}"
        return text


class ExperimentError(InputError):
    """One or more problems in an experiment file or its tables, all reported at once.

    The problems ride on the exception as :attr:`problems`.
    """

    def __init__(self, problems: Sequence[Problem]):
        self.problems: tuple[Problem, ...] = tuple(problems)
        n = len(self.problems)
        head = f"{n} problem{'s' if n != 1 else ''} found:"
        super().__init__("\n".join([head, *("  - " + str(p) for p in self.problems)]))


class UqreportWarning(UserWarning):
    """Base class of uqreport's warnings."""


class ConvergenceWarning(UqreportWarning):
    """An iterative method (fit, adaptive Monte Carlo, MCMC) stopped before its criterion."""


class ValidationWarning(UqreportWarning):
    """A check of an assumption failed (linear range, excess ratio, steady state, ...)."""
