"""Relativistic effects and an extended mass: pure, vectorised kernels.

Internal units: au, Julian yr, solar masses, km/s, angles in radians (sky
offsets in mas only in :func:`effect_sizes`).  Axes (east, north, z) with z
away from the observer, as in :mod:`deepwell.model.kernels.orbit`.

* Romer delay: :func:`romer_delay_days`, :func:`emission_epochs`.
* Redshift: :func:`redshift_velocity` (exact or first order, scaled by f).
* Schwarzschild precession and a Plummer sphere: the orbit integrator lives
  in :mod:`deepwell.model.kernels.post_newtonian` and is re-exported here (:func:`integrate_orbits`,
  :func:`osculating_state`, :func:`pn_track`); the analytic per-orbit
  advances are :func:`precession_per_orbit_rad` and
  :func:`plummer_precession_per_orbit_rad`.
* :func:`effect_sizes` summarises how large each effect is for one orbit.
"""

from dataclasses import dataclass

import numpy as np

from deepwell.core.constants import (
    AU_SI,
    C_AU_PER_YR,
    C_KMS,
    GRAV_RADIUS_AU_PER_MSUN,
    KEPLER_K,
    KMS_PER_AU_PER_YR,
    MAS_PER_RAD,
    SCHWARZSCHILD_M_PER_MSUN,
)

from .orbit import OrbitTrack, kepler_xy, per_epoch, thiele_innes, to_sky
from .post_newtonian import (
    IntegratedStates,
    PhysicalTrack,
    integrate_orbits,
    osculating_state,
    pn_track,
)

__all__ = [
    "schwarzschild_radius_au",
    "romer_delay_days",
    "emission_epochs",
    "redshift_velocity",
    "precession_per_orbit_rad",
    "plummer_enclosed_mass",
    "plummer_precession_per_orbit_rad",
    "EffectSizes",
    "effect_sizes",
    "IntegratedStates",
    "PhysicalTrack",
    "integrate_orbits",
    "osculating_state",
    "pn_track",
]

_DAYS_PER_YR = 365.25


def romer_delay_days(z_au):
    """Light-travel delay z/c of a star behind (z > 0) the mass, in days.

    Parameters
    ----------
    z_au : array_like
        Line-of-sight offset from the mass, au, positive away from the observer.

    Returns
    -------
    ndarray
        Delay in days (negative for a star in front of the mass).

    Notes
    -----
    t_obs = t_em + z/c; the constant R0/c is dropped (physics.md sect. 4).
    """
    return np.asarray(z_au, dtype=float) / C_AU_PER_YR * _DAYS_PER_YR


def emission_epochs(t_obs, z_au_of_t, n_iter=6):
    """Emission epochs of light received at ``t_obs`` (Romer delay).

    Parameters
    ----------
    t_obs : array_like
        Observed epochs, Julian yr.
    z_au_of_t : callable
        ``z_au_of_t(t)`` -> line-of-sight offset (au, away from the observer)
        at the emission epochs ``t`` (same shape as ``t``), vectorised.
    n_iter : int
        Fixed-point iterations.

    Returns
    -------
    ndarray
        t_em solving t_em + z(t_em)/c = t_obs.

    Notes
    -----
    Fixed point t_em <- t_obs - z(t_em)/c from t_em = t_obs; the map
    contracts by |v_z|/c, so each iteration gains about log10(c/|v_z|) digits
    (six reach < 1 ms for |v_z| ~ 0.03 c).  For integrated orbits the delay is
    solved inside the integrator instead (``pn_track(..., light_time=True)``).
    """
    t_obs = np.asarray(t_obs, dtype=float)
    t_em = t_obs
    for _ in range(n_iter):
        t_em = t_obs - np.asarray(z_au_of_t(t_em)) / C_AU_PER_YR
    return t_em


