"""Injection-recovery of the relativistic pieces of the joint model (invented data only).

The data are made by the simulator, which evaluates the effects straight from the
relativity kernels (not through the fitter's model).  The injected values are
those of general relativity, f = f_sp = 1 (Do et al. 2019, Science 365, 664;
GRAVITY Collaboration 2020, A&A 636, L5, for the meaning of f and f_sp).
"""

import math
from pathlib import Path

import numpy as np
import pytest

from deepwell.fit.joint import fit_joint
from deepwell.model.kernels.relativity import plummer_precession_per_orbit_rad
from deepwell.results.effect_sizes import (
    extended_mass_limits,
    star_effect_sizes,
    truncated_gaussian_upper_limit,
)
from deepwell.tables.effects import effects_from_args
from deepwell.tables.observations import read_observations
from deepwell.tables.settings import parse_settings
from deepwell.tools.simulate import write_scenario

# An invented nucleus: one tight star (16-yr, e = 0.88 around 4e6 Msun at 8 kpc)
# with 0.05-mas interferometry around one pericentre, 0.5-mas imaging for 30 yr and
# 10 km/s spectra; and one wider star.  No real object is behind these numbers.
TIGHT = """
name = "tight test nucleus"
story = "invented for relativistic injection-recovery tests"
seed = 97
reference_epoch = 2000.0

[truth]
mass = 4.0e6
distance = 8000.0
x0 = 0.3
y0 = -0.2
vx0 = 0.02
vy0 = 0.01
vz0 = 5.0

[effects]
romer = true
redshift = 1.0
precession = 1.0
{plummer}

[stars.r-1]
a = 126.0
e = 0.88
inc = 134.0
node = 228.0
peri_arg = 66.0
t_peri = 2018.4

[stars.r-2]
a = 180.0
e = 0.55
inc = 60.0
node = 100.0
peri_arg = 300.0
t_peri = 2009.0

[[campaigns]]
dataset = "imager"
kind = "positions"
start = 1995.0
end = 2025.0
cadence = 1.0
error = 0.5

[[campaigns]]
dataset = "interferometer"
kind = "positions"
relative_to = "mass"
start = 2016.5
end = 2020.5
cadence = 6.0
error = 0.05
stars = ["r-1"]

[[campaigns]]
dataset = "spectra"
kind = "velocities"
start = 2000.0
end = 2025.0
cadence = 2.0
error = 10.0

[[campaigns]]
dataset = "spectra-peri"
kind = "velocities"
start = 2017.8
end = 2019.0
cadence = 12.0
error = 10.0
stars = ["r-1"]
"""

MASS, B_AU, R_REF_AU, M_PLUMMER = 4.0e6, 1000.0, 2000.0, 4.0e4
A_MAS, ECC, DIST = 126.0, 0.88, 8000.0


def _data(tmp_path_factory, name, plummer=""):
    root = tmp_path_factory.mktemp(name)
    (root / "description.toml").write_text(TIGHT.format(plummer=plummer))
    return read_observations(write_scenario(root / "description.toml", root / "data"))


@pytest.fixture(scope="module")
def relativistic(tmp_path_factory):
    return _data(tmp_path_factory, "gr")


@pytest.fixture(scope="module")
def free_fit(relativistic):
    settings = parse_settings({"shared": {"f": {"fixed": False}, "f_sp": {"fixed": False}}})
    return fit_joint(relativistic, settings)


def test_redshift_and_precession_factors_recovered_within_3_sigma(free_fit):
    # injected general relativity: f = 1, f_sp = 1
    for name in ("f", "f_sp"):
        value, sigma = free_fit.value(name), free_fit.sigma(name)
        assert 0.0 < sigma < 0.5
        assert abs(value - 1.0) < 3.0 * sigma, (name, value, sigma)
    # a correct model: chi-square within 4 sd of its dof (common practice)
    assert abs(free_fit.chi2 - free_fit.dof) < 4.0 * math.sqrt(2.0 * free_fit.dof)


def test_newtonian_model_of_relativistic_data_raises_chi2_by_more_than_25(
        relativistic, free_fit):
    newton = fit_joint(relativistic, effects_from_args(parse_settings({}), newtonian=True))
    assert newton.model.layout.extra == ()
    assert not newton.model.effects.any_on
    # 25 in chi-square is a 5-sigma preference for one extra parameter (common practice)
    assert newton.chi2 - free_fit.chi2 > 25.0
    assert any("none (Newtonian" in n for n in newton.notes)
    assert any("1PN precession" in n for n in free_fit.notes)


def test_effect_sizes_of_the_tight_star(free_fit):
    sizes = star_effect_sizes(free_fit)["r-1"]
    # physics.md sect. 5 and 6 [computed]: ~190 km/s redshift at pericentre and 11.25'
    # per orbit for a 16-yr, e = 0.88 orbit around 4e6 Msun; the fitted orbit is within
    # a percent of it
    assert sizes["redshift_excess_kms"] == pytest.approx(190.0, rel=0.05)
    assert sizes["precession_arcmin"] == pytest.approx(11.25, rel=0.03)
    # Romer range: 2 a sin(i) sqrt(sin^2 w + (1 - e^2) cos^2 w) / c (physics.md sect. 4),
    # with the light time for 1 au 499.004784 s (IAU)
    a_au = A_MAS * 1e-3 * DIST
    w, i = math.radians(66.0), math.radians(134.0)
    z_amp = a_au * math.sin(i) * math.hypot(math.sin(w), math.sqrt(1 - ECC**2) * math.cos(w))
    assert sizes["romer_range_days"] == pytest.approx(2 * z_amp * 499.004784 / 86400, rel=0.02)
    assert sizes["detectable"] and sizes["integrated"]
    assert sizes["osculating_epoch"] == pytest.approx(
        free_fit.value("r-1:t_peri") + 0.5 * free_fit.value("r-1:period"), abs=1e-9)
    # the observed pericentre lies within a day of the osculating one (1PN shift of order
    # GM/(c^2 a) of the period, physics.md sect. 6), and the integrated period within 1e-3
    assert abs(sizes["pericentre_emitted"] - free_fit.value("r-1:t_peri")) < 1.0 / 365.25
    assert sizes["integrated_period"] == pytest.approx(free_fit.value("r-1:period"), rel=1e-3)


