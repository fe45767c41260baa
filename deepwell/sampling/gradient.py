"""The log-posterior and its gradient in whitened coordinates, for Hamiltonian sampling.

Coordinates
    z = L^-1 (theta - centre), with theta the sampled entries of the internal
    vector (:class:`deepwell.sampling.target.LogPosterior`) and L L^T a
    covariance (at first the least-squares one).  In z the posterior of a
    well-measured data set is close to a unit Gaussian, which is what lets a
    Hamiltonian sampler with a unit mass matrix take large steps.

Longitude coordinate
    Each star's pericentre epoch is sampled as its mean argument of latitude
    at the mean epoch t_k of its positions, lambda = 2 pi (t_k - t_peri) / P
    + omega (omega = atan2(sqrt(e) sin w, sqrt(e) cos w)), instead of t_peri.
    A partly covered orbit fixes where the star is along its orbit at t_k
    much better than when it last passed pericentre, and for a nearly
    circular orbit omega and the phase are degenerate while their sum is not
    (mean longitude, common practice in orbit fitting).  The map is triangular
    with |dt_peri/dlambda| = P / 2 pi, which the density in the new
    coordinates carries, so the posterior of the reported quantities and
    their uniform prior in t_peri are unchanged.

Gradient
    The log-posterior is -1/2 |M r(theta)|^2 + const + log J(theta), r the
    whitened residuals, M = I - A (A^T A)^-1 A^T the projector that integrates
    out the linear frame terms (M = I when none are) and J the prior
    Jacobians.  Since M is a symmetric idempotent matrix::

        d logp / d theta = -(dr/dtheta)^T (M r) + d log J / d theta

    dr/dtheta comes from forward differences (step 1e-6 standard deviations)
    with the column grouping of :func:`deepwell.fit.numerical_jacobian`
    (element j of every star at once), so one gradient costs one vectorised
    model call of 1 + n_shared + 6 rows, whatever the number of stars.  The gradient is therefore an
    approximation, but a deterministic function of z: the leapfrog map stays
    reversible and volume-preserving and the Metropolis correction uses the
    exact log-posterior, so the sampled distribution is exact (Neal 2011,
    Handbook of MCMC, ch. 5, section 5.3.1, from memory); gradient errors only
    cost acceptance.
"""

import numpy as np

from ..parameters import STAR_INTERNAL

__all__ = ["WhitenedTarget"]


