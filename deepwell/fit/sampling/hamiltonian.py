"""One Hamiltonian (NUTS) chain: warm-up, adaptation, draws, checkpoints.

Warm-up of ``n_warmup`` transitions (none of them kept)
    * all of it: the step size is adapted by dual averaging
      (:class:`deepwell.fit.sampling.nuts.DualAveraging`);
    * two windows, transitions 10%-35% and 35%-75%: at the end of each the
      window's draws give a new whitening (metric, :func:`adapted_cov`:
      the previous one rescaled to the draws' widths, blended with their
      covariance) and the step-size adaptation starts again from the
      current step size.

Draws
    After the warm-up the step size is frozen at its averaged value and each
    transition is kept.  Without a fixed number of draws the chain runs until
    ``stop_rule`` holds (checked every ``check_every`` draws).

Checkpoints
    The complete state (position, gradient, step-size adaptation, metric,
    warm-up window, draws, random-generator state) goes to one HDF5 file
    written atomically (:func:`deepwell.fit.sampling.backend.save_state`) every
    ``checkpoint_every`` transitions, so a resumed chain continues the
    uninterrupted one bit for bit.
"""

import time
from dataclasses import dataclass

import numpy as np

from .backend import CheckpointError, check_state, load_state, restore_rng, save_state
from .coordinates import COORDS_VERSION, STATE_ARC
from .gradient import WhitenedTarget
from .nuts import DualAveraging, initial_step_size, nuts_step
from .progress import make_progress

__all__ = ["ChainRun", "run_chain", "adapted_cov"]

_KIND = "deepwell-nuts-checkpoint-1"


@dataclass(frozen=True)
class ChainRun:
    """What one NUTS chain produced (the interface of an ensemble run, one walker).

    Attributes
    ----------
    chain : ndarray, shape (n_draws, 1, n_dim)
        Kept draws of the sampled coordinates (after warm-up).
    log_prob : ndarray, shape (n_draws, 1)
    accept_stat, n_leapfrog, diverged : ndarray, shape (n_draws,)
        Per kept transition.
    step_size : float
    n_warmup : int
    n_steps : int
        Kept transitions.
    thin : int
        Always 1.
    stop_reason : str
    elapsed : float
    max_depth : int
    n_gradients : int
        Gradient evaluations over the whole run, warm-up included.
    """

    chain: np.ndarray
    log_prob: np.ndarray
    accept_stat: np.ndarray
    n_leapfrog: np.ndarray
    diverged: np.ndarray
    step_size: float
    n_warmup: int
    n_steps: int
    thin: int
    stop_reason: str
    elapsed: float
    max_depth: int
    n_gradients: int

    @property
    def acceptance(self):
        """Mean acceptance statistic (one entry: one 'walker')."""
        return np.array([float(np.mean(self.accept_stat)) if self.n_steps else np.nan])

    @property
    def n_divergent(self):
        return int(np.sum(self.diverged))

    @property
    def n_max_depth(self):
        """Kept transitions that stopped at the depth limit."""
        return int(np.sum(self.n_leapfrog >= 2 ** self.max_depth - 1))


def adapted_cov(draws, prior_cov, max_ratio=20.0):
    """Metric from warm-up draws: ``prior_cov`` rescaled to the draws' widths,
    then shrunk towards the draws' own covariance with weight n / (n + n_dim).

    The least-squares covariance has the right correlations for a
    well-measured orbit but can be too narrow by large factors for a partly
    covered one; rescaling each coordinate to its warm-up standard deviation
    (ratios clipped to [1/max_ratio, max_ratio]) corrects the widths with only
    n_dim numbers estimated, and the dense part adds correlations where the
    draws are many enough to show them.
    """
    x = np.asarray(draws, float)
    n, d = x.shape
    if n < 2:
        return prior_cov
    c = np.cov(x, rowvar=False)
    ratio = np.sqrt(np.clip(np.diag(c), 1e-300, None) / np.diag(prior_cov))
    ratio = np.clip(ratio, 1.0 / max_ratio, max_ratio)
    scaled = prior_cov * np.outer(ratio, ratio)
    w = n / (n + 5.0 * d)
    return w * c + (1.0 - w) * scaled


