"""Orbit projection against published examples, textbook laws and an N-body code."""

import math

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from deepwell.core.constants import GM_SUN_AU3_PER_YR2
from deepwell.model.kernels.orbit import (
    elements_from_thiele_innes,
    keplerian_track,
    period_from_a,
    position_angle_separation,
    thiele_innes,
)

DEG = math.pi / 180.0


def _angle_diff(x, y):
    """Difference of two angles reduced to [-pi, pi]."""
    return np.angle(np.exp(1j * (np.asarray(x) - np.asarray(y))))


def test_meeus_example_57a_position_angle_and_separation():
    # Source: Meeus, Astronomical Algorithms, 2nd ed. (1998), Example 57.a:
    # P = 41.623 yr, T = 1934.008, e = 0.2763, a = 0.907", i = 59.025 deg,
    # node = 23.717 deg, omega = 219.907 deg give at 1980.0 rho = 0.411" and
    # theta = 318.4 deg (published to those digits; tolerance 0.0005", 0.05 deg).
    track = keplerian_track(
        t=1980.0, a=907.0, ecc=0.2763, inc=59.025 * DEG, node=23.717 * DEG,
        peri_arg=219.907 * DEG, t_peri=1934.008, period=41.623, distance=1.0,
    )
    sep, pa = position_angle_separation(track.east, track.north)
    assert abs(sep / 1000.0 - 0.411) < 0.0005
    assert abs(pa / DEG - 318.4) < 0.05


def test_position_angle_is_measured_from_north_through_east():
    # Source: definition of position angle, from north through east
    # (Meeus 1998, ch. 57; from memory).  Due east is 90 deg, due south
    # 180 deg, due west 270 deg; separation 3-4-5 triangle; tolerance 1e-15.
    sep, pa = position_angle_separation([1.0, 0.0, -1.0, 3.0], [0.0, -1.0, 0.0, 4.0])
    np.testing.assert_allclose(pa[:3], [math.pi / 2, math.pi, 1.5 * math.pi], atol=1e-15)
    assert abs(sep[3] - 5.0) < 1e-15


def test_keplers_third_law_against_gaussian_constant():
    # Source: Gaussian gravitational constant k = 0.01720209895 (IAU 1976
    # System of Astronomical Constants): a massless body at 1 au around
    # 1 Msun has P = 2 pi / k = 365.2568983 d.  a = 1000 mas at 1 pc is 1 au.
    # Tolerance 1e-8 relative (IAU 2015 constants agree to ~2e-10).
    k_gauss = 0.01720209895
    period_days = period_from_a(1000.0, 1.0, 1.0) * 365.25
    assert abs(period_days / (2.0 * math.pi / k_gauss) - 1.0) < 1e-8
    assert abs(period_days / 365.2568983 - 1.0) < 1e-8


@pytest.mark.parametrize("peri_arg_deg", [0.0, 75.0, 200.0])
def test_star_recedes_at_ascending_node_and_vz_matches_dz_dt(peri_arg_deg):
    # Source: definition of the ascending node (sky-plane crossing moving away
    # from the observer) and the radial-velocity formula
    # v_z = K [cos(nu + omega) + e cos(omega)], K = n a sin i / sqrt(1 - e^2)
    # (Hilditch 2001, An Introduction to Close Binary Stars, sect. 2.4; from
    # memory).  At the node nu = -omega, so v_z = K (1 + e cos omega) > 0.
    # Also v_z = distance * dz/dt by central differences, with
    # 1 au/yr = 4.740470463 km/s (IAU au and Julian year; computed).
    a, ecc, inc, node, t_peri, period, distance = 120.0, 0.6, 0.7, 1.1, 2002.3, 15.0, 8000.0
    omega = peri_arg_deg * DEG
    nu = -omega
    ecc_anom = 2.0 * math.atan(math.sqrt((1 - ecc) / (1 + ecc)) * math.tan(nu / 2.0))
    t_node = t_peri + (ecc_anom - ecc * math.sin(ecc_anom)) * period / (2.0 * math.pi)
    args = dict(a=a, ecc=ecc, inc=inc, node=node, peri_arg=omega, t_peri=t_peri,
                period=period, distance=distance)
    at_node = keplerian_track(t_node, **args)
    n = 2.0 * math.pi / period
    k_mas_per_yr = n * a * math.sin(inc) / math.sqrt(1 - ecc * ecc)
    k_kms = k_mas_per_yr * distance * 1e-3 * 4.740470463
    assert abs(at_node.z) < 1e-9 * a
    assert at_node.v_z > 0.0
    assert abs(at_node.v_z / (k_kms * (1 + ecc * math.cos(omega))) - 1.0) < 1e-9
    h = 1e-4
    z_plus = keplerian_track(t_node + h, **args).z
    z_minus = keplerian_track(t_node - h, **args).z
    dz_dt_kms = (z_plus - z_minus) / (2 * h) * distance * 1e-3 * 4.740470463
    assert abs(dz_dt_kms / at_node.v_z - 1.0) < 1e-6


@pytest.mark.parametrize("inc_deg, turn", [(40.0, 2 * math.pi), (140.0, -2 * math.pi)])
def test_position_angle_increases_with_time_for_direct_orbits(inc_deg, turn):
    # Source: visual-binary convention, i < 90 deg means the position angle
    # increases with time (Meeus 1998, ch. 57; from memory; physics.md sect. 2).
    # Over one period the unwrapped angle must change by exactly +2 pi
    # (or -2 pi for i > 90 deg), tolerance 1e-9 rad, monotonically.
    period = 16.0
    t = np.linspace(2000.0, 2000.0 + period, 4001)
    track = keplerian_track(t, 125.0, 0.88, inc_deg * DEG, 3.9, 1.2, 2002.3, period, 8000.0)
    _, pa = position_angle_separation(track.east, track.north)
    pa = np.unwrap(pa)
    assert abs((pa[-1] - pa[0]) - turn) < 1e-9
    assert np.all(np.sign(np.diff(pa)) == np.sign(turn))


