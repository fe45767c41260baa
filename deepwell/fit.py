"""The joint least-squares fit and its uncertainties.

``fit_joint`` builds lmfit parameters (bounds, fixed entries) over the internal
vector, finds starting
orbits automatically (:mod:`deepwell.start`), minimises the whitened residuals
with bounds, fixed parameters and Gaussian priors, and returns a
:class:`~deepwell.results.FitResult` with the covariance of the reported
(physical) quantities from the Jacobian at the solution.  The stated errors
are used as given: the covariance is *not* rescaled by the reduced chi-square.
"""

import warnings

import lmfit
import numpy as np

from .errors import InputError
from .model import JointModel, Prior
from .parameters import EXTRA, SHARED, STAR_INTERNAL
from .results import FitResult, phase_coverage, physical_labels, physical_owner, physical_vector
from .start import find_start, polish_stars

__all__ = ["build_model", "bounds", "fit_joint", "minimise", "covariance", "assemble_result",
           "numerical_jacobian", "FitWarning"]


class FitWarning(UserWarning):
    """A fit that finished but whose result needs care."""


def build_model(observations, settings):
    """The joint model with the priors of the settings file."""
    priors = []
    effects = settings.effect_switches()
    for name in tuple(SHARED) + effects.extra_names:
        s = settings.shared_setting(name)
        if s.prior_mean is not None:
            priors.append(Prior(name, s.prior_mean, s.prior_sigma))
    stars = list(dict.fromkeys(observations.positions["star"]))
    for star, st in settings.stars.items():
        if star in stars:
            for el, (mean, sigma) in st.priors.items():
                priors.append(Prior(el, mean, sigma, star=star))
    return JointModel(observations, reference_epoch=settings.reference_epoch, priors=priors,
                      effects=effects, datasets=settings.dataset_config())


def bounds(model, settings):
    """Lower and upper bounds and the fitted mask of the internal vector."""
    names = model.layout.names()
    lo = np.full(len(names), -np.inf)
    hi = np.full(len(names), np.inf)
    free = np.ones(len(names), bool)
    for i, name in enumerate(names):
        if name in SHARED or name in EXTRA:
            spec = SHARED.get(name) or EXTRA[name]
            s = settings.shared_setting(name)
            lo[i] = spec.lower if s.min is None else s.min
            hi[i] = spec.upper if s.max is None else s.max
            free[i] = not s.fixed
        else:
            k, el = name[1:].split("_", 1)
            st = settings.stars.get(model.stars[int(k)])
            free[i] = not (st is not None and st.fixed)
            lo[i], hi[i] = {"period": (1e-3, np.inf), "sqe_cos": (-1.0, 1.0),
                            "sqe_sin": (-1.0, 1.0),
                            "cos_inc": (-1.0, 1.0)}.get(el, (-np.inf, np.inf))
    return lo, hi, free


def _default_steps(model, vec):
    """Finite-difference steps in the internal parameters."""
    lay = model.layout
    h = np.empty(lay.size)
    base = {"mass": 1e-7 * abs(vec[0]), "distance": 1e-7 * abs(vec[1]), "x0": 1e-4, "y0": 1e-4,
            "vx0": 1e-5, "vy0": 1e-5, "vz0": 1e-3}
    for i, n in enumerate(lay.shared_names):
        h[i] = base.get(n, 1e-5)
    blk = lay.star_block(vec)
    for k in range(len(lay.stars)):
        per = abs(blk[k, 0])
        i0 = lay.n_shared + k * len(STAR_INTERNAL)
        h[i0:i0 + 6] = [1e-7 * per, 1e-6, 1e-6, 1e-6, 1e-6, 1e-7 * per]
    return h


