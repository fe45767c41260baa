"""Bayesian evidence of a fitted model: Laplace approximation and nested sampling.

The evidence (marginal likelihood) of a model with parameters theta is
Z = integral of L(theta) pi(theta) d theta, with L normalised as a density of
the data and pi the proper prior of :mod:`deepwell.fit.stated_prior`.  Two
ways to compute it:

* :func:`laplace_evidence` -- the Laplace approximation at the least-squares
  best fit: ln Z = ln L(theta^) + ln pi(theta^) + d/2 ln(2 pi) + 1/2 ln det C,
  with C the covariance (J^T J)^-1 of the fit (priors' rows included).  Exact
  for a linear model with Gaussian errors and a Gaussian prior; for uniform
  priors exact while the posterior lies well inside the box.  Costs nothing
  beyond the fit.
* :func:`nested_evidence` -- nested sampling with dynesty (Skilling 2004, AIP
  Conf. Proc. 735, 395; Speagle 2020, MNRAS 493, 3132), giving ln Z and its
  statistical uncertainty; the cost grows with the number of parameters and
  the information (ln of prior over posterior volume), so it is meant for
  models of modest dimension (see ``tests/benchmarks/bench_evidence.py``).

Normalisation of the likelihood
-------------------------------
The model's residuals r have sum of squares -2 ln L up to a constant (see
:meth:`deepwell.model.JointModel.residuals`); with the stated errors C_i of
every row (2x2 for positions) the constant is::

    ln L = -1/2 (sum r^2 - K) - N/2 ln(2 pi) - 1/2 sum_i ln det C_i

where K is the constant the residual transforms add (1 for the mixture
likelihood's extra row, 2 m ln(1/s_min) + 1 per fitted error term), so that
ln Z is a proper log density of the N data.  The Gaussian priors' residual
rows are the prior, not the likelihood: nested sampling draws them through
the prior transform.
"""

import time
from dataclasses import dataclass

import numpy as np

from deepwell.tables.datasets import SCALE_MIN

from .stated_prior import DEFAULT_WIDTH, stated_prior

__all__ = ["EvidenceResult", "ModelLikelihood", "evidence", "laplace_evidence",
           "laplace_log_evidence", "nested_evidence", "nested_log_evidence"]

#: A log-likelihood below which a point counts as impossible (dynesty wants finite values).
LOG_ZERO = -1e300


@dataclass(frozen=True)
class EvidenceResult:
    """The log-evidence of one model and how it was obtained.

    Attributes
    ----------
    log_evidence : float
        ln Z (natural log of a probability density of the data in their units).
    log_evidence_err : float
        Statistical 1-sigma uncertainty of ln Z (nested sampling); NaN for the
        Laplace approximation, whose approximation error is not estimated.
    method : str
        "laplace" or "nested".
    prior : tuple of str
        The stated prior, one line per piece (see :class:`StatedPrior.describe`).
    n_calls : int
        Log-likelihood evaluations used (1 for Laplace: the covariance is the fit's).
    seconds : float
        Wall time (s).
    n_dim : int
        Number of parameters integrated over.
    finished : bool
        False when nested sampling stopped at its call or time budget before its
        convergence rule; ln Z is then an underestimate.
    n_iterations : int
        Nested-sampling iterations (0 for Laplace).
    log_likelihood_max : float
        Largest ln L found (at the best fit for Laplace).
    notes : tuple of str
        Warnings for the report (a posterior near a prior edge, a run cut short).
    """

    log_evidence: float
    log_evidence_err: float
    method: str
    prior: tuple
    n_calls: int
    seconds: float
    n_dim: int
    finished: bool = True
    n_iterations: int = 0
    log_likelihood_max: float = float("nan")
    notes: tuple = ()


