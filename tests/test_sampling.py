"""Tests of posterior sampling: the sampler core, checkpoints, R-hat, marginalisation.

Every test compares with a value from outside deepwell: an analytic
posterior (normal equations), a hand computation of a published formula, or
an independent numerical integration (scipy quadrature).
"""

import json
import types
from pathlib import Path

import numpy as np
import pytest
from scipy import integrate, stats

from deepwell.core.parameters import EXTRA
from deepwell.fit.joint import build_model, fit_joint
from deepwell.fit.sampling import (
    CheckpointMismatch,
    LogPosterior,
    SamplerOptions,
    SamplingWarning,
    gelman_rubin,
    rank_rhat,
    run_ensemble,
    sample_posterior,
)
from deepwell.fit.sampling.convergence import autocorr_times, ess_bulk_tail, quantile_summary
from deepwell.model.layout import internal_star_values
from deepwell.tables.observations import read_observations
from deepwell.tables.settings import parse_settings

SCENARIOS = Path(__file__).resolve().parents[1] / "scenarios"


def gaussian_log_prob(mean, cov):
    prec = np.linalg.inv(cov)

    def log_prob(x):
        d = np.asarray(x) - mean
        return -0.5 * np.einsum("...i,ij,...j->...", d, prec, d)
    return log_prob


# --------------------------------------------------------- statistical core
def test_straight_line_posterior_matches_normal_equations():
    """Linear-Gaussian model: posterior mean and covariance from the normal
    equations, (X^T W X)^-1 X^T W y and (X^T W X)^-1 (analytic result, e.g.
    Hogg, Bovy & Lang 2010, arXiv:1008.4686, eqs. 5 and 18).  Mean within 3
    Monte-Carlo standard errors (sigma sqrt(tau / N)); widths within 10%."""
    rng = np.random.default_rng(42)
    x = np.linspace(0.0, 10.0, 25)
    sig = np.full_like(x, 0.7)
    y = 1.5 + 0.8 * x + rng.normal(0.0, sig)
    X = np.column_stack([np.ones_like(x), x])
    w = 1.0 / sig**2
    cov = np.linalg.inv(X.T @ (w[:, None] * X))
    mean = cov @ X.T @ (w * y)

    def log_prob(theta):
        model = theta @ X.T
        return -0.5 * np.sum((y - model) ** 2 * w, axis=-1)

    p0 = mean + 0.1 * rng.standard_normal((32, 2))
    run = run_ensemble(log_prob, p0, np.random.default_rng(7), n_steps=3000)
    chain = run.chain[500:]
    tau = autocorr_times(chain)
    flat = chain.reshape(-1, 2)
    sd = np.sqrt(np.diag(cov))
    mcse = sd * np.sqrt(tau / flat.shape[0])
    assert np.all(np.abs(flat.mean(axis=0) - mean) < 3 * mcse)
    assert np.allclose(flat.std(axis=0), sd, rtol=0.10)
    corr = np.corrcoef(flat.T)[0, 1]
    assert corr == pytest.approx(cov[0, 1] / (sd[0] * sd[1]), abs=0.05)


# -------------------------------------------------------------- checkpoints
class _Crash(Exception):
    pass


class _CrashAfter:
    """Progress object that raises after n steps (a kill between two saves)."""

    def __init__(self, n):
        self.n = n

    def update(self, k=1):
        self.n -= k
        if self.n <= 0:
            raise _Crash

    def set_postfix_str(self, text, refresh=True):
        pass

    def close(self):
        pass


def _toy():
    mean = np.array([1.0, -2.0, 0.5])
    cov = np.array([[1.0, 0.3, 0.0], [0.3, 2.0, 0.4], [0.0, 0.4, 0.5]])
    p0 = mean + 0.5 * np.random.default_rng(3).standard_normal((8, 3))
    return gaussian_log_prob(mean, cov), p0