def test_integrated_period_without_1pn_terms_is_keplers(relativistic):
    # f_sp held at 0: the integrated orbit is Keplerian, so its anomalistic period must be
    # Kepler's P = 2 pi sqrt(a^3/GM) with GM_sun = 1.3271244e20 m^3/s^2 (IAU 2015 B3),
    # au = 149597870700 m (IAU 2012 B2), Julian year 31557600 s
    settings = parse_settings({"shared": {"f_sp": {"value": 0.0}},
                               "effects": {"precession_stars": "all"}})
    res = fit_joint(relativistic, settings)
    sizes = star_effect_sizes(res)
    for star in res.stars:
        a_m = res.value(f"{star}:a") * 1e-3 * res.value("distance") * 149597870700.0
        period = 2 * math.pi * math.sqrt(a_m**3 / (1.3271244e20 * res.value("mass")))
        assert sizes[star]["integrated_period"] == pytest.approx(period / 31557600.0, abs=2e-6)


def test_truncated_gaussian_upper_limit_matches_closed_form():
    # For an estimate at 0 the posterior is half-normal: U_p = sigma Phi^-1((1 + p)/2)
    # (Feldman & Cousins 1998, PRD 57, 3873, sect. II, the Bayesian bounded case);
    # Phi^-1(0.975) = 1.959964, Phi^-1(0.9985) = 2.967738 (standard normal tables)
    assert truncated_gaussian_upper_limit(0.0, 2.0, 0.95) == pytest.approx(2 * 1.959964, 1e-5)
    assert truncated_gaussian_upper_limit(0.0, 2.0, 0.997) == pytest.approx(2 * 2.967738, 1e-5)


def _plummer_inside(m_total, b, r):
    # Plummer 1911, MNRAS 71, 460: M(<r) = M r^3 / (r^2 + b^2)^(3/2)
    return m_total * r**3 / (r * r + b * b) ** 1.5


def test_injected_plummer_mass_is_detected(tmp_path_factory):
    obs = _data(tmp_path_factory, "plummer",
                f"plummer_mass = {M_PLUMMER}\nplummer_scale = {B_AU}")
    settings = parse_settings({"effects": {"reference_radius": R_REF_AU}})
    (row,) = extended_mass_limits(obs, settings, [B_AU])
    truth = _plummer_inside(M_PLUMMER, B_AU, R_REF_AU) / MASS
    assert row["detected"] and row["lower_997_fraction"] > 0.0
    assert abs(row["ext_fraction"] - truth) < 3.0 * row["ext_fraction_sigma"]
    assert row["upper_997_fraction"] > truth


def test_limit_without_extended_mass_is_set_by_the_data_precision(relativistic):
    settings = parse_settings({"effects": {"reference_radius": R_REF_AU}})
    (row,) = extended_mass_limits(relativistic, settings, [B_AU])
    # Expected precision from the data (common practice, a Fisher-type estimate): the
    # per-orbit pericentre shift of the tight star, a |d omega/d fraction| (first-order
    # Gauss equation, physics.md sect. 7), measured by its 30 yearly 0.5-mas images
    # (the interferometry covers one pericentre only): sigma_est = 0.5/sqrt(30)/(a K).
    total_per_fraction = MASS / _plummer_inside(1.0, B_AU, R_REF_AU)
    k = abs(float(plummer_precession_per_orbit_rad(total_per_fraction, B_AU, A_MAS * 1e-3 * DIST,
                                                   ECC, MASS)))
    sigma_est = 0.5 / math.sqrt(30) / (A_MAS * k)
    assert row["ext_fraction_sigma"] == pytest.approx(sigma_est, rel=0.5)
    # an estimate within 2 sigma of zero gives a 99.7% limit below 5 sigma
    assert row["upper_997_fraction"] < 5.0 * sigma_est
    assert not row["detected"]
    assert row["upper_95_fraction"] < row["upper_997_fraction"]
    assert row["upper_997_msun"] == pytest.approx(row["upper_997_fraction"] * MASS, rel=0.01)


def test_keplerian_model_without_effects_is_unchanged(relativistic):
    # With every effect off the model is the plain Keplerian one (physics.md sect. 3):
    # no extra parameters and the same predictions as keplerian_track + frame terms.
    from deepwell.fit.joint import build_model
    from deepwell.model.kernels.orbit import keplerian_track

    settings = effects_from_args(parse_settings({}), newtonian=True)
    model = build_model(relativistic, settings)
    assert model.layout.n_shared == 7
    vec = np.array([MASS, DIST, 0, 0, 0, 0, 5.0, 16.0, 0.5, 0.6, -0.3, 1.0, 2018.4,
                    27.0, 0.2, 0.3, 0.4, 2.0, 2009.0])
    pred = model.predict(vec)
    el = model.layout.elements(vec)
    k = model.pos.star
    tr = keplerian_track(model.pos.t, el["a"][k], el["e"][k], el["inc"][k], el["node"][k],
                         el["peri_arg"][k], el["t_peri"][k], el["period"][k], DIST)
    assert np.max(np.abs(pred.ra - tr.east)) < 1e-12
    assert Path  # noqa: B018 (keeps the import list stable)