# --------------------------------------------------------------- generic cores
def laplace_log_evidence(log_peak, cov):
    """Laplace approximation of ln of the integral of exp(f(theta)) over R^d.

    Parameters
    ----------
    log_peak : float
        f at its maximum: ln L + ln pi (normalised prior) at the posterior mode.
    cov : ndarray, shape (d, d)
        Inverse of the Hessian of -f at the mode (the posterior covariance).

    Returns
    -------
    float
        log_peak + d/2 ln(2 pi) + 1/2 ln det cov (MacKay 2003, Information
        Theory, Inference and Learning Algorithms, ch. 27, from memory).

    Raises
    ------
    ValueError
        If ``cov`` is not positive definite (a parameter the data do not constrain).
    """
    cov = np.atleast_2d(np.asarray(cov, dtype=float))
    d = cov.shape[0]
    if d == 0:
        return float(log_peak)
    var = np.diag(cov)
    if not np.all(var > 0):
        raise ValueError("the Laplace evidence needs a positive-definite covariance; a "
                         "parameter has no variance (fix it or give it a prior)")
    scale = np.sqrt(var)
    corr = cov / np.outer(scale, scale)  # det C = det(correlation) prod(variances)
    eig = np.linalg.eigvalsh(0.5 * (corr + corr.T))
    if not eig[0] > 1e-12 * eig[-1]:
        raise ValueError("the Laplace evidence needs a positive-definite covariance; some "
                         "parameter combination is not constrained by the data (fix it or "
                         "give it a prior)")
    logdet = np.sum(np.log(eig)) + np.sum(np.log(var))
    return float(log_peak + 0.5 * d * np.log(2.0 * np.pi) + 0.5 * logdet)


def nested_log_evidence(log_likelihood, prior, nlive=None, dlogz=0.5, rng=None,
                        max_calls=None, max_seconds=None, sample="auto"):
    """ln Z by static nested sampling with dynesty.

    Parameters
    ----------
    log_likelihood : callable
        ln L of one coordinate vector (shape (ndim,)) -> float; -inf allowed.
    prior : deepwell.fit.stated_prior.StatedPrior
        The prior; its :meth:`~StatedPrior.transform` maps the unit cube.
    nlive : int, optional
        Live points (default max(100, 10 ndim)).
    dlogz : float
        Stop when the remaining prior volume could add less than this to ln Z.
    rng : numpy.random.Generator, optional
    max_calls : int, optional
        Budget of likelihood calls; the run is then marked unfinished.
    max_seconds : float, optional
        Budget of wall time (s), checked after every iteration.
    sample : str
        dynesty's sampling method ("auto": uniform in ellipsoids below 10
        dimensions, random walks up to 20, slices above).

    Returns
    -------
    dict
        ``log_evidence``, ``log_evidence_err``, ``n_calls``, ``n_iterations``,
        ``iteration_calls`` (calls spent on each iteration's new point), ``finished``,
        ``log_likelihood_max``, ``seconds``.
    """
    import dynesty  # lazy: a heavy optional library, needed only for nested runs

    rng = np.random.default_rng() if rng is None else rng
    ndim = prior.ndim
    nlive = max(100, 10 * ndim) if nlive is None else int(nlive)

    def loglike(theta):
        with np.errstate(all="ignore"):
            v = float(log_likelihood(theta))
        return v if np.isfinite(v) else LOG_ZERO

    t0 = time.perf_counter()
    sampler = dynesty.NestedSampler(loglike, prior.transform, ndim, nlive=nlive,
                                    bound="multi", sample=sample, rstate=rng)
    finished = True
    budget = np.inf if max_seconds is None else float(max_seconds)
    calls = sampler.ncall
    for res in sampler.sample(dlogz=dlogz, add_live=False, maxcall=None):
        calls += res.nc
        if (max_calls is not None and calls >= max_calls) or time.perf_counter() - t0 > budget:
            finished = bool(res.delta_logz < dlogz)
            break
    for _ in sampler.add_live_points():
        pass
    out = sampler.results
    return {
        "log_evidence": float(out.logz[-1]),
        "log_evidence_err": float(out.logzerr[-1]),
        "n_calls": int(np.sum(out.ncall)),
        "n_iterations": int(out.niter),
        "iteration_calls": np.asarray(out.ncall[:int(out.niter)], dtype=int),
        "finished": finished,
        "log_likelihood_max": float(np.max(out.logl)),
        "seconds": time.perf_counter() - t0,
    }