def test_resume_continues_the_uninterrupted_chain_exactly(tmp_path):
    """Bitwise reproducibility (common practice for resumable samplers): a run
    killed after 2 checkpoints and resumed equals one run straight through."""
    lp, p0 = _toy()
    full = run_ensemble(lp, p0, np.random.default_rng(11), n_steps=100, thin=2,
                        fingerprint="toy")
    path = tmp_path / "ck.h5"
    with pytest.raises(_Crash):
        run_ensemble(lp, p0, np.random.default_rng(11), n_steps=100, thin=2, checkpoint=path,
                     checkpoint_every=20, fingerprint="toy", progress=_CrashAfter(55))
    resumed = run_ensemble(lp, None, np.random.default_rng(999), n_steps=100, thin=2,
                           checkpoint=path, checkpoint_every=20, fingerprint="toy",
                           resume=True)
    assert resumed.resumed_at == 40
    assert np.array_equal(resumed.chain, full.chain)
    assert np.array_equal(resumed.log_prob, full.log_prob)
    assert np.array_equal(resumed.accepted, full.accepted)


def test_resume_after_a_shorter_run_extends_it_exactly(tmp_path):
    """Same property when the first session ends normally at n_steps=60."""
    lp, p0 = _toy()
    full = run_ensemble(lp, p0, np.random.default_rng(5), n_steps=90)
    path = tmp_path / "ck.h5"
    run_ensemble(lp, p0, np.random.default_rng(5), n_steps=60, checkpoint=path,
                 checkpoint_every=25)
    resumed = run_ensemble(lp, None, np.random.default_rng(0), n_steps=90, checkpoint=path,
                           resume=True)
    assert np.array_equal(resumed.chain, full.chain)
    assert np.array_equal(resumed.coords, full.coords)


def test_resume_refuses_a_checkpoint_of_other_data(tmp_path):
    lp, p0 = _toy()
    path = tmp_path / "ck.h5"
    run_ensemble(lp, p0, np.random.default_rng(1), n_steps=10, checkpoint=path,
                 fingerprint="data-A")
    with pytest.raises(CheckpointMismatch, match="hash mismatch"):
        run_ensemble(lp, None, np.random.default_rng(1), n_steps=20, checkpoint=path,
                     fingerprint="data-B", resume=True)
    with pytest.raises(CheckpointMismatch):  # other thinning is another sampler option
        run_ensemble(lp, None, np.random.default_rng(1), n_steps=20, checkpoint=path,
                     fingerprint="data-A", thin=2, resume=True)


# -------------------------------------------------------------------- R-hat
def test_rhat_matches_hand_computation_of_bda3_eq_11_4():
    """Gelman et al. 2013, BDA3, eqs. 11.2-11.4 [from memory]: two chains
    (1, 2, 3) and (2, 4, 6).  Means 2 and 4, grand mean 3; B = n/(m-1) sum
    (mean_j - 3)^2 = 3 * 2 = 6; s^2 = 1 and 4, W = 2.5; var+ = (2/3) 2.5 + 6/3
    = 11/3; R-hat = sqrt(11/3 / 2.5) = sqrt(22/15)."""
    chains = np.array([[1.0, 2.0, 3.0], [2.0, 4.0, 6.0]])
    assert gelman_rubin(chains) == pytest.approx(np.sqrt(22.0 / 15.0), rel=1e-12)


def _bimodal(x):
    """Equal mixture of unit Gaussians at -6 and +6 in both coordinates."""
    a = -0.5 * np.sum((x + 6.0) ** 2, axis=-1)
    b = -0.5 * np.sum((x - 6.0) ** 2, axis=-1)
    return np.logaddexp(a, b)


