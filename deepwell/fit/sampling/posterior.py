"""Posterior sampling of a joint fit: :func:`sample_posterior` and its result."""

import multiprocessing
import os
import signal
import time
import warnings
from dataclasses import dataclass
from pathlib import Path

import emcee
import numpy as np
import pandas as pd

from deepwell.core.errors import DeepwellError
from deepwell.core.text import plural
from deepwell.core.units import UNITS
from deepwell.fit.result import physical_labels, physical_vector

from .backend import fingerprint
from .convergence import (
    BURN_TAUS,
    ESS_MIN,
    RHAT_MAX,
    RUN_TAUS,
    autocorr_times,
    burn_in,
    enough_ess,
    enough_taus,
    ess_bulk_tail,
    quantile_summary,
    rank_rhat,
)
from .coordinates import STATE_ARC, SamplingCoordinates
from .ensemble import default_moves, run_ensemble
from .hamiltonian import ChainRun, run_chain
from .target import LogPosterior, SamplingWarning


class SamplingError(DeepwellError, RuntimeError):
    """A sampling run that produced nothing to summarise."""

__all__ = ["Summary", "PosteriorResult", "SamplingError", "SamplerOptions", "sample_posterior",
           "start_positions"]

_ANGLES = ("node", "peri_arg")
#: Fewest kept draws per NUTS chain for a run to count as converged.
MIN_CHAIN_DRAWS = 100


@dataclass(frozen=True)
class Summary:
    """One reported quantity: median and the 16th/84th percentiles.

    ``lower`` and ``upper`` are the percentiles themselves (not offsets);
    ``sigma`` is half the 68% width, (upper - lower) / 2.
    """

    label: str
    unit: str
    value: float
    lower: float
    upper: float
    sigma: float


@dataclass(frozen=True)
class PosteriorResult:
    """Posterior samples of a joint fit and their convergence diagnostics.

    Attributes
    ----------
    labels, units : tuple of str
        Reported quantities (as :func:`deepwell.fit.result.physical_labels`) and units.
    samples : ndarray, shape (n_ensembles, n_draws, n_walkers, n_labels)
        Reported quantities after burn-in, every ``thin`` steps; angles in
        degrees, unwrapped.
    internal_names : tuple of str
    internal_samples : ndarray, shape (n_ensembles, n_draws, n_walkers, n_internal)
        Full internal vectors (integrated-out frame terms drawn from their
        conditional Gaussian per sample).
    log_prob : ndarray, shape (n_ensembles, n_draws, n_walkers)
    sampled_names : tuple of str
        Internal parameters the walkers moved in.
    acceptance : ndarray, shape (n_ensembles, n_walkers)
    tau : ndarray, shape (n_sampled,)
        Integrated autocorrelation time per sampled parameter (steps, largest
        over the ensembles).
    rhat : ndarray, shape (n_sampled,)
        Rank-normalised split R-hat (arviz) across the independent chains.
    n_steps, burn : tuple of int
        Steps run and steps discarded as burn-in, per ensemble.
    thin : int
    n_walkers : int
    converged : bool
    statement : str
        Plain-English convergence statement (starts with "CONVERGED" or
        "NOT CONVERGED").
    implied_priors : tuple of str
    marginalised : tuple of str
        Frame terms integrated out analytically.
    stop_reasons : tuple of str
    elapsed : float
        Wall time of the sampling in s.
    seed : int
    sampler : str
        "nuts" (independent No-U-Turn chains: one 'walker' per chain) or
        "ensemble" (emcee ensembles).
    diagnostics : tuple of str
        Sampler-specific facts (step size, divergences, depth limits).
    ess_bulk, ess_tail : ndarray, shape (n_sampled,)
        Bulk and tail effective sample sizes (arviz), summed over the chains;
        NaN for ensembles (their walkers are not independent chains).
    """

    labels: tuple
    units: tuple
    samples: np.ndarray
    internal_names: tuple
    internal_samples: np.ndarray
    log_prob: np.ndarray
    sampled_names: tuple
    acceptance: np.ndarray
    tau: np.ndarray
    rhat: np.ndarray
    n_steps: tuple
    burn: tuple
    thin: int
    n_walkers: int
    converged: bool
    statement: str
    implied_priors: tuple
    marginalised: tuple
    stop_reasons: tuple
    elapsed: float
    seed: int
    sampler: str = "ensemble"
    diagnostics: tuple = ()
    ess_bulk: np.ndarray | None = None
    ess_tail: np.ndarray | None = None

    @property
    def flat_samples(self):
        """All draws of the reported quantities, shape (n_draws_total, n_labels)."""
        return self.samples.reshape(-1, self.samples.shape[-1])

    @property
    def ess(self):
        """Effective sample size per sampled parameter (all ensembles)."""
        kept = sum(n - b for n, b in zip(self.n_steps, self.burn, strict=False))
        return kept * self.n_walkers / self.tau

    def quantity(self, label):
        """:class:`Summary` of one reported quantity."""
        i = self.labels.index(label)
        angle = label.split(":")[-1] in _ANGLES
        med, lo, hi = quantile_summary(self.samples[..., i], angle=angle)
        return Summary(label, self.units[i], med, lo, hi, 0.5 * (hi - lo))

    @property
    def summary(self):
        """:class:`Summary` of every reported quantity, in label order."""
        return tuple(self.quantity(lab) for lab in self.labels)


