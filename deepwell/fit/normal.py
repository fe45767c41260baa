"""Least squares on the accumulated normal equations, for data too large for a dense Jacobian.

A star's rows depend only on its own six elements and on the shared
parameters, so the normal matrix J^T J has a block-arrow structure and is
accumulated star by star from the grouped differences
(:class:`deepwell.fit.jacobian.GroupedJacobian`); its size is the number of
free parameters squared, whatever the number of rows.  :func:`minimise_normal`
is a Levenberg-Marquardt iteration on it, :func:`normal_covariance` the
covariance from the same J^T J (errors as given, not rescaled).

The damped step solves (A + lambda diag A) p = -J^T r with A = J^T J
(Marquardt 1963, SIAM J. Appl. Math. 11, 431), in the parameters scaled by
sqrt(diag A) (the scaling scipy's ``x_scale="jac"`` uses); lambda follows
the gain ratio of actual to predicted reduction (Nielsen 1999, IMM report
IMM-REP-1999-05, from memory), falling tenfold after a step the quadratic model
predicted well.  Steps are clipped to the bounds.
"""

from dataclasses import dataclass

import numpy as np

from .jacobian import default_steps, grouped_jacobian

__all__ = ["NormalResult", "information_diagonal", "minimise_normal", "normal_covariance",
           "normal_system"]


@dataclass
class NormalResult:
    """Outcome of :func:`minimise_normal` (the attributes the fit reads of lmfit's)."""

    success: bool
    message: str
    nfev: int
    residual: np.ndarray
    n_jacobian: int = 0


def information_diagonal(model, vec, free):
    """Rows to leave out and diagonal information to add for the covariance.

    The grouped-Jacobian twin of :meth:`deepwell.model.JointModel.information_jacobian`:
    the columns of fitted error terms are zeroed on the data rows, their
    normalisation rows left out and their exact Fisher information added.

    Returns
    -------
    zero : list of (int, slice)
        (free position, rows) whose derivative is set to zero.
    diagonal : dict
        {free position: information} to add to J^T J.
    norm_rows : slice
        The normalisation rows, left out.
    """
    terms = model.datasets
    if terms is None or not terms.n_norm_rows():
        return [], {}, slice(0, 0)
    names = model.layout.names()
    pos = {names[i]: c for c, i in enumerate(np.flatnonzero(free))}
    zero, diagonal = [], {}
    for name, info in terms.fisher_information(model, vec).items():
        if name in pos:
            zero.append((pos[name], slice(0, model.n_data)))
            diagonal[pos[name]] = info
    return zero, diagonal, terms.norm_row_slice(model)


def normal_system(model, vec, free, steps, resid=None, information=False):
    """J^T J (and J^T r) of the model residuals at ``vec`` from grouped central differences.

    Parameters
    ----------
    model : deepwell.model.JointModel
    vec : ndarray
        Internal vector.
    free : ndarray of bool
        Fitted entries.
    steps : ndarray
        Finite-difference steps (internal units).
    resid : ndarray, optional
        Residuals at ``vec`` (for the gradient).
    information : bool
        Use the exact Fisher information of fitted error terms (for the covariance).

    Returns
    -------
    A : ndarray, shape (n_free, n_free)
    g : ndarray or None
    """
    jac = grouped_jacobian(model.residuals, vec, free, steps, model.layout,
                           model.residual_owner())
    diagonal = None
    if information and model.datasets is not None and model.datasets.n_norm_rows():
        zero, diagonal, norm_rows = information_diagonal(model, vec, free)
        jac.deriv[:, norm_rows] = 0.0
        shared = list(jac.shared_cols)
        for c, rows in zero:
            jac.deriv[shared.index(c), rows] = 0.0
    return jac.normal(resid, diagonal)


def _scaled_inverse(A, rcond=1e-12):
    """Pseudo-inverse of a symmetric positive semi-definite A, scaled by sqrt(diag A).

    Eigenvalues of the unit-diagonal scaled matrix below ``rcond`` times the largest
    are dropped (a relative singular value of the scaled J below 1e-6).

    Returns
    -------
    inv : ndarray
    n_dropped : int
    """
    d = np.sqrt(np.clip(np.diag(A), 0.0, None))
    d = np.where(d > 0, d, 1.0)
    w, v = np.linalg.eigh(A / np.outer(d, d))
    keep = w > w.max() * rcond if w.size and w.max() > 0 else np.zeros(w.size, bool)
    inv = (v[:, keep] / w[keep]) @ v[:, keep].T
    return inv / np.outer(d, d), int(np.sum(~keep))


