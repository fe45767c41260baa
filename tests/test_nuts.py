"""Tests of the Hamiltonian (NUTS) sampler: transitions, gradient, checkpoints.

References are outside deepwell: the analytic posterior of a linear-Gaussian
model (normal equations), the definition of the derivative (an independent
finite difference with another step), and bitwise equality with an
uninterrupted run.
"""

from pathlib import Path

import numpy as np
import pytest

from deepwell.fit.sampling import LogPosterior
from deepwell.fit.sampling.backend import CheckpointMismatch
from deepwell.fit.sampling.convergence import autocorr_times
from deepwell.fit.sampling.gradient import WhitenedTarget
from deepwell.fit.sampling.hamiltonian import run_chain
from deepwell.fit.sampling.nuts import DualAveraging, initial_step_size, nuts_step
from tests.test_sampling import _Crash, _CrashAfter, _tiny_orbit_problem

SCENARIOS = Path(__file__).resolve().parents[1] / "scenarios"
KEPLER = {"romer": False, "redshift": "off", "precession": False}


def test_nuts_recovers_the_straight_line_posterior_of_the_normal_equations():
    """Linear-Gaussian model: posterior mean (X^T W X)^-1 X^T W y and covariance
    (X^T W X)^-1 (Hogg, Bovy & Lang 2010, arXiv:1008.4686, eqs. 5 and 18).
    Sampled in raw (not whitened) coordinates so the step-size adaptation has
    work to do.  Mean within 4 Monte-Carlo standard errors, widths within 8%,
    correlation within 0.04."""
    rng = np.random.default_rng(42)
    x = np.linspace(0.0, 10.0, 25)
    sig = np.full_like(x, 0.7)
    y = 1.5 + 0.8 * x + rng.normal(0.0, sig)
    X = np.column_stack([np.ones_like(x), x])
    w = 1.0 / sig**2
    cov = np.linalg.inv(X.T @ (w[:, None] * X))
    mean = cov @ X.T @ (w * y)

    def f(theta):
        r = (y - X @ theta) * np.sqrt(w)
        return -0.5 * float(r @ r), X.T @ (r * np.sqrt(w))

    gen = np.random.default_rng(7)
    z = mean + 1.0
    lp, g = f(z)
    da = DualAveraging(initial_step_size(f, z, lp, g, gen))
    eps = None
    for _ in range(300):
        tr = nuts_step(f, z, lp, g, eps or np.exp(da.log_eps), gen)
        z, lp, g = tr.z, tr.log_prob, tr.grad
        eps = da.update(tr.accept_stat)
    eps = da.final
    draws = []
    for _ in range(3000):
        tr = nuts_step(f, z, lp, g, eps, gen)
        z, lp, g = tr.z, tr.log_prob, tr.grad
        draws.append(z)
    flat = np.array(draws)
    tau = autocorr_times(flat[:, None, :])
    sd = np.sqrt(np.diag(cov))
    mcse = sd * np.sqrt(tau / len(flat))
    assert np.all(np.abs(flat.mean(axis=0) - mean) < 4 * mcse)
    assert np.allclose(flat.std(axis=0), sd, rtol=0.08)
    corr = np.corrcoef(flat.T)[0, 1]
    assert corr == pytest.approx(cov[0, 1] / (sd[0] * sd[1]), abs=0.04)


def test_dual_averaging_reaches_the_target_acceptance():
    """Hoffman & Gelman 2014 (JMLR 15, 1593, section 3.2; from memory): after
    adaptation the mean acceptance statistic is near delta = 0.8 (within 0.07)
    on a 20-d Gaussian with scales 0.5-2."""
    scales = np.linspace(0.5, 2.0, 20)

    def f(z):
        u = z / scales
        return -0.5 * float(u @ u), -u / scales

    gen = np.random.default_rng(3)
    z = np.zeros(20)
    lp, g = f(z)
    da = DualAveraging(initial_step_size(f, z, lp, g, gen))
    eps = np.exp(da.log_eps)
    for _ in range(400):
        tr = nuts_step(f, z, lp, g, eps, gen)
        z, lp, g = tr.z, tr.log_prob, tr.grad
        eps = da.update(tr.accept_stat)
    acc = []
    for _ in range(400):
        tr = nuts_step(f, z, lp, g, da.final, gen)
        z, lp, g = tr.z, tr.log_prob, tr.grad
        acc.append(tr.accept_stat)
    assert np.mean(acc) == pytest.approx(0.8, abs=0.07)


# ------------------------------------------------------------ orbit target
#: Gaussian priors (2%) on mass and distance around the sparse demo's truth: one
#: star alone leaves them nearly free, and its posterior then runs off along
#: nearly parabolic orbits (uniform-in-period prior) -- a fine test of honesty
#: but not of agreement between two samplers.
ANCHORED = {"mass": {"prior": {"mean": 5.1e6, "sigma": 1.0e5}},
            "distance": {"prior": {"mean": 9400.0, "sigma": 190.0}}}

