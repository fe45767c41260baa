"""Can a star's data tell a relativistic effect from a refit orbit? A Fisher estimate.

For each star and each effect (Rømer delay, redshift, precession) the expected
chi-square difference between the model with the effect and the model without
it, at the *actual* epochs and (fitted) errors, after the fit's parameters are
refitted to absorb what they can:

    Δχ² ≈ |(1 - P_J) w|²,   w = (prediction with - prediction without) / σ,

with w non-zero on the star's own rows only, and P_J the projector onto the
span of the columns of J, the whitened derivatives of all predictions (and
prior rows) with respect to the fit's free parameters except the effect
strengths f, f_sp and ext_fraction: the linearised refit.  The star's elements
absorb what an orbit change can mimic; the shared terms (vz0, a spectrograph's
zero-point, mass, distance, frame) absorb only as far as the other stars and
the priors let them: a constant redshift offset of one star is not taken for a
detection when a zero-point could carry it.  For noise-free data from the
model with the effect, this is the chi-square the refit model without the
effect reaches, to first order; with noise, its expectation (Fisher
information, common practice).

Both models are the general-relativistic ones (f = f_sp = 1, Rømer delay on,
this star integrated) minus the one effect, whatever the fit itself switched
on, so an effect the fit leaves out is estimated too.
"""

import numpy as np

from deepwell.core.parameters import SHARED
from deepwell.fit.jacobian import default_steps, numerical_jacobian
from deepwell.model.epochs import observations_at
from deepwell.model.quality import DETECTABLE_DCHI2
from deepwell.tables.effects import Effects

__all__ = ["EFFECTS", "refit_basis", "projected_dchi2", "refit_jacobian", "star_effect_dchi2",
           "effect_dchi2"]

#: The effects estimated, in order.
EFFECTS = ("romer", "redshift", "precession")


def refit_basis(jac):
    """Orthonormal basis (n, r) of the column span of ``jac``: what a linear refit absorbs.

    Directions below 1e-10 of the largest singular value are dropped
    (parameters the data do not constrain absorb nothing).
    """
    jac = np.asarray(jac, float)
    if jac.size == 0:
        return np.zeros((jac.shape[0], 0))
    u, s, _ = np.linalg.svd(jac, full_matrices=False)
    return u[:, s > s[0] * 1e-10] if s[0] > 0 else u[:, :0]


def projected_dchi2(jac, signal, basis=None):
    """Chi-square left by a signal after a linear least-squares refit.

    Parameters
    ----------
    jac : ndarray, shape (n, p)
        Whitened derivatives of the predictions (per unit error) with respect
        to the refitted parameters.
    signal : ndarray, shape (n,)
        Whitened difference of the predictions with and without the effect.
    basis : ndarray, optional
        :func:`refit_basis` of ``jac``, when already computed.

    Returns
    -------
    float
        min over δ of |signal - jac δ|² (dimensionless).
    """
    q = refit_basis(jac) if basis is None else basis
    w = np.asarray(signal, float)
    rest = w - q @ (q.T @ w)
    return float(rest @ rest)


def _errors(model, vec):
    """Effective (ra, dec, corr) and vr errors of every row (with the fitted error model)."""
    pos, vel = model.pos, model.vel
    if model.datasets is not None:
        sa, sd, rho, sv, _ = model.datasets.errors(model, vec)
    else:
        sa, sd, rho = pos.ra_err, pos.dec_err, pos.corr
        sv = vel.vr_err if vel is not None else np.zeros(0)
    n_vel = vel.n if vel is not None else 0
    return (*(np.broadcast_to(x, pos.ra.shape) for x in (sa, sd, rho)),
            np.broadcast_to(sv, (n_vel,)))


def _gr_model(model, star, t_pos, t_vel, without=None):
    """One-star model at the star's epochs: general relativity, minus effect ``without``."""
    fx = model.effects
    on = {e: e != without for e in EFFECTS}
    effects = Effects(romer=on["romer"], redshift="exact" if on["redshift"] else "off",
                      precession=on["precession"], precession_stars="all",
                      steps_per_orbit=fx.steps_per_orbit)
    obs = observations_at((star,), t_pos, t_vel)
    return model.replace(observations=obs, stars=(star,), priors=(), datasets=None,
                         effects=effects, integrated=[on["precession"]],
                         reference_radius=None)