# ------------------------------------------------------------------ helpers
def _data_hash(result):
    obs = result.observations
    parts = []
    for df in (obs.positions, obs.velocities):
        cols = [c for c in df.columns if c not in ("line", "file")]
        parts.append(pd.util.hash_pandas_object(df[cols], index=False).to_numpy().tobytes().hex())
    return fingerprint(parts)


def start_positions(target, result, n_walkers, rng, max_rounds=200):
    """Walkers drawn from the least-squares solution and its covariance.

    Draws outside the support are redrawn; after ``max_rounds`` the spread is
    halved and the search repeats.
    """
    mean = target.base[target.sampled]
    cov = target.start_cov(result.internal_cov)
    w, v = np.linalg.eigh(0.5 * (cov + cov.T))
    floor = 1e-12 * np.maximum(np.abs(mean), 1e-6) ** 2
    root = v * np.sqrt(np.maximum(w, 0.0))
    p0 = np.empty((n_walkers, len(mean)))
    todo = np.arange(n_walkers)
    scale = 1.0
    for round_ in range(10 * max_rounds):
        z = rng.standard_normal((len(todo), len(mean)))
        trial = mean + scale * (z @ root.T) + np.sqrt(floor) * rng.standard_normal(z.shape)
        ok = np.isfinite(target(trial))
        p0[todo[ok]] = trial[ok]
        todo = todo[~ok]
        if todo.size == 0:
            return p0
        if (round_ + 1) % max_rounds == 0:
            scale *= 0.5
    raise RuntimeError("could not place the walkers inside the prior support")


def _unit(label, layout):
    if label in layout.shared_names:
        return layout.spec(label).unit
    return UNITS[label.split(":")[-1]]


def _stop_rule(chain, thin):
    """Ensembles: the autocorrelation-time rule."""
    return enough_taus(chain, thin)


def _chain_stop_rule(chain, thin):
    """NUTS chains: the autocorrelation-time rule and bulk/tail ESS >= ESS_MIN."""
    return enough_ess(chain, thin)


_JOBS = {}


def _run_job(k):
    fn, job = _JOBS[k]
    return fn(**job)


def _worker_signals():
    """Chain workers take SIGTERM and SIGINT as plain signals (the parent handles the user)."""
    signal.signal(signal.SIGTERM, signal.SIG_DFL)
    signal.signal(signal.SIGINT, signal.SIG_IGN)


def _run_all(jobs, processes):
    """Run ``(function, kwargs)`` jobs, in forked processes when ``processes`` > 1.

    If the parent is interrupted (Ctrl-C, or SIGTERM turned into an exception by
    the command line), the workers are terminated with it, never left running.
    """
    if processes <= 1 or len(jobs) == 1:
        return [fn(**job) for fn, job in jobs]
    _JOBS.clear()
    _JOBS.update(enumerate(jobs))
    ctx = multiprocessing.get_context("fork")
    pool = ctx.Pool(processes, initializer=_worker_signals)
    try:
        out = pool.map(_run_job, range(len(jobs)), chunksize=1)
        pool.close()
        return out
    except BaseException:
        pool.terminate()
        raise
    finally:
        pool.join()
        _JOBS.clear()


