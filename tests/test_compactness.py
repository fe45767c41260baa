"""Checks of deepwell.results.compactness against published constants, worked numbers and scipy."""

import json
import math
import re

import numpy as np
import pytest
from astropy import constants as const
from astropy import units as u
from scipy import stats

from deepwell.results import compactness as cp

AU_KM = const.au.to_value(u.km)
M_EARTH_MSUN = (const.GM_earth / const.GM_sun).decompose().value  # IAU 2015 B3 nominal values


# --- Schwarzschild radii -----------------------------------------------------------------------


@pytest.mark.parametrize(
    ("mass_msun", "expected_km"),
    [
        (1.0, 2.953),  # 2 GM_sun / c^2 from astropy IAU 2015 nominal GM_sun
        (M_EARTH_MSUN, 8.87e-6),  # 2 GM_earth / c^2 from astropy IAU 2015 nominal GM_earth
        (10.0, 29.53),  # 10 x the solar value, astropy GM_sun
    ],
)
def test_schwarzschild_radius_matches_astropy_nominal_values(mass_msun, expected_km):
    got_km = cp.schwarzschild_radius_au(mass_msun) * AU_KM
    assert got_km == pytest.approx(expected_km, rel=1e-3)


def test_schwarzschild_radius_equals_astropy_expression():
    # astropy constants (IAU 2015 B3): R_s = 2 GM_sun / c^2, evaluated with units
    expected = (2 * const.GM_sun / const.c**2).to_value(u.au)
    assert cp.schwarzschild_radius_au(1.0) == pytest.approx(expected, rel=1e-12)


@pytest.mark.parametrize(
    ("mass_msun", "rule_km"),
    [(1.0, 3.0), (10.0, 30.0), (M_EARTH_MSUN, 1e-5)],  # common practice: 3 km, 30 km, 1 cm
)
def test_schwarzschild_radius_rules_of_thumb(mass_msun, rule_km):
    # common practice rules of thumb, tolerance 15%
    assert cp.schwarzschild_radius_au(mass_msun) * AU_KM == pytest.approx(rule_km, rel=0.15)


# --- Escape velocities -------------------------------------------------------------------------

R_EARTH_EQ_AU = const.R_earth.to_value(u.au)  # astropy: IAU 2015 nominal equatorial radius
R_SUN_AU = const.R_sun.to_value(u.au)  # astropy: IAU 2015 nominal solar radius
MOON_GM_KM3_S2 = 4902.800  # lunar GM, from memory (astropy has no lunar constants)
MOON_R_KM = 1737.4  # mean lunar radius, from memory
M_MOON_MSUN = MOON_GM_KM3_S2 * 1e9 / const.GM_sun.si.value


@pytest.mark.parametrize(
    ("mass_msun", "r_au", "expected_kms", "rel"),
    [
        (M_EARTH_MSUN, R_EARTH_EQ_AU, 11.18, 5e-4),  # astropy GM_earth, R_earth (equatorial)
        (M_EARTH_MSUN, 6371.0 / AU_KM, 11.19, 5e-4),  # astropy GM_earth; 6371 km mean radius
        (1.0, R_SUN_AU, 617.7, 2e-4),  # astropy GM_sun, R_sun (IAU 2015 nominal)
        (M_MOON_MSUN, MOON_R_KM / AU_KM, 2.376, 5e-4),  # lunar GM and radius from memory
    ],
)
def test_escape_velocity_from_published_constants(mass_msun, r_au, expected_kms, rel):
    assert cp.escape_velocity_kms(mass_msun, r_au) == pytest.approx(expected_kms, rel=rel)


@pytest.mark.parametrize(
    ("mass_msun", "r_au", "rounded_kms"),
    [
        (M_EARTH_MSUN, R_EARTH_EQ_AU, 11.2),  # common practice: Earth 11.2 km/s
        (M_MOON_MSUN, MOON_R_KM / AU_KM, 2.4),  # common practice: Moon 2.4 km/s
        (1.0, R_SUN_AU, 620.0),  # common practice: Sun about 620 km/s
    ],
)
def test_escape_velocity_rounded_values_of_the_trade(mass_msun, r_au, rounded_kms):
    # common practice rounded values, tolerance 3%
    assert cp.escape_velocity_kms(mass_msun, r_au) == pytest.approx(rounded_kms, rel=0.03)


def test_escape_fraction_is_escape_velocity_over_c():
    # astropy c: v_esc / c = sqrt(R_s / r) must equal sqrt(2 GM / r) / c
    c_kms = const.c.to_value(u.km / u.s)
    v = cp.escape_velocity_kms(4e6, 120.0)
    assert cp.escape_fraction_of_c(4e6, 120.0) == pytest.approx(v / c_kms, rel=1e-12)


