"""Keplerian orbit kernel: elements -> sky positions and line-of-sight velocity.

Pure, vectorised numpy functions in internal units (mas, Julian yr, au, pc,
solar masses, km/s, angles in radians).  Conventions (``shared/physics.md``
section 2, the standard visual-binary convention):

* ``east`` is the offset toward east (Delta RA cos dec), ``north`` toward north;
* z points away from the observer, a positive radial velocity is receding;
* the ascending node is where the star crosses the sky plane moving away from
  the observer; ``node`` is its position angle (north through east), the
  argument of pericentre is measured from it in the direction of motion, and
  inc < 90 deg means the position angle increases with time.
"""

from dataclasses import dataclass

import numpy as np

from deepwell.core.constants import GM_SUN_AU3_PER_YR2, KEPLER_K, KMS_PER_AU_PER_YR

from .kepler import solve_kepler

__all__ = [
    "period_from_a",
    "a_from_period",
    "thiele_innes",
    "to_sky",
    "pericentre_speed_kms",
    "kepler_xy",
    "OrbitTrack",
    "keplerian_track",
    "per_epoch",
    "elements_from_thiele_innes",
    "position_angle_separation",
    "gm_angular",
    "kepler_state",
    "elements_from_state",
]


def period_from_a(a_mas, mass, distance):
    """Orbital period from Kepler's third law.

    Parameters
    ----------
    a_mas : array_like
        Angular semi-major axis in mas.
    mass : array_like
        Central mass in solar masses.
    distance : array_like
        Distance in pc.

    Returns
    -------
    ndarray
        Period in Julian years.

    Notes
    -----
    P^2 = k (a[arcsec] R0[pc])^3 / M with k = 4 pi^2 au^3 / (GM_sun yr^2);
    a[au] = a[arcsec] R0[pc] exactly (small-angle identity).
    """
    a_au = np.asarray(a_mas) * 1e-3 * np.asarray(distance)
    return np.sqrt(KEPLER_K * a_au**3 / np.asarray(mass))


def a_from_period(period, mass, distance):
    """Angular semi-major axis (mas) from the period (yr), mass (Msun), distance (pc)."""
    a_au = np.cbrt(np.asarray(period) ** 2 * np.asarray(mass) / KEPLER_K)
    return a_au / np.asarray(distance) * 1e3


def thiele_innes(a, inc, node, peri_arg):
    """Thiele-Innes constants A, B, F, G, C, H (same unit as ``a``).

    Parameters
    ----------
    a : array_like
        Semi-major axis (any length or angle unit).
    inc, node, peri_arg : array_like
        Inclination, position angle of the ascending node and argument of
        pericentre, in radians.

    Returns
    -------
    tuple of ndarray
        ``(A, B, F, G, C, H)`` such that north = A X + F Y, east = B X + G Y,
        z = C X + H Y (z away from the observer).
    """
    cw, sw = np.cos(peri_arg), np.sin(peri_arg)
    cn, sn = np.cos(node), np.sin(node)
    ci, si = np.cos(inc), np.sin(inc)
    A = a * (cw * cn - sw * sn * ci)
    B = a * (cw * sn + sw * cn * ci)
    F = a * (-sw * cn - cw * sn * ci)
    G = a * (-sw * sn + cw * cn * ci)
    C = a * sw * si
    H = a * cw * si
    return A, B, F, G, C, H


def kepler_xy(t, period, ecc, t_peri):
    """Position and velocity in the orbital plane, in units of a.

    Parameters
    ----------
    t : array_like
        Epochs (Julian yr).
    period : array_like
        Period (yr).
    ecc : array_like
        Eccentricity.
    t_peri : array_like
        Epoch of pericentre (Julian yr).

    Returns
    -------
    X, Y, dX, dY : ndarray
        X = cos E - e, Y = sqrt(1 - e^2) sin E and their time derivatives
        (per yr).
    """
    n = 2.0 * np.pi / period
    mean_anom = n * (np.asarray(t) - t_peri)
    _, sin_e, cos_e = solve_kepler(mean_anom, ecc)
    root = np.sqrt(1.0 - ecc * ecc)
    denom = n / (1.0 - ecc * cos_e)
    return cos_e - ecc, root * sin_e, -sin_e * denom, root * cos_e * denom


