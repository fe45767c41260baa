"""Tests of the Bayesian evidence: the Laplace approximation, nested sampling, stated priors.

Outside values: the closed-form evidence of a linear model with Gaussian errors
and a Gaussian prior (Bishop 2006, Pattern Recognition and Machine Learning,
eq. 3.86 for an isotropic prior, and eq. 2.115 for the marginal of a linear-
Gaussian model, both from memory), evaluated independently with scipy's
multivariate normal; the change-of-variables rule for densities; and
injection-recovery on invented nuclei made by ``deepwell simulate``.
"""

import math

import numpy as np
import pytest
from scipy import stats

from deepwell.fit.evidence import (
    ModelLikelihood,
    evidence,
    laplace_evidence,
    laplace_log_evidence,
    nested_evidence,
    nested_log_evidence,
)
from deepwell.fit.joint import build_model, fit_joint
from deepwell.fit.ladder import LadderFit, Rung
from deepwell.fit.least_squares import bounds, minimise
from deepwell.fit.result import assemble_result
from deepwell.fit.stated_prior import EccentricityDisk, Gaussian, StatedPrior, stated_prior
from deepwell.results.evidence import ladder_evidence
from deepwell.tables.observations import read_observations
from deepwell.tables.settings import parse_settings
from deepwell.tools.simulate import write_scenario

NEWTONIAN = {"romer": False, "redshift": "off", "precession": False}
LINEAR = ("x0", "y0", "vx0", "vy0", "vz0")

# An invented one-star nucleus (16-yr, e = 0.88 orbit around 4e6 Msun at 8 kpc) with
# yearly 0.5-mas imaging and 10 km/s spectra, dense around one pericentre; the
# redshift factor f of the simulated data is set per test.  No real object behind it.
ONE_STAR = """
name = "one-star evidence nucleus"
story = "invented for evidence tests"
seed = 11
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
romer = false
redshift = {f}
precession = 0.0
[stars.e-1]
a = 126.0
e = 0.88
inc = 134.0
node = 228.0
peri_arg = 66.0
t_peri = 2018.4
[[campaigns]]
dataset = "imager"
kind = "positions"
start = 1995.0
end = 2025.0
cadence = 1.0
error = 0.5
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
"""


def _one_star(tmp_path_factory, f):
    root = tmp_path_factory.mktemp(f"one-star-f{f:g}")
    (root / "description.toml").write_text(ONE_STAR.format(f=f))
    return read_observations(write_scenario(root / "description.toml", root / "data"))


def _fit(obs, redshift):
    fx = dict(NEWTONIAN, redshift="exact" if redshift else "off")
    return fit_joint(obs, parse_settings({"effects": fx}))


# ------------------------------------------------ linear-Gaussian: closed form
def _polynomial_problem(seed=1):
    rng = np.random.default_rng(seed)
    x = np.linspace(0.0, 1.0, 30)
    design = np.column_stack([np.ones_like(x), x, x**2])
    sigma = 0.3
    y = design @ np.array([1.0, 0.5, -0.7]) + rng.normal(0.0, sigma, x.size)
    return design, y, sigma


def test_laplace_evidence_equals_bishop_closed_form_for_linear_gaussian():
    # Bishop 2006 eq. 3.86 (from memory), prior N(0, 1/alpha I), noise precision beta:
    # ln p(t) = M/2 ln alpha + N/2 ln beta - E(m_N) - 1/2 ln|A| - N/2 ln(2 pi),
    # A = alpha I + beta Phi^T Phi, m_N = beta A^-1 Phi^T t,
    # E(m_N) = beta/2 |t - Phi m_N|^2 + alpha/2 m_N^T m_N.
    phi, t, sigma = _polynomial_problem()
    n, m = phi.shape
    alpha, beta = 1.0 / 1.5**2, 1.0 / sigma**2
    a_mat = alpha * np.eye(m) + beta * phi.T @ phi
    m_n = beta * np.linalg.solve(a_mat, phi.T @ t)
    e_mn = 0.5 * beta * np.sum((t - phi @ m_n) ** 2) + 0.5 * alpha * m_n @ m_n
    bishop = (0.5 * m * np.log(alpha) + 0.5 * n * np.log(beta) - e_mn
              - 0.5 * np.linalg.slogdet(a_mat)[1] - 0.5 * n * np.log(2 * np.pi))
    # the same number as a marginal density (Bishop eq. 2.115): t ~ N(0, C + Phi S Phi^T)
    marginal = stats.multivariate_normal(np.zeros(n), np.eye(n) / beta
                                         + phi @ phi.T / alpha).logpdf(t)
    assert bishop == pytest.approx(marginal, abs=1e-9)
    prior = StatedPrior(("c0", "c1", "c2"),
                        tuple(Gaussian(i, 0.0, 1.5, f"c{i}: N(0, 1.5^2)") for i in range(m)))
    log_l = (-0.5 * beta * np.sum((t - phi @ m_n) ** 2)
             - n * np.log(sigma * np.sqrt(2 * np.pi)))
    laplace = laplace_log_evidence(log_l + prior.log_density(m_n), np.linalg.inv(a_mat))
    assert laplace == pytest.approx(bishop, abs=1e-8)


