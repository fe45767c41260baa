"""Injection-recovery tests of the joint fit (invented data only)."""

import json

import numpy as np
import pytest
from scipy import stats

from deepwell.core.parameters import SHARED
from deepwell.fit.joint import fit_joint
from deepwell.fit.least_squares import bounds, covariance, minimise
from deepwell.model.layout import internal_star_values
from deepwell.tables.observations import read_observations
from deepwell.tables.settings import Settings, parse_settings


def truth_vector(model, folder):
    """Internal vector of the simulated truth (the independent reference)."""
    truth = json.loads((folder / "truth.json").read_text())
    vec = np.zeros(model.layout.size)
    for i, name in enumerate(SHARED):
        vec[i] = truth["shared"][name]
    for k, star in enumerate(model.stars):
        el = truth["stars"][star]
        i0 = model.layout.n_shared + 6 * k
        vec[i0:i0 + 6] = internal_star_values(
            el["period"], el["e"], np.radians(el["inc"]), np.radians(el["node"]),
            np.radians(el["peri_arg"]), el["t_peri"])
    return vec


@pytest.fixture(scope="module")
def small_fit(small_scenario):
    obs = read_observations(small_scenario)
    return fit_joint(obs, Settings())


def test_automatic_start_reaches_the_chi2_of_a_fit_started_at_the_truth(small_fit,
                                                                         small_scenario):
    model = small_fit.model
    lo, hi, free = bounds(model, Settings())
    vec, _ = minimise(model, truth_vector(model, small_scenario), free, lo, hi)
    # same minimum within 0.05 in chi-square (a fraction of the 1-sigma change of 1)
    assert small_fit.chi2 <= model.chi2(vec) + 0.05


def test_shared_parameters_recovered_within_joint_997_region(small_fit, small_scenario):
    truth = truth_vector(small_fit.model, small_scenario)
    n = len(SHARED)
    diff = small_fit.values[:n] - truth[:n]
    maha = diff @ np.linalg.solve(small_fit.cov[:n, :n], diff)
    # one joint test: Mahalanobis distance against the chi-square 99.7% quantile, 7 dof
    assert maha < stats.chi2.ppf(0.997, n)


def test_reduced_chi2_of_a_correct_model_is_near_one(small_fit):
    # chi-square of a correct model: mean dof, sd sqrt(2 dof); 4 sd band (common practice)
    dof = small_fit.dof
    assert abs(small_fit.chi2 - dof) < 4 * np.sqrt(2 * dof)


def test_mass_distance_degeneracy_exponent(small_fit):
    # For astrometry plus velocities the mass scales roughly as distance**alpha with
    # alpha between 2 and 3 (a**3/P**2 with a ~ distance: alpha = 3 for pure astrometry,
    # lower when velocities pin the distance) -- common practice.
    assert 1.0 < small_fit.mass_distance_exponent < 3.2
    assert small_fit.mass_distance_correlation > 0.5


def test_fixed_distance_is_held_and_shrinks_the_mass_error(small_scenario, small_fit):
    obs = read_observations(small_scenario)
    settings = parse_settings({"shared": {"distance": {"value": 5200.0, "fixed": True}}})
    res = fit_joint(obs, settings)
    assert res.value("distance") == 5200.0
    assert res.sigma("distance") == 0.0
    assert res.sigma("mass") < small_fit.sigma("mass")


def test_gaussian_prior_pulls_toward_its_mean(small_scenario, small_fit):
    # A prior with sigma much smaller than the data error dominates: the posterior
    # mean of a linear-Gaussian problem is the precision-weighted mean (common practice).
    obs = read_observations(small_scenario)
    d0, s0 = small_fit.value("distance"), small_fit.sigma("distance")
    prior_mean, prior_sigma = d0 + 3 * s0, s0 / 10
    settings = parse_settings({"shared": {"distance": {
        "prior": {"mean": prior_mean, "sigma": prior_sigma}}}})
    res = fit_joint(obs, settings)
    expected = (d0 / s0**2 + prior_mean / prior_sigma**2) / (1 / s0**2 + 1 / prior_sigma**2)
    assert res.value("distance") == pytest.approx(expected, abs=0.3 * prior_sigma)


