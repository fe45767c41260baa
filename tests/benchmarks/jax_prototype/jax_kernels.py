"""Prototype JAX kernels mirroring deepwell/model/kernels (measurement only, not the package).

Units and axes as in deepwell: au, Julian yr, solar masses, km/s, radians; axes
(east, north, z) with z away from the observer.  Every function is pure and
traceable (fixed iteration counts, fixed step counts), float64 only: call
:func:`enable_x64` before building anything.

* :func:`kepler_ecc_anom`: Kepler's equation E - e sin E = M for 0 <= e < 1,
  Markley's (1995) starter and three fourth-order corrections (Danby 1988,
  sect. 6.6), with a ``jax.custom_jvp`` from the implicit-function theorem:
  dE/dM = 1/(1 - e cos E), dE/de = sin E/(1 - e cos E).
* :func:`thiele_innes`, :func:`kepler_xy`, :func:`to_sky` (physics.md sect. 2).
* :func:`pn_sweeps`: the 1PN + Plummer equation of motion with f_sp, in the
  regularised time dt/ds = r^1.5, fixed-step DOP853 (the tableau deepwell uses:
  Hairer, Norsett & Wanner 1993, sect. II.10) in ``jax.lax.scan``;
  :func:`pn_dense` serves epochs by the same quintic Hermite interpolation and
  in-step Newton solve for the emission epoch (Romer delay) as
  deepwell.model.kernels.post_newtonian.
* :func:`redshift_velocity`: exact or first-order relativistic redshift with f.
"""

import math
from functools import partial

import jax
import jax.numpy as jnp
import numpy as np

from deepwell.core.constants import (
    C_AU_PER_YR,
    C_KMS,
    GRAV_RADIUS_AU_PER_MSUN,
    KEPLER_K,
)
from deepwell.model.kernels.post_newtonian import _A as _DOP_A
from deepwell.model.kernels.post_newtonian import _B as _DOP_B


def enable_x64():
    """Switch JAX to float64 (call once in an entry point, before tracing)."""
    jax.config.update("jax_enable_x64", True)


# ----------------------------------------------------------------- Kepler
_PI = math.pi
_TWO_PI = 2.0 * math.pi
_MK_A = 3.0 * _PI**2 / (_PI**2 - 6.0)
_MK_B = 1.6 * _PI / (_PI**2 - 6.0)
N_KEPLER_CORRECTIONS = 3


def _kepler_solve(m, e):
    """E for M, e (no derivative rule): Markley starter + fixed Danby steps."""
    turns = jnp.round(m / _TWO_PI)
    mr = m - turns * _TWO_PI
    sign = jnp.where(mr >= 0.0, 1.0, -1.0)
    ma = jnp.abs(mr)
    alpha = _MK_A + _MK_B * (_PI - ma) / (1.0 + e)
    d = 3.0 * (1.0 - e) + alpha * e
    q = 2.0 * alpha * d * (1.0 - e) - ma * ma
    r = 3.0 * alpha * d * (d - 1.0 + e) * ma + ma * ma * ma
    w = jnp.cbrt(jnp.abs(r) + jnp.sqrt(jnp.maximum(q * q * q + r * r, 0.0))) ** 2
    ecc_anom = (2.0 * r * w / (w * w + w * q + q * q) + ma) / d
    for _ in range(N_KEPLER_CORRECTIONS):
        s, c = jnp.sin(ecc_anom), jnp.cos(ecc_anom)
        f0 = ecc_anom - e * s - ma
        f1 = 1.0 - e * c
        f2 = e * s
        f3 = e * c
        d1 = -f0 / f1
        d2 = -f0 / (f1 + 0.5 * d1 * f2)
        d3 = -f0 / (f1 + 0.5 * d2 * f2 + d2 * d2 * f3 / 6.0)
        ecc_anom = ecc_anom + d3
    return sign * ecc_anom + turns * _TWO_PI


@jax.custom_jvp
def kepler_ecc_anom(m, e):
    """Eccentric anomaly E (rad) solving E - e sin E = M, 0 <= e < 1."""
    return _kepler_solve(m, e)


@kepler_ecc_anom.defjvp
def _kepler_jvp(primals, tangents):
    m, e = primals
    dm, de = tangents
    ecc_anom = _kepler_solve(m, e)
    s, c = jnp.sin(ecc_anom), jnp.cos(ecc_anom)
    inv = 1.0 / (1.0 - e * c)
    return ecc_anom, (dm + s * de) * inv


