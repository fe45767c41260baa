"""Checks of the enclosed-mass profile (deepwell.results.enclosed) and its figure.

Invented data only.
"""

import math
from pathlib import Path

import matplotlib.image
import numpy as np
import pytest
from astropy import units as u
from astropy.table import Table
from scipy import integrate

from deepwell.core.constants import GM_SUN_AU3_PER_YR2, KMS_PER_AU_PER_YR
from deepwell.core.errors import InputError
from deepwell.fit.joint import fit_joint
from deepwell.model.kernels.relativity import (
    integrate_orbits,
    osculating_state,
    plummer_enclosed_mass,
)
from deepwell.report.figures.enclosed import figure_data, plot_enclosed_mass
from deepwell.results import enclosed as pr
from deepwell.results.compactness import cluster_lifetimes
from deepwell.tables import constraints
from deepwell.tables.observations import read_observations
from deepwell.tables.settings import parse_settings

RICH = Path(__file__).resolve().parents[1] / "scenarios" / "rich"
# The demo scenarios are simulated without relativistic effects (their [effects] table),
# so they are fitted with the Newtonian model.
NEWTONIAN = {"effects": {"romer": False, "redshift": "off", "precession": False}}


@pytest.fixture(scope="module")
def rich_profile():
    result = fit_joint(read_observations(RICH), parse_settings(NEWTONIAN))
    return pr.enclosed_mass_profile(result)


# --- statistical integration tests -------------------------------------------------------------


def test_point_mass_scenario_per_star_masses_agree_with_joint_mass(rich_profile):
    # Statistical consistency test: the invented rich scenario has a pure point mass
    # (scenarios/rich/description.toml), so chi2 of the per-star masses against the joint
    # mass follows a chi2 distribution (scipy.stats.chi2); p must not be tiny.
    c = rich_profile.consistency
    assert c.dof == len(rich_profile.stars) - 1 == 11
    assert c.p_value > 1e-3
    assert rich_profile.consistency_good.p_value > 1e-3


# An invented nucleus with a Plummer sphere of 2% of the point mass (no real object behind it).
PL_MASS, PL_DIST, PL_EXT, PL_B = 4.0e6, 8000.0, 0.02 * 4.0e6, 800.0  # Msun, pc, Msun, au
PL_STARS = {"p-in": (300.0, 60.0, 30.0, 2005.3), "p-mid": (900.0, 120.0, 200.0, 2001.0),
            "p-out": (1600.0, 35.0, 300.0, 2009.0)}  # a [au], inc, node [deg], t_peri [yr]


def _plummer_scenario(folder, rng, ecc=0.03, pos_err=0.05, vel_err=5.0, n_epochs=20):
    """Write positions/velocities of near-circular orbits integrated in point mass + Plummer."""
    pos, vel = [], []
    for name, (a, inc, node, t_peri) in PL_STARS.items():
        # Start on the orbit that is (nearly) circular for the mass it encloses.
        m_enc = PL_MASS + plummer_enclosed_mass(PL_EXT, PL_B, a)
        r0, v0 = osculating_state(a, ecc, math.radians(inc), math.radians(node),
                                  math.radians(40.0), t_peri, 2010.0, m_enc)
        t = np.sort(rng.uniform(2000.0, 2020.0, n_epochs))
        st = integrate_orbits(t, r0, v0, 2010.0, PL_MASS * GM_SUN_AU3_PER_YR2, f_sp=0.0,
                              gm_ext=PL_EXT * GM_SUN_AU3_PER_YR2, b_ext=PL_B,
                              steps_per_orbit=400)
        east, north = st.position[:, 0] / PL_DIST * 1e3, st.position[:, 1] / PL_DIST * 1e3
        vz = st.velocity[:, 2] * KMS_PER_AU_PER_YR
        for k in range(n_epochs):
            e_n = pos_err * rng.standard_normal(2)
            pos.append(f"{name},{t[k]:.6f},{east[k] + e_n[0]:.6f},{north[k] + e_n[1]:.6f},"
                       f"{pos_err},{pos_err},ifm,mass")
            vel.append(f"{name},{t[k]:.6f},{vz[k] + vel_err * rng.standard_normal():.4f},"
                       f"{vel_err},spec")
    (folder / "positions.csv").write_text(
        "star,epoch,ra,dec,ra_err,dec_err,dataset,relative_to\n" + "\n".join(pos) + "\n")
    (folder / "velocities.csv").write_text(
        "star,epoch,vr,vr_err,dataset\n" + "\n".join(vel) + "\n")
    return folder