def test_covariance_matches_inverse_hessian_of_chi2(small_fit):
    # Independent route: finite-difference Hessian of chi2/2 in two parameters
    model, vec, free = small_fit.model, small_fit.internal, small_fit.free
    cov, _ = covariance(model, vec, free)
    i = 0  # mass
    h = 1e-3 * np.sqrt(cov[i, i])

    def half_chi2(v):
        r = model.residuals(v)
        return 0.5 * np.sum(r * r)

    # curvature along the mass axis with the other parameters re-minimised equals
    # 1 / var(mass) (profile likelihood, common practice)
    lo, hi, fr = bounds(model, Settings())
    fr = fr.copy()
    fr[i] = False
    prof = []
    for step in (-1, 0, 1):
        v0 = vec.copy()
        v0[i] += step * 30 * h
        v, _ = minimise(model, v0, fr, lo, hi)
        prof.append(half_chi2(v))
    curv = (prof[0] - 2 * prof[1] + prof[2]) / (30 * h) ** 2
    assert 1.0 / curv == pytest.approx(cov[i, i], rel=0.05)


def test_frame_terms_without_frame_data_are_held_and_said(tmp_path):
    from deepwell.tables.effects import effects_from_args
    from deepwell.tools.simulate import write_scenario
    from tests.conftest import SMALL_SCENARIO

    desc = tmp_path / "d.toml"
    text = SMALL_SCENARIO.format(seed=77).replace('relative_to = "frame"', 'relative_to = "mass"')
    desc.write_text(text + '\n[effects]\nromer = false\nredshift = 0.0\nprecession = 0.0\n')
    folder = write_scenario(desc, tmp_path / "data")
    res = fit_joint(read_observations(folder), effects_from_args(Settings(), newtonian=True))
    # positions measured against the mass carry no frame terms (physics.md section 3)
    for name in ("x0", "y0", "vx0", "vy0"):
        assert res.sigma(name) == 0.0
    assert any("no data constrain them: x0, y0, vx0, vy0" in n for n in res.notes)
    # the mass is still recovered: simulated 2.6e6 solMass within 4 sigma
    assert abs(res.value("mass") - 2.6e6) < 4 * res.sigma("mass")


def test_yearly_sampling_alias_is_resolved_jointly(tmp_path):
    # Short-period stars observed exactly once a year: for one star alone P and
    # P/2 fit equally well (sampling alias, common practice); the joint refit must
    # reach the chi-square of a fit started at the truth (invented injection data,
    # relativistic as the fitter's default).
    from deepwell.tools.simulate import write_scenario

    stars = {"al-1": (31.5, 0.3, 130.0, 220.0, 60.0, 2012.0),
             "al-2": (41.2, 0.2, 60.0, 140.0, 300.0, 2008.0),
             "al-3": (260.0, 0.3, 100.0, 30.0, 150.0, 2020.0)}
    text = ('name = "alias"\nstory = "invented"\nseed = 11\n[truth]\nmass = 4.0e6\n'
            "distance = 8000.0\nx0 = 0.3\ny0 = -0.2\nvx0 = 0.02\nvy0 = -0.01\nvz0 = 3.0\n")
    for name, (a, e, i, o, w, t) in stars.items():
        text += (f"[stars.{name}]\na = {a}\ne = {e}\ninc = {i}\nnode = {o}\n"
                 f"peri_arg = {w}\nt_peri = {t}\n")
    text += ('[[campaigns]]\ndataset = "img"\nkind = "positions"\nstart = 2000.0\n'
             "end = 2024.0\ncadence = 1.0\nscatter_days = 0.0\nerror = 0.5\n"
             '[[campaigns]]\ndataset = "spec"\nkind = "velocities"\nstart = 2004.0\n'
             "end = 2024.0\ncadence = 1.0\nscatter_days = 0.0\nerror = 15.0\n")
    desc = tmp_path / "d.toml"
    desc.write_text(text)
    folder = write_scenario(desc, tmp_path / "data")
    res = fit_joint(read_observations(folder), Settings())
    model = res.model
    kep = truth_vector(model.keplerian(), folder)
    n_ex = len(model.layout.extra)
    start = np.concatenate([kep[:7], [1.0] * n_ex, kep[7:]])
    lo, hi, free = bounds(model, Settings())
    vec, _ = minimise(model, start, free, lo, hi)
    assert res.chi2 <= model.chi2(vec) + 0.5