def _moves(moves):
    if moves is None or moves == "de":
        return default_moves()
    if moves == "stretch":
        return [(emcee.moves.StretchMove(), 1.0)]
    return list(moves)


def _statement(runs, burns, tau, rhat, names, n_steps, max_time, n_ens, what="ensemble",
               ess=None):
    problems = []
    for k, run in enumerate(runs):
        if getattr(run, "n_divergent", 0):
            problems.append(f"{what} {k}: {run.n_divergent} divergent transitions after "
                            "warm-up (the sampler could not follow the posterior's curvature "
                            "there; regions may be under-explored)")
    for k, (run, b) in enumerate(zip(runs, burns, strict=False)):
        kept = run.n_steps - b
        tmax = np.max(tau)
        if what == "chain" and kept < MIN_CHAIN_DRAWS:
            problems.append(f"chain {k}: only {kept} draws kept after burn-in (need at least "
                            f"{MIN_CHAIN_DRAWS} to estimate autocorrelation times and "
                            "percentiles reliably)")
        if not np.isfinite(tmax) or kept < RUN_TAUS * tmax:
            if run.stop_reason == "max_time":
                why = f"the time budget (max_time={max_time} s) ended the run"
            elif run.stop_reason == "n_steps":
                why = f"the fixed number of steps (n_steps={n_steps}) ended the run"
            elif run.stop_reason == "max_steps":
                why = "the step cap (max_steps) ended the run"
            else:
                why = "the rule was met at the last check but not on the final estimate"
            if np.isfinite(tmax):
                problems.append(f"{what} {k}: {kept} steps kept after burn-in = "
                                f"{kept / tmax:.1f} autocorrelation times (need {RUN_TAUS}); "
                                f"{why}")
            else:
                problems.append(f"{what} {k}: the autocorrelation time cannot be measured "
                                f"(chain too short or walkers that never moved); {why}")
    bad = np.flatnonzero(~(rhat < RHAT_MAX))
    if bad.size:
        worst = bad[np.argmax(np.nan_to_num(rhat[bad], nan=np.inf))]
        problems.append(f"R-hat across {n_ens} independent {what}s is {rhat[worst]:.3f} for "
                        f"{names[worst]} (need < {RHAT_MAX}; {plural(bad.size, 'parameter')} "
                        f"{'fails' if bad.size == 1 else 'fail'})")
    if n_ens < 2:
        problems.append(f"only one {what}: R-hat across independent {what}s is unavailable")
    if ess is not None:
        need = ESS_MIN * n_ens
        for kind, values in zip(("bulk", "tail"), ess, strict=True):
            low = np.flatnonzero(~(values >= need))
            if low.size:
                worst = low[np.argmin(np.nan_to_num(values[low], nan=-np.inf))]
                problems.append(f"{kind} ESS is {values[worst]:.0f} for {names[worst]} (need "
                                f">= {ESS_MIN} per {what}, {need} in all)")
    ok_tau = np.where(np.isfinite(tau), tau, np.inf)
    worst_tau = names[int(np.argmax(ok_tau))]
    rule = (f"rule: at least {RUN_TAUS} autocorrelation times per {what} after discarding "
            f"{BURN_TAUS} as burn-in, rank-normalised split R-hat < {RHAT_MAX} (arviz) across "
            f">= 2 {what}s" + (f", bulk and tail ESS >= {ESS_MIN} per {what}"
                               if ess is not None else ""))
    tau_text = (f"{np.max(ok_tau):.3g} steps" if np.isfinite(np.max(ok_tau))
                else "not measurable")
    rhat_max = np.max(np.where(np.isfinite(rhat), rhat, np.inf))
    facts = (f"largest autocorrelation time {tau_text} ({worst_tau}); "
             f"largest R-hat {rhat_max:.4f}")
    if ess is not None:
        low = [np.min(np.where(np.isfinite(v), v, -1.0)) for v in ess]
        low = [f"{x:.0f}" if x >= 0 else "not measurable" for x in low]
        facts += f"; smallest bulk ESS {low[0]}, smallest tail ESS {low[1]}"
    if problems:
        return False, ("NOT CONVERGED: the uncertainties below may be too small or biased. "
                       + "; ".join(problems) + f". ({rule}; {facts})")
    return True, f"CONVERGED ({rule}): {facts}."