@dataclass(frozen=True)
class OrbitTrack:
    """Positions and velocities of a star relative to the central mass.

    Attributes
    ----------
    east, north, z : ndarray
        Offsets from the mass in mas (z away from the observer, in mas at the
        distance of the mass).
    v_east, v_north : ndarray
        Proper motion relative to the mass in mas/yr.
    v_z : ndarray
        Line-of-sight velocity relative to the mass in km/s (receding > 0).
    """

    east: np.ndarray
    north: np.ndarray
    z: np.ndarray
    v_east: np.ndarray
    v_north: np.ndarray
    v_z: np.ndarray


def keplerian_track(t, a, ecc, inc, node, peri_arg, t_peri, period, distance, star=None):
    """Keplerian sky track and radial velocity, broadcast over all inputs.

    Parameters
    ----------
    t : array_like
        Epochs (Julian yr, the emission epochs).
    a : array_like
        Angular semi-major axis (mas).
    ecc : array_like
        Eccentricity.
    inc, node, peri_arg : array_like
        Angles in radians.
    t_peri : array_like
        Epoch of pericentre (Julian yr).
    period : array_like
        Period (yr).
    distance : array_like
        Distance (pc), converts angular rates into km/s.
    star : array_like of int, optional
        Index of the element set of each epoch: the elements then have one
        entry per star in their last axis, and the Thiele-Innes constants are
        computed once per star rather than once per epoch (same values).

    Returns
    -------
    OrbitTrack
    """
    consts, (period, ecc, t_peri) = per_epoch(star, thiele_innes(a, inc, node, peri_arg),
                                              (period, ecc, t_peri))
    X, Y, dX, dY = kepler_xy(t, period, ecc, t_peri)
    east, north, z = to_sky(consts, X, Y)
    v_east, v_north, v_z = to_sky(consts, dX, dY)
    mas_per_yr_to_kms = np.asarray(distance) * 1e-3 * KMS_PER_AU_PER_YR
    return OrbitTrack(east=east, north=north, z=z, v_east=v_east, v_north=v_north,
                      v_z=v_z * mas_per_yr_to_kms)


def pericentre_speed_kms(mass, a_au, ecc):
    """Speed at pericentre from vis-viva, v_p^2 = G M (1 + e) / (a (1 - e)), in km/s.

    ``mass`` in Msun, ``a_au`` the semi-major axis in au (Kepler orbit of a
    test particle; common practice).
    """
    mass, a_au, ecc = (np.asarray(x, dtype=float) for x in (mass, a_au, ecc))
    return np.sqrt(GM_SUN_AU3_PER_YR2 * mass / a_au * (1 + ecc) / (1 - ecc)) * KMS_PER_AU_PER_YR


def to_sky(constants, X, Y):
    """East, north and z of orbital-plane coordinates: the Thiele-Innes combination.

    Parameters
    ----------
    constants : tuple of array_like
        (A, B, F, G, C, H) from :func:`thiele_innes`.
    X, Y : array_like
        Orbital-plane coordinates (X toward pericentre) in units of the
        eccentric-anomaly ellipse, or their time derivatives.

    Returns
    -------
    east, north, z : ndarray
        east = B X + G Y, north = A X + F Y, z = C X + H Y (physics.md sect. 2),
        in the unit of the constants.
    """
    A, B, F, G, C, H = constants
    return B * X + G * Y, A * X + F * Y, C * X + H * Y


def per_epoch(star, consts, elements):
    """Thiele-Innes constants and elements taken at each epoch's star (unchanged if None).

    Parameters
    ----------
    star : array_like of int or None
        Star index of each epoch.
    consts : tuple of ndarray
        Constants with one entry per star in the last axis.
    elements : tuple of array_like
        Further per-star elements (e.g. period, eccentricity, pericentre epoch).

    Returns
    -------
    consts, elements : tuple of ndarray
        The same, indexed with ``star`` along the last axis.
    """
    if star is None:
        return consts, elements
    return (tuple(np.take(c, star, axis=-1) for c in consts),
            tuple(np.take(x, star, axis=-1) for x in elements))