def test_rhat_near_one_for_independent_ensembles_and_large_for_separated_modes():
    """Converged independent ensembles give rank-normalised R-hat < 1.01 (Vehtari et al.
    2021, Bayesian Anal. 16, 667, recommend 1.01); two ensembles stuck in different
    modes of a bimodal target give R-hat far above 1.1 (BDA3 threshold)."""
    lp = gaussian_log_prob(np.zeros(2), np.eye(2))
    runs = []
    for seed in (1, 2):
        rng = np.random.default_rng(seed)
        runs.append(run_ensemble(lp, rng.standard_normal((16, 2)), rng, n_steps=2000))
    assert np.all(rank_rhat([r.chain[200:] for r in runs]) < 1.01)
    # Each ensemble confined to one mode of the bimodal target (the DE moves of a free
    # ensemble can jump between the modes, which would make the chains agree).
    stuck = []
    for seed, centre in ((3, -6.0), (4, 6.0)):
        rng = np.random.default_rng(seed)
        p0 = centre + 0.3 * rng.standard_normal((16, 2))
        in_mode = (lambda c: lambda x: np.where(np.all(np.sign(x) == np.sign(c), axis=-1),
                                                _bimodal(x), -np.inf))(centre)
        stuck.append(run_ensemble(in_mode, p0, rng, n_steps=500).chain[100:])
    assert np.all(rank_rhat(stuck) > 1.1)


def _vehtari_rhat(chains):
    """Rank-normalised split R-hat written out from Vehtari et al. 2021 (Bayesian Anal.
    16, 667), eqs. 14-16 and the folded variant of sect. 4.2: split each chain in two,
    rank all draws together, map ranks r to z = Phi^-1((r - 3/8) / (S + 1/4)) (Blom), take
    BDA3's R-hat of z, and of the folded draws |x - median|; report the larger."""
    x = np.asarray(chains, float)
    n = x.shape[1] // 2
    halves = np.concatenate([x[:, :n], x[:, x.shape[1] - n:]])

    def rank_z(y):
        r = stats.rankdata(y, method="average").reshape(y.shape)
        return stats.norm.ppf((r - 0.375) / (y.size + 0.25))

    bulk = gelman_rubin(rank_z(halves))
    folded = gelman_rubin(rank_z(np.abs(halves - np.median(halves))))
    return max(bulk, folded)


def test_rank_rhat_matches_the_published_recipe():
    # Four AR(1) chains, one shifted by a fraction of a sigma: the wiring through arviz
    # must give the number of the recipe written out independently above.
    rng = np.random.default_rng(7)
    x = np.zeros((4, 400))
    for t in range(1, 400):
        x[:, t] = 0.6 * x[:, t - 1] + rng.standard_normal(4)
    x[3] += 0.4
    got = rank_rhat([c[:, None, None] for c in x])[0]
    assert got == pytest.approx(_vehtari_rhat(x), rel=1e-10)
    assert got > 1.01


def test_bulk_ess_of_ar1_chains_follows_the_integrated_autocorrelation_time():
    # AR(1) with coefficient phi: integrated autocorrelation time tau = (1 + phi) / (1 - phi)
    # (common practice; the sum of phi^|k| over all lags), so ESS = N / tau.
    phi, m, n = 0.5, 4, 5000
    rng = np.random.default_rng(11)
    x = np.zeros((m, n))
    x[:, 0] = rng.standard_normal(m) / np.sqrt(1 - phi**2)
    for t in range(1, n):
        x[:, t] = phi * x[:, t - 1] + rng.standard_normal(m)
    bulk, tail = ess_bulk_tail([c[:, None, None] for c in x])
    assert bulk[0] == pytest.approx(m * n * (1 - phi) / (1 + phi), rel=0.15)
    assert 0.3 * bulk[0] < tail[0] < 3.0 * bulk[0]  # same order (loose: tails decorrelate faster)


