"""The log-posterior of the joint model, with the linear frame terms integrated out.

Sampled coordinates are the free entries of the internal vector
(:mod:`deepwell.core.parameters`): mass, distance, the frame terms, and per star
period, sqrt(e) cos w, sqrt(e) sin w, cos i, node, t_peri.  A flat density in
these coordinates implies, for the reported quantities:

* mass, distance: uniform between their bounds;
* a: p(a) proportional to a^(1/2) at fixed mass and distance (uniform in period);
* e and w: uniform (the map (e, w) -> (sqrt(e) cos w, sqrt(e) sin w) has the
  constant Jacobian 1/2);
* inclination: uniform in cos i, i.e. p(i) proportional to sin i (isotropic);
* node, t_peri, frame terms: uniform.

A Gaussian prior set on ``a`` or ``inc`` multiplies these by the Jacobian of
the sampled coordinate, so that the stated prior is a prior on the reported
quantity itself with a uniform base: log|da/dP| = log(2a/3P) for ``a`` and
log|di/dcos i| = -log(sin i) for ``inc``.  Priors on e, peri_arg, node,
t_peri and on shared parameters need no Jacobian.

Analytic marginalisation
------------------------
x0, y0, vx0, vy0, vz0 enter the whitened residuals linearly with a design
matrix A that does not depend on the other parameters:
r(theta, beta) = r0(theta) - A beta.  With a flat prior on beta::

    log int exp(-|r|^2/2) d beta = -|r0 - A beta_hat|^2 / 2
                                   + p/2 log(2 pi) - 1/2 log det(A^T A),
    beta_hat = (A^T A)^-1 A^T r0,

and beta given theta is Gaussian with mean beta_hat and covariance
(A^T A)^-1.  The linearity is checked numerically at construction; if it
fails (a model piece that couples the frame terms to the orbits), the terms
are sampled instead, with a warning.
"""

import warnings

import numpy as np

from deepwell.core.parameters import MAX_ECC
from deepwell.fit.least_squares import bounds

__all__ = ["LINEAR_TERMS", "LogPosterior", "SamplingWarning"]

#: Shared parameters that enter the model linearly.
LINEAR_TERMS = ("x0", "y0", "vx0", "vy0", "vz0")


class SamplingWarning(UserWarning):
    """A sampling run whose result needs care."""


