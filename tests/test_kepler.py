"""Kepler solver against outside references (mpmath at 40 digits, Kepler's equation)."""

import mpmath
import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from deepwell.model.kernels.kepler import (
    compiled_kernel_available,
    solve_kepler,
    solve_kepler_numpy,
)

ECCENTRICITIES = [0.0, 0.1, 0.5, 0.9, 0.99, 0.999, 0.9999]


def _mp_eccentric_anomaly(mean_anomaly, ecc):
    """E from E - e sin E = M by Newton's method at 40 significant digits.

    Reference: Kepler's equation (Kepler 1609, Astronomia Nova); Newton
    iteration in mpmath with mp.dps = 40, converged to 1e-36 rad.
    """
    with mpmath.workdps(40):
        m = mpmath.mpf(float(mean_anomaly))
        e = mpmath.mpf(float(ecc))
        turns = mpmath.nint(m / (2 * mpmath.pi))
        m_red = m - 2 * mpmath.pi * turns
        ecc_anom = mpmath.pi if (e > 0.8 and m_red > 0) else m_red
        if e > 0.8 and m_red < 0:
            ecc_anom = -mpmath.pi
        for _ in range(200):
            step = (ecc_anom - e * mpmath.sin(ecc_anom) - m_red) / (1 - e * mpmath.cos(ecc_anom))
            ecc_anom -= step
            if abs(step) < mpmath.mpf(10) ** -36:
                break
        return ecc_anom + 2 * mpmath.pi * turns


def _mean_anomaly_grid():
    """Mean anomalies from 1e-14 to 1e3 rad in both signs, with the hard spots."""
    rng = np.random.default_rng(20240601)
    near_zero = np.geomspace(1e-14, np.pi, 60)
    uniform = rng.uniform(0.0, np.pi, 40)
    base = np.concatenate([near_zero, uniform, [0.0, np.pi]])
    many_turns = base[::3] + 2.0 * np.pi * rng.integers(-159, 160, base[::3].size)
    large = rng.uniform(-1e3, 1e3, 30)
    return np.concatenate([base, -base, many_turns, large, [1e3, -1e3]])


GRID = _mean_anomaly_grid()


@pytest.mark.parametrize("solver", [solve_kepler, solve_kepler_numpy], ids=["default", "numpy"])
@pytest.mark.parametrize("ecc", ECCENTRICITIES)
def test_kepler_solution_matches_40_digit_reference(solver, ecc):
    # Source: mpmath (mp.dps = 40) Newton solution of Kepler's equation.
    # Tolerance 1e-12 rad in E itself for |M| <= 1e3 (the requirement);
    # sin E and cos E to 1e-13 against mpmath's sin and cos of that E.
    ecc_anom, sin_e, cos_e = solver(GRID, ecc)
    ref = [_mp_eccentric_anomaly(m, ecc) for m in GRID]
    err_e = np.array([float(mpmath.mpf(float(x)) - r) for x, r in zip(ecc_anom, ref, strict=True)])
    err_s = np.array([float(s - mpmath.sin(r)) for s, r in zip(sin_e, ref, strict=True)])
    err_c = np.array([float(c - mpmath.cos(r)) for c, r in zip(cos_e, ref, strict=True)])
    assert np.max(np.abs(err_e)) < 1e-12
    assert np.max(np.abs(err_s)) < 1e-13
    assert np.max(np.abs(err_c)) < 1e-13


def test_kepler_residual_with_broadcast_eccentricity_array():
    # Source: Kepler's equation E - e sin E = M (Kepler 1609), evaluated in
    # mpmath (40 digits) at the returned E.  Tolerance: |residual| / (1 - e cos E)
    # < 1e-12 rad, i.e. the implied error in E, for an (m, e) grid broadcast 2-d.
    m = GRID[::4][:, None]
    ecc = np.array([0.0, 0.3, 0.95, 0.9999])[None, :]
    ecc_anom, _, _ = solve_kepler(m, ecc)
    assert ecc_anom.shape == (m.size, ecc.size)
    worst = 0.0
    with mpmath.workdps(40):
        for (i, j), x in np.ndenumerate(ecc_anom):
            x_mp = mpmath.mpf(float(x))
            e_mp = mpmath.mpf(float(ecc[0, j]))
            resid = x_mp - e_mp * mpmath.sin(x_mp) - mpmath.mpf(float(m[i, 0]))
            worst = max(worst, float(abs(resid) / (1 - e_mp * mpmath.cos(x_mp))))
    # The representable E near |M| = 1e3 is itself rounded to 5.7e-14.
    assert worst < 1e-12


def test_kepler_scalar_input_gives_scalar_circular_solution():
    # Source: for e = 0 Kepler's equation gives E = M (Kepler 1609); sin and
    # cos against mpmath at 40 digits, tolerance 1e-15.
    ecc_anom, sin_e, cos_e = solve_kepler(2.5, 0.0)
    assert np.ndim(ecc_anom) == 0
    assert abs(ecc_anom - 2.5) < 1e-15
    assert abs(sin_e - float(mpmath.sin(2.5))) < 1e-15
    assert abs(cos_e - float(mpmath.cos(2.5))) < 1e-15


def test_kepler_invalid_eccentricity_gives_nan():
    # Source: Kepler's equation in this elliptic form is defined for
    # 0 <= e < 1 only (common practice); out-of-range e and infinite M must
    # give NaN (count of NaN outputs: exactly 4 of 5), never a number.
    ecc_anom, sin_e, cos_e = solve_kepler(np.array([1.0, 1.0, 1.0, np.inf, 1.0]),
                                          np.array([-0.1, 1.0, np.nan, 0.5, 0.5]))
    for arr in (ecc_anom, sin_e, cos_e):
        assert int(np.isnan(arr).sum()) == 4
        assert not np.isnan(arr[4])


def test_compiled_kernel_is_the_default_path():
    # Source: the project's dependency list names numba; this checks that the
    # default path is the compiled one, and that it agrees with the independent
    # numpy iteration to 1e-13 rad over the reference grid at e = 0.97.
    assert compiled_kernel_available()
    fast = solve_kepler(GRID, 0.97)[0]
    slow = solve_kepler_numpy(GRID, 0.97)[0]
    assert np.max(np.abs(fast - slow)) < 1e-13


@settings(deadline=None, max_examples=200)
@given(
    mean_anomaly=st.floats(min_value=-1e3, max_value=1e3, allow_nan=False),
    ecc=st.floats(min_value=0.0, max_value=0.9999),
)
def test_kepler_equation_holds_property(mean_anomaly, ecc):
    # Source: Kepler's equation E - e sin E = M (Kepler 1609), residual in
    # mpmath at 40 digits divided by dM/dE = 1 - e cos E gives the error in E;
    # tolerance 1e-12 rad.  Also sin^2 + cos^2 = 1 to 1e-15 (identity) and E - M
    # in [-pi, pi] (the documented branch: |E - M| = e |sin E| <= e).
    ecc_anom, sin_e, cos_e = solve_kepler(mean_anomaly, ecc)
    with mpmath.workdps(40):
        x = mpmath.mpf(float(ecc_anom))
        e = mpmath.mpf(ecc)
        resid = x - e * mpmath.sin(x) - mpmath.mpf(mean_anomaly)
        err = float(abs(resid) / (1 - e * mpmath.cos(x)))
    assert err < 1e-12
    assert abs(sin_e * sin_e + cos_e * cos_e - 1.0) < 1e-15
    assert abs(ecc_anom - mean_anomaly) <= ecc + 1e-12
