"""The Fisher estimate behind the "detectable" column (deepwell.results.detectability).

Checks: (1) against a linear-Gaussian model, where the linearised refit is exact
and the chi-square left after a least-squares refit is computed independently
with scipy.linalg.lstsq; (2) by injection: noise-free invented data with an
effect, fitted with and without it, give a chi-square difference equal to the
expected one within 5% (what second-order terms of the refit leave; common
practice for a linearised estimate); (3) a star whose pericentre lies outside
its data is not called detectable in redshift by the Fisher number although its
redshift at pericentre exceeds its velocity error (the old rule's mistake).
"""

import textwrap

import numpy as np
import pytest
from scipy import linalg

from deepwell.fit.joint import fit_joint
from deepwell.model.quality import DETECTABLE_DCHI2
from deepwell.results.detectability import effect_dchi2, projected_dchi2
from deepwell.results.effect_sizes import star_effect_sizes
from deepwell.tables.effects import effects_from_args
from deepwell.tables.observations import read_observations
from deepwell.tables.settings import Settings
from deepwell.tools.simulate import write_scenario


def test_projected_chi2_equals_the_exact_refit_of_a_linear_model():
    # Linear model y = A theta (+ s with the effect): noise-free data with the effect,
    # refitted without it, leave chi2 = min |A theta0 + s - A theta|^2, the exact
    # least-squares residual (scipy.linalg.lstsq, an independent solver). A column
    # that is an exact copy of another (a degenerate parameter) absorbs nothing more.
    rng = np.random.default_rng(5)
    a = rng.standard_normal((200, 6))
    a = np.column_stack([a, a[:, 2]])
    theta0 = rng.standard_normal(7)
    s = 0.3 * np.sin(np.linspace(0, 9, 200)) + 0.05 * rng.standard_normal(200)
    y = a @ theta0 + s
    sol, *_ = linalg.lstsq(a, y, cond=1e-10)  # rank 6: drop the null direction
    exact = float(np.sum((y - a @ sol) ** 2))
    assert projected_dchi2(a, s) == pytest.approx(exact, rel=1e-9)
    # a signal inside the span is fully absorbed, one orthogonal to it not at all
    assert projected_dchi2(a, a @ theta0) == pytest.approx(0.0, abs=1e-9)
    q, _ = np.linalg.qr(np.column_stack([a[:, :6], s]))
    perp = q[:, -1]
    assert projected_dchi2(a, 4.0 * perp) == pytest.approx(16.0, rel=1e-9)


# An invented one-star nucleus (no real object behind these numbers).  The errors
# are stated honestly but the scatter is 1e-6 of them: noise-free data in effect.
ONE_STAR = textwrap.dedent("""
    name = "one-star test nucleus"
    story = "invented for the detectability tests"
    seed = 3
    reference_epoch = 2000.0
    [truth]
    mass = 4.0e6
    distance = 8000.0
    [effects]
    romer = {romer}
    redshift = {redshift}
    precession = 0.0
    [stars.d-1]
    a = 125.0
    e = 0.88
    inc = 134.0
    node = 228.0
    peri_arg = 66.0
    t_peri = {t_peri}
    [[campaigns]]
    dataset = "imager"
    kind = "positions"
    start = {start}
    end = {end}
    cadence = 2.0
    error = [0.4, 0.6]
    [[campaigns]]
    dataset = "spectra"
    kind = "velocities"
    start = {start}
    end = {end}
    cadence = 2.0
    error = [{rv_error}, {rv_error}]
    [systematics.imager]
    error_factor = {factor}
    [systematics.spectra]
    error_factor = {factor}
""")


def _scenario(tmp_path, name, **kw):
    args = dict(romer="false", redshift="0.0", t_peri=2010.0, start=2000.0, end=2022.0,
                rv_error=15.0, factor=1e-6) | kw
    (tmp_path / f"{name}.toml").write_text(ONE_STAR.format(**args))
    return read_observations(write_scenario(tmp_path / f"{name}.toml", tmp_path / name))


def _settings(romer, redshift):
    return effects_from_args(Settings(), newtonian=True, romer=romer, redshift=redshift)


@pytest.mark.parametrize(("effect", "with_it", "without"), [
    ("romer", ("true", "0.0"), ((True, "off"), (False, "off"))),
    ("redshift", ("false", "1.0"), ((False, "exact"), (False, "off"))),
])
def test_expected_chi2_matches_the_refit_of_noise_free_injected_data(tmp_path, effect,
                                                                     with_it, without):
    romer, redshift = with_it
    obs = _scenario(tmp_path, effect, romer=romer, redshift=redshift, rv_error=1.0)
    on = fit_joint(obs, _settings(*without[0]))
    off = fit_joint(obs, _settings(*without[1]))
    assert on.chi2 < 1e-3  # the model with the effect fits noise-free data exactly
    expected = effect_dchi2(on)["d-1"][f"dchi2_{effect}"]
    refit = off.chi2 - on.chi2
    assert expected > 10.0  # a clear effect, where the check means something
    assert refit == pytest.approx(expected, rel=0.05)


def test_redshift_of_an_unobserved_pericentre_is_not_called_detectable(tmp_path):
    # Pericentre in 2010, data 2012.5-2019 only (the apocentre half of a ~14-yr orbit),
    # honest noise. The redshift at pericentre (~200 km/s for this orbit, physics.md
    # section 5 order of magnitude) dwarfs the 15 km/s errors, but the data never see it.
    obs = _scenario(tmp_path, "apo", redshift="1.0", start=2012.5, end=2019.0, factor=1.0)
    fit = fit_joint(obs, _settings(False, "exact"))
    size = star_effect_sizes(fit)["d-1"]
    assert size["redshift_excess_kms"] > 5 * size["median_velocity_error_kms"]
    assert size["dchi2_redshift"] < DETECTABLE_DCHI2
    assert not size["detectable_redshift"]