@settings(deadline=None, max_examples=100)
@given(
    a=st.floats(min_value=1.0, max_value=1e4),
    inc=st.floats(min_value=0.01, max_value=math.pi - 0.01),
    node=st.floats(min_value=0.0, max_value=2 * math.pi),
    peri_arg=st.floats(min_value=0.0, max_value=2 * math.pi),
)
def test_thiele_innes_round_trip_property(a, inc, node, peri_arg):
    # Source: Thiele-Innes constants as defined in physics.md sect. 2 (the
    # standard visual-binary form, e.g. Heintz 1978, Double Stars; from
    # memory).  Elements -> constants -> elements returns the input:
    # a to 1e-12 relative, angles to 1e-9 rad modulo 2 pi (i >= 0.01 rad keeps
    # omega - node well conditioned).  Without C, H the node is in [0, pi)
    # and (node, omega) equals the input or the input shifted by pi.
    consts = thiele_innes(a, inc, node, peri_arg)
    a2, inc2, node2, peri2 = elements_from_thiele_innes(*consts[:4])
    assert abs(a2 / a - 1.0) < 1e-12
    assert abs(inc2 - inc) < 1e-9
    assert abs(_angle_diff(node2, node)) < 1e-9 or abs(_angle_diff(node2, node + math.pi)) < 1e-9
    assert 0.0 <= node2 < math.pi
    assert abs(_angle_diff(peri2 - node2, peri_arg - node)) < 1e-9
    a3, inc3, node3, peri3 = elements_from_thiele_innes(*consts[:4], C=consts[4], H=consts[5])
    assert abs(_angle_diff(node3, node)) < 1e-9
    assert abs(_angle_diff(peri3, peri_arg)) < 1e-9
    # One of the two line-of-sight constants alone also resolves the branch
    # when it is not near zero.
    if abs(consts[5]) > 1e-3 * a:
        _, _, node4, _ = elements_from_thiele_innes(*consts[:4], H=consts[5])
        assert abs(_angle_diff(node4, node)) < 1e-9


def _rot_z(angle):
    c, s = math.cos(angle), math.sin(angle)
    return np.array([[c, -s, 0.0], [s, c, 0.0], [0.0, 0.0, 1.0]])


def _rot_x(angle):
    c, s = math.cos(angle), math.sin(angle)
    return np.array([[1.0, 0.0, 0.0], [0.0, c, -s], [0.0, s, c]])


def test_keplerian_track_matches_rebound_ias15_over_one_period():
    # Source: REBOUND (Rein & Liu 2012, A&A 537, A128) with the IAS15
    # integrator (Rein & Spiegel 2015, MNRAS 446, 1424): a massless particle,
    # e = 0.95, around 1 Msun, in au, yr and GM_sun [au^3/yr^2].  The
    # orbital-plane state is turned to (north, east, away) with explicit
    # rotations R_z(node) R_x(inc) R_z(omega) (Murray & Dermott 1999, Solar
    # System Dynamics, eq. 2.122; from memory), independent of thiele_innes.
    # Tolerance: 1e-9 a in position and 1e-9 a n in velocity, at 41 epochs
    # over a full period (pericentre included).
    rebound = pytest.importorskip("rebound")
    a_au, ecc, inc, node, omega = 10.0, 0.95, 0.6, 2.2, 4.0
    mean_anom0 = 0.3
    gm = GM_SUN_AU3_PER_YR2
    sim = rebound.Simulation()
    sim.G = gm
    sim.integrator = "ias15"
    sim.add(m=1.0)
    sim.add(m=0.0, a=a_au, e=ecc, inc=0.0, Omega=0.0, omega=0.0, M=mean_anom0)
    sim.move_to_com()
    n = math.sqrt(gm / a_au**3)
    period = 2 * math.pi / n
    t_peri = -mean_anom0 / n
    rot = _rot_z(node) @ _rot_x(inc) @ _rot_z(omega)
    times = np.linspace(0.0, period, 41)
    ref_pos, ref_vel = [], []
    for t in times:
        sim.integrate(t, exact_finish_time=1)
        star, centre = sim.particles[1], sim.particles[0]
        ref_pos.append(rot @ (np.array(star.xyz) - np.array(centre.xyz)))
        ref_vel.append(rot @ (np.array(star.vxyz) - np.array(centre.vxyz)))
    ref_pos, ref_vel = np.array(ref_pos), np.array(ref_vel)

    distance = 1000.0  # pc, so 1 mas = 1 au
    track = keplerian_track(times, a_au * 1000.0 / distance, ecc, inc, node, omega,
                            t_peri, period, distance)
    from deepwell.core.constants import KMS_PER_AU_PER_YR

    scale = distance / 1000.0
    pos = np.column_stack([track.north, track.east, track.z]) * scale
    vel = np.column_stack([track.v_north * scale, track.v_east * scale,
                           track.v_z / KMS_PER_AU_PER_YR])
    assert np.max(np.abs(pos - ref_pos)) < 1e-9 * a_au
    assert np.max(np.abs(vel - ref_vel)) < 1e-9 * a_au * n
