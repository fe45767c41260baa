"""Forecast of candidate observing epochs: Fisher information of synthetic observations.

The information of a candidate epoch is J^T J of the whitened residuals of
a synthetic model observing every star at that epoch with the stated errors
(central differences at the fitted vector).  It is added to the information
of the data in hand, I_0 = C^-1 (the fit's covariance, or the samples'
covariance).  When f or f_sp is in the model but was held fixed in the fit,
the forecast frees it: I_0 is then J^T J of the fit's own residuals (data
and priors) at the solution over the fitted entries plus the freed ones, so
"now" means "what the data in hand say about f with f free".  A strength not
in the model at all (its effect switched off) is reported as such and
skipped.  Only the stars chosen for the plan contribute rows, and of those
only the ones inside each instrument's field of view (a radius around the
mass, judged on the best-fit separation at the epoch).  The forecast assumes
the model is right and the stated errors are the true ones; it is linear
around the fitted solution.
"""

import numpy as np
import pandas as pd

from deepwell.fit.jacobian import default_steps, numerical_jacobian
from deepwell.model.epochs import observations_at

__all__ = ["TARGETS", "synthetic_model", "mass_relative", "information_gain",
           "fisher_forecast"]

#: Quantities whose forecast errors are ranked.
TARGETS = ("mass", "distance", "f", "f_sp")


# ------------------------------------------------------------------ synthetic data
def synthetic_model(model, epochs, pos_err=1.0, vel_err=10.0, stars=None,
                    relative_to="frame"):
    """A model like ``model`` observing ``stars`` at every one of ``epochs``.

    Every star gets one position row (stated errors ``pos_err`` mas in each
    coordinate, no correlation) and one velocity row (``vel_err`` km/s) per
    epoch; the measured values are zeros (only predictions and Jacobians of
    this model are meaningful).  Effects, integrated flags and the reference
    radius are those of ``model``; it has no priors.
    """
    obs = observations_at(model.stars if stars is None else stars, epochs, epochs, pos_err,
                          vel_err, relative_to, dataset="planned")
    return model.replace(observations=obs, priors=(), datasets=None)


def mass_relative(model, vec, pred):
    """Predicted frame positions (mas) with the frame terms removed: east, north of the mass."""
    sh = model.layout.shared
    dt = model.pos.t - model.reference_epoch
    x = (sh(vec, "x0")[..., None] + sh(vec, "vx0")[..., None] * dt) * model.pos.frame
    y = (sh(vec, "y0")[..., None] + sh(vec, "vy0")[..., None] * dt) * model.pos.frame
    return pred.ra - x, pred.dec - y


# ------------------------------------------------------------------ forecast
def _covariance_from_information(info):
    """Inverse of an information matrix after equilibration; inf where it is null."""
    d = np.sqrt(np.clip(np.diag(info), 0.0, None))
    ok = d > 0
    cov = np.full(info.shape, np.nan)
    sub = info[np.ix_(ok, ok)] / np.outer(d[ok], d[ok])
    cov[np.ix_(ok, ok)] = np.linalg.pinv(sub, rcond=1e-13, hermitian=True) / np.outer(d[ok], d[ok])
    cov[~ok, ~ok] = np.inf
    return cov


def information_gain(info0, jac, row_sets):
    """Standard errors now and after adding each set of Jacobian rows.

    Parameters
    ----------
    info0 : ndarray, shape (n, n)
        Information matrix of the data in hand (inverse covariance).
    jac : ndarray, shape (n_rows, n)
        Jacobian of the whitened residuals of the candidate data.
    row_sets : sequence of boolean masks over the rows of ``jac``

    Returns
    -------
    sigma_now : ndarray, shape (n,)
    sigma_after : ndarray, shape (len(row_sets), n)

    Notes
    -----
    Gauss-Markov: Cov_after = (I_0 + J_s^T J_s)^-1 for the rows s added
    (e.g. Press et al. 2007, Numerical Recipes, sect. 15.4, the normal
    equations of linear least squares).
    """
    now = np.sqrt(np.diag(_covariance_from_information(info0)))
    after = np.array([np.sqrt(np.diag(_covariance_from_information(
        info0 + jac[sel].T @ jac[sel]))) for sel in row_sets])
    return now, after


def _current_information(result, free, samples, notes):
    model = result.model
    if np.array_equal(free, result.free):
        if samples is not None:
            cov = np.cov(np.asarray(samples).reshape(-1, free.size)[:, free], rowvar=False)
        else:
            cov = result.internal_cov[np.ix_(free, free)]
        return np.linalg.pinv(0.5 * (cov + cov.T), hermitian=True)
    notes.append("f and/or f_sp were held fixed in the fit; the forecast frees them: the "
                 "information in hand is J^T J of the fit's residuals (data and priors) at "
                 "the solution with them free")
    jac = numerical_jacobian(model.residuals, result.internal, free,
                             _steps(model, result, free), model.layout, model.residual_owner())
    return jac.T @ jac


def _steps(model, result, free):
    steps = default_steps(model, result.internal)
    sig = np.sqrt(np.clip(np.diag(result.internal_cov), 0.0, None))
    return np.where(free & (sig > 0), 1e-3 * sig, steps)