def _one_star(shared=None):
    """Sparse demo, first star only, at its true elements (scenario truth file),
    with its least-squares covariance there."""
    from deepwell.fit.least_squares import covariance

    res = _tiny_orbit_problem(KEPLER, shared=shared)
    target = LogPosterior(res, marginalise=True)
    free = np.zeros(res.model.layout.size, bool)
    free[target.sampled] = True
    cov, _ = covariance(res.model, res.internal, free)
    return target, cov


def test_grouped_gradient_equals_a_plain_central_difference():
    """The grouped, projected gradient of WhitenedTarget against the definition
    of the derivative: plain central differences of the log-posterior, one
    coordinate at a time, with a 10x larger step (common practice); agreement
    to 1e-4 of the largest component."""
    target, cov = _one_star()
    wt = WhitenedTarget(target, target.base[target.sampled], cov)
    z = np.random.default_rng(2).normal(0.0, 0.5, wt.n)
    lp, grad = wt(z)
    assert lp == pytest.approx(float(wt.log_prob(z)), abs=1e-8)
    h = 1e-3
    eye = np.eye(wt.n)
    plain = np.array([(wt.log_prob(z + h * e) - wt.log_prob(z - h * e)) / (2 * h) for e in eye])
    assert np.max(np.abs(grad - plain)) < 1e-4 * np.max(np.abs(plain))


def test_killed_chain_resumes_to_the_uninterrupted_one_exactly(tmp_path):
    """Bitwise reproducibility (common practice for resumable samplers): a chain
    killed in its warm-up after 2 saves, resumed, equals one run straight
    through; a checkpoint of other data is refused."""
    target, cov = _one_star()
    centre = target.base[target.sampled]
    kw = dict(n_warmup=40, n_draws=30, fingerprint="one-star")
    full = run_chain(target, centre, cov, centre, np.random.default_rng(11), **kw)
    path = tmp_path / "chain.h5"
    with pytest.raises(_Crash):
        run_chain(target, centre, cov, centre, np.random.default_rng(11), checkpoint=path,
                  checkpoint_every=15, progress=_CrashAfter(37), **kw)
    again = run_chain(target, centre, cov, centre, np.random.default_rng(999),
                      checkpoint=path, checkpoint_every=15, resume=True, **kw)
    assert np.array_equal(again.chain, full.chain)
    assert np.array_equal(again.log_prob, full.log_prob)
    assert again.step_size == full.step_size
    assert again.n_gradients == full.n_gradients
    with pytest.raises(CheckpointMismatch):
        run_chain(target, centre, cov, centre, np.random.default_rng(1), checkpoint=path,
                  resume=True, **{**kw, "fingerprint": "other data"})


@pytest.mark.parametrize("state_arc, kind", [(0.0, "phase"), (1e9, "state")])
def test_star_coordinates_round_trip_and_carry_their_jacobian(state_arc, kind):
    """Both per-star coordinate maps (mean longitude; position and velocity at
    the data epoch): the map back must invert the map, its Jacobian must equal
    a plain central difference of the map, one coordinate at a time (definition
    of the derivative, common practice), and the density must carry log|det| of
    that Jacobian (change of variables).  For the state map this checks the
    closed form (2/3) GM^2 e / P from the Delaunay variables against the
    numerical determinant, mass and distance columns included."""
    target, cov = _one_star()
    theta = target.base[target.sampled]
    wt = WhitenedTarget(target, theta, cov, state_arc=state_arc)
    assert wt.coords.kinds == [kind]
    u = wt.to_u(theta)
    assert np.allclose(wt.to_theta(u), theta, rtol=1e-12, atol=1e-9)
    h = 1e-5 * np.sqrt(np.diag(wt.cov))
    num = np.column_stack([(wt.to_theta(u + h[i] * e) - wt.to_theta(u - h[i] * e)) / (2 * h[i])
                           for i, e in enumerate(np.eye(wt.n))])
    scale = np.max(np.abs(num), axis=1, keepdims=True)
    assert np.allclose(wt._jac(u) / scale, num / scale, rtol=1e-5, atol=1e-7)
    sign, logdet = np.linalg.slogdet(num)
    assert float(wt.log_det(u)) == pytest.approx(logdet, abs=1e-5)
    z = wt.whiten(theta)
    assert float(wt.log_prob(z)) == pytest.approx(float(target(theta)) + logdet, abs=1e-5)


def test_state_map_picks_the_pericentre_epoch_nearest_the_fit_and_reports_the_window():
    """A Keplerian orbit repeats with its period (common practice), so the state
    map may return t_peri shifted by whole periods: shifted by 0.55 P, a point
    comes back 0.45 P on the other side of the least-squares value, with the
    same log-posterior; window_use reports how far draws reach (0.45)."""
    target, cov = _one_star()
    theta = target.base[target.sampled]
    wt = WhitenedTarget(target, theta, cov, state_arc=1e9)
    star = target.model.stars[0]
    i_p, i_t = target.names.index(f"{star}:period"), target.names.index(f"{star}:t_peri")
    moved = theta.copy()
    moved[i_t] += 0.55 * theta[i_p]
    back = wt.to_theta(wt.to_u(moved))
    assert back[i_t] == pytest.approx(theta[i_t] - 0.45 * theta[i_p], abs=1e-8)
    assert float(target(back)) == pytest.approx(float(target(moved)), abs=1e-8)
    assert wt.coords.window_use(back[None])[0] == pytest.approx(0.45, abs=1e-9)


