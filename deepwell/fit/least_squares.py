"""Least squares over the internal vector: bounds, the minimiser and the covariance.

:func:`minimise` drives lmfit (scipy's trust-region reflective method) over
the whitened residuals of a :class:`~deepwell.model.JointModel` with bounds,
fixed parameters and Gaussian priors, with a vectorised grouped Jacobian
(:mod:`deepwell.fit.jacobian`).  :func:`covariance` gives the covariance of
the free internal parameters from J^T J at the solution.  The stated errors
are used as given: the covariance is *not* rescaled by the reduced chi-square.

Large problems, whose dense Jacobian (residual rows x free parameters) would
exceed :data:`DENSE_CELLS` numbers, are solved on the normal equations
accumulated star by star instead (:mod:`deepwell.fit.normal`): the same
minimum and the same J^T J covariance in memory that grows with the rows
times (shared parameters + 6) only.
"""

import lmfit
import numpy as np

from deepwell.core.parameters import STAR_INTERNAL

from .jacobian import default_steps, numerical_jacobian
from .normal import minimise_normal, normal_covariance

__all__ = ["DENSE_CELLS", "bounds", "minimise", "covariance", "uses_normal_equations"]

#: Largest dense Jacobian (residual rows x free parameters, 8 bytes each) handed to
#: scipy's trust-region solver; larger problems use the accumulated normal equations.
DENSE_CELLS = 4_000_000


def uses_normal_equations(model, free):
    """True when the fit of ``model`` goes through the accumulated normal equations."""
    return len(model.residual_owner()) * int(np.sum(free)) > DENSE_CELLS


def bounds(model, settings):
    """Lower and upper bounds and the fitted mask of the internal vector."""
    names = model.layout.names()
    lo = np.full(len(names), -np.inf)
    hi = np.full(len(names), np.inf)
    free = np.ones(len(names), bool)
    for i, name in enumerate(names):
        if name in model.layout.shared_names:
            spec = model.layout.spec(name)
            s = settings.shared_setting(name)
            lo[i] = spec.lower if s.min is None else s.min
            hi[i] = spec.upper if s.max is None else s.max
            free[i] = not s.fixed
        else:
            k, j = divmod(i - model.layout.n_shared, len(STAR_INTERNAL))
            el = STAR_INTERNAL[j]
            st = settings.stars.get(model.stars[k])
            free[i] = not (st is not None and st.fixed)
            lo[i], hi[i] = {"period": (1e-3, np.inf), "sqe_cos": (-1.0, 1.0),
                            "sqe_sin": (-1.0, 1.0),
                            "cos_inc": (-1.0, 1.0)}.get(el, (-np.inf, np.inf))
    return lo, hi, free


def covariance(model, vec, free):
    """Covariance of the free internal parameters from J^T J (errors as given).

    With fitted error scales or jitters the information of those terms is the
    exact Fisher information (:meth:`JointModel.information_jacobian`).
    """
    steps = default_steps(model, vec)
    if not np.any(free):
        return np.zeros((0, 0)), 0
    if uses_normal_equations(model, free):
        return normal_covariance(model, vec, free)
    for _ in range(2):
        jac = numerical_jacobian(model.residuals, vec, free, steps, model.layout,
                                 model.residual_owner())
        jac = model.information_jacobian(jac, vec, free)  # exact for fitted error terms
        u, s, vt = np.linalg.svd(jac, full_matrices=False)
        keep = s > s[0] * 1e-12
        cov = (vt[keep].T / s[keep] ** 2) @ vt[keep]
        sig = np.sqrt(np.clip(np.diag(cov), 0, None))
        steps[free] = np.where(sig > 0, 1e-3 * sig, steps[free])
    rank_deficient = int(np.sum(~keep))
    return cov, rank_deficient


def minimise(model, vec0, free, lo, hi, max_nfev=None, restarts=8, progress=None):
    """Least-squares minimum of the model residuals over the ``free`` entries.

    lmfit drives scipy's trust-region reflective method with the bounds and a
    vectorised central-difference Jacobian (all trial vectors in one model
    call, so a Jacobian costs about one model evaluation per star block
    rather than one per parameter).  Problems larger than :data:`DENSE_CELLS`
    go to :func:`deepwell.fit.normal.minimise_normal` (``progress`` then gets
    one line per iteration).

    Returns
    -------
    vec : ndarray
        The best internal vector.
    out : lmfit.MinimizerResult or deepwell.fit.normal.NormalResult
        With ``success``, ``message`` and ``nfev``.
    """
    vec0 = np.asarray(vec0, float)
    if uses_normal_equations(model, free):
        return minimise_normal(model, vec0, free, lo, hi, progress=progress)
    names = [f"x{i}" for i in range(model.layout.size)]  # lmfit wants identifiers
    params = lmfit.Parameters()
    for i, name in enumerate(names):
        params.add(name, value=float(np.clip(vec0[i], lo[i], hi[i])), min=lo[i], max=hi[i],
                   vary=bool(free[i]))
    steps = default_steps(model, vec0)

    def current(p):
        return np.array([p[n].value for n in names])

    def fun(p):
        return model.residuals(current(p))

    owner = model.residual_owner()

    def jac(p):
        return numerical_jacobian(model.residuals, current(p), free, steps, model.layout, owner)

    # A trust region that has shrunk in a long curved valley (partial arcs)
    # crawls; restarting from the last point resets it, which is far faster
    # than a larger evaluation budget.  Restart while chi-square still drops.
    budget = max_nfev or 100 + 10 * int(np.sum(free))
    total, best = 0, None
    for _ in range(restarts + 1):
        mini = lmfit.Minimizer(fun, params, scale_covar=False, calc_covar=False)
        with np.errstate(invalid="ignore", divide="ignore"):  # lmfit's own stderr step
            out = mini.minimize(method="least_squares", jac=jac, x_scale="jac", ftol=1e-10,
                                xtol=1e-10, gtol=1e-10, max_nfev=budget)
        total += out.nfev
        cost = float(np.sum(out.residual**2))
        improved = best is None or cost < best - 1e-3
        best = cost if best is None else min(best, cost)
        params = out.params
        if out.success or not improved:
            break
    out.nfev = total
    return current(out.params), out


