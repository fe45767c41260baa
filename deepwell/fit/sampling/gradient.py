"""The log-posterior and its gradient in whitened coordinates, for Hamiltonian sampling.

Coordinates
    z = L^-1 (theta - centre), with theta the sampled entries of the internal
    vector (:class:`deepwell.fit.sampling.target.LogPosterior`) and L L^T a
    covariance (at first the least-squares one).  In z the posterior of a
    well-measured data set is close to a unit Gaussian, which is what lets a
    Hamiltonian sampler with a unit mass matrix take large steps.

Per-star coordinates
    Before whitening, each star's elements are mapped to the coordinates of
    :mod:`deepwell.fit.sampling.coordinates` (its position and velocity at the
    mean epoch of its data for a partly covered orbit, its mean argument of
    latitude instead of t_peri otherwise); the density carries the Jacobian
    of that map, so the sampled posterior of theta is unchanged.

Gradient
    The log-posterior is -1/2 |M r(theta)|^2 + const + log J(theta), r the
    whitened residuals, M = I - A (A^T A)^-1 A^T the projector that integrates
    out the linear frame terms (M = I when none are) and J the prior
    Jacobians.  Since M is a symmetric idempotent matrix::

        d logp / d theta = -(dr/dtheta)^T (M r) + d log J / d theta

    dr/dtheta comes from forward differences (step 1e-6 standard deviations)
    with the column grouping of :func:`deepwell.fit.jacobian`
    (element j of every star at once), so one gradient costs one vectorised
    model call of 1 + n_shared + 6 rows, whatever the number of stars.  The gradient is therefore an
    approximation, but a deterministic function of z: the leapfrog map stays
    reversible and volume-preserving and the Metropolis correction uses the
    exact log-posterior, so the sampled distribution is exact (Neal 2011,
    Handbook of MCMC, ch. 5, section 5.3.1, from memory); gradient errors only
    cost acceptance.
"""

import numpy as np

from deepwell.core.parameters import STAR_INTERNAL

from .coordinates import STATE_ARC, SamplingCoordinates

__all__ = ["WhitenedTarget"]


