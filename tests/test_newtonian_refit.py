"""The refitted Newtonian comparison model of the effect figures (results/newtonian.py).

Injection-recovery tests on the invented ``small_scenario`` of conftest.py (and a copy
simulated without relativistic effects).  The checks are physical: the same orbit
described by osculating elements at two different epochs must give the same drawn
signal; the refit's Δχ² must equal that of the model ladder's Newtonian-against-full
comparison; on Newtonian data the drawn residuals must be consistent with zero.
"""

import numpy as np
import pytest
from scipy.optimize import brentq

from deepwell.core.constants import KMS_PER_AU_PER_YR
from deepwell.fit.joint import fit_joint
from deepwell.fit.ladder import fit_ladder
from deepwell.fit.least_squares import bounds, minimise
from deepwell.fit.result import assemble_result
from deepwell.model.epochs import model_at_epochs, star_vector
from deepwell.model.kernels.orbit import elements_from_state, gm_angular
from deepwell.model.kernels.post_newtonian import pn_track
from deepwell.model.layout import internal_star_values
from deepwell.report.figures.effects import precession_curves, precession_figure, redshift_curves
from deepwell.results import analyse
from deepwell.results.effect_sizes import star_effect_sizes
from deepwell.results.newtonian import newtonian_refit, relativistic_effects
from deepwell.tables.effects import effects_from_args
from deepwell.tables.observations import read_observations
from deepwell.tables.settings import Settings
from deepwell.tools.simulate import write_scenario
from tests.conftest import SMALL_SCENARIO

STAR = "t-1"  # e = 0.86, 13.5-yr orbit: the largest precession of the scenario


@pytest.fixture(scope="module")
def obs(small_scenario):
    return read_observations(small_scenario)


@pytest.fixture(scope="module")
def fit(obs):
    return fit_joint(obs, Settings())


def _apocentre_elements(result, star, orbits):
    """Internal vector of ``result`` with ``star``'s elements osculating ``orbits`` apocentres
    away from the fitted osculating epoch: the same integrated orbit, another osculating epoch.

    The integrated track's apocentre (where r . v = 0) is found by root finding; its state
    converted to Keplerian elements (two-body relations, Murray & Dermott 1999, sect. 2.8)
    puts the osculating apocentre there, so t_peri + P/2 is the new osculating epoch.
    """
    m, vec = result.model, result.internal
    k = m.stars.index(star)
    el = {q: float(v[k]) for q, v in m.layout.elements(vec).items()}
    mass, dist = float(m.layout.shared(vec, "mass")), float(m.layout.shared(vec, "distance"))
    t_ref = el["t_peri"] + 0.5 * el["period"]

    def track(t):
        return pn_track(np.atleast_1d(t), el["a"] * 1e-3 * dist, el["e"], el["inc"],
                        el["node"], el["peri_arg"], el["t_peri"], mass, t_ref,
                        f_sp=float(m.layout.shared(vec, "f_sp")),
                        steps_per_orbit=m.effects.steps_per_orbit)

    def r_dot_v(t):
        tr = track(t)
        return float(tr.east[0] * tr.v_east[0] + tr.north[0] * tr.v_north[0]
                     + tr.z[0] * tr.v_z[0])

    guess = t_ref + orbits * el["period"]
    t_new = brentq(r_dot_v, guess - 0.1 * el["period"], guess + 0.1 * el["period"], xtol=1e-12)
    tr = track(t_new)
    per_au = 1e3 / dist  # mas per au
    state = per_au * np.array([tr.east[0], tr.north[0], tr.z[0],
                               *(np.array([tr.v_east[0], tr.v_north[0], tr.v_z[0]])
                                 / KMS_PER_AU_PER_YR)])
    e2 = elements_from_state(state, gm_angular(mass, dist), t_new)
    period = float(e2["period"])
    out = vec.copy()
    i0 = m.layout.n_shared + 6 * k
    out[i0:i0 + 6] = internal_star_values(
        period, float(e2["ecc"]), np.arccos(float(e2["cos_inc"])), float(e2["node"]),
        np.arctan2(float(e2["e_sin"]), float(e2["e_cos"])), t_new - 0.5 * period)
    return out, t_ref, t_new


@pytest.fixture(scope="module")
def other_epoch_fit(fit):
    """The same data fitted again, started from t-1's elements osculating one orbit earlier."""
    vec, t_old, t_new = _apocentre_elements(fit, STAR, -1)
    m = fit.model
    lo, hi, _ = bounds(m, fit.settings)
    best, sol = minimise(m, np.clip(vec, lo, hi), fit.free, lo, hi)
    assert sol.success
    return assemble_result(m, best, fit.free, fit.settings, fit.observations), t_old, t_new