def test_dynesty_evidence_of_linear_gaussian_within_3_sigma_of_closed_form():
    # closed form: Bishop 2006 eq. 2.115 (from memory), via scipy's multivariate normal
    phi, t, sigma = _polynomial_problem(seed=2)
    mean0, sd0 = np.array([0.5, -1.0, 2.0]), np.array([1.0, 2.0, 1.5])
    exact = stats.multivariate_normal(phi @ mean0, sigma**2 * np.eye(len(t))
                                      + phi @ np.diag(sd0**2) @ phi.T).logpdf(t)
    prior = StatedPrior(("c0", "c1", "c2"),
                        tuple(Gaussian(i, mean0[i], sd0[i], "") for i in range(3)))

    def log_l(theta):
        r = (t - phi @ theta) / sigma
        return -0.5 * r @ r - len(t) * np.log(sigma * np.sqrt(2 * np.pi))

    run = nested_log_evidence(log_l, prior, nlive=200, rng=np.random.default_rng(5))
    assert run["finished"]
    assert 0.0 < run["log_evidence_err"] < 0.5
    assert abs(run["log_evidence"] - exact) < 3.0 * run["log_evidence_err"]


@pytest.fixture(scope="module")
def frame_only(small_scenario):
    """The small nucleus with only the five linear frame terms free, each with a
    Gaussian prior: a linear-Gaussian model inside deepwell."""
    obs = read_observations(small_scenario)
    priors = {"x0": (0.0, 2.0), "y0": (0.0, 2.0), "vx0": (0.0, 0.1), "vy0": (0.0, 0.1),
              "vz0": (0.0, 30.0)}
    settings = parse_settings({"effects": NEWTONIAN, "shared": {
        n: {"prior": {"mean": m, "sigma": s}} for n, (m, s) in priors.items()}})
    full = fit_joint(obs, settings)
    model = build_model(obs, settings)
    lo, hi, _ = bounds(model, settings)
    free = np.zeros(model.layout.size, bool)
    free[[model.layout.index(n) for n in LINEAR]] = True
    vec, _ = minimise(model, full.internal, free, lo, hi)
    return assemble_result(model, vec, free, settings, obs), priors


def test_laplace_evidence_of_the_frame_terms_equals_the_gaussian_marginal(frame_only):
    # With the orbits fixed, x0, y0, vx0, vy0, vz0 enter linearly (physics.md sect. 3):
    # ra = x0 + vx0 (t - t_ref) + east, dec = y0 + vy0 (t - t_ref) + north,
    # vr = vz0 + v_z.  The data are then Gaussian with mean A m0 and covariance
    # C + A S0 A^T (Bishop 2006 eq. 2.115, from memory), evaluated by scipy.
    res, priors = frame_only
    model = res.model
    zero = res.internal.copy()
    zero[[model.layout.index(n) for n in LINEAR]] = 0.0
    pred = model.predict(zero)
    pos, vel = model.pos, model.vel
    assert np.all(pos.corr == 0.0)
    y = np.concatenate([pos.ra - pred.ra, pos.dec - pred.dec, vel.vr - pred.vr])
    dt = pos.t - model.reference_epoch
    n_p, n_v = pos.n, vel.n
    design = np.zeros((2 * n_p + n_v, 5))
    design[:n_p, 0], design[:n_p, 2] = pos.frame, pos.frame * dt
    design[n_p:2 * n_p, 1], design[n_p:2 * n_p, 3] = pos.frame, pos.frame * dt
    design[2 * n_p:, 4] = 1.0
    m0 = np.array([priors[n][0] for n in LINEAR])
    s0 = np.array([priors[n][1] for n in LINEAR])
    noise = np.concatenate([pos.ra_err, pos.dec_err, vel.vr_err]) ** 2
    exact = stats.multivariate_normal(design @ m0, np.diag(noise)
                                      + design @ np.diag(s0**2) @ design.T).logpdf(y)
    lap = laplace_evidence(res)
    assert lap.method == "laplace" and lap.n_dim == 5 and math.isnan(lap.log_evidence_err)
    assert lap.log_evidence == pytest.approx(exact, abs=1e-8)
    assert any(line.startswith("vz0: Gaussian, mean 0, sigma 30 km / s") for line in lap.prior)


