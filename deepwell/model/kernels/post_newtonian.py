"""First post-Newtonian (1PN) orbits around a point mass plus a Plummer sphere.

A fixed-step eighth-order Runge-Kutta integrator in a regularised time,
compiled with numba and vectorised over many orbits (stars, walkers).  Units:
au, Julian yr, solar masses; GM in au^3/yr^2; state vectors are ordered
(east, north, z) with z away from the observer, the axes of
:func:`deepwell.model.kernels.orbit.thiele_innes`.

Design
------
* Time is regularised with dt/ds = r^alpha (Sundman 1913); alpha = 1.5 spreads
  the steps between pericentre and apocentre of orbits with e up to ~0.97.
* The step in s is a fixed fraction 1/steps_per_orbit of the osculating
  Keplerian orbit's s-period, so the result is a smooth function of the
  parameters (no adaptive step-size noise in a likelihood).
* Requested epochs are served by quintic Hermite interpolation in t between
  step ends (position, velocity and acceleration known at both ends); with
  ``light_time=True`` the requested epochs are *observed* epochs and the
  emission epoch t_em + z(t_em)/c = t_obs is solved inside each step.
"""

from dataclasses import dataclass

import numpy as np
from numba import njit

from deepwell.core.constants import C_AU_PER_YR, GM_SUN_AU3_PER_YR2, KEPLER_K, KMS_PER_AU_PER_YR

from . import dop853_tableau as _dop
from .orbit import kepler_xy, thiele_innes, to_sky

__all__ = ["IntegratedStates", "PhysicalTrack", "integrate_orbits", "osculating_state", "pn_track"]

# Dormand & Prince 8(5,3) tableau (Hairer, Norsett & Wanner 1993, Solving
# Ordinary Differential Equations I, sect. II.10), kept in our own module.
_A = np.ascontiguousarray(_dop.A[: _dop.N_STAGES, : _dop.N_STAGES], dtype=float)
_B = np.ascontiguousarray(_dop.B, dtype=float)
_NS = _dop.N_STAGES


@dataclass(frozen=True)
class IntegratedStates:
    """States of integrated orbits at requested epochs.

    Attributes
    ----------
    position : ndarray, shape (..., n_epochs, 3)
        (east, north, z) relative to the mass, au.
    velocity : ndarray, shape (..., n_epochs, 3)
        Velocity, au/yr.
    t_emit : ndarray, shape (..., n_epochs)
        Epoch at which the state holds (Julian yr): the requested epoch, or
        the emission epoch when light time is included.
    """

    position: np.ndarray
    velocity: np.ndarray
    t_emit: np.ndarray


@dataclass(frozen=True)
class PhysicalTrack:
    """Track of a star relative to the mass in physical units.

    Attributes
    ----------
    east, north, z : ndarray
        Offsets in au (z away from the observer).
    v_east, v_north, v_z : ndarray
        Velocity in km/s (v_z > 0 receding).
    t_emit : ndarray
        Epoch of the state (Julian yr; emission epoch if light time is on).
    """

    east: np.ndarray
    north: np.ndarray
    z: np.ndarray
    v_east: np.ndarray
    v_north: np.ndarray
    v_z: np.ndarray
    t_emit: np.ndarray


@njit(cache=True)
def _rhs(y, gm, k_pn, gm_ext, b2, alpha, out):
    """d(x, v, t)/ds of the 1PN + Plummer equation with dt/ds = r^alpha."""
    x0, x1, x2, v0, v1, v2 = y[0], y[1], y[2], y[3], y[4], y[5]
    r2 = x0 * x0 + x1 * x1 + x2 * x2
    r = np.sqrt(r2)
    gm_r3 = gm / (r2 * r)
    vsq = v0 * v0 + v1 * v1 + v2 * v2
    rv = x0 * v0 + x1 * v1 + x2 * v2
    c_r = -gm_r3 + k_pn * gm_r3 * (4.0 * gm / r - vsq)
    c_v = 4.0 * k_pn * gm_r3 * rv
    if gm_ext != 0.0:
        d2 = r2 + b2
        c_r -= gm_ext / (d2 * np.sqrt(d2))
    if alpha == 1.5:
        g = r * np.sqrt(r)
    elif alpha == 1.0:
        g = r
    else:
        g = r**alpha
    out[0] = g * v0
    out[1] = g * v1
    out[2] = g * v2
    out[3] = g * (c_r * x0 + c_v * v0)
    out[4] = g * (c_r * x1 + c_v * v1)
    out[5] = g * (c_r * x2 + c_v * v2)
    out[6] = g


