"""Bayesian inference over the measurement models with emcee.

Entry point for the batch chain: :func:`batch_posterior` (returns a
:class:`PosteriorResult`).  The generic pieces are importable on their own: priors from
input quantities (:mod:`.priors`), likelihoods with the linear parameters integrated out
(:mod:`.likelihoods`), the ensemble sampler run to a convergence rule (:mod:`.sampler`) and
its diagnostics (:mod:`.diagnostics`).  The method is described in ``docs/bayes.md``.
"""

from .batch import batch_posterior
from .batch_model import BatchPosterior
from .batch_setup import build_batch_posterior
from .diagnostics import PredictiveCheck, hdi, integrated_time, split_rhat
from .priors import Prior, between_run_prior, noise_scale_prior, prior_from_input
from .results import CredibleInterval, PosteriorResult, PosteriorSettings, PosteriorSummary
from .sampler import EnsembleRun, run_ensembles

__all__ = [
    "BatchPosterior",
    "CredibleInterval",
    "EnsembleRun",
    "PosteriorResult",
    "PosteriorSettings",
    "PosteriorSummary",
    "PredictiveCheck",
    "Prior",
    "batch_posterior",
    "between_run_prior",
    "build_batch_posterior",
    "hdi",
    "integrated_time",
    "noise_scale_prior",
    "prior_from_input",
    "run_ensembles",
    "split_rhat",
]
