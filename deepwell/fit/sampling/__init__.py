"""Posterior sampling of the joint model (emcee ensembles, checkpoints, convergence).

Public API::

    sample_posterior(result, SamplerOptions(...)) -> PosteriorResult
    run_ensemble(log_prob, p0, rng, ...) -> EnsembleRun  # generic sampler core

Modules: :mod:`.ensemble` (the loop over emcee moves), :mod:`.hamiltonian`
and :mod:`.nuts` (No-U-Turn chains), :mod:`.coordinates` and :mod:`.gradient`
(per-star sampler coordinates, whitening), :mod:`.backend` (HDF5
checkpoints), :mod:`.convergence` (autocorrelation, R-hat, quantiles),
:mod:`.target` (log-posterior, implied priors, analytic marginalisation),
:mod:`.posterior` (``sample_posterior`` and its result).
"""

from .backend import CheckpointError, CheckpointMismatch
from .convergence import ESS_MIN, RHAT_MAX, RUN_TAUS, gelman_rubin, rank_rhat
from .ensemble import EnsembleRun, NoProgress, default_moves, run_ensemble
from .posterior import (
    PosteriorResult,
    SamplerOptions,
    SamplingError,
    Summary,
    sample_posterior,
)
from .target import LINEAR_TERMS, LogPosterior, SamplingWarning

__all__ = [
    "sample_posterior", "SamplerOptions", "PosteriorResult", "Summary", "run_ensemble",
    "EnsembleRun", "NoProgress", "default_moves", "LogPosterior", "LINEAR_TERMS", "SamplingWarning",
    "CheckpointError", "CheckpointMismatch", "gelman_rubin", "rank_rhat", "RHAT_MAX", "ESS_MIN",
    "RUN_TAUS", "SamplingError",
]