@njit(cache=True)
def _step(y, k, h, gm, k_pn, gm_ext, b2, alpha, A, B, ytmp, ynew):
    """One DOP853 step of size h in s; k[0] must hold f(y) on entry."""
    for s in range(1, _NS):
        for j in range(7):
            acc = 0.0
            for m in range(s):
                acc += A[s, m] * k[m, j]
            ytmp[j] = y[j] + h * acc
        _rhs(ytmp, gm, k_pn, gm_ext, b2, alpha, k[s])
    for j in range(7):
        acc = 0.0
        for s in range(_NS):
            acc += B[s] * k[s, j]
        ynew[j] = y[j] + h * acc


@njit(cache=True)
def _hermite(ya, fa, yb, fb, theta, pos, vel):
    """Quintic Hermite position and its derivative at theta in [0, 1]."""
    ht = yb[6] - ya[6]
    t2, t3 = theta * theta, theta * theta * theta
    t4, t5 = t3 * theta, t3 * t2
    h0 = 1.0 - 10.0 * t3 + 15.0 * t4 - 6.0 * t5
    h1 = theta - 6.0 * t3 + 8.0 * t4 - 3.0 * t5
    h2 = 0.5 * (t2 - 3.0 * t3 + 3.0 * t4 - t5)
    h3 = 10.0 * t3 - 15.0 * t4 + 6.0 * t5
    h4 = -4.0 * t3 + 7.0 * t4 - 3.0 * t5
    h5 = 0.5 * (t3 - 2.0 * t4 + t5)
    d0 = -30.0 * t2 + 60.0 * t3 - 30.0 * t4
    d1 = 1.0 - 18.0 * t2 + 32.0 * t3 - 15.0 * t4
    d2 = theta - 4.5 * t2 + 6.0 * t3 - 2.5 * t4
    d4 = -12.0 * t2 + 28.0 * t3 - 15.0 * t4
    d5 = 1.5 * t2 - 4.0 * t3 + 2.5 * t4
    ga, gb = fa[6], fb[6]
    for j in range(3):
        va, vb = ya[3 + j] * ht, yb[3 + j] * ht
        aa, ab = fa[3 + j] / ga * ht * ht, fb[3 + j] / gb * ht * ht
        pos[j] = h0 * ya[j] + h1 * va + h2 * aa + h3 * yb[j] + h4 * vb + h5 * ab
        vel[j] = (d0 * (ya[j] - yb[j]) + d1 * va + d2 * aa + d4 * vb + d5 * ab) / ht