# --- Worked numbers ----------------------------------------------------------------------------


def test_worked_numbers_inside_120_au():
    # shared/physics.md §8 [computed]: 4e6 Msun inside 120 au; tolerance 10%
    rep = cp.compactness(4e6, 120.0)
    assert rep.mean_density_lower_limit == pytest.approx(4.85e15, rel=0.1)
    assert rep.r_peri_in_rs == pytest.approx(1520.0, rel=0.1)
    assert rep.v_esc_over_c == pytest.approx(0.0257, rel=0.1)
    assert rep.max_lifetime_yr == pytest.approx(4e5, rel=0.1)
    ns = rep.lifetimes["neutron stars"]  # physics.md: the neutron-star cluster evaporates
    assert ns["t_max_yr"] == pytest.approx(rep.max_lifetime_yr, rel=1e-12)
    assert ns["t_max_yr"] == pytest.approx(ns["t_evap_yr"], rel=1e-12)


def test_worked_numbers_inside_1000_au():
    # shared/physics.md §8 [computed]: 4e6 Msun inside 1000 au; tolerance 10%
    rep = cp.compactness(4e6, 1000.0)
    assert rep.mean_density_lower_limit == pytest.approx(8.38e12, rel=0.1)
    assert rep.max_lifetime_yr == pytest.approx(1e7, rel=0.1)


def test_pn_parameter_at_ten_schwarzschild_radii():
    # shared/physics.md §8, common practice: GM/(r c^2) = 0.05 at ten Schwarzschild radii
    m = 4e6
    r = 10.0 * cp.schwarzschild_radius_au(m)
    assert cp.pn_parameter(m, r) == pytest.approx(0.05, rel=1e-12)
    assert cp.radius_in_ten_schwarzschild_radii(m, r) == pytest.approx(1.0, rel=1e-12)


# --- Ingredients (Binney & Tremaine 2008; Spitzer 1987) -------------------------------------


def test_maxwellian_fraction_above_twice_rms_speed():
    # Binney & Tremaine (2008) as cited in shared/physics.md §8: 7.38e-3; independent value
    # from scipy's Maxwell distribution (unit scale, rms speed sqrt(3))
    expected = 1.0 - stats.maxwell.cdf(2.0 * math.sqrt(3.0))
    assert cp.maxwellian_fraction_above(2.0 * math.sqrt(3.0)) == pytest.approx(expected, rel=1e-9)
    assert expected == pytest.approx(7.38e-3, rel=1e-3)


def test_evaporation_time_is_136_relaxation_times():
    # Binney & Tremaine (2008) as cited in shared/physics.md §8: t_evap ~ 136 t_rh (1%)
    assert cp.evaporation_time_yr(1.0) == pytest.approx(136.0, rel=0.01)
    expected = 1.0 / (1.0 - stats.maxwell.cdf(2.0 * math.sqrt(3.0)))  # scipy, independent
    assert cp.evaporation_time_yr(1.0) == pytest.approx(expected, rel=1e-9)


def test_relaxation_time_for_a_globular_cluster_like_case():
    # Spitzer (1987) / Binney & Tremaine (2008) formula as cited in shared/physics.md §8,
    # evaluated independently with astropy units: N = 1e5 stars of 1 Msun, r_h = 3 pc
    n, m, r_h = 1e5, 1.0, 3.0 * u.pc
    expected = (0.138 * n / math.log(0.4 * n) * np.sqrt(r_h**3 / (n * m * const.GM_sun))).to_value(
        u.yr
    )
    got = cp.relaxation_time_yr(n, m, r_h.to_value(u.au))
    assert got == pytest.approx(expected, rel=1e-9)


@pytest.mark.parametrize("theta_scale", [1e-6, 1.0, 1e3])
def test_collision_rate_equals_maxwellian_average_of_focused_cross_section(theta_scale):
    # Binney & Tremaine (2008) collision rate as cited in shared/physics.md §8, against a direct
    # scipy average of n * pi (2 r_*)^2 (1 + v_esc^2 / v^2) v over the Maxwellian of relative
    # speeds (1-D dispersion sqrt(2) sigma); v_esc^2 = 2 G (2m) / (2 r_*) (common practice)
    n, sigma_kms, r_star_au = 0.3, 500.0, 1e-4
    sigma = (sigma_kms * u.km / u.s).to_value(u.au / u.yr)  # astropy unit conversion
    gm_msun = const.GM_sun.to_value(u.au**3 / u.yr**2)
    m = theta_scale * 2.0 * sigma**2 * r_star_au / gm_msun  # so that Theta = theta_scale
    v_esc2 = 2.0 * gm_msun * m / r_star_au
    dist = stats.maxwell(scale=math.sqrt(2.0) * sigma)
    mean_focused_speed = dist.mean() + v_esc2 * dist.expect(lambda v: 1.0 / v)
    rate = n * math.pi * (2 * r_star_au) ** 2 * mean_focused_speed
    assert cp.collision_time_yr(n, sigma_kms, m, r_star_au) == pytest.approx(1.0 / rate, rel=1e-7)


