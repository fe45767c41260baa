"""Kepler's equation E - e sin E = M, solved for every 0 <= e < 1.

The solver is the hot path of every model evaluation.  It is vectorised over
any broadcastable shapes of mean anomaly and eccentricity and returns the
eccentric anomaly together with its sine and cosine (which the caller needs
anyway), so no further trigonometric pass is spent.
"""

import numpy as np

__all__ = ["solve_kepler"]

_TWO_PI = 2.0 * np.pi
# Cody-Waite split of 2 pi: the high part has 27 significant bits, so that
# turns * _TWO_PI_HI is exact for |turns| < 2**26 and the reduction of a
# large mean anomaly loses no accuracy (common practice in libm range reduction).
_TWO_PI_HI = 6.283185303211212  # 0x1.921fb54000000p+2, 2 pi truncated to 27 bits
_TWO_PI_LO = 3.968374318722162e-09  # 2 pi - _TWO_PI_HI, from a 50-digit value


def _reduce(mean_anomaly):
    """Split M into a multiple of 2 pi and a remainder in [-pi, pi]."""
    turns = np.round(mean_anomaly / _TWO_PI)
    return (mean_anomaly - turns * _TWO_PI_HI) - turns * _TWO_PI_LO, turns


def solve_kepler(mean_anomaly, ecc, tol=1e-15, max_iter=12):
    """Solve Kepler's equation for the eccentric anomaly.

    Parameters
    ----------
    mean_anomaly : array_like
        Mean anomaly M in radians, any real value.
    ecc : array_like
        Eccentricity, 0 <= e < 1, broadcastable against ``mean_anomaly``.
    tol : float
        Convergence tolerance on the eccentric-anomaly step in radians.
    max_iter : int
        Maximum number of Danby (quartic) iterations.

    Returns
    -------
    E, sinE, cosE : ndarray
        Eccentric anomaly (rad, same branch as M, i.e. E - M is in [-pi, pi]),
        and its sine and cosine.

    Notes
    -----
    Starting value E0 = M + 0.85 e sign(sin M) (Danby 1988, Fundamentals of
    Celestial Mechanics, 2nd ed., sect. 6.6), then Danby's fourth-order
    correction using f, f', f'', f''' of f(E) = E - e sin E - M.
    """
    mean_anomaly = np.asarray(mean_anomaly, dtype=float)
    ecc = np.asarray(ecc, dtype=float)
    m_red, turns = _reduce(mean_anomaly)
    m_red, ecc = np.broadcast_arrays(m_red, ecc)
    turns = np.broadcast_to(turns, m_red.shape)
    ecc_anom = m_red + 0.85 * ecc * np.sign(np.sin(m_red))
    for _ in range(max_iter):
        s = np.sin(ecc_anom)
        c = np.cos(ecc_anom)
        es = ecc * s
        ec = ecc * c
        f0 = ecc_anom - es - m_red
        f1 = 1.0 - ec
        f2 = es
        f3 = ec
        d1 = -f0 / f1
        d2 = -f0 / (f1 + 0.5 * d1 * f2)
        d3 = -f0 / (f1 + 0.5 * d2 * f2 + d2 * d2 * f3 / 6.0)
        ecc_anom = ecc_anom + d3
        if np.all(np.abs(d3) <= tol * np.maximum(1.0, np.abs(ecc_anom))):
            break
    s = np.sin(ecc_anom)
    c = np.cos(ecc_anom)
    return ecc_anom + turns * _TWO_PI, s, c