@njit(cache=True)
def _sweep(y0, h, taus, idx, pars, inv_c, A, B, out_pos, out_vel, out_t):
    """Integrate from y0 with step h over the sorted targets taus (same direction)."""
    gm, k_pn, gm_ext, b2, alpha = pars[0], pars[1], pars[2], pars[3], pars[4]
    k = np.empty((_NS, 7))
    ya, yb, ytmp = y0.copy(), np.empty(7), np.empty(7)
    fa, fb = np.empty(7), np.empty(7)
    pos, vel = np.empty(3), np.empty(3)
    _rhs(ya, gm, k_pn, gm_ext, b2, alpha, fa)
    sign = 1.0 if h > 0.0 else -1.0
    i, n = 0, taus.size
    while i < n:
        k[0, :] = fa
        _step(ya, k, h, gm, k_pn, gm_ext, b2, alpha, A, B, ytmp, yb)
        _rhs(yb, gm, k_pn, gm_ext, b2, alpha, fb)
        obs_a = ya[6] + ya[2] * inv_c
        obs_b = yb[6] + yb[2] * inv_c
        if not np.isfinite(obs_b):  # bad input (e >= 1, NaN): flag, never loop forever
            for m in range(i, n):
                out_pos[idx[m], :] = np.nan
                out_vel[idx[m], :] = np.nan
                out_t[idx[m]] = np.nan
            return
        while i < n and (taus[i] - obs_b) * sign <= 0.0:
            theta = (taus[i] - obs_a) / (obs_b - obs_a)
            ht = yb[6] - ya[6]
            for _ in range(4):  # Newton on t(theta) + z(theta)/c = tau
                _hermite(ya, fa, yb, fb, theta, pos, vel)
                if inv_c == 0.0:
                    break
                resid = ya[6] + theta * ht + pos[2] * inv_c - taus[i]
                theta -= resid / (ht * (1.0 + vel[2] * inv_c))
            _hermite(ya, fa, yb, fb, theta, pos, vel)
            j = idx[i]
            out_pos[j, :] = pos
            out_vel[j, :] = vel
            out_t[j] = ya[6] + theta * ht
            i += 1
        ya[:] = yb
        fa[:] = fb


@njit(cache=True)
def _integrate_all(y0, hs, taus, order, pars, inv_c, A, B, out_pos, out_vel, out_t):
    for o in range(y0.shape[0]):
        tau, idx = taus[o], order[o]
        start = y0[o, 6] + y0[o, 2] * inv_c
        n_back = np.searchsorted(tau, start)
        _sweep(y0[o], hs[o], tau[n_back:], idx[n_back:], pars[o], inv_c, A, B,
               out_pos[o], out_vel[o], out_t[o])
        _sweep(y0[o], -hs[o], tau[:n_back][::-1], idx[:n_back][::-1], pars[o], inv_c, A, B,
               out_pos[o], out_vel[o], out_t[o])


def _check_plummer(m_ext, b_ext):
    """Scale radius to use: b_ext, or a dummy 1 when there is no extended mass."""
    if b_ext is None:
        if np.any(np.asarray(m_ext) != 0.0):
            raise ValueError("b_ext is required when the extended mass is non-zero")
        return 1.0
    if np.any(np.asarray(b_ext) <= 0.0):
        raise ValueError("b_ext must be positive")
    return b_ext


def _s_step(r0, v0, gm, alpha, steps_per_orbit):
    """Step in s: the osculating Kepler orbit's s-period / steps_per_orbit."""
    r = np.linalg.norm(r0, axis=-1)
    vsq = np.sum(v0 * v0, axis=-1)
    rv = np.sum(r0 * v0, axis=-1)
    a = 1.0 / np.abs(2.0 / r - vsq / gm)  # |a| keeps unbound orbits running
    ecc_vec = ((vsq / gm - 1.0 / r)[:, None] * r0 - (rv / gm)[:, None] * v0)
    ecc = np.minimum(np.linalg.norm(ecc_vec, axis=-1), 0.999)
    ecc_anom = np.linspace(0.0, 2.0 * np.pi, 128, endpoint=False)
    mean_g = np.mean((1.0 - ecc[:, None] * np.cos(ecc_anom)) ** (1.0 - alpha), axis=-1)
    period = 2.0 * np.pi * np.sqrt(a**3 / gm)
    return period * a ** (-alpha) * mean_g / steps_per_orbit