# --- Scaling laws ------------------------------------------------------------------------------


def test_relaxation_time_scales_as_r_to_three_halves():
    # t_rh ∝ r_h^(3/2) at fixed N and m (Spitzer 1987 formula): exact to 1e-12
    t = cp.relaxation_time_yr(1e6, 1.0, np.array([100.0, 400.0]))
    assert t[1] / t[0] == pytest.approx(8.0, rel=1e-12)


def test_mean_density_scales_as_r_to_minus_three():
    # rho = 3 M / (4 pi r^3): exact to 1e-12
    rho = cp.mean_density(4e6, np.array([120.0, 1200.0]))
    assert rho[0] / rho[1] == pytest.approx(1000.0, rel=1e-12)


def test_escape_velocity_scales_as_r_to_minus_one_half_and_mass_to_one_half():
    # v_esc = sqrt(2 G M / r): exact to 1e-12
    v = cp.escape_velocity_kms(np.array([1.0, 4.0, 1.0]), np.array([1.0, 1.0, 9.0]))
    assert v[1] / v[0] == pytest.approx(2.0, rel=1e-12)
    assert v[0] / v[2] == pytest.approx(3.0, rel=1e-12)


def test_cluster_lifetimes_broadcast_over_samples():
    # arrays give the same numbers as scalars (exact to 1e-12)
    arr = cp.cluster_lifetimes(np.array([4e6, 4e6]), np.array([120.0, 1000.0]))
    one = cp.compactness(4e6, 1000.0).lifetimes
    for name, d in one.items():
        assert arr[name]["t_max_yr"][1] == pytest.approx(d["t_max_yr"], rel=1e-12)


# --- Report ------------------------------------------------------------------------------------


def test_to_dict_units_parse_and_convert_with_astropy():
    # astropy unit strings: values convert consistently (IAU au; astropy solMass, pc)
    d = json.loads(json.dumps(cp.compactness(4e6, 120.0).to_dict()))
    rs = d["schwarzschild_radius"]
    rs_km = (rs["value"] * u.Unit(rs["unit"])).to_value(u.km)
    assert rs_km == pytest.approx(d["schwarzschild_radius_km"]["value"], rel=1e-12)
    rho = d["mean_density_lower_limit"]
    rho_si = (rho["value"] * u.Unit(rho["unit"])).to_value(u.kg / u.m**3)
    expected = (4e6 * const.M_sun / (4.0 / 3.0 * math.pi * (120.0 * u.au) ** 3)).to_value(
        u.kg / u.m**3
    )
    assert rho_si == pytest.approx(expected, rel=1e-9)
    assert d["lifetimes"]["neutron stars"]["excluded"] is True


def test_paragraph_quotes_the_worked_numbers():
    # shared/physics.md §8 [computed]: r/R_s = 1520 and density 4.85e15 Msun/pc^3 (1%)
    text = cp.compactness_paragraph(cp.compactness(4e6, 120.0))
    ratio = float(re.search(r"which is ([0-9.e+]+) Schwarzschild radii", text).group(1))
    rho = float(re.search(r"at least ([0-9.e+]+) Msun/pc\^3", text).group(1))
    assert ratio == pytest.approx(1520.0, rel=0.01)
    assert rho == pytest.approx(4.85e15, rel=0.01)
    assert text.count("0.04 Msun") == 1 and text.count("boson stars") == 1


def test_samples_percentiles_match_normal_quantiles():
    # scipy normal quantiles: 16/84 percentiles of N(mu, s) draws; sampling tolerance 2% of s
    rng = np.random.default_rng(20240501)
    mu, s = 4.0e6, 2.0e5
    mass = rng.normal(mu, s, 40000)
    summary = cp.compactness_from_samples(mass, np.full(mass.size, 120.0))
    assert summary["mass"]["p16"] == pytest.approx(mu + s * stats.norm.ppf(0.16), abs=0.02 * s)
    assert summary["mass"]["p84"] == pytest.approx(mu + s * stats.norm.ppf(0.84), abs=0.02 * s)
    # R_s is linear in M, so its percentiles are R_s of the mass percentiles (astropy GM_sun)
    rs_per_msun = (2 * const.GM_sun / const.c**2).to_value(u.au)
    rs = summary["schwarzschild_radius"]
    assert rs["median"] == pytest.approx(rs_per_msun * summary["mass"]["median"], rel=1e-9)
    assert rs["p84"] == pytest.approx(rs_per_msun * summary["mass"]["p84"], rel=1e-9)