def test_start_search_on_thinned_rows_reaches_the_chi2_of_a_start_at_the_truth(tmp_path):
    # Survey-scale input: with thousands of epochs per star the start search uses a few
    # hundred spread over each arc; the joint fit on every row must still reach the
    # chi-square of a fit started at the truth (invented injection data, Newtonian).
    from deepwell.fit.joint import START_ROWS, _start_model
    from deepwell.tables.effects import effects_from_args
    from deepwell.tools.simulate import write_scenario

    stars = {"sv-1": (120.0, 0.8, 130.0, 220.0, 60.0, 2010.3),
             "sv-2": (200.0, 0.3, 40.0, 100.0, 300.0, 2005.1),
             "sv-3": (300.0, 0.6, 90.0, 10.0, 150.0, 2015.9)}
    text = ('name = "survey"\nstory = "invented"\nseed = 5\n[truth]\nmass = 4.0e6\n'
            "distance = 8000.0\nx0 = 0.5\ny0 = -0.4\nvx0 = 0.05\nvy0 = 0.03\nvz0 = 5.0\n"
            "[effects]\nromer = false\nredshift = 0.0\nprecession = 0.0\n")
    for name, (a, e, i, o, w, t) in stars.items():
        text += (f"[stars.{name}]\na = {a}\ne = {e}\ninc = {i}\nnode = {o}\n"
                 f"peri_arg = {w}\nt_peri = {t}\n")
    text += ('[[campaigns]]\ndataset = "img"\nkind = "positions"\nstart = 1995.0\n'
             "end = 2025.0\ncadence = 100.0\nerror = 0.8\n"
             '[[campaigns]]\ndataset = "spec"\nkind = "velocities"\nstart = 2000.0\n'
             "end = 2025.0\ncadence = 1.0\nerror = 10.0\n")
    desc = tmp_path / "d.toml"
    desc.write_text(text)
    folder = write_scenario(desc, tmp_path / "data")
    settings = effects_from_args(Settings(), newtonian=True)
    obs = read_observations(folder)
    res = fit_joint(obs, settings)
    model = res.model
    assert np.bincount(model.pos.star).min() > 5 * START_ROWS  # the search really is thinned
    assert np.bincount(_start_model(model).pos.star).max() <= START_ROWS
    lo, hi, free = bounds(model, settings)
    vec, _ = minimise(model, truth_vector(model, folder), free, lo, hi)
    assert res.chi2 <= model.chi2(vec) + 0.05  # the same minimum (a fraction of 1 sigma)


def test_a_frame_far_from_the_origin_is_found_and_said(small_scenario, tmp_path, small_fit):
    # Injection: the same invented data with the frame moved by (1e4, -5e3) mas. Positions
    # are differences, so the fitted orbits and mass must equal those of the original fit
    # (to 5% of the mass error: the same least-squares problem re-parametrised, common practice)
    # and x0, y0 must move by exactly the shift within 3 sigma.
    import shutil

    import pandas as pd

    far = tmp_path / "far"
    shutil.copytree(small_scenario, far)
    pos = pd.read_csv(far / "positions.csv")
    frame = pos["relative_to"] == "frame"
    pos.loc[frame, "ra"] += 1e4
    pos.loc[frame, "dec"] -= 5e3
    pos.to_csv(far / "positions.csv", index=False)
    fit = fit_joint(read_observations(far), Settings())
    assert any("far from the frame origin" in n for n in fit.notes)
    assert abs(fit.value("mass") - small_fit.value("mass")) < 0.05 * small_fit.sigma("mass")
    assert abs(fit.value("x0") - 1e4 - small_fit.value("x0")) < 3 * small_fit.sigma("x0")
    assert abs(fit.value("y0") + 5e3 - small_fit.value("y0")) < 3 * small_fit.sigma("y0")