def test_plummer_scenario_per_star_masses_rise_by_the_injected_enclosed_mass(tmp_path):
    # Injection-recovery: orbits integrated with deepwell.model.kernels.post_newtonian
    # (Newtonian, f_sp = 0) in a point
    # mass plus a Plummer sphere; the expected rise is the Plummer enclosed mass
    # M_ext r^3/(r^2+b^2)^(3/2) (Plummer 1911; physics.md sect. 7) at the stars' radii.
    # Positions relative to the mass, so the frame terms are fixed at 0; the distance is
    # fixed at its true value because a point-mass joint fit of these data biases it.
    folder = _plummer_scenario(tmp_path, np.random.default_rng(11))
    fixed = {n: {"value": 0.0, "fixed": True} for n in ("x0", "y0", "vx0", "vy0")}
    fixed["distance"] = {"value": PL_DIST, "fixed": True}
    result = fit_joint(read_observations(folder), parse_settings({**NEWTONIAN, "shared": fixed}))
    good = sorted((s for s in pr.star_masses(result) if not s.poorly_constrained),
                  key=lambda s: s.r_mean_au)
    assert len(good) == 3
    inner, outer = good[0], good[-1]
    measured = outer.mass - inner.mass
    expected = (plummer_enclosed_mass(PL_EXT, PL_B, outer.r_mean_au)
                - plummer_enclosed_mass(PL_EXT, PL_B, inner.r_mean_au))
    sigma = math.hypot(outer.mass_sigma, inner.mass_sigma)
    assert abs(measured - expected) < 3.0 * sigma
    assert measured > 5.0 * sigma  # the rise is detected, so the agreement means something


# --- model curves --------------------------------------------------------------------------------


@pytest.mark.parametrize("gamma_in, gamma_out", [(1.3, 1.8), (1.2, 2.0), (0.5, 3.0), (1.4, 3.5)])
@pytest.mark.parametrize("x", [0.01, 0.3, 1.0, 2.5, 40.0])
def test_broken_power_law_enclosed_mass_equals_quadrature_of_the_density(x, gamma_in, gamma_out):
    # Independent value: 4 pi r^2 rho(r) integrated numerically (scipy.integrate.quad), with
    # rho_b fixed by the mass inside the break; tolerance 1e-8 relative.
    m_b, r_b = 2.0e6, 0.3
    rho_b = (3.0 - gamma_in) * m_b / (4.0 * np.pi * r_b**3)

    def shell(r):
        return 4.0 * np.pi * r * r * rho_b * (r / r_b) ** (-(gamma_in if r < r_b else gamma_out))

    r = x * r_b
    kw = dict(epsabs=0.0, epsrel=1e-13, limit=200)
    quad = integrate.quad(shell, 0.0, min(r, r_b), **kw)[0]
    if r > r_b:
        quad += integrate.quad(shell, r_b, r, **kw)[0]
    got = pr.broken_power_law_enclosed_mass(r, m_b, r_b, gamma_in, gamma_out)
    assert got == pytest.approx(quad, rel=1e-8)