def _same_elements_signal(result, star, t):
    """The old comparison: full model minus a Keplerian orbit with the same elements."""
    m, vec = result.model, result.internal
    full = model_at_epochs(m, star, t_pos=t, t_vel=t).predict(star_vector(m, vec, star))
    kep = model_at_epochs(m, star, t_pos=t, t_vel=t, newtonian=True).predict(
        star_vector(m, vec, star, newtonian=True))
    return np.stack([full.ra - kep.ra, full.dec - kep.dec]), full.vr - kep.vr


def test_drawn_signal_does_not_depend_on_the_osculating_epoch(fit, other_epoch_fit):
    """One orbit, osculating elements at two apocentres 13.5 yr apart (physics.md sect. 6:
    the fitted elements of an integrated star are osculating at a stated epoch): both fits
    predict the same data, so the relativistic model minus the refitted Newtonian model
    must agree; the old same-elements comparison differs (by about the sky precession of
    one orbit, ~0.3 mas, and ~20 km/s at pericentre)."""
    other, t_old, t_new = other_epoch_fit
    assert abs(t_new - t_old) > 13.0  # yr: a different osculating epoch indeed
    assert other.chi2 == pytest.approx(fit.chi2, abs=1e-3)  # the same minimum
    sizes = star_effect_sizes(fit)[STAR]
    n_a, n_b = newtonian_refit(fit), newtonian_refit(other)
    # Tolerances: a thousandth of the smallest position error (0.6 mas) and of the
    # velocity error (12 km/s), far above the optimiser's convergence (common practice).
    pa, pb = precession_curves(fit, STAR, n_a), precession_curves(other, STAR, n_b)
    np.testing.assert_allclose(pb["model"], pa["model"], rtol=0, atol=6e-4)
    np.testing.assert_allclose(pb["resid_data"], pa["resid_data"], rtol=0, atol=6e-4)
    ra, rb = redshift_curves(fit, STAR, n_a, sizes), redshift_curves(other, STAR, n_b, sizes)
    np.testing.assert_allclose(rb["model"], ra["model"], rtol=0, atol=0.012)
    # ... while the same-elements comparison of the old figures does depend on the epoch
    old_a, old_va = _same_elements_signal(fit, STAR, ra["t"])
    old_b, old_vb = _same_elements_signal(other, STAR, ra["t"])
    assert np.abs(old_a - old_b).max() > 0.1  # mas
    assert np.abs(old_va - old_vb).max() > 5.0  # km/s


def test_refit_delta_chi2_equals_the_ladder_comparison(obs, fit):
    """Δχ² of the refit = χ²(ladder's Newtonian rung) - χ²(ladder's full GR rung, reached
    through the Rømer and redshift rungs). Tolerance 0.01, a hundredth of the Δχ² of a
    one-sigma effect (common practice)."""
    refit = newtonian_refit(fit)
    assert refit.switched_off == ("Rømer delay", "redshift (exact)", "1PN precession")
    ladder = {f.rung.key: f.result for f in fit_ladder(obs, Settings())}
    assert ladder["precession"].model.effects.describe() == fit.model.effects.describe()
    expected = ladder["newtonian"].chi2 - ladder["precession"].chi2
    assert refit.delta_chi2 == pytest.approx(expected, abs=0.01)
    assert refit.fewer_parameters == ladder["precession"].n_free - ladder["newtonian"].n_free
    assert refit.converged and refit.delta_chi2 > 0


@pytest.fixture(scope="module")
def newtonian_data(tmp_path_factory):
    """The small scenario simulated with every relativistic effect off (invented data)."""
    root = tmp_path_factory.mktemp("newtonian-truth")
    text = SMALL_SCENARIO.format(seed=5150).replace(
        "[truth]", "[effects]\nromer = false\nredshift = 0.0\nprecession = 0.0\n\n[truth]", 1)
    (root / "d.toml").write_text(text)
    return read_observations(write_scenario(root / "d.toml", root / "data"))