class LogPosterior:
    """Vectorised log-posterior of a fitted joint model.

    Parameters
    ----------
    result : deepwell.fit.result.FitResult
        Supplies the model, the settings (bounds, priors, fixed entries) and the
        values of fixed parameters.
    marginalise : bool or sequence of str
        Linear terms to integrate out analytically (True: all free ones of
        LINEAR_TERMS that have no finite bounds; False: none).

    Attributes
    ----------
    sampled : ndarray of int
        Indices of the sampled entries in the internal vector.
    marginal : ndarray of int
        Indices of the integrated-out entries.
    names : list of str
        Internal names of the sampled entries.
    """

    def __init__(self, result, marginalise=True):
        self.model = result.model
        lay = self.model.layout
        self.base = np.asarray(result.internal, float).copy()
        lo, hi, free = bounds(self.model, result.settings)
        self.lo, self.hi = lo, hi
        names = lay.names()
        explicit = marginalise is not True
        if marginalise is True:
            marginalise = [n for n in LINEAR_TERMS
                           if free[names.index(n)] and np.isinf(lo[names.index(n)])
                           and np.isinf(hi[names.index(n)])]
        marginalise = [] if marginalise is False else list(marginalise)
        for n in marginalise:
            if n not in LINEAR_TERMS or not free[names.index(n)]:
                raise ValueError(f"{n!r} is not a free linear term; cannot integrate it out")
        self.marginal = np.array([names.index(n) for n in marginalise], dtype=np.intp)
        mask = free.copy()
        mask[self.marginal] = False
        self.sampled = np.flatnonzero(mask)
        self.names = [names[i] for i in self.sampled]
        self._setup_linear(explicit)
        self._jacobian_terms = self._prior_jacobians()

    # ------------------------------------------------------------ linear part
    def _setup_linear(self, explicit):
        """Keep the requested terms that enter linearly with a constant design column."""
        self.notes = []
        p = len(self.marginal)
        self._proj = None
        self.log_norm = 0.0
        if p == 0:
            return
        v = self.base.copy()
        v[self.marginal] = 0.0
        v2 = v.copy()  # a second point of the other parameters for the check
        v2[self.sampled] *= 1.0 + 1e-4
        beta = np.random.default_rng(12345).normal(0.0, 3.0, p)  # fixed check values
        trial = np.repeat(v[None], 3 * p + 1, axis=0)
        trial[2 * p + 1:] = v2
        for j, i in enumerate(self.marginal):
            trial[j, i] = 1.0
            trial[p + j, i] = beta[j]
            trial[2 * p + 1 + j, i] = 1.0
        trial[2 * p, self.marginal] = beta
        r = self.model.residuals(trial)
        r_v, r_v2 = self.model.residuals(np.stack([v, v2]))
        a = r_v[:, None] - r[:p].T  # column j: r(beta=0) - r(beta=e_j)
        a2 = r_v2[:, None] - r[2 * p + 1:].T
        tol = 1e-8 * (1.0 + np.max(np.abs(r)))
        good = (np.max(np.abs(a - a2), axis=0) < tol) & (
            np.max(np.abs(r_v[:, None] - a * beta - r[p:2 * p].T), axis=0) < tol)
        if np.all(good) and np.max(np.abs(r_v - a @ beta - r[2 * p])) >= tol:
            good[:] = False  # cross terms between the linear parameters
        if not np.all(good):
            names = self.model.layout.names()
            bad = [names[i] for i in self.marginal[~good]]
            note = (f"{', '.join(bad)} {'enters' if len(bad) == 1 else 'enter'} the model "
                    "non-linearly or with a coefficient "
                    "that depends on the orbits (e.g. the exact redshift couples vz0 to the "
                    f"star's velocity), so {'it is' if len(bad) == 1 else 'they are'} "
                    "sampled, not integrated out")
            self.notes.append(note)
            if explicit:
                warnings.warn(SamplingWarning(note), stacklevel=4)
            free = np.zeros(len(v), bool)
            free[self.sampled] = True
            free[self.marginal[~good]] = True
            self.marginal = self.marginal[good]
            self.sampled = np.flatnonzero(free)
            self.names = [names[i] for i in self.sampled]
            a = a[:, good]
            if a.shape[1] == 0:
                return
        fisher = a.T @ a
        self.design = a
        self.fisher = fisher
        self.beta_cov = np.linalg.inv(fisher)
        self._proj = self.beta_cov @ a.T
        sign, logdet = np.linalg.slogdet(fisher)
        self.log_norm = 0.5 * p * np.log(2.0 * np.pi) - 0.5 * logdet

    # ---------------------------------------------------------------- priors
    def _prior_jacobians(self):
        """(star index, element) of priors that need a Jacobian term."""
        out = []
        for prior in self.model.priors:
            if prior.star is not None and prior.name in ("a", "inc"):
                out.append((self.model.stars.index(prior.star), prior.name))
        return out

    def implied_priors(self):
        """Plain-English statements of the priors this sampling implies."""
        lay = self.model.layout
        names = lay.names()
        text = []
        for n in ("mass", "distance"):
            i = names.index(n)
            if i in self.sampled:
                text.append(f"{n}: uniform between {self.lo[i]:g} and {self.hi[i]:g}")
        for n in LINEAR_TERMS:
            i = names.index(n)
            how = ("integrated out analytically, uniform prior over all values"
                   if i in self.marginal else "uniform" if i in self.sampled else "fixed")
            text.append(f"{n}: {how}")
        text.append("per star: uniform in period, so p(a) is proportional to a^(1/2) at fixed "
                    "mass and distance (not uniform in a)")
        text.append(f"per star: uniform in eccentricity on [0, {MAX_ECC}) and in the argument "
                    "of pericentre (sampled as sqrt(e) cos w, sqrt(e) sin w)")
        text.append("per star: uniform in cos(inclination), i.e. p(i) proportional to sin(i) "
                    "(isotropic orbit orientations); uniform in node and pericentre epoch")
        for prior in self.model.priors:
            where = prior.name if prior.star is None else f"{prior.star}:{prior.name}"
            extra = ""
            if prior.star is not None and prior.name == "a":
                extra = " (Jacobian |da/dP| applied: a prior on a itself with a uniform base)"
            elif prior.star is not None and prior.name == "inc":
                extra = (" (Jacobian |di/dcos i| applied: a prior on i itself with a "
                         "uniform base, replacing the sin(i) factor)")
            text.append(f"{where}: Gaussian prior mean {prior.mean:g}, sigma {prior.sigma:g}"
                        f"{extra}")
        return tuple(text) + tuple(self.notes)

    # ------------------------------------------------------------ evaluation
    def full_vectors(self, theta):
        """Internal vectors with ``theta`` in the sampled entries (linear terms 0)."""
        theta = np.asarray(theta, float)
        vec = np.broadcast_to(self.base, theta.shape[:-1] + self.base.shape).copy()
        vec[..., self.sampled] = theta
        vec[..., self.marginal] = 0.0
        return vec

    def inside(self, vec):
        """Mask of vectors inside the hard bounds of the internal parameters."""
        s = self.sampled
        ok = np.all((vec[..., s] > self.lo[s]) & (vec[..., s] < self.hi[s]), axis=-1)
        blk = self.model.layout.star_block(vec)
        ok &= np.all(blk[..., 0] > 0.0, axis=-1)
        ok &= np.all(blk[..., 1] ** 2 + blk[..., 2] ** 2 < MAX_ECC, axis=-1)
        ok &= np.all(np.abs(blk[..., 3]) <= 1.0, axis=-1)
        ok &= (self.model.layout.shared(vec, "mass") > 0) & (
            self.model.layout.shared(vec, "distance") > 0)
        return ok

    def __call__(self, theta):
        """Log-posterior (up to a constant) of sampled vectors, shape (..., n_sampled)."""
        theta = np.asarray(theta, float)
        flat = theta.reshape(-1, theta.shape[-1])
        vec = self.full_vectors(flat)
        out = np.full(len(flat), -np.inf)
        ok = self.inside(vec)
        if np.any(ok):
            v = vec[ok]
            r = self.model.residuals(v)
            if self._proj is not None:
                beta = r @ self._proj.T
                r = r - beta @ self.design.T
            lp = -0.5 * np.sum(r * r, axis=-1) + self.log_norm
            out[ok] = lp + self._jacobian(v)
        return out.reshape(theta.shape[:-1])

    def _jacobian(self, vec):
        if not self._jacobian_terms:
            return 0.0
        el = self.model.layout.elements(vec)
        total = np.zeros(vec.shape[:-1])
        for k, name in self._jacobian_terms:
            if name == "a":
                total += np.log(2.0 * el["a"][..., k] / (3.0 * el["period"][..., k]))
            else:
                total -= np.log(np.sin(el["inc"][..., k]))
        return total

    def recover_linear(self, theta, rng):
        """Full internal vectors with the linear terms drawn from their conditional.

        Parameters
        ----------
        theta : ndarray, shape (..., n_sampled)
        rng : numpy.random.Generator

        Returns
        -------
        ndarray, shape (..., n_internal)
        """
        theta = np.asarray(theta, float)
        vec = self.full_vectors(theta)
        if self._proj is None:
            return vec
        flat = vec.reshape(-1, vec.shape[-1])
        r = self.model.residuals(flat)
        mean = r @ self._proj.T
        chol = np.linalg.cholesky(self.beta_cov)
        draws = mean + rng.standard_normal(mean.shape) @ chol.T
        flat[:, self.marginal] = draws
        return flat.reshape(vec.shape)

    def start_cov(self, internal_cov):
        """Covariance of the sampled entries from the fit's internal covariance."""
        c = np.asarray(internal_cov, float)[np.ix_(self.sampled, self.sampled)]
        return c
