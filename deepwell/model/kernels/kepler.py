"""Kepler's equation E - e sin E = M, solved for every 0 <= e < 1.

The solver is the hot path of every model evaluation.  It is vectorised over
any broadcastable shapes of mean anomaly and eccentricity and returns the
eccentric anomaly together with its sine and cosine (which the caller needs
anyway), so no further trigonometric pass is spent.

Two implementations share one interface:

* a compiled kernel (numba, ``cache=True``), used by default for inputs that
  convert to float64.  It is non-iterative: Markley's cubic starting value and
  one fifth-order correction; the sine and cosine of the result come from
  those of the starting value rotated through the small correction.  The cube
  root, sine and cosine are evaluated inline (bit-pattern guess plus third-order
  steps; Taylor polynomials after a quadrant reduction), so the loops are pure
  arithmetic that the compiler vectorises, and the whole solve costs less than
  one ``numpy.sin`` + ``numpy.cos`` pass over the same array;
* :func:`solve_kepler_numpy`, an independent iterative solver in plain numpy,
  used when numba is missing or the input is not float64-compatible, and kept
  as a reference for the tests.

numba is imported, and the kernel compiled or loaded from its on-disk cache,
on the first call only, so importing deepwell stays cheap.
"""

import math
import threading

import numpy as np

__all__ = ["solve_kepler", "solve_kepler_numpy", "compiled_kernel_available"]

_TWO_PI = 2.0 * np.pi
_INV_TWO_PI = 1.0 / _TWO_PI
# Cody-Waite split of 2 pi: the high part has 27 significant bits, so that
# turns * _TWO_PI_HI is exact for |turns| < 2**26 and the reduction of a
# large mean anomaly loses no accuracy (common practice in libm range reduction).
_TWO_PI_HI = 6.283185303211212  # 0x1.921fb54000000p+2, 2 pi truncated to 27 bits
_TWO_PI_LO = 3.968374318722162e-09  # 2 pi - _TWO_PI_HI, from a 50-digit value

# Constants of Markley's starter (Markley 1995):
# alpha = (3 pi^2 + 1.6 pi (pi - |M|) / (1 + e)) / (pi^2 - 6).
_PI = math.pi
_MK_A = 3.0 * _PI**2 / (_PI**2 - 6.0)
_MK_B = 1.6 * _PI / (_PI**2 - 6.0)


def _reduce(mean_anomaly):
    """Split M into a multiple of 2 pi and a remainder in [-pi, pi]."""
    turns = np.round(mean_anomaly / _TWO_PI)
    return (mean_anomaly - turns * _TWO_PI_HI) - turns * _TWO_PI_LO, turns


def solve_kepler_numpy(mean_anomaly, ecc, tol=1e-15, max_iter=12):
    """Solve Kepler's equation with an iterative pure-numpy method.

    Reference and fallback for :func:`solve_kepler`; same parameters and
    returns.  Eccentricities outside [0, 1) give NaN.

    Notes
    -----
    Starting value E0 = M + 0.85 e sign(sin M) (Danby 1988, Fundamentals of
    Celestial Mechanics, 2nd ed., sect. 6.6), then Danby's fourth-order
    correction using f, f', f'', f''' of f(E) = E - e sin E - M, repeated
    until the step is below ``tol``.
    """
    mean_anomaly = np.asarray(mean_anomaly, dtype=float)
    ecc = np.asarray(ecc, dtype=float)
    ecc = np.where((ecc >= 0.0) & (ecc < 1.0), ecc, np.nan)
    m_red, turns = _reduce(mean_anomaly)
    m_red, ecc = np.broadcast_arrays(m_red, ecc)
    turns = np.broadcast_to(turns, m_red.shape)
    ecc_anom = m_red + 0.85 * ecc * np.sign(np.sin(m_red))
    with np.errstate(invalid="ignore"):
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
            if not np.any(np.abs(d3) > tol * np.maximum(1.0, np.abs(ecc_anom))):
                break
    s = np.sin(ecc_anom)
    c = np.cos(ecc_anom)
    return (ecc_anom + turns * _TWO_PI_LO) + turns * _TWO_PI_HI, s, c