# ------------------------------------------------------------ deepwell models
class ModelLikelihood:
    """Normalised ln L of a fitted deepwell model over its free internal entries.

    Parameters
    ----------
    result : deepwell.fit.result.FitResult
        Supplies the model and the values of the fixed entries.

    Notes
    -----
    ln L = -1/2 (sum r^2 - K) + constant, over the data rows, the residual
    transforms' rows and the eccentricity penalty (zero inside the prior); the
    Gaussian priors' rows are left out (see the module docstring).
    """

    def __init__(self, result):
        self.model = result.model
        self.base = np.asarray(result.internal, dtype=float).copy()
        self.free = np.flatnonzero(result.free)
        self.n_rows = self.model.residuals(self.base).shape[-1] - len(self.model.priors)
        self.constant = log_likelihood_constant(self.model, self.base)
        self.calls = 0

    def vectors(self, theta):
        theta = np.asarray(theta, dtype=float)
        vec = np.broadcast_to(self.base, theta.shape[:-1] + self.base.shape).copy()
        vec[..., self.free] = theta
        return vec

    def __call__(self, theta):
        """ln L at coordinates ``theta``, shape (..., n_free)."""
        theta = np.asarray(theta, dtype=float)
        self.calls += int(np.prod(theta.shape[:-1], dtype=int))
        r = self.model.residuals(self.vectors(theta))[..., :self.n_rows]
        return -0.5 * np.sum(r * r, axis=-1) + self.constant


def log_likelihood_constant(model, vec):
    """The constant that makes -1/2 sum r^2 a normalised ln L (module docstring).

    Parameters
    ----------
    model : deepwell.model.JointModel
    vec : ndarray
        An internal vector (only the kinds of residual transforms matter).

    Returns
    -------
    float
        K/2 - N/2 ln(2 pi) - 1/2 sum ln det C_i, errors in mas and km/s.
    """
    pos = model.pos
    logdet = np.sum(2.0 * np.log(pos.ra_err) + 2.0 * np.log(pos.dec_err)
                    + np.log1p(-pos.corr**2))
    if model.vel is not None:
        logdet += np.sum(2.0 * np.log(model.vel.vr_err))
    offset = 0.0
    ds = model.datasets
    if ds is not None:
        offset += 1.0 if ds.mixture else 0.0
        if ds.n_norm_rows():
            for _, _, m in ds.errors(model, vec)[4]:
                offset += 2.0 * m * np.log(1.0 / SCALE_MIN) + 1.0
    return float(0.5 * offset - 0.5 * model.n_data * np.log(2.0 * np.pi) - 0.5 * logdet)


def _edge_notes(prior, theta, sigma, method):
    out = []
    for name, d in prior.edge_distance(theta, sigma):
        if d < 3.0:
            out.append(f"{name} lies {d:.1f} standard errors from the edge of its prior box, "
                       f"so the posterior is cut there and the {method} evidence is "
                       "unreliable; widen the box or fix the parameter")
    return out