def test_nested_evidence_of_the_frame_terms_within_3_sigma_of_the_marginal(frame_only):
    # the same model through dynesty: the Laplace value is exact here (previous test)
    res, _ = frame_only
    exact = laplace_evidence(res).log_evidence
    nest = nested_evidence(res, rng=np.random.default_rng(3), nlive=150)
    assert nest.finished and nest.method == "nested"
    assert 0.0 < nest.log_evidence_err < 0.6
    assert abs(nest.log_evidence - exact) < 3.0 * nest.log_evidence_err
    assert nest.n_calls > nest.n_iterations > 0


# ------------------------------------------------------------------- priors
def test_prior_density_is_the_jacobian_of_its_unit_cube_transform(small_scenario):
    # change of variables (common practice): a prior drawn as theta(u), u uniform on the
    # unit cube, has density 1/|det d theta/d u|; checked for every piece of the small
    # nucleus's stated prior (boxes, eccentricity disks, node turns, phase windows)
    res = fit_joint(read_observations(small_scenario),
                    parse_settings({"effects": NEWTONIAN}))
    prior = stated_prior(res)
    kinds = {type(p).__name__ for p in prior.pieces}
    assert kinds == {"Uniform", "EccentricityDisk", "PhaseWindow"}
    rng = np.random.default_rng(8)
    for u in rng.uniform(0.05, 0.95, (3, prior.ndim)):
        h = 1e-6
        jac = np.empty((prior.ndim, prior.ndim))
        for j in range(prior.ndim):
            up, dn = u.copy(), u.copy()
            up[j] += h
            dn[j] -= h
            jac[:, j] = (prior.transform(up) - prior.transform(dn)) / (2 * h)
        expected = -np.linalg.slogdet(jac)[1]
        assert prior.log_density(prior.transform(u)) == pytest.approx(expected, abs=1e-5)
    # the fit itself lies inside the prior and the boxes are +-20 standard errors
    theta = res.internal[res.free]
    assert np.isfinite(prior.log_density(theta))
    i = prior.names.index("mass")
    (box,) = [p for p in prior.pieces if getattr(p, "index", None) == i]
    assert box.high - box.low == pytest.approx(40.0 * res.sigma("mass"), rel=1e-9)


def test_eccentricity_disk_draws_are_uniform_in_e_and_w():
    # e uniform on [0, e_max), w uniform: Kolmogorov-Smirnov against scipy's uniform
    # (p > 0.001; a fixed seed, so the test is deterministic)
    disk = EccentricityDisk(0, 1, 0.9, 1.0, "")
    prior = StatedPrior(("h", "k"), (disk,))
    th = prior.transform(np.random.default_rng(4).uniform(size=(4000, 2)))
    e = th[:, 0] ** 2 + th[:, 1] ** 2
    w = np.mod(np.arctan2(th[:, 1], th[:, 0]), 2 * np.pi)
    assert stats.kstest(e, stats.uniform(0, 0.9).cdf).pvalue > 1e-3
    assert stats.kstest(w, stats.uniform(0, 2 * np.pi).cdf).pvalue > 1e-3
    assert prior.log_density(np.array([0.1, 0.2])) == pytest.approx(-np.log(np.pi * 0.9))