def _sky_state(t, a, ecc, inc, node, peri_arg, t_peri, period):
    """east, north, z and their rates, in the unit of ``a`` (and per yr)."""
    X, Y, dX, dY = kepler_xy(t, period, ecc, t_peri)
    consts = thiele_innes(a, inc, node, peri_arg)
    return to_sky(consts, X, Y) + to_sky(consts, dX, dY)


def elements_from_thiele_innes(A, B, F, G, C=None, H=None):
    """Geometric elements from the Thiele-Innes constants.

    Parameters
    ----------
    A, B, F, G : array_like
        Thiele-Innes constants (any length or angle unit, e.g. mas), as
        returned by :func:`thiele_innes`.
    C, H : array_like, optional
        The line-of-sight constants C = a sin(omega) sin(i) and
        H = a cos(omega) sin(i).  Either one, or both, resolves the
        180-degree ambiguity of the node.

    Returns
    -------
    a : ndarray
        Semi-major axis, in the unit of the constants.
    inc : ndarray
        Inclination in radians, in [0, pi].
    node : ndarray
        Position angle of the ascending node in radians: in [0, pi) without
        ``C`` and ``H``, in [0, 2 pi) with them.
    peri_arg : ndarray
        Argument of pericentre in radians, in [0, 2 pi), matching ``node``.

    Notes
    -----
    With the conventions of :func:`thiele_innes`,

        A + G = a (1 + cos i) cos(omega + node),  B - F = a (1 + cos i) sin(omega + node),
        A - G = a (1 - cos i) cos(omega - node),  -B - F = a (1 - cos i) sin(omega - node),

    so with R+ = hypot(A + G, B - F) and R- = hypot(A - G, B + F):
    a = (R+ + R-)/2, tan^2(i/2) = R-/R+, and omega +/- node follow from
    two arc tangents.  Astrometry alone fixes (node, omega) only up to a
    common shift by pi; since sin i >= 0, the signs of C and H give those
    of sin(omega) and cos(omega) and pick the branch.  For i = 0 or pi only
    omega + node (or omega - node) is defined; half of it is returned for
    each.
    """
    A, B, F, G = (np.asarray(v, dtype=float) for v in (A, B, F, G))
    r_plus = np.hypot(A + G, B - F)
    r_minus = np.hypot(A - G, B + F)
    a = 0.5 * (r_plus + r_minus)
    inc = 2.0 * np.arctan2(np.sqrt(r_minus), np.sqrt(r_plus))
    w_plus_n = np.arctan2(B - F, A + G)
    w_minus_n = np.arctan2(-B - F, A - G)
    peri_arg = 0.5 * (w_plus_n + w_minus_n)
    node = 0.5 * (w_plus_n - w_minus_n)
    # Put the node in [0, pi), moving omega with it.
    wrapped = _wrap(node, np.pi)
    peri_arg = peri_arg + (wrapped - node)
    node = wrapped
    if C is not None or H is not None:
        c_val = 0.0 if C is None else np.asarray(C, dtype=float)
        h_val = 0.0 if H is None else np.asarray(H, dtype=float)
        flip = np.sin(peri_arg) * c_val + np.cos(peri_arg) * h_val < 0.0
        node = np.where(flip, node + np.pi, node)
        peri_arg = np.where(flip, peri_arg + np.pi, peri_arg)
    return a, inc, node, _wrap(peri_arg, 2.0 * np.pi)


def gm_angular(mass, distance):
    """GM of the central mass in angular units, mas^3 / yr^2.

    Kepler's third law gives GM = 4 pi^2 a^3 / P^2 for any orbit; this is that
    value for the angular semi-major axis of a 1-yr orbit at ``distance``.
    """
    return 4.0 * np.pi**2 * a_from_period(1.0, mass, distance) ** 3


def kepler_state(t, period, ecc, inc, node, peri_arg, t_peri, a):
    """Keplerian position and velocity relative to the mass, in angular units.

    Parameters
    ----------
    t : array_like
        Epoch (Julian yr).
    period, ecc, inc, node, peri_arg, t_peri, a : array_like
        Elements (yr, -, rad, rad, rad, yr, mas), broadcast together.

    Returns
    -------
    ndarray, shape (..., 6)
        east, north, z (mas; z away from the observer) and their rates (mas/yr).
    """
    return np.stack(_sky_state(t, a, ecc, inc, node, peri_arg, t_peri, period), axis=-1)