# ----------------------------------------------------------- projection
def thiele_innes(a, inc, node, peri_arg):
    """Thiele-Innes constants (A, B, F, G, C, H), unit of ``a`` (physics.md sect. 2)."""
    cw, sw = jnp.cos(peri_arg), jnp.sin(peri_arg)
    cn, sn = jnp.cos(node), jnp.sin(node)
    ci, si = jnp.cos(inc), jnp.sin(inc)
    return (a * (cw * cn - sw * sn * ci), a * (cw * sn + sw * cn * ci),
            a * (-sw * cn - cw * sn * ci), a * (-sw * sn + cw * cn * ci),
            a * sw * si, a * cw * si)


def to_sky(consts, x, y):
    """(east, north, z) = (B X + G Y, A X + F Y, C X + H Y)."""
    A, B, F, G, C, H = consts
    return B * x + G * y, A * x + F * y, C * x + H * y


def kepler_xy(t, period, ecc, t_peri):
    """X, Y (units of a) and their time derivatives (per yr)."""
    n = _TWO_PI / period
    ecc_anom = kepler_ecc_anom(n * (t - t_peri), ecc)
    s, c = jnp.sin(ecc_anom), jnp.cos(ecc_anom)
    root = jnp.sqrt(1.0 - ecc * ecc)
    den = n / (1.0 - ecc * c)
    return c - ecc, root * s, -s * den, root * c * den


def a_au_from_period(period, mass):
    """Kepler's third law: a (au) = (P^2 M / k)^(1/3)."""
    return jnp.cbrt(period**2 * mass / KEPLER_K)


# ------------------------------------------------------------- redshift
def redshift_velocity(v_z, v_sq, r_au, mass, f, vz0, exact=True):
    """RV = vz0 + v_z + f * excess (km/s), as deepwell.model.kernels.relativity."""
    g = mass * GRAV_RADIUS_AU_PER_MSUN / r_au
    if exact:
        ln1pz = (-0.5 * jnp.log1p(-v_sq / C_KMS**2) + jnp.log1p(v_z / C_KMS)
                 - 0.5 * jnp.log1p(-2.0 * g) + jnp.log1p(vz0 / C_KMS))
        excess = C_KMS * jnp.expm1(ln1pz) - vz0 - v_z
    else:
        excess = 0.5 * v_sq / C_KMS + g * C_KMS
    return vz0 + v_z + f * excess


# ------------------------------------------------------------ 1PN orbit
_A = jnp.asarray(_DOP_A)
_B = jnp.asarray(_DOP_B)
_NS = _DOP_B.shape[0]
INV_C = 1.0 / C_AU_PER_YR


def _rhs(y, pars):
    """d(x, v, t)/ds of the 1PN + Plummer equation, dt/ds = r^1.5 (physics.md sect. 6-7)."""
    gm, k_pn, gm_ext, b2 = pars
    x, v = y[:3], y[3:6]
    r2 = jnp.sum(x * x)
    r = jnp.sqrt(r2)
    gm_r3 = gm / (r2 * r)
    vsq = jnp.sum(v * v)
    rv = jnp.sum(x * v)
    d2 = r2 + b2
    c_r = -gm_r3 + k_pn * gm_r3 * (4.0 * gm / r - vsq) - gm_ext / (d2 * jnp.sqrt(d2))
    c_v = 4.0 * k_pn * gm_r3 * rv
    g = r * jnp.sqrt(r)
    return jnp.concatenate([g * v, g * (c_r * x + c_v * v), g[None]])


def _dop853_step(y, f, h, pars):
    """One fixed DOP853 step of size h in s; f = rhs(y)."""
    ks = [f]
    for s in range(1, _NS):
        acc = sum(_DOP_A[s, m] * ks[m] for m in range(s) if _DOP_A[s, m] != 0.0)
        ks.append(_rhs(y + h * acc, pars))
    return y + h * sum(_DOP_B[s] * ks[s] for s in range(_NS) if _DOP_B[s] != 0.0)


def s_step(r0, v0, gm, steps_per_orbit, alpha=1.5):
    """Step in s: the osculating Kepler orbit's s-period / steps_per_orbit."""
    r = jnp.sqrt(jnp.sum(r0 * r0))
    vsq = jnp.sum(v0 * v0)
    rv = jnp.sum(r0 * v0)
    a = 1.0 / jnp.abs(2.0 / r - vsq / gm)
    ecc_vec = (vsq / gm - 1.0 / r) * r0 - (rv / gm) * v0
    ecc = jnp.minimum(jnp.sqrt(jnp.sum(ecc_vec * ecc_vec)), 0.999)
    ecc_anom = np.linspace(0.0, 2.0 * np.pi, 128, endpoint=False)
    mean_g = jnp.mean((1.0 - ecc * jnp.cos(ecc_anom)) ** (1.0 - alpha))
    period = _TWO_PI * jnp.sqrt(a**3 / gm)
    return period * a ** (-alpha) * mean_g / steps_per_orbit