def _vector(sub, model, vec, k):
    """Internal vector of the one-star model ``sub``: the fit's shared values, f = f_sp = 1."""
    lay = model.layout
    shared = [float(lay.shared(vec, n)) for n in SHARED]
    extra = [1.0 for _ in sub.layout.extra]  # f and f_sp at general relativity
    return np.concatenate([shared, extra, lay.star_block(vec)[k]])


def _whiten(pred, sa, sd, rho, sv):
    """Whitened rows of a prediction (same whitening as the fit's residuals)."""
    root = np.sqrt(1.0 - rho**2)
    r1 = pred.ra / sa
    r2 = (pred.dec / sd - rho * pred.ra / sa) / root
    return np.concatenate([r1, r2, pred.vr / sv], axis=-1)


#: Shared parameters that are effect strengths: the model without the effect has none.
_STRENGTHS = ("f", "f_sp", "ext_fraction")


def refit_jacobian(model, vec, free):
    """Whitened derivatives of all predictions and prior rows: the linearised refit.

    Parameters
    ----------
    model : deepwell.model.JointModel
    vec : ndarray
        Internal vector at the solution.
    free : ndarray of bool
        Parameters the refit may move (effect strengths are taken out here).

    Returns
    -------
    ndarray, shape (n_data + n_prior_rows, n_moved)
    """
    sa, sd, rho, sv = _errors(model, vec)
    names = model.layout.names()
    moved = np.asarray(free, bool) & np.array([n not in _STRENGTHS for n in names])

    def rows(v):
        p = model.predict(v)
        return np.concatenate([_whiten(p, sa, sd, rho, sv), model.prior_residuals(v)],
                              axis=-1)

    owner = model.residual_owner()
    n_prior = np.shape(model.prior_residuals(vec))[-1]  # penalty and prior rows come last
    owner = np.concatenate([owner[:model.n_data], owner[len(owner) - n_prior:]])
    return numerical_jacobian(rows, vec, moved, default_steps(model, vec), model.layout, owner)


def star_effect_dchi2(model, vec, star, jac, basis=None):
    """Expected Δχ² of each effect for one star of a joint model.

    Parameters
    ----------
    model : deepwell.model.JointModel
        The fitted model (its epochs, errors and fitted error terms are used).
    vec : ndarray
        Its internal vector at the solution.
    star : str
    jac : ndarray
        :func:`refit_jacobian` of the model.
    basis : ndarray, optional
        :func:`refit_basis` of ``jac`` (computed here if not given).

    Returns
    -------
    dict
        Effect name (:data:`EFFECTS`) -> expected Δχ² (dimensionless, >= 0).
    """
    k = model.stars.index(star)
    basis = refit_basis(jac) if basis is None else basis
    sa, sd, rho, sv = _errors(model, vec)
    p_rows = np.flatnonzero(model.pos.star == k)
    v_rows = (np.flatnonzero(model.vel.star == k) if model.vel is not None
              else np.zeros(0, np.intp))
    t_pos, t_vel = model.pos.t[p_rows], model.vel.t[v_rows] if v_rows.size else np.zeros(0)
    errs = (sa[p_rows], sd[p_rows], rho[p_rows], sv[v_rows])
    full = _gr_model(model, star, t_pos, t_vel)
    base = _whiten(full.predict(_vector(full, model, vec, k)), *errs)
    npos = model.pos.n
    where = np.concatenate([p_rows, npos + p_rows, 2 * npos + v_rows])
    out = {}
    for effect in EFFECTS:
        sub = _gr_model(model, star, t_pos, t_vel, without=effect)
        w = np.zeros(jac.shape[0])
        w[where] = base - _whiten(sub.predict(_vector(sub, model, vec, k)), *errs)
        out[effect] = projected_dchi2(jac, w, basis)
    return out


def effect_dchi2(result):
    """:func:`star_effect_dchi2` of every star of a fit, with the detection flags.

    Parameters
    ----------
    result : deepwell.fit.result.FitResult

    Returns
    -------
    dict[str, dict]
        Per star: ``dchi2_romer``, ``dchi2_redshift``, ``dchi2_precession``
        (expected Δχ²) and ``detectable_<effect>`` (Δχ² >= DETECTABLE_DCHI2).
    """
    jac = refit_jacobian(result.model, result.internal, result.free)
    basis = refit_basis(jac)
    out = {}
    for star in result.model.stars:
        d = star_effect_dchi2(result.model, result.internal, star, jac, basis)
        out[star] = {**{f"dchi2_{e}": v for e, v in d.items()},
                     **{f"detectable_{e}": bool(v >= DETECTABLE_DCHI2) for e, v in d.items()}}
    return out