def elements_from_state(state, gm, t):
    """Keplerian elements of a position and velocity (inverse of :func:`kepler_state`).

    Parameters
    ----------
    state : array_like, shape (..., 6)
        east, north, z (mas) and their rates (mas/yr), relative to the mass.
    gm : array_like
        GM in mas^3 / yr^2 (:func:`gm_angular`).
    t : array_like
        Epoch of the state (Julian yr).

    Returns
    -------
    dict of ndarray
        ``period`` (yr), ``ecc``, ``e_cos`` and ``e_sin`` (e cos w, e sin w,
        smooth through e = 0), ``cos_inc``, ``node`` (rad, in (-pi, pi]),
        ``t_peri`` (yr, within half a period of ``t``), ``a`` (mas).
        Unbound states (non-negative energy) give NaN.

    Notes
    -----
    Standard two-body relations (e.g. Murray & Dermott 1999, Solar System
    Dynamics, section 2.8, from memory): 1/a = 2/r - v^2/GM, the angular
    momentum h = r x v and the eccentricity vector (v x h)/GM - r/|r|.  The
    cross products are taken component-wise in (east, north, z); with the
    vectors P and Q of :func:`thiele_innes` (r = X P + Y Q) that gives
    h along W = P x Q = (cos node sin i, -sin node sin i, -cos i), the node
    direction N = (sin node, cos node, 0) and the in-plane direction W x N,
    so e cos w = e.N and e sin w = e.(W x N).
    """
    s = np.asarray(state, float)
    r, v = s[..., :3], s[..., 3:]
    gm = np.asarray(gm, float)
    rn = np.sqrt(np.sum(r * r, axis=-1))
    v2 = np.sum(v * v, axis=-1)
    inv_a = 2.0 / rn - v2 / gm
    with np.errstate(invalid="ignore", divide="ignore"):
        a = np.where(inv_a > 0.0, 1.0 / inv_a, np.nan)
        h = np.cross(r, v)
        ev = np.cross(v, h) / gm[..., None] - r / rn[..., None]
        w = h / np.sqrt(np.sum(h * h, axis=-1))[..., None]
        node = np.arctan2(-w[..., 1], w[..., 0])
        cos_inc = -w[..., 2]
        n_vec = np.stack([np.sin(node), np.cos(node), np.zeros_like(node)], axis=-1)
        m_vec = np.cross(w, n_vec)
        e_cos = np.sum(ev * n_vec, axis=-1)
        e_sin = np.sum(ev * m_vec, axis=-1)
        ecc = np.hypot(e_cos, e_sin)
        ecos_e = 1.0 - rn / a
        esin_e = np.sum(r * v, axis=-1) / np.sqrt(gm * a)
        ecc_anom = np.arctan2(esin_e, ecos_e)
        period = 2.0 * np.pi * np.sqrt(a**3 / gm)
        t_peri = np.asarray(t, float) - (ecc_anom - esin_e) * period / (2.0 * np.pi)
    return {"period": period, "ecc": ecc, "e_cos": e_cos, "e_sin": e_sin, "cos_inc": cos_inc,
            "node": node, "t_peri": t_peri, "a": a}


def position_angle_separation(east, north):
    """Separation and position angle of a sky offset.

    Parameters
    ----------
    east, north : array_like
        Offsets toward east (Delta RA cos dec) and north, in one unit.

    Returns
    -------
    separation : ndarray
        sqrt(east^2 + north^2), in the unit of the offsets.
    position_angle : ndarray
        Radians in [0, 2 pi), measured from north through east:
        atan2(east, north).
    """
    east = np.asarray(east, dtype=float)
    north = np.asarray(north, dtype=float)
    return np.hypot(east, north), _wrap(np.arctan2(east, north), 2.0 * np.pi)


def _wrap(angle, period):
    """Angle reduced to [0, period) (np.mod alone can round up to period)."""
    reduced = np.mod(angle, period)
    return np.where(reduced >= period, reduced - period, reduced)