def redshift_velocity(v_z, v_sq, r_au, mass, f=1.0, exact=True, vz0=0.0):
    """Observed radial velocity c z of a star including the relativistic redshift.

    Parameters
    ----------
    v_z : array_like
        Line-of-sight velocity relative to the mass, km/s (receding > 0).
    v_sq : array_like
        Squared speed relative to the mass, (km/s)^2.
    r_au : array_like
        Distance from the mass, au.
    mass : array_like
        Point mass, solar masses.
    f : array_like
        Factor on the relativistic excess (0 Newtonian, 1 general relativity).
    exact : bool
        Exact (default) or first-order form.
    vz0 : array_like
        Systemic line-of-sight velocity of the mass, km/s.

    Returns
    -------
    ndarray
        RV = vz0 + v_z + f * excess, km/s (optical convention c z); with ``exact``,
        NaN where v >= c or r <= R_s (no physical orbit).

    Notes
    -----
    The plain Doppler term is the Newtonian model vz0 + v_z (physics.md
    sect. 3 and 5), so f = 0 gives exactly the Newtonian RV in both forms.

    Exact: 1 + z = gamma (1 + v_z/c) (1 - R_s/r)^(-1/2) (1 + vz0/c), with
    gamma = (1 - v^2/c^2)^(-1/2) and R_s = 2GM/c^2; excess = c z - vz0 - v_z.
    It holds the transverse Doppler and gravitational terms, their products
    with v_z/c and the clock term v_z vz0/c.

    First order: excess = (v^2/2 + GM/r)/c.

    References
    ----------
    Do et al. 2019, Science 365, 664 (the factor f, their Upsilon).
    """
    v_z = np.asarray(v_z, dtype=float)
    vz0 = np.asarray(vz0, dtype=float)
    gm_over_rc2 = np.asarray(mass, dtype=float) * GRAV_RADIUS_AU_PER_MSUN / np.asarray(r_au)
    if exact:
        # a trial orbit faster than light or inside the Schwarzschild radius has no
        # redshift: NaN there (the callers treat it as outside the support), silently
        with np.errstate(invalid="ignore", divide="ignore"):
            ln1pz = (-0.5 * np.log1p(-np.asarray(v_sq) / C_KMS**2) + np.log1p(v_z / C_KMS)
                     - 0.5 * np.log1p(-2.0 * gm_over_rc2) + np.log1p(vz0 / C_KMS))
            excess = C_KMS * np.expm1(ln1pz) - vz0 - v_z
    else:
        excess = 0.5 * np.asarray(v_sq) / C_KMS + gm_over_rc2 * C_KMS
    return vz0 + v_z + f * excess


def precession_per_orbit_rad(mass, a_au, e):
    """Schwarzschild pericentre advance per orbit, radians.

    Parameters
    ----------
    mass : array_like
        Central mass, solar masses.
    a_au : array_like
        Semi-major axis, au.
    e : array_like
        Eccentricity.

    Returns
    -------
    ndarray
        Delta omega = 6 pi GM / (c^2 a (1 - e^2)) (prograde).

    References
    ----------
    Einstein 1915, Sitzungsber. Preuss. Akad. Wiss., 831.
    """
    gm_c2 = np.asarray(mass, dtype=float) * GRAV_RADIUS_AU_PER_MSUN
    return 6.0 * np.pi * gm_c2 / (np.asarray(a_au) * (1.0 - np.asarray(e) ** 2))


def plummer_enclosed_mass(m_ext, b, r):
    """Mass of a Plummer sphere inside radius r.

    Parameters
    ----------
    m_ext : array_like
        Total mass (any unit; the result has the same unit).
    b : array_like
        Scale radius (same unit as ``r``).
    r : array_like
        Radius.

    Returns
    -------
    ndarray
        M_ext r^3 / (r^2 + b^2)^(3/2).

    References
    ----------
    Plummer 1911, MNRAS 71, 460.
    """
    r = np.asarray(r, dtype=float)
    return np.asarray(m_ext) * r**3 / (r * r + np.asarray(b) ** 2) ** 1.5