# ----------------------------------------------------- analytic marginalising
def _tiny_orbit_problem(effects, priors=None, shared=None):
    """Sparse demo, one star, at its true elements (scenario truth file)."""
    obs = read_observations(SCENARIOS / "sparse")
    truth = json.loads((SCENARIOS / "sparse" / "truth.json").read_text())
    stars = {s: {"prior": p} for s, p in (priors or {}).items()}
    settings = parse_settings({"effects": effects, "stars": stars, "shared": shared or {}})
    model = build_model(obs, settings)
    model = model.for_stars(model.stars[:1]) if hasattr(model, "for_stars") else model
    lay = model.layout
    vec = np.zeros(lay.size)
    for i, name in enumerate(lay.shared_names):
        vec[i] = truth["shared"][name] if name in truth["shared"] else EXTRA[name].default
    for k, star in enumerate(lay.stars):
        el = truth["stars"][star]
        vec[lay.n_shared + 6 * k: lay.n_shared + 6 * (k + 1)] = internal_star_values(
            el["period"], el["e"], np.radians(el["inc"]), np.radians(el["node"]),
            np.radians(el["peri_arg"]), el["t_peri"])
    return types.SimpleNamespace(model=model, internal=vec, settings=settings,
                                 internal_cov=np.eye(lay.size))


@pytest.mark.parametrize("effects, term", [
    ({"romer": False, "redshift": "off", "precession": False}, "vz0"),
    ({}, "x0"),
])
def test_marginal_likelihood_equals_quadrature(effects, term):
    """The analytic Gaussian integral over one linear term equals adaptive
    quadrature of exp(log-likelihood) over it (scipy.integrate.quad, an
    independent check), to < 1e-6 relative in the log."""
    res = _tiny_orbit_problem(effects)
    marg = LogPosterior(res, marginalise=[term])
    full = LogPosterior(res, marginalise=False)
    assert marg.names == [n for n in full.names if n != term]
    theta = marg.base[marg.sampled] * (1.0 + 1e-4)
    analytic = float(marg(theta))
    j = full.names.index(term)

    def lp(value):
        t = np.insert(theta, j, value)
        return float(full(t))

    # locate the peak and width, then integrate exp(lp - peak)
    grid = np.linspace(-200.0, 200.0, 4001)
    vals = np.array([float(v) for v in full(np.insert(np.repeat(theta[None], grid.size, 0),
                                                      j, grid, axis=1))])
    peak_at = grid[np.argmax(vals)]
    peak = lp(peak_at)
    value, err = integrate.quad(lambda v: np.exp(lp(v) - peak), peak_at - 50, peak_at + 50,
                                points=[peak_at], epsabs=0, epsrel=1e-12, limit=200)
    numeric = peak + np.log(value)
    assert analytic == pytest.approx(numeric, rel=1e-6)


def test_exact_redshift_keeps_vz0_sampled():
    """With the exact redshift, vz0 multiplies (1 + z) of each star (physics.md
    section 5), so its design column depends on the orbit: it must be sampled."""
    res = _tiny_orbit_problem({"redshift": "exact"})
    target = LogPosterior(res, marginalise=True)
    assert "vz0" in target.names
    assert {"x0", "y0", "vx0", "vy0"}.isdisjoint(target.names)


# ------------------------------------------------------------ whole pipeline
def test_angle_percentiles_do_not_break_at_the_360_degree_wrap():
    """Percentiles of an angle scattered around 0 deg: wrapping must give the
    same numbers as the unwrapped samples (numpy.percentile as the reference)."""
    raw = np.random.default_rng(8).normal(0.0, 2.0, 20001)
    med, lo, hi = quantile_summary(np.mod(raw, 360.0), angle=True)
    p16, p50, p84 = np.percentile(raw, [16, 50, 84])
    assert np.mod(med, 360.0) == pytest.approx(np.mod(p50, 360.0), abs=1e-9)
    assert hi - lo == pytest.approx(p84 - p16, abs=1e-9)


