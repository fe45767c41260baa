"""The ensemble loop: emcee proposal moves driven step by step.

The loop is deliberately thin.  It receives a vectorised log-probability, the
starting positions, a :class:`numpy.random.Generator` and a small set of
options; emcee's differential-evolution moves make the proposals; storage
goes through :mod:`deepwell.fit.sampling.backend`; progress goes to a tqdm bar
(stderr a terminal), to log lines every 5% (stderr a file or pipe) or to a
do-nothing object with the same interface, so the loop has no ``if progress``
branches.

Why not ``emcee.EnsembleSampler`` itself: it draws from a legacy
``RandomState``.  Driving emcee's moves directly lets every random number come
from the Generator passed in, whose bit-generator state is saved with each
checkpoint, so a resumed run continues the uninterrupted one bit for bit.
"""

import logging
import time
from dataclasses import dataclass

import emcee
import numpy as np

from .backend import Checkpoint, CheckpointError, load_checkpoint, restore_rng, save_checkpoint
from .progress import LineProgress, NoProgress, make_progress

__all__ = ["EnsembleRun", "default_moves", "run_ensemble", "NoProgress", "LineProgress",
           "make_progress"]

log = logging.getLogger("deepwell")


class _GeneratorAdapter:
    """The few ``RandomState`` methods emcee's moves call, served by a Generator."""

    def __init__(self, rng):
        self.rng = rng

    def rand(self, *shape):
        return self.rng.random(shape) if shape else self.rng.random()

    def randn(self, *shape):
        return self.rng.standard_normal(shape) if shape else self.rng.standard_normal()

    def randint(self, low, high=None, size=None):
        return self.rng.integers(low, high, size=size)

    def choice(self, a, size=None, replace=True, p=None):
        return self.rng.choice(a, size=size, replace=replace, p=p)

    def shuffle(self, x):
        self.rng.shuffle(x)


def default_moves():
    """Differential evolution (80%) with the snooker variant (20%).

    References
    ----------
    ter Braak 2006, Stat. Comput. 16, 239; ter Braak & Vrugt 2008, Stat.
    Comput. 18, 435; Nelson, Ford & Payne 2014, ApJS 210, 11.
    """
    return [(emcee.moves.DEMove(), 0.8), (emcee.moves.DESnookerMove(), 0.2)]


def describe_moves(moves):
    """Short text of moves and weights (part of the checkpoint fingerprint)."""
    parts = []
    for move, w in moves:
        opts = {k: v for k, v in vars(move).items() if isinstance(v, (int, float, bool, str))}
        parts.append(f"{type(move).__name__}{sorted(opts.items())}@{w:g}")
    return ";".join(parts)


@dataclass(frozen=True)
class EnsembleRun:
    """What one ensemble produced.

    Attributes
    ----------
    chain : ndarray, shape (n_stored, n_walkers, n_dim)
        Positions after steps ``thin, 2 thin, ...`` (step 0, the start, is not stored).
    log_prob : ndarray, shape (n_stored, n_walkers)
    accepted : ndarray of int, shape (n_walkers,)
        Accepted proposals per walker over all ``n_steps``.
    n_steps : int
        Steps taken in total (including steps before a resume).
    thin : int
    stop_reason : str
        ``"n_steps"``, ``"converged"``, ``"max_time"`` or ``"max_steps"``.
    elapsed : float
        Wall time in s over all sessions of this run.
    coords, last_log_prob : ndarray
        Final walker positions and their log-probabilities.
    resumed_at : int
        Step at which this session resumed (0 for a fresh run).
    """

    chain: np.ndarray
    log_prob: np.ndarray
    accepted: np.ndarray
    n_steps: int
    thin: int
    stop_reason: str
    elapsed: float
    coords: np.ndarray
    last_log_prob: np.ndarray
    resumed_at: int = 0

    @property
    def acceptance(self):
        """Fraction of accepted proposals per walker."""
        return self.accepted / max(self.n_steps, 1)


def _log_prob_fn(log_prob):
    def compute(coords):
        lp = np.asarray(log_prob(coords), dtype=float)
        return np.where(np.isnan(lp), -np.inf, lp), None
    return compute