def numerical_jacobian(func, vec, free, steps, layout=None, owner=None):
    """Central-difference Jacobian of ``func`` over the ``free`` entries of ``vec``.

    All trial vectors are evaluated in one vectorised call.  With ``layout``
    and ``owner`` (the star index owning each output row, -1 for rows of
    shared parameters only), element j of every star is perturbed at once:
    a row of star k feels only star k's elements, so the 6 grouped differences
    give the same Jacobian as 6 x n_stars separate ones at a fraction of the
    cost (column grouping of a block-sparse Jacobian, Curtis, Powell & Reid
    1974, from memory).
    """
    idx = np.flatnonzero(free)
    if layout is None or owner is None:
        groups = [[i] for i in idx]
    else:
        n_sh = layout.n_shared
        groups = [[i] for i in idx if i < n_sh]
        for j in range(len(STAR_INTERNAL)):
            cols = [i for i in idx if i >= n_sh and (i - n_sh) % len(STAR_INTERNAL) == j]
            if cols:
                groups.append(cols)
    trial = np.repeat(np.asarray(vec, float)[None, :], 2 * len(groups), axis=0)
    for g, cols in enumerate(groups):
        trial[2 * g, cols] += steps[cols]
        trial[2 * g + 1, cols] -= steps[cols]
    out = func(trial)
    diff = out[0::2] - out[1::2]
    column = {i: c for c, i in enumerate(idx)}
    jac = np.zeros((out.shape[-1], len(idx)))
    for g, cols in enumerate(groups):
        if len(cols) == 1 and (layout is None or cols[0] < layout.n_shared):
            jac[:, column[cols[0]]] = diff[g] / (2.0 * steps[cols[0]])
            continue
        for i in cols:
            k = (i - layout.n_shared) // len(STAR_INTERNAL)
            rows = owner == k
            jac[rows, column[i]] = diff[g, rows] / (2.0 * steps[i])
    return jac


def covariance(model, vec, free):
    """Covariance of the free internal parameters from J^T J (errors as given).

    With fitted error scales or jitters the information of those terms is the
    exact Fisher information (:meth:`JointModel.information_jacobian`).
    """
    steps = _default_steps(model, vec)
    if not np.any(free):
        return np.zeros((0, 0)), 0
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


def minimise(model, vec0, free, lo, hi, max_nfev=None, restarts=8):
    """Least-squares minimum of the model residuals over the ``free`` entries.

    lmfit drives scipy's trust-region reflective method with the bounds and a
    vectorised central-difference Jacobian (all trial vectors in one model
    call, so a Jacobian costs about one model evaluation per star block
    rather than one per parameter).

    Returns
    -------
    vec : ndarray
        The best internal vector.
    out : lmfit.MinimizerResult
        With ``success``, ``message`` and ``nfev``.
    """
    vec0 = np.asarray(vec0, float)
    names = model.layout.names()
    params = lmfit.Parameters()
    for i, name in enumerate(names):
        params.add(name, value=float(np.clip(vec0[i], lo[i], hi[i])), min=lo[i], max=hi[i],
                   vary=bool(free[i]))
    steps = _default_steps(model, vec0)

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


def fit_joint(observations, settings, progress=None):
    """Fit all stars jointly around one mass.

    Parameters
    ----------
    observations : deepwell.tables.Observations
    settings : deepwell.settings.Settings
    progress : callable, optional
        Called with a short text at each phase (for the command line).

    Returns
    -------
    FitResult
    """
    say = progress or (lambda text: None)
    model = build_model(observations, settings)
    say(f"searching starting orbits for {len(model.stars)} stars")
    start = find_start(model.keplerian(), settings)  # effects: see deepwell.effects
    model, start_vec = model.start_from(start.vec, settings)
    start.notes.extend(model.effect_notes())
    lo, hi, free = bounds(model, settings)
    unused = _unconstrained_shared(model)
    for name in unused:
        free[model.layout.index(name)] = False
    if unused:
        start.notes.append("held at their starting values because no data constrain them: "
                           + ", ".join(unused))
    if model.n_data < int(free.sum()):
        raise InputError(f"{model.n_data} measured numbers cannot determine {int(free.sum())} "
                         "free parameters: add data, drop poorly observed stars, or fix "
                         "parameters in the settings (e.g. the distance)",
                         file=str(observations.folder))
    vec0 = np.clip(start_vec, lo, hi)
    say(f"joint fit of {int(free.sum())} parameters to {model.n_data} data")
    vec, sol = minimise(model, vec0, free, lo, hi)
    notes = list(start.notes)
    if model.datasets is not None and model.datasets.mixture:  # see deepwell.robust
        from .robust import restart_without_outliers
        vec, sol, note = restart_without_outliers(model, vec, sol, settings, free, lo, hi)
        notes += [note] if note else []
    poor = _stars_to_polish(model, vec)
    if poor:
        say(f"searching again for {len(poor)} poorly constrained star(s) with the fitted frame")
        vec2, changed = polish_stars(model, vec, poor)
        if changed:
            vec2, sol2 = minimise(model, vec2, free, lo, hi)
            if np.sum(model.residuals(vec2) ** 2) < np.sum(model.residuals(vec) ** 2):
                vec, sol = vec2, sol2
                notes.append("a second search with the fitted mass, distance and frame "
                             "changed the orbit of " + ", ".join(changed))
    vec, sol, aliased = _alias_retry(model, vec, sol, free, lo, hi)
    if aliased:
        notes.append("a joint retry with the period of " + ", ".join(aliased) + " multiplied or "
                     "divided by 2 or 3 lowered the chi-square (seasonal sampling aliases "
                     "periods); that solution was kept")
    notes += _coverage_notes(model, vec)
    say("uncertainties from the Jacobian at the solution")
    if not sol.success:
        notes.append(f"the optimiser stopped without convergence: {sol.message}")
    return assemble_result(model, vec, free, settings, observations, notes,
                           converged=bool(sol.success), nfev=int(sol.nfev))