def test_short_run_on_sparse_demo_says_not_converged_and_summarises_correctly():
    """A run cut short by n_steps must say NOT CONVERGED and why; the summary is
    the median and 16th/84th percentiles (checked against numpy.percentile)."""
    obs = read_observations(SCENARIOS / "sparse")
    fit = fit_joint(obs, parse_settings({"effects": {"romer": False, "redshift": "off",
                                                     "precession": False}}))
    with pytest.warns(SamplingWarning, match="NOT CONVERGED"):
        post = sample_posterior(fit, SamplerOptions(n_steps=120, progress=False, processes=1,
                                                    sampler="ensemble"))
    assert post.statement.startswith("NOT CONVERGED")
    assert "n_steps=120" in post.statement
    assert not post.converged
    assert post.samples.shape[:1] == (2,) and post.samples.shape[-1] == len(fit.labels)
    m = post.quantity("mass")
    p16, p50, p84 = np.percentile(post.samples[..., post.labels.index("mass")], [16, 50, 84])
    assert (m.value, m.lower, m.upper) == pytest.approx((p50, p16, p84), rel=1e-12)
    assert m.sigma == pytest.approx(0.5 * (p84 - p16), rel=1e-12)
    assert any("sin(i)" in text for text in post.implied_priors)


def test_nuts_report_names_the_stars_moved_in_position_and_velocity():
    """The sampling diagnostics say which stars the chains moved in their
    position and velocity: those whose data span less than half their period
    (span from the tables, period from the scenario truth file)."""
    obs = read_observations(SCENARIOS / "sparse")
    truth = json.loads((SCENARIOS / "sparse" / "truth.json").read_text())
    fit = fit_joint(obs, parse_settings({"effects": {"romer": False, "redshift": "off",
                                                     "precession": False}}))
    with pytest.warns(SamplingWarning, match="NOT CONVERGED"):
        post = sample_posterior(fit, SamplerOptions(n_steps=5, n_warmup=10, n_chains=2,
                                                    progress=False, processes=1))
    note = next(t for t in post.diagnostics if t.startswith("coordinates:"))
    for star in fit.model.stars:
        epochs = np.concatenate([obs.positions.loc[obs.positions.star == star, "epoch"],
                                 obs.velocities.loc[obs.velocities.star == star, "epoch"]])
        short = np.ptp(epochs) < 0.5 * truth["stars"][star]["period"]
        assert (star in note.split(" moved")[0]) == short
    assert "log GM" in note


def test_prior_on_a_carries_the_jacobian_of_the_sampled_period():
    """A Gaussian prior on a, sampled in period: log p gains log|da/dP| =
    log(2 a / 3 P) (Kepler's third law, a^3 proportional to P^2 at fixed mass
    and distance); a recomputed here from physics.md section 1 with
    k = 1.0000377738 [computed]."""
    base = {"romer": False, "redshift": "off", "precession": False}
    plain = _tiny_orbit_problem(base)
    star = plain.model.stars[0]
    mean, sigma = 200.0, 15.0
    with_prior = _tiny_orbit_problem(base, priors={star: {"a": {"mean": mean, "sigma": sigma}}})
    t0, t1 = LogPosterior(plain, False), LogPosterior(with_prior, False)
    theta = t0.base[t0.sampled]
    lay = plain.model.layout
    period = theta[t0.names.index(f"{lay.stars[0]}:period")]
    mass, dist = theta[t0.names.index("mass")], theta[t0.names.index("distance")]
    a = (period**2 * mass / 1.0000377738) ** (1.0 / 3.0) / dist * 1e3
    expected = -0.5 * ((a - mean) / sigma) ** 2 + np.log(2.0 * a / (3.0 * period))
    assert lay.names() == with_prior.model.layout.names()
    assert float(t1(theta) - t0(theta)) == pytest.approx(expected, rel=1e-9)