def integrate_orbits(t_eval, r0, v0, t0, gm, f_sp=1.0, gm_ext=0.0, b_ext=None,
                     light_time=False, steps_per_orbit=96, alpha=1.5):
    """Integrate 1PN test-particle orbits around a point mass and a Plummer sphere.

    Parameters
    ----------
    t_eval : array_like, shape (n_epochs,) or (n_orbits, n_epochs)
        Requested epochs (Julian yr), any order, before or after ``t0``.
    r0, v0 : array_like, shape (n_orbits, 3) or (3,)
        Position (au) and velocity (au/yr) at ``t0``, axes (east, north, z).
    t0 : array_like, shape (n_orbits,) or scalar
        Epoch of the initial state (Julian yr).
    gm : array_like
        GM of the point mass, au^3/yr^2 (``mass * GM_SUN_AU3_PER_YR2``).
    f_sp : array_like
        Factor on the 1PN terms (0 Newtonian, 1 general relativity).
    gm_ext, b_ext : array_like
        GM (au^3/yr^2) and scale radius (au, > 0; required if any ``gm_ext``
        is non-zero) of the Plummer sphere.
    light_time : bool
        If True, ``t_eval`` are observed epochs and the states are returned at
        the emission epochs t_em solving t_em + z(t_em)/c = t_eval.
    steps_per_orbit : int
        Steps per osculating Keplerian orbit (cost and accuracy knob).
    alpha : float
        Exponent of the time transformation dt/ds = r^alpha.

    Returns
    -------
    IntegratedStates
        Arrays of shape (n_orbits, n_epochs, ...); a single orbit given as
        1-d ``r0`` drops the leading axis.

    Notes
    -----
    d^2r/dt^2 = -GM r/r^3 + f_sp GM/(c^2 r^3) [(4GM/r - v^2) r + 4 (r.v) v]
    - G M_ext r/(r^2 + b^2)^(3/2), the 1PN harmonic-gauge test-particle
    equation (PPN beta = gamma = 1) plus a Plummer sphere.  Integrated in
    s with dt/ds = r^alpha by the fixed-step DOP853 method, output by quintic
    Hermite interpolation in t.

    References
    ----------
    Hairer, Norsett & Wanner 1993, Solving ODEs I, 2nd ed., sect. II.10 (DOP853).
    Sundman 1913, Acta Math. 36, 105 (time transformation).
    """
    b_ext = _check_plummer(gm_ext, b_ext)
    single = np.ndim(r0) == 1
    r0 = np.atleast_2d(np.asarray(r0, dtype=float))
    v0 = np.atleast_2d(np.asarray(v0, dtype=float))
    n_orb = max(r0.shape[0], v0.shape[0])
    r0, v0 = np.broadcast_to(r0, (n_orb, 3)), np.broadcast_to(v0, (n_orb, 3))
    t_eval = np.asarray(t_eval, dtype=float)
    t_eval = np.broadcast_to(t_eval, (n_orb, t_eval.shape[-1]))
    t0, gm, f_sp, gm_ext, b_ext = (np.broadcast_to(np.asarray(p, dtype=float), (n_orb,))
                                   for p in (t0, gm, f_sp, gm_ext, b_ext))
    if not np.all(np.isfinite(t_eval)):
        raise ValueError("t_eval must be finite")
    inv_c = 1.0 / C_AU_PER_YR if light_time else 0.0
    y0 = np.concatenate([r0, v0, np.zeros((n_orb, 1))], axis=1)
    pars = np.stack([gm, f_sp / C_AU_PER_YR**2, gm_ext, b_ext**2,
                     np.full(n_orb, float(alpha))], axis=1)
    hs = _s_step(r0, v0, gm, alpha, steps_per_orbit)
    order = np.argsort(t_eval, axis=-1, kind="stable")
    taus = np.ascontiguousarray(np.take_along_axis(t_eval, order, -1) - t0[:, None])
    n_ep = t_eval.shape[-1]
    pos, vel, t_em = np.empty((n_orb, n_ep, 3)), np.empty((n_orb, n_ep, 3)), np.empty((n_orb, n_ep))
    _integrate_all(y0, hs, taus, np.ascontiguousarray(order), pars, inv_c, _A, _B,
                   pos, vel, t_em)
    t_em += t0[:, None]
    if single:
        return IntegratedStates(pos[0], vel[0], t_em[0])
    return IntegratedStates(pos, vel, t_em)