def test_residuals_drawn_on_newtonian_data_are_consistent_with_zero(newtonian_data):
    """Data without relativity, fitted with it (strengths held at 1): the drawn points
    (data minus the refitted Newtonian model) have chi-square about zero within 3 sigma of
    its expectation, sqrt(2 nu) for nu degrees of freedom (chi-square distribution,
    common practice); nu counts the points minus their share of the fitted parameters."""
    rel = fit_joint(newtonian_data, Settings())
    refit = newtonian_refit(rel)
    sizes = star_effect_sizes(rel)
    chi2, n_points = 0.0, 0
    for star in rel.stars:
        p = precession_curves(rel, star, refit)
        assert np.all(rel.model.pos.corr == 0.0)  # the simulation has uncorrelated errors
        chi2 += float(np.sum((p["resid_data"] / p["err_data"]) ** 2))
        n_points += p["resid_data"].size
        v = redshift_curves(rel, star, refit, sizes[star])
        chi2 += float(np.sum((v["resid_data"] / v["err_data"]) ** 2))
        n_points += v["resid_data"].size
    nu = n_points - refit.n_free_newtonian * n_points / refit.result.n_data
    assert n_points > 150
    assert abs(chi2 - nu) < 3.0 * np.sqrt(2.0 * nu)


def test_analyse_carries_the_refit_only_for_relativistic_fits(obs, fit):
    newt_fit = fit_joint(obs, effects_from_args(Settings(), newtonian=True))
    assert relativistic_effects(newt_fit.model.effects) == ()
    assert newtonian_refit(newt_fit) is None
    refit = analyse(fit).newtonian
    # chi-square of the refit recomputed from its own whitened residuals (definition)
    direct = float(np.sum(refit.result.model.data_residuals(refit.result.internal) ** 2))
    assert refit.chi2_newtonian == pytest.approx(direct, rel=1e-10)
    # the stars' parts of the delta chi-square add up to it (each datum belongs to one star)
    assert sum(refit.star_delta_chi2.values()) == pytest.approx(refit.delta_chi2, rel=1e-9)
    assert refit.result.model.effects.describe() == newt_fit.model.effects.describe()
    # started at the relativistic solution, the refit reaches the minimum that a Newtonian
    # fit from its own start search finds (0.01: a hundredth of one unit of chi-square)
    assert refit.chi2_newtonian == pytest.approx(newt_fit.chi2, abs=0.01)


FRINGE = """
[[campaigns]]
dataset = "fringe"
kind = "positions"
relative_to = "mass"
start = 2016.0
end = 2022.0
cadence = 1.0
error = [0.04, 0.06]
"""


@pytest.fixture(scope="module")
def mixed_fit(tmp_path_factory):
    """The small scenario plus 0.05-mas positions measured from the mass (invented data)."""
    root = tmp_path_factory.mktemp("fringe")
    (root / "d.toml").write_text(SMALL_SCENARIO.format(seed=6161) + FRINGE)
    return fit_joint(read_observations(write_scenario(root / "d.toml", root / "data")),
                     Settings())


def test_precession_residuals_of_errors_ten_times_apart_never_share_an_axis(mixed_fit):
    """0.05-mas (fringe) and 0.6-0.9-mas (imager) positions: one pair of panels each, since
    classes more than a factor 10 apart in median error get their own axes (common
    practice: one residual panel per instrument class); each panel keeps its own frame
    convention and its y range holds its own data with their error bars."""
    refit = newtonian_refit(mixed_fit)
    d = precession_curves(mixed_fit, STAR, refit)
    assert [p["datasets"] for p in d["panels"]] == [["fringe"], ["imager"]]
    median = {ds: float(np.median(np.minimum(*d["err_data"])[d["dataset"] == ds]))
              for ds in ("fringe", "imager")}
    assert median["imager"] > 10.0 * median["fringe"]  # numpy median, independent of marks
    fringe, imager = d["panels"]
    assert (fringe["relative_to"], imager["relative_to"]) == ("mass", "frame")
    assert np.array_equal(d["frame_row"][fringe["rows"]], np.zeros(fringe["rows"].sum(), bool))
    np.testing.assert_allclose(imager["model"] - fringe["model"], d["frame_shift"], atol=1e-12)
    for p in d["panels"]:
        r = p["rows"]
        for j in (0, 1):
            lo, hi = p["ylim"][j]
            assert lo <= np.min(d["resid_data"][j][r] - d["err_data"][j][r])
            assert hi >= np.max(d["resid_data"][j][r] + d["err_data"][j][r])
    # the fringe axes span less than a tenth of the imager axes: the precise data stay visible
    for j in (0, 1):
        assert np.ptp(fringe["ylim"][j]) < 0.1 * np.ptp(imager["ylim"][j])
    fig = precession_figure(STAR, d)
    axes = [ax for ax in fig.axes if ax.containers]
    assert len(axes) == 4
    shown = [{c.get_label().removeprefix("data: ") for c in ax.containers} for ax in axes]
    assert shown == [{"fringe"}, {"fringe"}, {"imager"}, {"imager"}]