def test_a_time_budget_that_ends_in_the_warm_up_is_a_clear_error():
    """No draws, no summary: a run whose --max-time ends during the NUTS warm-up
    must raise one clear error (a user-facing DeepwellError), not a traceback
    from the diagnostics (common practice: never summarise an empty chain)."""
    from deepwell.core.errors import DeepwellError
    from deepwell.fit.sampling import SamplingError

    obs = read_observations(SCENARIOS / "sparse")
    fit = fit_joint(obs, parse_settings({"effects": {"romer": False, "redshift": "off",
                                                     "precession": False}}))
    with pytest.raises(SamplingError, match="fewer than 4 kept draws") as info:
        sample_posterior(fit, SamplerOptions(max_time=0.05, progress=False, processes=1,
                                             n_chains=2))
    assert isinstance(info.value, DeepwellError)
    assert "--max-time" in str(info.value)


def test_a_sampling_run_that_gets_no_posterior_still_writes_the_least_squares_report(
        tmp_path, capsys):
    # A run whose --max-time ends in the warm-up: exit 0, the least-squares report is
    # written and says plainly, at its top and in summary.json, that there is no posterior.
    from deepwell.cli import main

    out = tmp_path / "report"
    code = main(["fit", str(SCENARIOS / "sparse"), "--out", str(out), "--newtonian",
                 "--sample", "--max-time", "0.01", "--chains", "2", "--no-figures", "-q"])
    err = capsys.readouterr().err
    assert code == 0 and "NOT CONVERGED: no posterior" in err and "Traceback" not in err
    summary = json.loads((out / "summary.json").read_text())
    assert summary["sampling"]["converged"] is False and summary["sampling"]["posterior"] is None
    assert summary["sampling"]["statement"].startswith("NOT CONVERGED: no posterior")
    assert "least_squares" not in summary and summary["parameters"]["mass"]["sigma"] > 0
    first = (out / "report.md").read_text().splitlines()[0]
    assert first.startswith("**WARNING") and "produced no posterior" in first
    assert not (out / "posterior.nc").exists()


def _children(pid):
    """PIDs of the live child processes of ``pid`` (Linux /proc)."""
    out = []
    for stat in Path("/proc").glob("[0-9]*/stat"):
        try:
            fields = stat.read_text().rsplit(")", 1)[1].split()
        except OSError:
            continue
        if int(fields[1]) == pid and fields[0] != "Z":
            out.append(int(stat.parent.name))
    return out


@pytest.mark.skipif(not Path("/proc/self/stat").exists(), reason="needs Linux /proc")
def test_sigterm_stops_the_chain_workers_with_the_parent(tmp_path):
    # Common practice for a command-line program: SIGTERM ends the run and every
    # process it started, and says so in one line (exit 128 + 15).
    import os
    import signal
    import subprocess
    import sys
    import time

    code = ("import sys; from deepwell.cli import main; sys.exit(main(sys.argv[1:]))")
    proc = subprocess.Popen(
        [sys.executable, "-c", code, "fit", str(SCENARIOS / "sparse"), "--out",
         str(tmp_path / "rep"), "--newtonian", "--sample", "--chains", "2", "--no-figures",
         "-q"], stderr=subprocess.PIPE, text=True, env={**os.environ, "PYTHONWARNINGS": "ignore"})
    deadline = time.monotonic() + 240
    kids = []
    while time.monotonic() < deadline and proc.poll() is None:
        kids = _children(proc.pid)
        if len(kids) >= 2:
            break
        time.sleep(0.2)
    assert len(kids) >= 2, "the chain workers never started"
    time.sleep(1.0)
    proc.send_signal(signal.SIGTERM)
    _, err = proc.communicate(timeout=60)
    assert proc.returncode == 143 and "terminated" in err and "Traceback" not in err
    time.sleep(0.5)
    assert [k for k in kids if Path(f"/proc/{k}").exists()
            and "Z" not in Path(f"/proc/{k}/stat").read_text().rsplit(")", 1)[1].split()[0]] \
        == []
    assert not (tmp_path / "rep").exists()