def test_state_map_obeys_the_two_body_integrals():
    """Position and velocity from the elements (deepwell.model.kernels.orbit.kepler_state)
    against the textbook integrals of the two-body problem, vis-viva
    v^2 = GM (2/r - 1/a) and |r x v| = sqrt(GM a (1 - e^2)) (e.g. Murray &
    Dermott 1999, Solar System Dynamics, chapter 2, from memory), with GM from
    Kepler's third law in angular units; and elements_from_state inverts it
    for random orbits (to 1e-10)."""
    from deepwell.model.kernels.orbit import (
        a_from_period,
        elements_from_state,
        gm_angular,
        kepler_state,
    )

    rng = np.random.default_rng(11)
    n = 500
    per = rng.uniform(5.0, 400.0, n)
    ecc = rng.uniform(0.01, 0.98, n)
    inc = np.arccos(rng.uniform(-1.0, 1.0, n))
    node, w = rng.uniform(-np.pi, np.pi, (2, n))
    tp = 2000.0 + rng.uniform(-0.5, 0.5, n) * per
    mass, dist = 3.0e6, 7000.0
    a = a_from_period(per, mass, dist)
    st = kepler_state(2011.0, per, ecc, inc, node, w, tp, a)
    gm = gm_angular(mass, dist)
    r = np.linalg.norm(st[:, :3], axis=1)
    v2 = np.sum(st[:, 3:] ** 2, axis=1)
    assert np.allclose(v2, gm * (2.0 / r - 1.0 / a), rtol=1e-10)
    hmag = np.linalg.norm(np.cross(st[:, :3], st[:, 3:]), axis=1)
    assert np.allclose(hmag, np.sqrt(gm * a * (1.0 - ecc**2)), rtol=1e-10)
    el = elements_from_state(st, gm, 2011.0)
    assert np.allclose(el["period"], per, rtol=1e-10)
    assert np.allclose(el["e_cos"] + 1j * el["e_sin"], ecc * np.exp(1j * w), atol=1e-10)
    assert np.allclose(el["cos_inc"], np.cos(inc), atol=1e-10)
    assert np.allclose(np.exp(1j * el["node"]), np.exp(1j * node), atol=1e-10)
    phase = (el["t_peri"] - tp) / per
    assert np.allclose(phase, np.round(phase), atol=1e-10)


def test_nuts_in_state_coordinates_matches_an_emcee_ensemble_on_one_orbit():
    """The posterior of one orbit (sparse demo, first star; mass and distance
    free) sampled by NUTS with the star moving in its position and velocity,
    against the same posterior sampled by emcee's differential-evolution
    ensemble (Foreman-Mackey et al. 2013; a general-purpose sampler that knows
    nothing of deepwell's coordinates or Jacobians).  Means must agree within
    0.3 posterior standard deviations and widths within 20% (Monte Carlo
    error of a few hundred effective draws each, common practice)."""
    from deepwell.fit.sampling import run_ensemble

    target, cov = _one_star(ANCHORED)
    centre = target.base[target.sampled]
    run = run_chain(target, centre, cov, centre, np.random.default_rng(5), n_warmup=200,
                    n_draws=800, state_arc=1e9)
    nuts = run.chain[:, 0, :]
    assert run.diverged.sum() == 0
    rng = np.random.default_rng(6)
    nw = 4 * target.sampled.size
    p0 = centre + 0.1 * rng.standard_normal((nw, centre.size)) @ np.linalg.cholesky(cov).T
    ens = run_ensemble(target, p0, rng, n_steps=3000, thin=5)
    ref = ens.chain[200:].reshape(-1, centre.size)
    sd = ref.std(axis=0)
    assert np.all(np.abs(nuts.mean(axis=0) - ref.mean(axis=0)) < 0.3 * sd)
    assert np.allclose(nuts.std(axis=0), sd, rtol=0.2)


def test_adapted_metric_takes_the_widths_of_the_warm_up_draws():
    """Warm-up metric (deepwell.fit.sampling.hamiltonian.adapted_cov): draws from a
    known Gaussian 30x wider than the prior covariance in two coordinates; the
    adapted variances must match the true ones (sample-variance accuracy
    ~ sqrt(2/n), common practice: within 10% for n = 4000) and the matrix stays
    positive definite."""
    from deepwell.fit.sampling.hamiltonian import adapted_cov

    rng = np.random.default_rng(4)
    prior = np.eye(5)
    prior[0, 1] = prior[1, 0] = 0.6
    true = np.diag([900.0, 900.0, 1.0, 1.0, 1.0])
    draws = rng.multivariate_normal(np.zeros(5), true, size=4000)
    got = adapted_cov(draws, prior)
    np.linalg.cholesky(got)
    assert np.allclose(np.diag(got), np.diag(true), rtol=0.10)