def fisher_forecast(result, epochs, pos_err, vel_err, relative_to="frame", samples=None,
                    stars=None, astrometry_field=None, velocity_field=None):
    """Errors of the targets now and after observing each candidate epoch.

    Parameters
    ----------
    result : FitResult
    epochs : array_like
        Candidate epochs (Julian yr); every chosen star (inside the fields of
        view) is observed at each.
    pos_err, vel_err : float
        Stated errors of the new positions (mas, per coordinate) and radial
        velocities (km/s).
    relative_to : {"frame", "mass"}
    samples : ndarray, optional
        Posterior samples of the internal vector (for the information in hand).
    stars : sequence of str, optional
        Stars observed (default: all).
    astrometry_field, velocity_field : float, optional
        Radius (mas) around the mass inside which a star's position
        (velocity) is measured, judged on its best-fit separation at the
        epoch; None: no limit.

    Returns
    -------
    table : DataFrame
        See :attr:`Plan.forecast`; the last row (``candidate = "all"``) has
        every candidate observed.
    notes : list of str

    Notes
    -----
    I_after = I_0 + J_e^T J_e with J_e the Jacobian of the whitened residuals
    of epoch e's synthetic rows over the free internal parameters; the
    forecast sigma of a target is sqrt of its diagonal entry of I_after^-1.
    The targets are entries of the internal vector, so no transformation is
    needed.  Gain = 1 - sigma_after / sigma_now.
    """
    model = result.model
    notes = []
    names = model.layout.names()
    free = np.asarray(result.free, bool).copy()
    targets = []
    for q in TARGETS:
        if q not in names:
            notes.append(f"{q} is not in the model (its effect is switched off): no forecast")
            continue
        free[names.index(q)] = True
        targets.append(q)
    info0 = _current_information(result, free, samples, notes)
    t = np.asarray(epochs, float)
    syn = synthetic_model(model, t, pos_err, vel_err, relative_to=relative_to)
    jac = numerical_jacobian(syn.residuals, result.internal, free, _steps(model, result, free),
                             syn.layout, syn.residual_owner())[: syn.n_data]
    seen_pos, seen_vel = _observed_rows(result, syn, stars, astrometry_field, velocity_field)
    row_t = np.concatenate([syn.pos.t, syn.pos.t, syn.vel.t])
    seen = np.concatenate([seen_pos, seen_pos, seen_vel])
    col = {q: int(np.sum(free[: names.index(q)])) for q in targets}
    sets = [(row_t == e) & seen for e in t] + [seen]
    sig_now, sig_after = information_gain(info0, jac, sets)
    rows = []
    for k in range(len(sets)):
        at = np.ones(syn.pos.n, bool) if k == len(t) else syn.pos.t == t[k]
        row = {"candidate": "all" if k == len(t) else f"{t[k]:.4f}",
               "epoch": np.nan if k == len(t) else t[k],
               "n_astrometry": int(np.sum(seen_pos & at)),
               "n_velocity": int(np.sum(seen_vel & (np.ones(syn.vel.n, bool) if k == len(t)
                                                     else syn.vel.t == t[k])))}
        for q in targets:
            now, after = sig_now[col[q]], sig_after[k, col[q]]
            row[f"sigma_now_{q}"] = now
            row[f"sigma_after_{q}"] = after
            row[f"gain_{q}"] = 1.0 - after / now if np.isfinite(now) else np.nan
        rows.append(row)
    table = pd.DataFrame(rows)
    for q in targets:
        if not np.isfinite(sig_now[col[q]]):
            notes.append(f"{q} is not constrained by the data in hand; its gain is not defined")
        gain = table[f"gain_{q}"].to_numpy()[:-1]
        order = np.argsort(-np.nan_to_num(gain, nan=-np.inf), kind="stable")
        rank = np.empty(len(gain) + 1)
        rank[order] = np.arange(1, len(gain) + 1)
        rank[-1] = np.nan
        table[f"rank_{q}"] = rank
    return table, notes


def _observed_rows(result, syn, stars, astrometry_field, velocity_field):
    """Which rows of the synthetic model are observed: chosen stars inside the fields.

    Returns
    -------
    pos, vel : ndarray of bool
        One flag per position row and per velocity row of ``syn``.
    """
    names = np.asarray(syn.stars)
    chosen = np.ones(len(names), bool) if stars is None else np.isin(names, list(stars))
    pos = chosen[syn.pos.star]
    vel = chosen[syn.vel.star]
    if astrometry_field is not None or velocity_field is not None:
        p = syn.predict(result.internal)
        ra, dec = mass_relative(syn, result.internal, p)
        sep = dict(zip(zip(syn.pos.star, syn.pos.t, strict=True), np.hypot(ra, dec), strict=True))
        if astrometry_field is not None:
            pos = pos & (np.hypot(ra, dec) <= astrometry_field)
        if velocity_field is not None:
            vsep = np.array([sep[(k, t)] for k, t in zip(syn.vel.star, syn.vel.t, strict=True)])
            vel = vel & (vsep <= velocity_field)
    return pos, vel