class WhitenedTarget:
    """Log-posterior and gradient of a :class:`LogPosterior` in whitened coordinates.

    Parameters
    ----------
    target : deepwell.sampling.target.LogPosterior
    centre : ndarray, shape (n,)
        theta at z = 0.
    cov : ndarray, shape (n, n)
        Covariance of theta defining the whitening (positive definite).
    rel_step : float
        Forward-difference step in units of each parameter's standard
        deviation under ``cov``.
    cov_u : ndarray, optional
        Covariance in the phase coordinates u instead (replaces ``cov`` for
        the whitening; used after the warm-up adapts the metric).
    """

    def __init__(self, target, centre, cov, rel_step=1e-6, cov_u=None):
        self.target = target
        self.n = len(centre)
        model = target.model
        lay = model.layout
        n_sh, n_el = lay.n_shared, len(STAR_INTERNAL)
        col = {i: c for c, i in enumerate(target.sampled)}
        self._per, self._tp, self._tref, self._c, self._s = [], [], [], [], []
        for k in range(len(model.stars)):
            i_p, i_t = n_sh + k * n_el, n_sh + k * n_el + n_el - 1
            t = model.pos.t[model.pos.star == k]
            if all(i in col for i in (i_p, i_t, i_p + 1, i_p + 2)) and t.size:
                self._per.append(col[i_p])
                self._tp.append(col[i_t])
                self._c.append(col[i_p + 1])
                self._s.append(col[i_p + 2])
                self._tref.append(float(np.mean(t)))
        self._per, self._tp = np.array(self._per, np.intp), np.array(self._tp, np.intp)
        self._c, self._s = np.array(self._c, np.intp), np.array(self._s, np.intp)
        self._tref = np.array(self._tref, float)
        cov = 0.5 * (np.asarray(cov, float) + np.asarray(cov, float).T)
        self.steps = rel_step * np.sqrt(np.diag(cov))  # in theta
        self.centre = self.to_u(np.asarray(centre, float))
        if cov_u is None:
            jinv = np.linalg.inv(self._jac(self.centre))
            cov_u = jinv @ cov @ jinv.T
        self.cov = 0.5 * (cov_u + cov_u.T)
        self.chol = np.linalg.cholesky(self.cov)
        self.owner = model.residual_owner()
        groups = []  # (columns in theta, their star indices or -1)
        for c, i in enumerate(target.sampled):
            if i < n_sh:
                groups.append(([c], [-1]))
        for j in range(n_el):
            cols = [c for c, i in enumerate(target.sampled)
                    if i >= n_sh and (i - n_sh) % n_el == j]
            if cols:
                stars = [(target.sampled[c] - n_sh) // n_el for c in cols]
                groups.append((cols, stars))
        self.groups = groups
        self.rows_of = {k: np.flatnonzero(self.owner == k) for k in range(len(model.stars))}

    # ------------------------------------------------------------ coordinates
    def _omega(self, x):
        return np.arctan2(x[..., self._s], x[..., self._c])

    def to_u(self, theta):
        """Phase coordinates of sampled points (t_peri replaced by lambda)."""
        u = np.array(theta, float, copy=True)
        u[..., self._tp] = (2.0 * np.pi * (self._tref - u[..., self._tp]) / u[..., self._per]
                            + self._omega(u))
        return u

    def to_theta(self, u):
        """Sampled coordinates of phase-coordinate points."""
        th = np.array(u, float, copy=True)
        th[..., self._tp] = self._tref - u[..., self._per] * (
            u[..., self._tp] - self._omega(u)) / (2.0 * np.pi)
        return th

    def _jac(self, u):
        """d theta / d u at one point."""
        jac = np.eye(self.n)
        per, tp, c, s = u[self._per], u[self._tp], u[self._c], u[self._s]
        rho2 = c * c + s * s
        jac[self._tp, self._tp] = -per / (2.0 * np.pi)
        jac[self._tp, self._per] = -(tp - self._omega(u)) / (2.0 * np.pi)
        jac[self._tp, self._s] = per / (2.0 * np.pi) * c / rho2
        jac[self._tp, self._c] = -per / (2.0 * np.pi) * s / rho2
        return jac

    def log_det(self, u):
        """log |d theta / d u| = sum of log(P / 2 pi) over the rephased stars."""
        return np.sum(np.log(np.abs(np.asarray(u)[..., self._per]) / (2.0 * np.pi)), axis=-1)

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
        """Log-density of z (posterior of theta times the phase Jacobian), shape (...)."""
        u = self.u(z)
        return self.target(self.to_theta(u)) + self.log_det(u)

    def __call__(self, z):
        """(log-density, gradient with respect to z) at one point z.

        The gradient is NaN when a difference point leaves the support.
        """
        t = self.target
        u = self.u(z)
        theta = self.to_theta(u)
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
        lp = -0.5 * float(r0 @ r0) + t.log_norm + float(self.log_det(u))
        grad = np.empty(self.n)
        for g, (cols, stars) in enumerate(self.groups):
            diff = r[1 + g] - r[0]
            for c, k in zip(cols, stars, strict=True):
                rows = slice(None) if k < 0 else self.rows_of[k]
                grad[c] = -float(diff[rows] @ r0[rows]) / self.steps[c]
        if t._jacobian_terms:
            lp += float(t._jacobian(vec[:1])[0])
            grad += self._jacobian_gradient(theta)
        grad_u = self._jac(u).T @ grad
        grad_u[self._per] += 1.0 / u[self._per]
        return lp, self.chol.T @ grad_u

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