def test_plummer_enclosed_mass_limits_follow_the_central_density_and_the_total_mass():
    # physics.md sect. 7 (Plummer 1911): r << b: M(<r) -> (4 pi/3) rho_0 r^3 with
    # rho_0 = 3 M/(4 pi b^3); r >> b: M(<r) -> M. Leading corrections are 1.5 (r/b)^2 and
    # 1.5 (b/r)^2, so at r/b = 1e-3 and 1e3 the tolerance 2e-6 relative covers them.
    mass, m_ext, b = 3.0e6, 6.0e4, 500.0
    rho_0 = 3.0 * m_ext / (4.0 * np.pi * b**3)
    r_small, r_big = 1e-3 * b, 1e3 * b
    inner = pr.point_plus_plummer_enclosed(r_small, mass, m_ext, b) - mass
    outer = pr.point_plus_plummer_enclosed(r_big, mass, m_ext, b) - mass
    assert inner == pytest.approx(4.0 / 3.0 * np.pi * rho_0 * r_small**3, rel=2e-6)
    assert outer == pytest.approx(m_ext, rel=2e-6)


def test_plummer_enclosed_mass_equals_quadrature_of_the_plummer_density():
    # Independent value: quad of 4 pi r^2 (3M/4 pi b^3)(1 + r^2/b^2)^(-5/2) (physics.md sect. 7).
    m_ext, b = 6.0e4, 500.0
    rho = lambda r: 3 * m_ext / (4 * np.pi * b**3) * (1 + (r / b) ** 2) ** -2.5  # noqa: E731
    for r in (50.0, 500.0, 3000.0):
        quad = integrate.quad(lambda s: 4 * np.pi * s * s * rho(s), 0, r, epsrel=1e-12)[0]
        assert pr.point_plus_plummer_enclosed(r, 0.0, m_ext, b) == pytest.approx(quad, rel=1e-9)


# --- consistency and limits -----------------------------------------------------------------


def _star(name, mass, sigma, poor=False):
    return pr.StarMass(name, mass, sigma, 100.0, 300.0, 210.0, 200.0, 0.5, 1.0, 1.0, True, poor,
                       "invented" if poor else "")


def test_consistency_chi2_matches_hand_computation_and_scipy_survival_function():
    # Hand arithmetic: ((10-12)/2)^2 + ((13-12)/1)^2 + ((12-12)/4)^2 = 2; dof = 2;
    # chi2 survival function with 2 dof is exp(-chi2/2) (closed form) = exp(-1).
    stars = [_star("a", 10.0, 2.0), _star("b", 13.0, 1.0), _star("c", 12.0, 4.0),
             _star("d", 50.0, 1.0, poor=True)]
    c = pr.consistency_chi2(stars, 12.0, include_poor=False)
    assert (c.chi2, c.dof) == (pytest.approx(2.0, rel=1e-14), 2)
    assert c.p_value == pytest.approx(math.exp(-1.0), rel=1e-12)
    assert pr.consistency_chi2(stars, 12.0).dof == 3


def test_no_dark_cluster_radius_is_where_the_longest_lifetime_reaches_the_galaxy_age():
    # Definition (Maoz 1998, ApJ 494, L181 criterion): the longest lifetime over all
    # constituents equals the 10 Gyr age there; tolerance 1e-6 relative.
    r = pr.no_dark_cluster_radius_au(4.0e6)
    longest = max(float(v["t_max_yr"]) for v in cluster_lifetimes(4.0e6, r).values())
    assert longest == pytest.approx(1.0e10, rel=1e-6)


# --- external constraints reader -------------------------------------------------------------


def _csv(tmp_path, text):
    path = tmp_path / "external.csv"
    path.write_text(text)
    return path


def test_external_constraints_are_read_with_comments_and_labels(tmp_path):
    # Invented constraints; expected values are the numbers written into the file.
    path = _csv(tmp_path, "# invented\nradius_pc,mass,mass_err,label\n\n0.5,3.6e6,2e5,gas\n"
                          "1.2,4.5e6,4e5,stars\n")
    ext = constraints.read_external_constraints(path)
    np.testing.assert_allclose(ext.mass, [3.6e6, 4.5e6], rtol=0)
    assert ext.radius_au[0] == pytest.approx((0.5 * u.pc).to_value(u.au), rel=1e-12)
    assert ext.labels == ("gas", "stars")