_CHUNK = 256
# pi/2 as a double plus its remainder (from a 60-digit value), for the
# quadrant reduction of the sine and cosine below.
_PIO2_HI = 1.5707963267948966
_PIO2_LO = 6.123233995736766e-17
# Adding this to the bit pattern of a positive double divided by 3 gives a
# first guess of its cube root within about 6 % (exponent 1023 - 1023/3 = 682
# moved to the exponent field; common practice in libm cube roots).
_CBRT_MAGIC = 682 << 52


# Rows of the kernel's scratch buffer, each _CHUNK long.  One buffer with
# constant row offsets lets the compiler prove that the rows do not overlap,
# so the loops vectorise without run-time alias checks.
_ECC, _MRED, _SIGN, _TURNS, _DD, _QQ, _RR, _TT, _GG, _EOUT, _SOUT, _COUT = (
    k * _CHUNK for k in range(12)
)


def _kepler_loop(mean_anomaly, ecc, ecc_anom, sin_e, cos_e):
    """Kernel compiled by numba (see :func:`solve_kepler` for the method).

    ``mean_anomaly``, ``ecc_anom``, ``sin_e``, ``cos_e`` are 1-d float64
    arrays of one length; ``ecc`` has that length or length 1.  The work goes
    in chunks through short loops of pure arithmetic, which the compiler
    vectorises: the cube root of the starter and the sine and cosine of the
    starting value are computed inline (bit-pattern guess plus third-order Householder steps,
    and Taylor polynomials after a quadrant reduction).
    """
    n = mean_anomaly.size
    n_ecc = ecc.size
    buf = np.empty(12 * _CHUNK)
    bits = buf.view(np.int64)
    for start in range(0, n, _CHUNK):
        k = min(_CHUNK, n - start)
        if n_ecc > 1:
            for j in range(k):
                buf[_ECC + j] = ecc[start + j]
        else:
            for j in range(k):
                buf[_ECC + j] = ecc[0]
        for j in range(k):
            buf[_MRED + j] = mean_anomaly[start + j]
        # Cody-Waite reduction to [-pi, pi], fold to [0, pi] (E is odd in M),
        # and Markley's cubic up to the argument t of its cube root.
        for j in range(k):
            e = buf[_ECC + j]
            m_full = buf[_MRED + j]
            turns = np.floor(m_full * _INV_TWO_PI + 0.5)
            m = (m_full - turns * _TWO_PI_HI) - turns * _TWO_PI_LO
            valid = e >= 0.0 and e < 1.0 and abs(m_full) < np.inf
            buf[_SIGN + j] = (1.0 if m >= 0.0 else -1.0) if valid else np.nan
            m = abs(m)
            alpha = _MK_A + _MK_B * (_PI - m) / (1.0 + e)
            d = 3.0 * (1.0 - e) + alpha * e
            q = 2.0 * alpha * d * (1.0 - e) - m * m
            r = 3.0 * alpha * d * (d - 1.0 + e) * m + m * m * m
            disc = q * q * q + r * r
            buf[_TT + j] = r + math.sqrt(disc if disc > 0.0 else 0.0)
            buf[_MRED + j] = m
            buf[_TURNS + j] = turns
            buf[_DD + j] = d
            buf[_QQ + j] = q
            buf[_RR + j] = r
        for j in range(k):
            bits[_GG + j] = bits[_TT + j] // 3 + _CBRT_MAGIC
        for j in range(k):
            e = buf[_ECC + j]
            m = buf[_MRED + j]
            # Cube root of t: three third-order Householder steps y <- y (y^3 + 2t) / (2y^3 + t)
            # from the bit-pattern guess (error 6e-2 -> 1e-4 -> 1e-12 -> 1e-16).
            t = buf[_TT + j]
            y = buf[_GG + j]
            y3 = y * y * y
            y = y * (y3 + 2.0 * t) / (2.0 * y3 + t)
            y3 = y * y * y
            y = y * (y3 + 2.0 * t) / (2.0 * y3 + t)
            y3 = y * y * y
            y = y * (y3 + 2.0 * t) / (2.0 * y3 + t)
            w = y * y
            q = buf[_QQ + j]
            e0 = (2.0 * buf[_RR + j] * w / (w * w + w * q + q * q) + m) / buf[_DD + j]
            # sin e0, cos e0 for e0 in [0, pi]: e0 = quad pi/2 + x, |x| <= pi/4
            # (two-part pi/2), Taylor series of sin x to x^17, cos x to x^16
            # (truncation below 3e-18).
            quad = np.floor(e0 * (1.0 / _PIO2_HI) + 0.5)
            x = (e0 - quad * _PIO2_HI) - quad * _PIO2_LO
            xx = x * x
            ps = 1.0 / 355687428096000.0
            ps = ps * xx - 1.0 / 1307674368000.0
            ps = ps * xx + 1.0 / 6227020800.0
            ps = ps * xx - 1.0 / 39916800.0
            ps = ps * xx + 1.0 / 362880.0
            ps = ps * xx - 1.0 / 5040.0
            ps = ps * xx + 1.0 / 120.0
            ps = ps * xx - 1.0 / 6.0
            sx = x + x * xx * ps
            pc = 1.0 / 20922789888000.0
            pc = pc * xx - 1.0 / 87178291200.0
            pc = pc * xx + 1.0 / 479001600.0
            pc = pc * xx - 1.0 / 3628800.0
            pc = pc * xx + 1.0 / 40320.0
            pc = pc * xx - 1.0 / 720.0
            pc = pc * xx + 1.0 / 24.0
            pc = pc * xx - 0.5
            cx = 1.0 + xx * pc
            s0 = sx if quad < 0.5 else (cx if quad < 1.5 else -sx)
            c0 = cx if quad < 0.5 else (-sx if quad < 1.5 else -cx)
            # Markley's fifth-order correction, then sin and cos of e0 + d5 by
            # rotation through the small angle d5 (series to d5^7 and d5^6;
            # |d5| < 4e-4 for 0 <= e < 1, so truncation is below 1e-23).
            f2 = e * s0
            f3 = e * c0
            f0 = e0 - f2 - m
            f1 = 1.0 - f3
            d3 = -f0 / (f1 - 0.5 * f0 * f2 / f1)
            d4 = -f0 / (f1 + 0.5 * d3 * f2 + d3 * d3 * f3 / 6.0)
            d5 = -f0 / (f1 + 0.5 * d4 * f2 + d4 * d4 * f3 / 6.0 - d4 * d4 * d4 * f2 / 24.0)
            dd = d5 * d5
            sd = d5 * (1.0 - dd / 6.0 * (1.0 - dd / 20.0 * (1.0 - dd / 42.0)))
            cd = 1.0 - dd / 2.0 * (1.0 - dd / 12.0 * (1.0 - dd / 30.0))
            sign = buf[_SIGN + j]  # NaN for invalid input, which propagates
            turns = buf[_TURNS + j]
            buf[_EOUT + j] = (sign * (e0 + d5) + turns * _TWO_PI_LO) + turns * _TWO_PI_HI
            buf[_SOUT + j] = sign * (s0 * cd + c0 * sd)
            buf[_COUT + j] = (c0 * cd - s0 * sd) + (sign - sign)
        for j in range(k):
            ecc_anom[start + j] = buf[_EOUT + j]
        for j in range(k):
            sin_e[start + j] = buf[_SOUT + j]
        for j in range(k):
            cos_e[start + j] = buf[_COUT + j]