def _alias_retry(model, vec, sol, free, lo, hi, factors=(2.0, 0.5, 3.0, 1.0 / 3.0)):
    """Joint refits with a badly fitting star's period scaled by small integer ratios.

    Data taken once a year leave P and P/2, 2P, ... nearly equally good for one
    star; only a joint refit (mass, distance and frame free) tells them apart.
    Tried only for stars whose reduced chi-square exceeds 2.
    """
    chi, ndat = model.star_chi2(vec)
    red = chi / np.maximum(ndat - len(STAR_INTERNAL), 1)
    cost = float(np.sum(model.residuals(vec) ** 2))
    changed = []
    for k in np.flatnonzero(red > 2.0):
        i_per = model.layout.n_shared + k * len(STAR_INTERNAL)
        if not free[i_per]:
            continue
        for f in factors:
            trial = vec.copy()
            trial[i_per] *= f
            v2, s2 = minimise(model, trial, free, lo, hi, restarts=2)
            c2 = float(np.sum(model.residuals(v2) ** 2))
            if c2 < cost - 1.0:
                vec, sol, cost = v2, s2, c2
                changed.append(model.stars[k])
                break
    return vec, sol, changed


def _unconstrained_shared(model):
    """Frame terms without data: no frame-relative positions, or no velocities."""
    names = []
    if not np.any(model.pos.frame):
        names += ["x0", "y0", "vx0", "vy0"]
    if model.vel is None:
        names.append("vz0")
    return names


def _stars_to_polish(model, vec):
    """Stars worth a second search: short arcs or a poor fit."""
    chi, ndat = model.star_chi2(vec)
    red = chi / np.maximum(ndat - len(STAR_INTERNAL), 1)
    return [k for k in range(len(model.stars))
            if phase_coverage(model, vec, k) < 0.5 or red[k] > 2.0]


def _coverage_notes(model, vec):
    """A plain warning when no orbit is covered well enough for linear errors."""
    cover = [phase_coverage(model, vec, k) for k in range(len(model.stars))]
    if max(cover) >= 0.5:
        return []
    return [f"no star covers half of its orbit (best phase coverage {max(cover):.2f}): the mass "
            "and distance rest on partial arcs, where the posterior is far from Gaussian; the "
            "least-squares errors are a linear approximation that can understate the real "
            "uncertainty several-fold. Sample the posterior (--sample) before quoting them."]


def assemble_result(model, vec, free, settings, observations, notes=(), converged=True,
                    nfev=0):
    """A :class:`FitResult` at internal vector ``vec``: covariance and statistics.

    Used by :func:`fit_joint` and to rebuild a finished fit from its saved state.
    """
    notes = list(notes)
    cov_int, rank_def = covariance(model, vec, free)
    full_cov = np.zeros((model.layout.size, model.layout.size))
    full_cov[np.ix_(free, free)] = cov_int
    steps = _default_steps(model, vec)
    steps[free] = np.where(np.diag(cov_int) > 0, 1e-3 * np.sqrt(np.diag(cov_int)), steps[free])
    G = numerical_jacobian(lambda v: physical_vector(model.layout, v), vec, free, steps,
                           model.layout, physical_owner(model.layout))
    cov_phys = G @ cov_int @ G.T
    chi_s, n_s = model.star_chi2(vec)
    if rank_def and not any("not constrained by the data" in n for n in notes):
        notes.append(f"{rank_def} parameter combination(s) are not constrained by the data "
                     "(singular covariance); their errors are not meaningful")
        warnings.warn(FitWarning(notes[-1]), stacklevel=2)
    return FitResult(
        model=model,
        internal=vec,
        internal_cov=full_cov,
        free=free,
        values=physical_vector(model.layout, vec),
        cov=cov_phys,
        labels=physical_labels(model.layout),
        chi2=float(model.chi2(vec)),
        n_data=model.n_data,
        n_free=int(free.sum()),
        star_chi2=chi_s,
        star_ndata=n_s,
        converged=converged,
        nfev=nfev,
        notes=tuple(notes),
        settings=settings,
        observations=observations,
    )