def plummer_precession_per_orbit_rad(m_ext, b, a_au, e, mass, n_nodes=1024):
    """First-order pericentre shift per orbit due to a Plummer sphere, radians.

    Parameters
    ----------
    m_ext : array_like
        Plummer mass, solar masses.
    b : array_like
        Plummer scale radius, au.
    a_au, e : array_like
        Semi-major axis (au) and eccentricity (> 0).
    mass : array_like
        Point mass, solar masses.
    n_nodes : int
        Nodes of the periodic trapezoid rule in true anomaly.

    Returns
    -------
    ndarray
        Delta omega (negative: retrograde).

    Notes
    -----
    Delta omega = (1/(e M)) int_0^{2 pi} M_ext(<r(nu)) cos(nu) dnu with
    r(nu) = a (1 - e^2)/(1 + e cos nu), from Gauss's equation for omega with a
    radial perturbing force (physics.md sect. 7).  For uniform density it is
    -3 pi sqrt(1 - e^2) M_ext(<a)/M.
    """
    nu = np.linspace(0.0, 2.0 * np.pi, n_nodes, endpoint=False)
    a_au, e, m_ext, b, mass = (np.asarray(x, dtype=float)[..., None]
                               for x in (a_au, e, m_ext, b, mass))
    r = a_au * (1.0 - e * e) / (1.0 + e * np.cos(nu))
    integral = np.mean(plummer_enclosed_mass(m_ext, b, r) * np.cos(nu), axis=-1) * 2.0 * np.pi
    return integral / (e[..., 0] * mass[..., 0])


@dataclass(frozen=True)
class EffectSizes:
    """Sizes of the relativistic effects for one orbit.

    Attributes
    ----------
    redshift_excess_kms : ndarray
        Exact redshift excess over vz0 + v_z at pericentre, km/s (f = 1).
    redshift_first_order_kms : ndarray
        (v^2/2 + GM/r)/c at pericentre, km/s.
    precession_arcmin : ndarray
        Schwarzschild advance per orbit, arcmin.
    precession_mas : ndarray
        a Delta omega projected on the sky, mas (apocentre moves (1 + e) times this).
    romer_range_days : ndarray
        Peak-to-peak Romer delay over the orbit, days.
    """

    redshift_excess_kms: np.ndarray
    redshift_first_order_kms: np.ndarray
    precession_arcmin: np.ndarray
    precession_mas: np.ndarray
    romer_range_days: np.ndarray


def effect_sizes(a_au, e, mass, distance_pc, inc, peri_arg):
    """How large the redshift, precession and Romer delay are for an orbit.

    Parameters
    ----------
    a_au : array_like
        Semi-major axis, au.
    e : array_like
        Eccentricity.
    mass : array_like
        Point mass, solar masses.
    distance_pc : array_like
        Distance, pc.
    inc, peri_arg : array_like
        Inclination and argument of pericentre, radians.

    Returns
    -------
    EffectSizes

    Notes
    -----
    At pericentre r = a(1 - e), v^2 = GM(1 + e)/(a(1 - e)) and
    v_z = K (1 + e) cos(omega), K = n a sin(i)/sqrt(1 - e^2).  The sky shift
    is a Delta omega |Q_sky| with |Q_sky| = sqrt(sin^2 omega + cos^2 omega
    cos^2 i), the projected unit vector perpendicular to the major axis.
    z(E) = a sin i [sin(omega)(cos E - e) + cos(omega) sqrt(1 - e^2) sin E],
    so the Romer range is 2 a sin i sqrt(sin^2 omega + (1 - e^2) cos^2 omega)/c.
    """
    a_au, e, mass, inc, w = (np.asarray(x, dtype=float) for x in (a_au, e, mass, inc, peri_arg))
    n = 2.0 * np.pi / np.sqrt(KEPLER_K * a_au**3 / mass)  # rad/yr
    root = np.sqrt(1.0 - e * e)
    v_sq = (n * a_au * KMS_PER_AU_PER_YR) ** 2 * (1.0 + e) / (1.0 - e)
    v_z = n * a_au * KMS_PER_AU_PER_YR * np.sin(inc) / root * (1.0 + e) * np.cos(w)
    r_p = a_au * (1.0 - e)
    exact = redshift_velocity(v_z, v_sq, r_p, mass) - v_z
    first = redshift_velocity(v_z, v_sq, r_p, mass, exact=False) - v_z
    d_omega = precession_per_orbit_rad(mass, a_au, e)
    q_sky = np.sqrt(np.sin(w) ** 2 + np.cos(w) ** 2 * np.cos(inc) ** 2)
    sky_mas = a_au / np.asarray(distance_pc) * 1e3 * d_omega * q_sky
    z_amp = a_au * np.abs(np.sin(inc)) * np.sqrt(np.sin(w) ** 2 + (root * np.cos(w)) ** 2)
    return EffectSizes(
        redshift_excess_kms=exact,
        redshift_first_order_kms=first,
        precession_arcmin=d_omega * MAS_PER_RAD / 60e3,
        precession_mas=sky_mas,
        romer_range_days=romer_delay_days(2.0 * z_amp),
    )