class WhitenedTarget:
    """Log-posterior and gradient of a :class:`LogPosterior` in whitened coordinates.

    Parameters
    ----------
    target : deepwell.fit.sampling.target.LogPosterior
    centre : ndarray, shape (n,)
        theta at z = 0.
    cov : ndarray, shape (n, n)
        Covariance of theta defining the whitening (positive definite).
    rel_step : float
        Forward-difference step in units of each parameter's standard
        deviation under ``cov``.
    cov_u : ndarray, optional
        Covariance in the per-star coordinates u instead (replaces ``cov`` for
        the whitening; used after the warm-up adapts the metric).
    state_arc : float
        Data span (fraction of the period) below which a star moves in its
        state (:class:`~deepwell.fit.sampling.coordinates.SamplingCoordinates`).
    """

    def __init__(self, target, centre, cov, rel_step=1e-6, cov_u=None, state_arc=STATE_ARC):
        self.target = target
        centre = np.asarray(centre, float)
        self.n = len(centre)
        model = target.model
        cov = 0.5 * (np.asarray(cov, float) + np.asarray(cov, float).T)
        self.coords = SamplingCoordinates(target, centre, cov, state_arc=state_arc)
        self.steps = rel_step * np.sqrt(np.diag(cov))  # in theta
        self.centre = self.to_u(centre)
        if cov_u is None:
            ju = self.coords.jacobian_to_u(centre)
            cov_u = ju @ cov @ ju.T
        self.cov = 0.5 * (cov_u + cov_u.T)
        self.chol = np.linalg.cholesky(self.cov)
        self.owner = model.residual_owner()
        self.rows_of = {k: np.flatnonzero(self.owner == k) for k in range(len(model.stars))}
        n_sh = model.layout.n_shared
        # Model-difference groups in theta: each shared column, then element j of all stars.
        self.groups = [([c], [-1]) for c, i in enumerate(target.sampled) if i < n_sh]
        n_el = len(STAR_INTERNAL)
        for j in range(n_el):
            cols = [c for c, i in enumerate(target.sampled) if i >= n_sh and (i - n_sh) % n_el == j]
            if cols:
                self.groups.append((cols, [(target.sampled[c] - n_sh) // n_el for c in cols]))

    # ------------------------------------------------------------ coordinates
    def to_u(self, theta):
        """Per-star coordinates of sampled points."""
        return self.coords.to_u(theta)

    def to_theta(self, u):
        """Sampled coordinates of per-star-coordinate points (NaN where unbound)."""
        return self.coords.to_theta(u)

    def _jac(self, u):
        """d theta / d u at one point."""
        return self.coords.jacobian(u)[0]

    def log_det(self, u):
        """log |d theta / d u|."""
        return self.coords.log_det(u)

    @property
    def n_rows(self):
        """Model rows evaluated per gradient."""
        return 1 + len(self.groups)

    def u(self, z):
        return self.centre + np.asarray(z, float) @ self.chol.T

    def theta(self, z):
        """Sampled coordinates of whitened points, shape (..., n)."""
        return self.to_theta(self.u(z))

    def whiten(self, theta):
        """Whitened coordinates of sampled points."""
        from scipy.linalg import solve_triangular

        d = self.to_u(theta) - self.centre
        return solve_triangular(self.chol, d.T, lower=True).T

    def log_prob(self, z):
        """Log-density of z (posterior of theta times the coordinate Jacobian), shape (...)."""
        u = self.u(z)
        theta, terms = self.coords.theta_and_terms(u)
        lp = self.target(theta)
        return np.where(np.isfinite(lp), lp + np.sum(terms, axis=-1), -np.inf)

    def __call__(self, z):
        """(log-density, gradient with respect to z) at one point z.

        The gradient is NaN when a difference point leaves the support.
        """
        t = self.target
        u = self.u(z)
        theta, terms = self.coords.theta_and_terms(u)
        trial = np.repeat(theta[None], self.n_rows, axis=0)
        for g, (cols, _) in enumerate(self.groups):
            trial[1 + g, cols] += self.steps[cols]
        vec = t.full_vectors(trial)
        if not t.inside(vec[:1])[0]:
            return -np.inf, np.full(self.n, np.nan)
        if not np.all(t.inside(vec)):
            return float(self.log_prob(z)), np.full(self.n, np.nan)
        r = t.model.residuals(vec)
        r0 = r[0]
        if t._proj is not None:
            r0 = r0 - (t._proj @ r0) @ t.design.T
        lp = -0.5 * float(r0 @ r0) + t.log_norm + float(np.sum(terms))
        grad = np.empty(self.n)
        for g, (cols, stars) in enumerate(self.groups):
            diff = r[1 + g] - r[0]
            for c, k in zip(cols, stars, strict=True):
                rows = slice(None) if k < 0 else self.rows_of[k]
                grad[c] = -float(diff[rows] @ r0[rows]) / self.steps[c]
        if t._jacobian_terms:
            lp += float(t._jacobian(vec[:1])[0])
            grad += self._jacobian_gradient(theta)
        jac, dlogdet = self.coords.jacobian(u)
        return lp, self.chol.T @ (jac.T @ grad + dlogdet)

    def _jacobian_gradient(self, theta):
        """Central differences of the prior-Jacobian term (no model call)."""
        t = self.target
        h = self.steps
        trial = np.repeat(theta[None], 2 * self.n, axis=0)
        idx = np.arange(self.n)
        trial[2 * idx, idx] += h
        trial[2 * idx + 1, idx] -= h
        jac = np.asarray(t._jacobian(t.full_vectors(trial)), float)
        return (jac[0::2] - jac[1::2]) / (2.0 * h)