def laplace_evidence(result, prior=None, width=DEFAULT_WIDTH, reference=None):
    """ln Z of a fitted model by the Laplace approximation at its best fit.

    Parameters
    ----------
    result : deepwell.fit.result.FitResult
    prior : StatedPrior, optional
        Default: ``stated_prior(result, width, reference)``.
    width : float
        Half-width of the default prior's boxes, in standard errors.
    reference : FitResult, optional
        The fit that centres the default prior's boxes (the same for every model
        compared; default ``result``).

    Returns
    -------
    EvidenceResult

    Notes
    -----
    ln Z = ln L(theta^) + ln pi(theta^) + d/2 ln(2 pi) + 1/2 ln det C, with
    C the fit's covariance of the free internal entries, from J^T J of all
    residual rows, the Gaussian priors' rows included (the exact Fisher
    information for fitted error terms).  A uniform prior enters as its
    constant density; the approximation ignores any part of the posterior
    cut by a prior edge (a note says when the best fit is within 3 standard
    errors of one).
    """
    t0 = time.perf_counter()
    prior = stated_prior(result, width, reference) if prior is None else prior
    like = ModelLikelihood(result)
    theta = result.internal[like.free]
    cov = result.internal_cov[np.ix_(like.free, like.free)]
    log_l = float(like(theta))
    log_pi = float(prior.log_density(theta))
    notes = _edge_notes(prior, theta, np.sqrt(np.clip(np.diag(cov), 0, None)), "Laplace")
    if not np.isfinite(log_pi):
        raise ValueError("the best fit lies outside the stated prior")
    log_z = laplace_log_evidence(log_l + log_pi, cov)
    notes.append("Laplace approximation at the best fit (Gaussian posterior from J^T J); "
                 "its approximation error is not estimated")
    return EvidenceResult(log_evidence=log_z, log_evidence_err=float("nan"), method="laplace",
                          prior=prior.describe(), n_calls=like.calls,
                          seconds=time.perf_counter() - t0, n_dim=len(theta),
                          log_likelihood_max=log_l, notes=tuple(notes))


def nested_evidence(result, prior=None, width=DEFAULT_WIDTH, reference=None, rng=None,
                    nlive=None, dlogz=0.5, max_calls=None, max_seconds=None):
    """ln Z of a fitted model and its uncertainty by nested sampling (dynesty).

    Parameters
    ----------
    result : deepwell.fit.result.FitResult
    prior : StatedPrior, optional
        Default: ``stated_prior(result, width, reference)``.
    width : float
        Half-width of the default prior's boxes, in standard errors.
    reference : FitResult, optional
        The fit that centres the default prior's boxes (the same for every model
        compared; default ``result``).
    rng : numpy.random.Generator, optional
    nlive, dlogz, max_calls, max_seconds :
        See :func:`nested_log_evidence`.

    Returns
    -------
    EvidenceResult
        ``finished`` is False if a budget stopped the run (ln Z then too low).
    """
    prior = stated_prior(result, width, reference) if prior is None else prior
    like = ModelLikelihood(result)
    run = nested_log_evidence(like, prior, nlive=nlive, dlogz=dlogz, rng=rng,
                              max_calls=max_calls, max_seconds=max_seconds)
    notes = [f"nested sampling (dynesty, {run['n_iterations']} iterations, stop at "
             f"delta ln Z < {dlogz:g})"]
    if not run["finished"]:
        notes.append("NOT FINISHED: the run stopped at its budget before its convergence "
                      "rule; ln Z is an underestimate")
    return EvidenceResult(log_evidence=run["log_evidence"],
                          log_evidence_err=run["log_evidence_err"], method="nested",
                          prior=prior.describe(), n_calls=run["n_calls"],
                          seconds=run["seconds"], n_dim=prior.ndim,
                          finished=run["finished"], n_iterations=run["n_iterations"],
                          log_likelihood_max=run["log_likelihood_max"], notes=tuple(notes))


def evidence(result, method="laplace", prior=None, width=DEFAULT_WIDTH, reference=None,
             **options):
    """ln Z of a fitted model by ``method`` ("laplace" or "nested"); see those functions."""
    if method == "laplace":
        if options:
            raise TypeError(f"the Laplace evidence takes no option {sorted(options)[0]!r}")
        return laplace_evidence(result, prior=prior, width=width, reference=reference)
    if method == "nested":
        return nested_evidence(result, prior=prior, width=width, reference=reference,
                               **options)
    raise ValueError(f"unknown evidence method {method!r}: use 'laplace' or 'nested'")