# ------------------------------------------------------------------ model pieces
def keplerian_emission_track(t, a, ecc, inc, node, peri_arg, t_peri, period, distance,
                             romer=True, n_newton=2, star=None):
    """Keplerian track at the emission epochs of light observed at ``t``.

    Parameters are those of :func:`deepwell.model.kernels.orbit.keplerian_track` (``a`` in
    mas, angles in radians, epochs in Julian yr, ``distance`` in pc; with ``star`` the
    elements are per star and ``star`` gives the star of each epoch).

    Returns
    -------
    track : OrbitTrack
        At the emission epochs (mas, mas/yr, km/s).
    t_emit : ndarray
        Emission epochs (Julian yr).

    Notes
    -----
    Newton's method on g(t_em) = t_em + z(t_em)/c - t_obs from t_em = t_obs:
    t_em <- t_em - g / (1 + v_z/c).  The first step leaves at most a few
    hundred seconds near a tight pericentre, the second well below 1 s
    (physics.md sect. 4).
    """
    consts, (period, ecc, t_peri) = per_epoch(star, thiele_innes(a, inc, node, peri_arg),
                                              (period, ecc, t_peri))
    C, H = consts[4], consts[5]
    t = np.asarray(t, dtype=float)
    t_em = t
    if romer:
        to_au = np.asarray(distance) * 1e-3 / C_AU_PER_YR  # mas -> light-years of au
        for _ in range(n_newton):
            X, Y, dX, dY = kepler_xy(t_em, period, ecc, t_peri)
            z = (C * X + H * Y) * to_au  # the z row of to_sky only
            vz = (C * dX + H * dY) * to_au
            t_em = t_em - (t_em + z - t) / (1.0 + vz)
    X, Y, dX, dY = kepler_xy(t_em, period, ecc, t_peri)
    to_kms = np.asarray(distance) * 1e-3 * KMS_PER_AU_PER_YR
    east, north, z = to_sky(consts, X, Y)
    v_east, v_north, v_z = to_sky(consts, dX, dY)
    track = OrbitTrack(east=east, north=north, z=z, v_east=v_east, v_north=v_north,
                       v_z=v_z * to_kms)
    return track, np.broadcast_to(t_em, track.east.shape)


def star_sky_precession_mas(el, mass, distance):
    """Sky shift per orbit of each star's Schwarzschild precession, mas.

    ``el`` is the dict of :meth:`deepwell.model.layout.Layout.elements` for one
    vector; ``mass`` (Msun) and ``distance`` (pc) are scalars.
    """
    a_au = el["a"] * 1e-3 * distance
    return effect_sizes(a_au, el["e"], mass, distance, el["inc"], el["peri_arg"]).precession_mas


def schwarzschild_radius_au(mass):
    """Schwarzschild radius R_s = 2 G M / c^2 in au for a mass in Msun.

    Notes
    -----
    Uses the nominal GM_sun (IAU 2015 B3): R_s = 2953.25 m per Msun.
    """
    return np.asarray(mass, dtype=float) * (SCHWARZSCHILD_M_PER_MSUN / AU_SI)