def normal_covariance(model, vec, free):
    """Covariance of the free internal parameters from the accumulated J^T J.

    As :func:`deepwell.fit.least_squares.covariance`: steps refined once to a
    thousandth of the first errors, exact Fisher information for fitted error
    terms, errors as given.

    Returns
    -------
    cov : ndarray, shape (n_free, n_free)
    rank_deficient : int
        Number of parameter combinations the data do not constrain.
    """
    steps = default_steps(model, vec)
    if not np.any(free):
        return np.zeros((0, 0)), 0
    for _ in range(2):
        A, _ = normal_system(model, vec, free, steps, information=True)
        cov, dropped = _scaled_inverse(A)
        sig = np.sqrt(np.clip(np.diag(cov), 0, None))
        steps[free] = np.where(sig > 0, 1e-3 * sig, steps[free])
    return cov, dropped


def minimise_normal(model, vec0, free, lo, hi, max_iter=200, ftol=1e-10, xtol=1e-10,
                    gtol=1e-10, progress=None):
    """Levenberg-Marquardt minimum of the model residuals on the accumulated normal equations.

    Parameters
    ----------
    model : deepwell.model.JointModel
    vec0 : ndarray
        Starting internal vector.
    free : ndarray of bool
        Fitted entries.
    lo, hi : ndarray
        Bounds of the internal vector (steps are clipped to them).
    max_iter : int
        Most Jacobians (iterations).
    ftol, xtol, gtol : float
        Stop when the sum of squares falls by less than ``ftol`` of itself on an
        accepted step, when the scaled step is below ``xtol`` of the scaled vector,
        or when the cosine between the residuals and every scaled Jacobian column is
        below ``gtol`` (the tests of MINPACK, Moré, Garbow & Hillstrom 1980, from memory).
    progress : callable, optional
        Called with one line per iteration.

    Returns
    -------
    vec : ndarray
    out : NormalResult
    """
    say = progress or (lambda text: None)
    x = np.clip(np.asarray(vec0, float), lo, hi)
    idx = np.flatnonzero(free)
    r = model.residuals(x)
    cost = float(r @ r)
    nfev, lam, nu = 1, 1e-4, 2.0
    steps = default_steps(model, x)
    message, success = f"stopped after {max_iter} iterations", False
    for it in range(1, max_iter + 1):
        A, g = normal_system(model, x, free, steps, resid=r)
        d = np.sqrt(np.clip(np.diag(A), 0.0, None))
        d = np.where(d > 0, d, 1.0)
        As, gs = A / np.outer(d, d), g / d
        if np.max(np.abs(gs)) <= gtol * np.sqrt(cost):
            message, success = "the gradient vanished (gtol)", True
            break
        accepted = False
        while not accepted:
            try:
                ps = np.linalg.solve(As + lam * np.eye(len(As)), -gs)
            except np.linalg.LinAlgError:
                lam *= nu
                nu *= 2.0
                continue
            trial = x.copy()
            trial[idx] = np.clip(x[idx] + ps / d, lo[idx], hi[idx])
            ps = (trial[idx] - x[idx]) * d
            r_new = model.residuals(trial)
            nfev += 1
            new = float(r_new @ r_new)
            predicted = -(2.0 * gs @ ps + ps @ As @ ps)
            if np.isfinite(new) and new < cost:
                rho = (cost - new) / predicted if predicted > 0 else 0.0
                # a good quadratic model: towards Gauss-Newton quickly (curved valleys of
                # strongly correlated parameters need the undamped step)
                lam *= 0.1 if rho > 0.75 else max(1.0 / 3.0, 1.0 - (2.0 * rho - 1.0) ** 3)
                lam = max(lam, 1e-12)
                nu = 2.0
                accepted = True
            else:
                lam *= nu
                nu *= 2.0
                if lam > 1e16:
                    break
        if not accepted:
            message, success = "no step lowers the sum of squares (at machine precision)", True
            break
        drop = cost - new
        step_small = np.linalg.norm(ps) <= xtol * (xtol + np.linalg.norm(x[idx] * d))
        x, r, cost = trial, r_new, new
        say(f"joint fit: iteration {it}, sum of squared residuals {cost:.10g}")
        if drop <= ftol * cost:
            message, success = "the sum of squares stopped falling (ftol)", True
            break
        if step_small:
            message, success = "the step became negligible (xtol)", True
            break
    return x, NormalResult(success=success, message=message, nfev=nfev, residual=r,
                           n_jacobian=it)