def osculating_state(a_au, e, inc, node, peri_arg, t_peri, t_ref, mass):
    """Keplerian state vector at ``t_ref`` from orbital elements.

    Parameters
    ----------
    a_au : array_like
        Semi-major axis, au.
    e, inc, node, peri_arg : array_like
        Eccentricity and angles (radians) as in
        :func:`deepwell.model.kernels.orbit.keplerian_track`.
    t_peri, t_ref : array_like
        Pericentre epoch and reference epoch (Julian yr).
    mass : array_like
        Central mass, solar masses.

    Returns
    -------
    r, v : ndarray, shape (..., 3)
        Position (au) and velocity (au/yr) on the (east, north, z) axes.

    Notes
    -----
    north = A X + F Y, east = B X + G Y, z = C X + H Y with the Thiele-Innes
    constants (physics.md sect. 2) and P^2 = k a^3 / M.
    """
    period = np.sqrt(KEPLER_K * np.asarray(a_au, dtype=float) ** 3 / mass)
    X, Y, dX, dY = kepler_xy(t_ref, period, e, t_peri)
    consts = thiele_innes(a_au, inc, node, peri_arg)
    r = np.stack(np.broadcast_arrays(*to_sky(consts, X, Y)), axis=-1)
    v = np.stack(np.broadcast_arrays(*to_sky(consts, dX, dY)), axis=-1)
    return r, v


def pn_track(t, a_au, e, inc, node, peri_arg, t_peri, mass, t_ref, f_sp=1.0,
             m_ext=0.0, b_ext=None, light_time=False, steps_per_orbit=96):
    """1PN (+ Plummer) track from osculating Keplerian elements at ``t_ref``.

    Parameters
    ----------
    t : array_like, scalar, shape (n_epochs,) or element_shape + (n_epochs,)
        Epochs (Julian yr): emission epochs, or observed epochs if ``light_time``.
    a_au, e, inc, node, peri_arg, t_peri : array_like
        Osculating Keplerian elements at ``t_ref`` (au, radians, Julian yr),
        broadcast to a common element shape (stars, walkers...).
    mass : array_like
        Point mass, solar masses.
    t_ref : array_like
        Osculating epoch (Julian yr).
    f_sp : array_like
        Factor on the 1PN terms.
    m_ext : array_like
        Plummer mass, solar masses.
    b_ext : array_like or None
        Plummer scale radius, au (required if any ``m_ext`` is non-zero).
    light_time : bool
        Include the Romer delay (states at the emission epochs).
    steps_per_orbit : int
        Integrator steps per orbit.

    Returns
    -------
    PhysicalTrack
        Arrays of shape element_shape + (n_epochs,).

    Notes
    -----
    The osculating elements describe the Keplerian orbit tangent to the true
    one at ``t_ref``; the integrated period and pericentre epochs differ from
    the Keplerian ones at order GM/(c^2 a) (physics.md sect. 6).
    """
    b_ext = _check_plummer(m_ext, b_ext)
    elems = np.broadcast_arrays(*(np.asarray(p, dtype=float) for p in
                                  (a_au, e, inc, node, peri_arg, t_peri, mass, t_ref,
                                   f_sp, m_ext, b_ext)))
    shape = elems[0].shape
    a_au, e, inc, node, peri_arg, t_peri, mass, t_ref, f_sp, m_ext, b_ext = (
        p.ravel() for p in elems)
    t = np.asarray(t, dtype=float)
    scalar_t = t.ndim == 0
    t = np.atleast_1d(t)
    t_flat = np.broadcast_to(t, shape + t.shape[-1:]).reshape(-1, t.shape[-1])
    r0, v0 = osculating_state(a_au, e, inc, node, peri_arg, t_peri, t_ref, mass)
    st = integrate_orbits(t_flat, r0, v0, t_ref, mass * GM_SUN_AU3_PER_YR2, f_sp=f_sp,
                          gm_ext=m_ext * GM_SUN_AU3_PER_YR2, b_ext=b_ext,
                          light_time=light_time, steps_per_orbit=steps_per_orbit)
    out = shape + t.shape[-1:]
    if scalar_t:
        out = shape
    p, v = st.position, st.velocity * KMS_PER_AU_PER_YR
    return PhysicalTrack(*(x.reshape(out) for x in (p[..., 0], p[..., 1], p[..., 2], v[..., 0],
                                                    v[..., 1], v[..., 2], st.t_emit)))