def run_ensemble(log_prob, p0, rng, n_steps=None, *, moves=None, thin=1, checkpoint=None,
                 fingerprint="", resume=False, checkpoint_every=500, max_time=None,
                 progress=False, stop_rule=None, check_every=500, max_steps=100_000,
                 desc="sampling", position=0, check_only=False):
    """Run one ensemble of walkers.

    Parameters
    ----------
    log_prob : callable
        Vectorised log-probability: array (n, n_dim) -> array (n,); -inf outside
        the support.
    p0 : ndarray, shape (n_walkers, n_dim), or None when resuming
        Starting positions (only their shape is checked when resuming).
    rng : numpy.random.Generator
        Source of every random number; its state is saved with each
        checkpoint and restored on resume (the Generator is modified in place).
    n_steps : int, optional
        Total number of steps.  None: run until ``stop_rule`` holds, checked
        every ``check_every`` steps, at most ``max_steps``.
    moves : list of (emcee move, weight), optional
        Default :func:`default_moves`.
    thin : int
        Store every ``thin``-th step.
    checkpoint : path, optional
        HDF5 file written every ``checkpoint_every`` steps and at the end.
    fingerprint : str
        Hash of whatever defines the target (data, settings, options); a
        resume refuses a file with another fingerprint.
    resume : bool
        Continue from ``checkpoint``.
    max_time : float, optional
        Wall-time budget in s for this session; the run stops early with
        ``stop_reason="max_time"``.
    progress : bool or object
        True for a tqdm bar, False for none, or an object with ``update`` and
        ``close``.
    stop_rule : callable, optional
        ``stop_rule(chain, thin) -> bool`` on the stored chain.
    check_only : bool
        With ``resume``: only read and check the checkpoint (CheckpointError if it
        cannot be resumed) and return None.

    Returns
    -------
    EnsembleRun
    """
    moves = default_moves() if moves is None else list(moves)
    weights = np.array([w for _, w in moves], float)
    weights /= weights.sum()
    thin = int(thin)
    if thin < 1:
        raise ValueError("thin must be a positive integer")
    fingerprint = f"{fingerprint}|thin={thin}|moves={describe_moves(moves)}"
    compute = _log_prob_fn(log_prob)
    random = _GeneratorAdapter(rng)
    model = emcee.model.Model(log_prob, compute, map, random)

    if resume:
        if checkpoint is None:
            raise ValueError("resume=True needs a checkpoint file")
        dims = {} if p0 is None else dict(zip("WD", np.shape(p0), strict=True))
        ck = load_checkpoint(checkpoint, fingerprint, dims)
        if len(ck.chain) != ck.step // thin:
            raise CheckpointError(f"{checkpoint}: damaged checkpoint ({len(ck.chain)} stored "
                                  f"steps after {ck.step} steps thinned by {thin}); refusing "
                                  "to resume. Start a new run without --resume.")
        restore_rng(checkpoint, rng, ck.rng_state)
        if check_only:
            return None
        chains, lps = [ck.chain], [ck.log_prob]
        coords, lp, accepted = ck.coords.copy(), ck.last_log_prob.copy(), ck.accepted.copy()
        step, elapsed0 = ck.step, ck.elapsed
    else:
        coords = np.array(p0, dtype=float)
        lp, _ = compute(coords)
        if not np.all(np.isfinite(lp)):
            raise ValueError(f"{np.sum(~np.isfinite(lp))} starting position(s) have zero "
                             "posterior probability")
        chains = [np.empty((0,) + coords.shape)]
        lps = [np.empty((0, coords.shape[0]))]
        accepted = np.zeros(coords.shape[0], np.int64)
        step, elapsed0 = 0, 0.0
    resumed_at = step

    target = n_steps if n_steps is not None else max_steps
    bar = make_progress(progress, total=target, initial=step, desc=desc, position=position,
                        max_time=max_time, open_ended=n_steps is None and stop_rule is not None)
    buf_c, buf_l = [], []
    t0 = time.monotonic()
    state = emcee.State(coords, log_prob=lp)
    reason = "n_steps" if n_steps is not None else "max_steps"

    def stored():
        return (np.concatenate(chains + [np.asarray(buf_c).reshape((-1,) + coords.shape)]),
                np.concatenate(lps + [np.asarray(buf_l).reshape(-1, coords.shape[0])]))

    def save():
        ch, lg = stored()
        save_checkpoint(checkpoint, Checkpoint(
            chain=ch, log_prob=lg, coords=state.coords, last_log_prob=state.log_prob,
            accepted=accepted, step=step, rng_state=rng.bit_generator.state,
            fingerprint=fingerprint, elapsed=elapsed0 + time.monotonic() - t0))

    try:
        while step < target:
            if max_time is not None and time.monotonic() - t0 > max_time:
                reason = "max_time"
                break
            move = moves[random.choice(len(moves), p=weights)][0]
            state, acc = move.propose(model, state)
            accepted += acc
            step += 1
            if step % thin == 0:
                buf_c.append(state.coords.copy())
                buf_l.append(state.log_prob.copy())
            bar.update(1)
            if checkpoint is not None and step % checkpoint_every == 0:
                save()
            if n_steps is None and stop_rule is not None and step % check_every == 0:
                if stop_rule(stored()[0], thin):
                    reason = "converged"
                    break
        if checkpoint is not None and step % checkpoint_every != 0:
            save()
    finally:
        bar.close()
    ch, lg = stored()
    return EnsembleRun(chain=ch, log_prob=lg, accepted=accepted, n_steps=step, thin=thin,
                       stop_reason=reason, elapsed=elapsed0 + time.monotonic() - t0,
                       coords=state.coords, last_log_prob=state.log_prob, resumed_at=resumed_at)