@dataclass(frozen=True)
class SamplerOptions:
    """How :func:`sample_posterior` samples; every field is optional.

    Attributes
    ----------
    n_walkers : int, optional
        ``sampler="ensemble"`` only: walkers per ensemble (default
        2 n_dim + 2; at least 2 n_dim).
    n_steps : int, optional
        Kept draws per chain (NUTS) or steps per ensemble.  None: run until
        the convergence rule holds, at most ``max_steps``.
    seed : int
        Seed of the numpy SeedSequence; chain/ensemble k uses child k.
        Nothing is seeded globally.
    progress : bool
        Show a progress bar per chain.
    max_time : float, optional
        Wall-time budget per chain in s.
    n_chains : int, optional
        Independent chains (default 4) or ensembles (default 2); >= 2 for R-hat.
    processes : int, optional
        Chains run in parallel (default: min(n_chains, CPU count)).
    marginalise : bool or sequence of str
        Integrate the frame terms out analytically (see
        :mod:`deepwell.fit.sampling.target`).
    sampler : {"nuts", "ensemble"}
        "nuts": No-U-Turn Hamiltonian chains in coordinates whitened by the
        least-squares covariance, then by the warm-up covariance
        (:mod:`deepwell.fit.sampling.hamiltonian`); "ensemble": emcee ensembles
        (:mod:`deepwell.fit.sampling.ensemble`).
    moves : {"de", "stretch"} or list of (move, weight)
        Ensemble moves: "de" differential evolution 80% + snooker 20%;
        "stretch" emcee's affine-invariant stretch move.
    thin : int, optional
        Ensemble only: store every ``thin``-th step (default max(1, n_dim // 8)).
    n_warmup : int, optional
        NUTS warm-up transitions per chain (default 300).
    max_depth : int
        NUTS tree depth limit.
    adapt_metric : bool
        NUTS: use the warm-up covariance as metric.
    max_draws : int
        Keep at most about this many draws per chain in the result.
    checkpoint_every, check_every : int, optional
        Transitions (NUTS) or steps (ensemble) between checkpoints and between
        convergence checks (50 / 500).
    max_steps : int, optional
        Cap on draws per chain when running to the convergence rule.
    """

    sampler: str = "nuts"
    n_chains: int | None = None
    n_steps: int | None = None
    n_warmup: int | None = None
    n_walkers: int | None = None
    max_time: float | None = None
    seed: int = 0
    progress: bool = True
    processes: int | None = None
    marginalise: object = True
    moves: object = "de"
    thin: int | None = None
    max_depth: int = 8
    adapt_metric: bool = True
    checkpoint_every: int | None = None
    check_every: int | None = None
    max_steps: int | None = None
    max_draws: int = 20_000