def pn_sweep(y0, h, pars, n_steps):
    """States and derivatives at the ends of ``n_steps`` steps of size h from y0.

    Returns ys, fs of shape (n_steps + 1, 7) (row 0 is the start).
    """
    f0 = _rhs(y0, pars)

    def body(carry, _):
        y, f = carry
        yn = _dop853_step(y, f, h, pars)
        fn = _rhs(yn, pars)
        return (yn, fn), (yn, fn)

    _, (ys, fs) = jax.lax.scan(body, (y0, f0), None, length=n_steps)
    return jnp.concatenate([y0[None], ys]), jnp.concatenate([f0[None], fs])


def _hermite(ya, fa, yb, fb, theta):
    """Quintic Hermite position and velocity at theta in [0, 1] (rows broadcast)."""
    ht = yb[..., 6] - ya[..., 6]
    t2 = theta * theta
    t3 = t2 * theta
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
    htc = ht[..., None]
    va, vb = ya[..., 3:6] * htc, yb[..., 3:6] * htc
    aa = fa[..., 3:6] / fa[..., 6:7] * htc * htc
    ab = fb[..., 3:6] / fb[..., 6:7] * htc * htc
    c = [x[..., None] for x in (h0, h1, h2, h3, h4, h5, d0, d1, d2, d4, d5)]
    pos = c[0] * ya[..., :3] + c[1] * va + c[2] * aa + c[3] * yb[..., :3] + c[4] * vb + c[5] * ab
    vel = (c[6] * (ya[..., :3] - yb[..., :3]) + c[7] * va + c[8] * aa + c[9] * vb
           + c[10] * ab) / htc
    return pos, vel


def locate(obs, sign, tau):
    """Step index k (1..n) with the epoch tau between step ends k-1 and k, and coverage."""
    key = jax.lax.stop_gradient(sign * obs)
    n = obs.shape[0] - 1
    target = jax.lax.stop_gradient(sign * tau)
    idx = jnp.clip(jnp.searchsorted(key, target, side="left"), 1, n)
    return idx, key[-1] >= target


def dense_rows(ya, fa, yb, fb, obs_a, obs_b, tau, light_time=True, n_newton=4):
    """Hermite state at each row's epoch between its two step ends (rows of 7-vectors).

    With light time, theta solves t(theta) + z(theta)/c = tau by Newton steps
    inside the step, as deepwell's ``_sweep``.
    """
    inv_c = INV_C if light_time else 0.0
    theta = (tau - obs_a) / (obs_b - obs_a)
    ht = yb[:, 6] - ya[:, 6]
    if light_time:
        for _ in range(n_newton):
            pos, vel = _hermite(ya, fa, yb, fb, theta)
            resid = ya[:, 6] + theta * ht + pos[:, 2] * inv_c - tau
            theta = theta - resid / (ht * (1.0 + vel[:, 2] * inv_c))
    pos, vel = _hermite(ya, fa, yb, fb, theta)
    return pos, vel, ya[:, 6] + theta * ht


def pn_dense(ys, fs, sign, tau, light_time=True, n_newton=4):
    """States at epochs ``tau`` (relative to the start) from one sweep's step ends.

    Parameters
    ----------
    ys, fs : (n + 1, 7) step-end states and derivatives of one sweep.
    sign : +1 forward, -1 backward sweep.
    tau : (R,) requested (observed, with light time) epochs minus the start epoch.

    Returns
    -------
    pos (R, 3) au, vel (R, 3) au/yr, t_em (R,) relative emission epochs, covered (R,)
    bool (False where the epoch lies beyond the last step).
    """
    inv_c = INV_C if light_time else 0.0
    obs = ys[:, 6] + ys[:, 2] * inv_c
    idx, covered = locate(obs, sign, tau)
    pos, vel, t_em = dense_rows(ys[idx - 1], fs[idx - 1], ys[idx], fs[idx], obs[idx - 1],
                                obs[idx], tau, light_time, n_newton)
    return pos, vel, t_em, covered


