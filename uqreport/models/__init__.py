"""Measurement models of the chains (pure numpy): exponential decays, batch kinetics, ..."""

from .decay import DecayFit, decay_curve, fit_decay

__all__ = ["DecayFit", "decay_curve", "fit_decay"]