_kernel = None
_kernel_lock = threading.Lock()


def _compiled_kernel():
    """Return the numba-compiled loop, or None if numba is unavailable."""
    global _kernel
    if _kernel is None:
        with _kernel_lock:
            if _kernel is None:
                try:
                    import numba
                except ImportError:
                    _kernel = False
                else:
                    # error_model="numpy": division by zero gives inf/NaN instead of
                    # a Python exception; without it the divisions carry a check
                    # and the loops do not vectorise.
                    _kernel = numba.njit(cache=True, nogil=True, error_model="numpy")(
                        _kepler_loop
                    )
    return _kernel or None


def compiled_kernel_available():
    """Whether :func:`solve_kepler` runs the compiled (numba) kernel.

    Returns
    -------
    bool
    """
    return _compiled_kernel() is not None


def solve_kepler(mean_anomaly, ecc, tol=1e-15, max_iter=12):
    """Solve Kepler's equation for the eccentric anomaly.

    Parameters
    ----------
    mean_anomaly : array_like
        Mean anomaly M in radians, any real value.
    ecc : array_like
        Eccentricity, 0 <= e < 1, broadcastable against ``mean_anomaly``.
        Values outside [0, 1), and non-finite M, give NaN.
    tol : float
        Convergence tolerance on the eccentric-anomaly step in radians
        (numpy path only; the compiled kernel is non-iterative).
    max_iter : int
        Maximum number of iterations (numpy path only).

    Returns
    -------
    E, sinE, cosE : ndarray
        Eccentric anomaly (rad, same branch as M, i.e. E - M is in [-pi, pi]),
        and its sine and cosine, with the broadcast shape of the inputs.

    Notes
    -----
    M is reduced to [-pi, pi] with a two-part (Cody-Waite) 2 pi, and E is
    odd in M, so the kernel works on |M| in [0, pi].  Starting value: the
    root of Markley's cubic,

        alpha = (3 pi^2 + 1.6 pi (pi - M)/(1 + e)) / (pi^2 - 6),
        d = 3 (1 - e) + alpha e,  q = 2 alpha d (1 - e) - M^2,
        r = 3 alpha d (d - 1 + e) M + M^3,  w = (|r| + sqrt(q^3 + r^2))^(2/3),
        E0 = (2 r w / (w^2 + w q + q^2) + M) / d,

    good to about 4e-4 rad, followed by one fifth-order correction
    delta_5 built from f = E - e sin E - M and its derivatives (Markley
    1995).  sin E and cos E come from sin E0, cos E0 rotated by delta_5,
    with series for sin and cos of the small angle.  Against 40-digit
    references the error in E is below 1e-14 rad for |M| <= pi and
    e <= 0.9999, and below 6e-14 rad (half a unit in the last place of E)
    for |M| up to 1e3; sin E and cos E are good to 1.1e-14.

    References
    ----------
    Markley, F. L. 1995, Celestial Mechanics and Dynamical Astronomy 63, 101,
    "Kepler equation solver".
    """
    m = np.asarray(mean_anomaly)
    e = np.asarray(ecc)
    kernel = _compiled_kernel()
    if (
        kernel is None
        or not np.can_cast(m.dtype, np.float64)
        or not np.can_cast(e.dtype, np.float64)
    ):
        return solve_kepler_numpy(mean_anomaly, ecc, tol=tol, max_iter=max_iter)
    m = m.astype(np.float64, copy=False)
    e = e.astype(np.float64, copy=False)
    shape = np.broadcast_shapes(m.shape, e.shape)
    if m.shape != shape:
        m = np.broadcast_to(m, shape)
    m_flat = np.ascontiguousarray(m).reshape(-1)
    if e.size == 1:
        e_flat = np.ascontiguousarray(e).reshape(1)
    else:
        if e.shape != shape:
            e = np.broadcast_to(e, shape)
        e_flat = np.ascontiguousarray(e).reshape(-1)
    ecc_anom = np.empty(shape)
    sin_e = np.empty(shape)
    cos_e = np.empty(shape)
    kernel(m_flat, e_flat, ecc_anom.reshape(-1), sin_e.reshape(-1), cos_e.reshape(-1))
    if not shape:
        return ecc_anom[()], sin_e[()], cos_e[()]
    return ecc_anom, sin_e, cos_e