# ------------------------------------------- 1PN orbit, planar and scaled
# The 1PN equation is invariant under rotations and, with x = a x', t = T t'
# (T = sqrt(a^3/GM)), s = s'/sqrt(GM), becomes
#     d^2x'/dt'^2 = -x'/r'^3 + kappa [(4/r' - v'^2) x' + 4 (x'.v') v'] / r'^3,
#     kappa = f_sp GM / (c^2 a),  dt'/ds' = r'^1.5,
# and deepwell's step h = P a^-1.5 <(1 - e cos E)^-0.5> / n becomes
# h' = 2 pi <(1 - e cos E)^-0.5> / n.  Runge-Kutta steps commute with linear
# maps of the state and with this time scaling, so the integrated orbit in the
# orbital plane, started at the osculating apocentre (-(1+e), 0; 0, -sqrt((1-e)/(1+e))),
# equals deepwell's 3-d sky-frame integration up to rounding, and it depends on
# two numbers only (e, kappa).  Its derivatives need two tangents, whatever the
# number of model parameters.

def _rhs2(y, kappa):
    """d(x', y', vx', vy', t')/ds' in the orbital plane (scaled units)."""
    x0, x1, v0, v1 = y[0], y[1], y[2], y[3]
    r2 = x0 * x0 + x1 * x1
    r = jnp.sqrt(r2)
    ir3 = 1.0 / (r2 * r)
    vsq = v0 * v0 + v1 * v1
    rv = x0 * v0 + x1 * v1
    c_r = -ir3 + kappa * ir3 * (4.0 / r - vsq)
    c_v = 4.0 * kappa * ir3 * rv
    g = r * jnp.sqrt(r)
    return jnp.stack([g * v0, g * v1, g * (c_r * x0 + c_v * v0), g * (c_r * x1 + c_v * v1), g])


def _step2(y, f, h, kappa):
    ks = [f]
    for s in range(1, _NS):
        acc = sum(_DOP_A[s, m] * ks[m] for m in range(s) if _DOP_A[s, m] != 0.0)
        ks.append(_rhs2(y + h * acc, kappa))
    return y + h * sum(_DOP_B[s] * ks[s] for s in range(_NS) if _DOP_B[s] != 0.0)


def _planar_sweep_primal(ecc, kappa, sign, n_steps, steps_per_orbit):
    ecc_anom = np.linspace(0.0, 2.0 * np.pi, 128, endpoint=False)
    e_c = jnp.minimum(ecc, 0.999)
    h = sign * _TWO_PI * jnp.mean((1.0 - e_c * jnp.cos(ecc_anom)) ** -0.5) / steps_per_orbit
    y0 = jnp.stack([-(1.0 + ecc), 0.0 * ecc, 0.0 * ecc, -jnp.sqrt((1.0 - ecc) / (1.0 + ecc)),
                    0.0 * ecc])
    f0 = _rhs2(y0, kappa)

    def body(carry, _):
        y, f = carry
        yn = _step2(y, f, h, kappa)
        fn = _rhs2(yn, kappa)
        return (yn, fn), (yn, fn)

    _, (ys, fs) = jax.lax.scan(body, (y0, f0), None, length=n_steps)
    return jnp.concatenate([y0[None], ys]), jnp.concatenate([f0[None], fs])


@partial(jax.custom_vjp, nondiff_argnums=(2, 3, 4))
def planar_sweep(ecc, kappa, sign, n_steps, steps_per_orbit):
    """Step ends (n+1, 5) and their s'-derivatives of the scaled planar 1PN orbit.

    Reverse-mode derivatives are computed in forward mode (two tangents, e and
    kappa, pushed through the scan) and contracted with the cotangent, so
    ``jax.grad`` of anything built on it never transposes the scan.
    """
    return _planar_sweep_primal(ecc, kappa, sign, n_steps, steps_per_orbit)


def _planar_fwd(ecc, kappa, sign, n_steps, steps_per_orbit):
    f = partial(_planar_sweep_primal, sign=sign, n_steps=n_steps,
                steps_per_orbit=steps_per_orbit)
    out, jac = jax.vmap(lambda te, tk: jax.jvp(f, (ecc, kappa), (te, tk)),
                        out_axes=(None, 0))(jnp.array([1.0, 0.0]), jnp.array([0.0, 1.0]))
    return out, jac


def _planar_bwd(sign, n_steps, steps_per_orbit, jac, ct):
    jy, jf = jac
    cy, cf = ct
    g = jnp.sum(jy * cy[None], axis=(1, 2)) + jnp.sum(jf * cf[None], axis=(1, 2))
    return g[0], g[1]


planar_sweep.defvjp(_planar_fwd, _planar_bwd)