def test_gaussian_prior_on_a_derived_element_is_refused(small_scenario):
    obs = read_observations(small_scenario)
    settings = parse_settings({"effects": NEWTONIAN,
                               "stars": {"t-2": {"prior": {"e": {"mean": 0.35,
                                                                 "sigma": 0.05}}}}})
    res = fit_joint(obs, settings)
    with pytest.raises(ValueError, match="t-2:e"):
        stated_prior(res)
    with pytest.raises(ValueError, match="unknown evidence method"):
        evidence(res, method="guess")


# ----------------------------------------------- Bayes factors on simulated data
@pytest.fixture(scope="module")
def redshift_fits(tmp_path_factory):
    """Fits with and without the redshift, of data made with f = 0 and with f = 1."""
    out = {}
    for f in (0.0, 1.0):
        obs = _one_star(tmp_path_factory, f)
        out[f] = (_fit(obs, redshift=False), _fit(obs, redshift=True))
    return out


def test_bayes_factor_favours_the_redshift_only_when_it_was_injected(redshift_fits):
    # injection-recovery: ln B = ln Z(redshift) - ln Z(Newtonian), both with the prior
    # set by the Newtonian fit; the two models have the same 13 free parameters (f held
    # at 1), so ln B is close to -Delta chi^2 / 2 (the Occam factors nearly cancel:
    # common practice), and its sign says which data carry the effect.
    for f, sign in ((0.0, -1.0), (1.0, 1.0)):
        newton, gr = redshift_fits[f]
        ln_b = (laplace_evidence(gr, reference=newton).log_evidence
                - laplace_evidence(newton).log_evidence)
        assert sign * ln_b > 5.0, (f, ln_b)
        assert ln_b == pytest.approx(-0.5 * (gr.chi2 - newton.chi2), abs=2.0)


def test_model_likelihood_is_the_normalised_gaussian_density(redshift_fits):
    # ln L at the best fit from scipy's normal density of every number (stated errors)
    newton, _ = redshift_fits[0.0]
    m = newton.model
    pred = m.predict(newton.internal)
    direct = (stats.norm(pred.ra, m.pos.ra_err).logpdf(m.pos.ra).sum()
              + stats.norm(pred.dec, m.pos.dec_err).logpdf(m.pos.dec).sum()
              + stats.norm(pred.vr, m.vel.vr_err).logpdf(m.vel.vr).sum())
    like = ModelLikelihood(newton)
    assert like(newton.internal[newton.free]) == pytest.approx(direct, abs=1e-8)


@pytest.mark.slow
def test_laplace_and_dynesty_agree_on_the_one_star_nucleus(redshift_fits):
    # 13 parameters, full-turn angles and isotropic orientation: the nested run is the
    # independent check of the Laplace value (agreement within 3 sigma + 0.5 nats for
    # the Laplace approximation's own error on a slightly non-Gaussian posterior)
    _, gr = redshift_fits[1.0]
    lap = laplace_evidence(gr)
    nest = nested_evidence(gr, rng=np.random.default_rng(21))
    assert nest.finished
    assert abs(nest.log_evidence - lap.log_evidence) < 3.0 * nest.log_evidence_err + 0.5




def test_ladder_evidence_shares_one_prior_and_gives_the_bayes_factor(redshift_fits):
    # the ladder's evidences: one reference fit (lowest chi-square) centres every box, so
    # ln B equals the pairwise Laplace value computed with that reference (and, as above,
    # about -Delta chi^2 / 2: common practice for models of equal dimension)
    newton, gr = redshift_fits[1.0]
    ladder = [LadderFit(Rung("newtonian", "Newtonian", {}), newton, 0.0),
              LadderFit(Rung("redshift", "+ redshift", {}, parent="newtonian"), gr, 0.0)]
    ev = ladder_evidence(ladder)
    assert ev.reference == "redshift" and ev.method == "laplace"
    ln_b = ev.results["redshift"].log_evidence - ev.results["newtonian"].log_evidence
    direct = (laplace_evidence(gr).log_evidence
              - laplace_evidence(newton, reference=gr).log_evidence)
    assert ln_b == pytest.approx(direct, abs=1e-9)
    assert ln_b == pytest.approx(-0.5 * (gr.chi2 - newton.chi2), abs=2.0)
    assert any(line.startswith("mass: uniform on") for line in ev.prior)
    assert set(ev.table()) == {"newtonian", "redshift"}