def sample_posterior(result, options=SamplerOptions(), checkpoint=None, resume=False):
    """Sample the posterior of a joint fit with independent chains or ensembles.

    Parameters
    ----------
    result : deepwell.fit.FitResult
        The least-squares fit: model, settings and starting point.
    options : SamplerOptions
        Sampler, chain counts and lengths, time budget, seed, progress bars.
    checkpoint : path, optional
        Folder for one HDF5 checkpoint per chain (``chain_<k>.h5``) or
        ensemble (``ensemble_<k>.h5``).
    resume : bool
        Continue the runs in ``checkpoint`` exactly where they stopped;
        refused (CheckpointMismatch) if data, settings or options differ.
    Returns
    -------
    PosteriorResult

    Notes
    -----
    Log-posterior = -1/2 sum(residuals^2) (data, Gaussian priors, penalties of
    :meth:`JointModel.residuals`) + Jacobians of priors on reported
    quantities, -inf outside the bounds; the implied priors are listed in
    ``PosteriorResult.implied_priors``.
    """
    o = options
    sampler, n_ensembles, n_steps, n_warmup = o.sampler, o.n_chains, o.n_steps, o.n_warmup
    n_walkers, max_time, seed, progress, processes = (o.n_walkers, o.max_time, o.seed,
                                                      o.progress, o.processes)
    marginalise, moves, thin, max_depth, adapt_metric = (o.marginalise, o.moves, o.thin,
                                                         o.max_depth, o.adapt_metric)
    checkpoint_every, check_every, max_steps, max_draws = (o.checkpoint_every, o.check_every,
                                                           o.max_steps, o.max_draws)
    if sampler not in ("nuts", "ensemble"):
        raise ValueError(f"sampler must be 'nuts' or 'ensemble', not {sampler!r}")
    t0 = time.monotonic()
    target = LogPosterior(result, marginalise=marginalise)
    ndim = len(target.sampled)
    nuts = sampler == "nuts"
    n_ensembles = int(n_ensembles or (4 if nuts else 2))
    processes = processes or min(n_ensembles, os.cpu_count() or 1)
    if nuts:
        n_walkers, thin, mv = 1, 1, None
    else:
        n_walkers = int(n_walkers or 2 * ndim + 2)
        n_walkers += n_walkers % 2
        if n_walkers < 2 * ndim:
            raise SamplingError(f"{n_walkers} walkers per ensemble are fewer than twice the "
                                f"{ndim} sampled parameters; use at least {2 * ndim} "
                                "(--walkers)")
        thin = int(thin or max(1, ndim // 8))
        mv = _moves(moves)
    base_hash = fingerprint(
        _data_hash(result), result.settings.raw, result.settings.reference_epoch,
        list(result.model.stars), target.names, [target.model.layout.names()[i]
                                                 for i in target.marginal],
        target.base[~np.isin(np.arange(len(target.base)), target.sampled)].tolist(),
        n_walkers, seed, sampler)
    centre = target.base[target.sampled]
    cov = target.start_cov(result.internal_cov)
    jobs = []
    for k in range(n_ensembles):
        rng = np.random.Generator(np.random.PCG64(np.random.SeedSequence(seed, spawn_key=(k,))))
        p0 = start_positions(target, result, n_walkers, rng)
        common = dict(
            rng=rng, fingerprint=f"{base_hash}|chain={k}", resume=resume, max_time=max_time,
            progress=progress, stop_rule=_chain_stop_rule if nuts else _stop_rule,
            position=k)
        if nuts:
            ck = None if checkpoint is None else Path(checkpoint) / f"chain_{k}.h5"
            jobs.append((run_chain, dict(
                target=target, centre=centre, cov=cov, theta0=p0[0], n_warmup=n_warmup or 300,
                n_draws=n_steps, checkpoint=ck, checkpoint_every=checkpoint_every or 50,
                check_every=check_every or 50, max_draws=max_steps or max_draws,
                max_depth=max_depth, adapt_metric=adapt_metric, desc=f"chain {k}", **common)))
        else:
            ck = None if checkpoint is None else Path(checkpoint) / f"ensemble_{k}.h5"
            jobs.append((run_ensemble, dict(
                log_prob=target, p0=p0, n_steps=n_steps, moves=mv, thin=thin, checkpoint=ck,
                checkpoint_every=checkpoint_every or 500, check_every=check_every or 500,
                max_steps=max_steps or 100_000, desc=f"ensemble {k}", **common)))
    if resume:  # every checkpoint is checked before any chain runs on
        for fn, job in jobs:
            fn(**job, check_only=True)
    runs = _run_all(jobs, processes)
    short = [k for k, r in enumerate(runs) if r.n_steps < 4]
    if short:
        what = "chain" if nuts else "ensemble"
        raise SamplingError(
            f"{what}{'' if len(short) == 1 else 's'} {', '.join(map(str, short))} stopped with "
            "fewer than 4 kept draws "
            f"({'; '.join(f'{r.stop_reason}' for r in runs)}): nothing to summarise; "
            "allow more time (--max-time) or steps, or continue with --resume")
    notes = _coordinates_notes(target, centre, cov, runs) if nuts else ()
    return _assemble(result, target, runs, seed, n_steps, max_time, max_draws,
                     time.monotonic() - t0, sampler, notes)


def _coordinates_notes(target, centre, cov, runs):
    """Which stars the chains moved in their position and velocity (and any
    whose draws reach the edge of the state map's node or t_peri window)."""
    coords = SamplingCoordinates(target, centre, cov)
    state = [s for s, k in zip(target.model.stars, coords.kinds, strict=True) if k == "state"]
    text = ("coordinates: " + (", ".join(state) if state else "no star")
            + f" moved in position and velocity at the mean epoch of its data (data span < "
            f"{STATE_ARC:g} of the period); other stars with free elements in mean longitude")
    if coords.log_scale:
        text += "; mass and distance as log GM and log distance"
    draws = np.concatenate([r.chain.reshape(-1, len(centre)) for r in runs])
    edge = [target.model.stars[k] for k, f in coords.window_use(draws).items() if f > 0.4]
    out = (text,)
    if edge:
        text = ("the draws of " + ", ".join(edge) + " reach the edge of the window of node "
                "(one turn) or pericentre epoch (one period) around the least-squares values; "
                "that orbit is barely constrained, and with an integrated orbit or a prior on "
                "those elements the posterior there is cut")
        warnings.warn(SamplingWarning(text), stacklevel=3)
        out += ("WARNING: " + text,)
    return out


def _diagnostics(runs):
    """Sampler facts for the report (NUTS: step sizes, divergences, depth limits)."""
    if not isinstance(runs[0], ChainRun):
        acc = np.concatenate([r.acceptance for r in runs])
        return (f"emcee ensembles; mean acceptance fraction {np.mean(acc):.3f}",)
    out = []
    for k, r in enumerate(runs):
        out.append(f"chain {k}: {r.n_warmup} warm-up + {r.n_steps} kept transitions, step "
                   f"size {r.step_size:.3g}, mean acceptance statistic "
                   f"{float(np.mean(r.accept_stat)) if r.n_steps else float('nan'):.3f}, mean "
                   f"{float(np.mean(r.n_leapfrog)) if r.n_steps else float('nan'):.1f} "
                   f"leapfrog steps, {r.n_gradients} gradient evaluations, "
                   f"{r.n_divergent} divergent, {r.n_max_depth} at the depth limit")
    hit = sum(r.n_max_depth for r in runs)
    if hit:
        out.append(f"{hit} transitions stopped at the tree-depth limit "
                   f"({runs[0].max_depth}): the chains explore slowly there")
    return tuple(out)


def _assemble(result, target, runs, seed, n_steps, max_time, max_draws, elapsed,
              sampler="ensemble", notes=()):
    thin = runs[0].thin
    burns = [burn_in(r.chain, thin) for r in runs]
    kept = [r.chain[b:] for r, b in zip(runs, burns, strict=False)]
    taus = np.array([autocorr_times(c, thin) for c in kept])
    tau = np.max(taus, axis=0)  # nan/inf (unmeasurable) propagate: conservative
    rhat = rank_rhat(kept) if len(runs) > 1 else np.full(len(target.names), np.nan)
    ess = ess_bulk_tail(kept) if sampler == "nuts" else None
    converged, text = _statement(runs, [b * thin for b in burns], tau, rhat, target.names,
                                 n_steps, max_time, len(runs),
                                 "chain" if sampler == "nuts" else "ensemble", ess)
    if not converged:
        warnings.warn(SamplingWarning(text), stacklevel=3)
    n = min(c.shape[0] for c in kept)
    step = max(1, int(np.ceil(n * runs[0].chain.shape[1] / max_draws)))
    theta = np.stack([c[c.shape[0] - n:][::-1][::step][::-1] for c in kept])
    lps = np.stack([r.log_prob[b:][r.log_prob.shape[0] - b - n:][::-1][::step][::-1]
                    for r, b in zip(runs, burns, strict=False)])
    rng = np.random.Generator(np.random.PCG64(np.random.SeedSequence(seed, spawn_key=(1000,))))
    internal = target.recover_linear(theta, rng)
    lay = target.model.layout
    labels = tuple(physical_labels(lay))
    return PosteriorResult(
        labels=labels, units=tuple(_unit(lab, lay) for lab in labels),
        samples=physical_vector(lay, internal), internal_names=tuple(lay.names()),
        internal_samples=internal, log_prob=lps, sampled_names=tuple(target.names),
        acceptance=np.stack([r.acceptance for r in runs]), tau=tau, rhat=rhat,
        n_steps=tuple(r.n_steps for r in runs), burn=tuple(b * thin for b in burns),
        thin=thin * step, n_walkers=runs[0].chain.shape[1], converged=converged,
        statement=text, implied_priors=target.implied_priors(),
        marginalised=tuple(lay.names()[i] for i in target.marginal),
        stop_reasons=tuple(r.stop_reason for r in runs), elapsed=elapsed, seed=seed,
        sampler=sampler, diagnostics=_diagnostics(runs) + tuple(notes),
        ess_bulk=None if ess is None else ess[0], ess_tail=None if ess is None else ess[1])