def _check_chain_state(path, arr, att, n, n_warmup):
    """Refuse a NUTS checkpoint with missing entries or shapes that do not fit ``n`` parameters."""
    dims = check_state(path, arr, att,
                       {"z": ("D",), "grad": ("D",), "metric": ("D", "D"),
                        "dual": (len(DualAveraging(1.0).state()),), "window": ("M", "D"),
                        "chain": ("S", "D"), "log_prob": ("S",), "stats": ("S", 3)},
                       {"fingerprint": "str", "rng_state": "state", "eps": "positive",
                        "log_prob": "float", "iteration": "int", "n_grad": "int",
                        "elapsed": "float"}, {"D": n})
    if dims["S"] != max(0, int(att["iteration"]) - n_warmup):
        raise CheckpointError(f"{path}: damaged checkpoint ({dims['S']} draws after "
                              f"{att['iteration']} transitions of which {n_warmup} warm-up); "
                              "refusing to resume. Start a new run without --resume.")


def run_chain(target, centre, cov, theta0, rng, n_warmup=300, n_draws=None, *,
              checkpoint=None, fingerprint="", resume=False, checkpoint_every=50,
              max_time=None, progress=False, stop_rule=None, check_every=50,
              max_draws=20_000, min_draws=200, max_depth=8, adapt_metric=True,
              desc="chain", position=0, state_arc=STATE_ARC, check_only=False):
    """Run one NUTS chain on a :class:`~deepwell.fit.sampling.target.LogPosterior`.

    Parameters
    ----------
    target : LogPosterior
    centre, cov : ndarray
        Least-squares values and covariance of the sampled coordinates (the
        first whitening).
    theta0 : ndarray
        Starting point (inside the support).
    rng : numpy.random.Generator
        Source of every random number (modified in place; saved in checkpoints).
    n_warmup : int
    n_draws : int, optional
        Kept draws; None: until ``stop_rule(chain, 1)`` holds and at least
        ``min_draws`` are kept, at most ``max_draws``.
    checkpoint, fingerprint, resume, checkpoint_every :
        HDF5 checkpointing as in :func:`deepwell.fit.sampling.ensemble.run_ensemble`.
    max_time : float, optional
        Wall-time budget (s) of this session.
    max_depth : int
        Tree depth limit (at most 2**max_depth - 1 leapfrog steps).
    adapt_metric : bool
        Replace the least-squares whitening by the warm-up covariance.
    state_arc : float
        Stars whose data span less than this fraction of their period move in
        their position and velocity (:mod:`deepwell.fit.sampling.coordinates`).

    check_only : bool
        With ``resume``: only read and check the checkpoint (CheckpointError if it
        cannot be resumed) and return None.

    Returns
    -------
    ChainRun
    """
    fingerprint = (f"{fingerprint}|nuts|warmup={n_warmup}|depth={max_depth}|"
                   f"metric={adapt_metric}|coords={COORDS_VERSION}|state_arc={state_arc}")
    prior_cov = np.asarray(cov, float)
    windows = [(int(0.1 * n_warmup), int(0.35 * n_warmup)),
               (int(0.35 * n_warmup), int(0.75 * n_warmup))]
    if resume:
        if checkpoint is None:
            raise ValueError("resume=True needs a checkpoint file")
        arr, att = load_state(checkpoint, fingerprint, kind=_KIND)
        _check_chain_state(checkpoint, arr, att, len(centre), n_warmup)
        restore_rng(checkpoint, rng, att["rng_state"])
        if check_only:
            return None
        wt = WhitenedTarget(target, centre, prior_cov, cov_u=arr["metric"],
                            state_arc=state_arc)
        z, lp, grad = arr["z"], float(att["log_prob"]), arr["grad"]
        eps = float(att["eps"])
        da = DualAveraging.from_state(list(arr["dual"]))
        it, elapsed0, n_grad = int(att["iteration"]), float(att["elapsed"]), int(att["n_grad"])
        window = list(arr["window"])
        draws, lps = list(arr["chain"]), list(arr["log_prob"])
        stats = [tuple(row) for row in arr["stats"]]
    else:
        wt = WhitenedTarget(target, centre, prior_cov, state_arc=state_arc)
        z = wt.whiten(np.asarray(theta0, float))
        lp, grad = wt(z)
        if not (np.isfinite(lp) and np.all(np.isfinite(grad))):
            raise ValueError("the starting point has zero posterior probability")
        eps = initial_step_size(wt, z, lp, grad, rng)
        da = DualAveraging(eps)
        it, elapsed0, n_grad = 0, 0.0, 0
        window, draws, lps, stats = [], [], [], []

    target_draws = n_draws if n_draws is not None else max_draws
    bar = make_progress(progress, total=n_warmup + target_draws, initial=it, desc=desc,
                        position=position, max_time=max_time,
                        open_ended=n_draws is None and stop_rule is not None)
    t0 = time.monotonic()
    reason = "n_steps" if n_draws is not None else "max_steps"
    n_div = sum(s[2] for s in stats)

    def save():
        save_state(checkpoint, {
            "z": z, "grad": grad, "metric": wt.cov, "dual": np.array(da.state(), float),
            "window": np.array(window, float).reshape(-1, wt.n),
            "chain": np.array(draws, float).reshape(-1, wt.n),
            "log_prob": np.array(lps, float), "stats": np.array(stats, float).reshape(-1, 3)},
            {"fingerprint": fingerprint, "rng_state": rng.bit_generator.state, "eps": eps,
             "log_prob": lp, "iteration": it, "n_grad": n_grad,
             "elapsed": elapsed0 + time.monotonic() - t0}, kind=_KIND)

    def chain_view():
        return np.array(draws, float).reshape(-1, 1, wt.n)

    try:
        while len(draws) < target_draws:
            if max_time is not None and time.monotonic() - t0 > max_time:
                reason = "max_time"
                break
            tr = nuts_step(wt, z, lp, grad, eps, rng, max_depth)
            z, lp, grad = tr.z, tr.log_prob, tr.grad
            n_grad += tr.n_leapfrog
            it += 1
            if it <= n_warmup:
                eps = da.update(tr.accept_stat)
                if adapt_metric and any(lo < it <= hi for lo, hi in windows):
                    window.append(wt.u(z))
                if adapt_metric and any(it == hi for _, hi in windows) and len(window) > 1:
                    theta = wt.theta(z)
                    wt = WhitenedTarget(target, centre, prior_cov, state_arc=state_arc,
                                        cov_u=adapted_cov(window, wt.cov))
                    z = wt.whiten(theta)
                    lp, grad = wt(z)
                    eps = initial_step_size(wt, z, lp, grad, rng, eps)
                    da = DualAveraging(eps)
                    window = []
                if it == n_warmup:
                    eps = da.final
            else:
                draws.append(wt.theta(z))
                lps.append(lp - float(wt.log_det(wt.u(z))))  # log-posterior of theta
                stats.append((tr.accept_stat, tr.n_leapfrog, tr.diverged))
                n_div += tr.diverged
            bar.update(1)
            bar.set_postfix_str(f"step {eps:.3g}, {n_div} divergent", refresh=False)
            if checkpoint is not None and it % checkpoint_every == 0:
                save()
            if (n_draws is None and stop_rule is not None and draws
                    and len(draws) % check_every == 0 and len(draws) >= min_draws
                    and stop_rule(chain_view(), 1)):
                reason = "converged"
                break
        if checkpoint is not None and it % checkpoint_every != 0:
            save()
    finally:
        bar.close()
    st = np.array(stats, float).reshape(-1, 3)
    return ChainRun(chain=chain_view(), log_prob=np.array(lps, float).reshape(-1, 1),
                    accept_stat=st[:, 0], n_leapfrog=st[:, 1].astype(int),
                    diverged=st[:, 2].astype(bool), step_size=float(eps), n_warmup=n_warmup,
                    n_steps=len(draws), thin=1, stop_reason=reason,
                    elapsed=elapsed0 + time.monotonic() - t0, max_depth=max_depth,
                    n_gradients=n_grad)