@pytest.mark.parametrize("text, line, column, words", [
    ("radius_pc,mass,mass_err\n0.5,abc,2e5\n", 2, "mass", "not a number"),
    ("# note\nradius_pc,mass,mass_err\n0.5,3e6,2e5\n\n-1,3e6,2e5\n", 5, "radius_pc", "positive"),
    ("radius_pc,mass,mass_err\n0.5,3e6,\n", 2, "mass_err", "empty"),
    ("radius_pc,mass,mass_err\n0.5,3e6,-4\n", 2, "mass_err", "negative"),
    ("radius_pc,mass,mass_err\n0.5,inf,4\n", 2, "mass", "finite"),
    ("radius_pc,mass\n0.5,3e6\n", 1, None, "mass_err"),
    ("radius_pc,mass,mass_err\n0.5,3e6\n", 2, None, "2 cells"),
])
def test_external_constraint_errors_name_file_line_and_column(tmp_path, text, line, column,
                                                              words):
    # Expected line numbers counted by hand in the invented files (first line is 1).
    path = _csv(tmp_path, text)
    with pytest.raises(InputError) as info:
        constraints.read_external_constraints(path)
    err = info.value
    assert (err.file, err.row, err.column) == (str(path), line, column)
    assert words in str(err) and str(path) in str(err)


# --- table and figure -------------------------------------------------------------------------


def test_profile_table_round_trips_through_ecsv_with_units(rich_profile, tmp_path):
    # astropy's ECSV writer/reader is the independent check of units and values.
    path = tmp_path / "profile.ecsv"
    pr.profile_table(rich_profile).write(path, format="ascii.ecsv")
    back = Table.read(path, format="ascii.ecsv")
    assert back["mass"].unit == u.solMass and back["r_mean"].unit == u.au
    np.testing.assert_allclose(back["mass"].value, [s.mass for s in rich_profile.stars],
                               rtol=1e-15)
    assert back.meta["consistency_all"]["dof"] == 11


def test_enclosed_mass_figure_writes_pdf_and_200_dpi_png(rich_profile, tmp_path):
    # Matplotlib's definition of dpi: 6.4 x 5.0 inch at 200 dpi is 1280 x 1000 pixels.
    ext = constraints.read_external_constraints(_csv(tmp_path, "radius_pc,mass,mass_err\n"
                                                      "0.5,3.6e6,2e5\n1.2,4.5e6,4e5\n"))
    prof = pr.EnclosedMassProfile(**{**rich_profile.__dict__, "external": ext})
    files = plot_enclosed_mass(prof, tmp_path / "enclosed_mass")
    assert [f.suffix for f in files] == [".pdf", ".png"]
    assert files[0].read_bytes()[:5] == b"%PDF-"
    assert matplotlib.image.imread(files[1]).shape[:2] == (1000, 1280)


def test_enclosed_mass_figure_shows_the_measured_range_with_the_whole_range_beside(rich_profile):
    # The main panel spans what the stars measure: every well-constrained star's
    # pericentre-to-apocentre bar and 1-sigma mass bar, and the joint point-mass band
    # (geometry only, common practice for a figure's limits); the whole range from the
    # Schwarzschild radius outwards is kept for the second panel.
    d = figure_data(rich_profile)
    (x0, x1), (y0, y1) = d["x_measured"], d["y_measured"]
    good = ~d["poor"]
    assert good.any()
    assert x0 <= d["r_lo"].min() and x1 >= d["r_hi"].max()
    assert y0 <= (d["m"] - d["m_err"])[good].min() and y1 >= (d["m"] + d["m_err"])[good].max()
    m, sig = rich_profile.joint_mass, rich_profile.joint_mass_sigma
    assert y0 < m - sig and y1 > m + sig
    # the mass window is a few per cent of the mass wide, not decades as on a log axis
    assert (y1 - y0) / m < 0.5
    assert d["x_range"][0] < d["r_s"] < x0 and d["x_range"][1] >= x1
