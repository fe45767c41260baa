"""Planning the next observations: predictions, passages, confusion and the forecast.

All scenarios here are invented for injection-recovery; no real object is behind them.
"""

import argparse
import dataclasses
import hashlib
import textwrap

import numpy as np
import pandas as pd
import pytest
from astropy import units as u
from astropy.coordinates import SkyCoord
from scipy.optimize import brentq

from deepwell.cli.plan import add_plan_parser, run_plan
from deepwell.core.errors import InputError, OutputError
from deepwell.fit.jacobian import numerical_jacobian
from deepwell.fit.joint import fit_joint
from deepwell.report.writer import write_report
from deepwell.results import analyse
from deepwell.tables.effects import effects_from_args
from deepwell.tables.observations import Observations, read_observations
from deepwell.tables.settings import Settings
from deepwell.tools.plan import (
    PlanSettings,
    candidate_epochs,
    default_errors,
    draw_vectors,
    fisher_forecast,
    information_gain,
    load_samples,
    make_plan,
    next_passages,
    parse_months,
    position_angle,
    predict_grid,
)
from deepwell.tools.simulate import write_scenario

NEWTONIAN = "\n[effects]\nromer = false\nredshift = 0.0\nprecession = 0.0\n"

# Ten invented stars: a few tight ones, most with periods longer than the data span,
# so that the prediction bands have visible widths.
BAND_SCENARIO = textwrap.dedent("""
    name = "planning nucleus"
    story = "invented for the planning tests"
    seed = 777
    reference_epoch = 2010.0
    [truth]
    mass = 3.1e6
    distance = 6100.0
    x0 = 0.3
    y0 = -0.2
    vx0 = 0.02
    vy0 = -0.01
    vz0 = 4.0
    [stars.p-1]
    a = 110.0
    e = 0.85
    inc = 120.0
    node = 220.0
    peri_arg = 60.0
    t_peri = 2011.2
    [stars.p-2]
    a = 160.0
    e = 0.4
    inc = 50.0
    node = 140.0
    peri_arg = 300.0
    t_peri = 2006.0
    [stars.p-3]
    a = 300.0
    e = 0.7
    inc = 95.0
    node = 20.0
    peri_arg = 150.0
    t_peri = 2009.0
    [stars.p-4]
    a = 420.0
    e = 0.5
    inc = 25.0
    node = 300.0
    peri_arg = 210.0
    t_peri = 1995.0
    [stars.p-5]
    a = 520.0
    e = 0.3
    inc = 140.0
    node = 80.0
    peri_arg = 30.0
    t_peri = 2030.0
    [stars.p-6]
    a = 380.0
    e = 0.8
    inc = 70.0
    node = 170.0
    peri_arg = 100.0
    t_peri = 2016.0
    [stars.p-7]
    a = 600.0
    e = 0.6
    inc = 35.0
    node = 250.0
    peri_arg = 280.0
    t_peri = 2040.0
    [stars.p-8]
    a = 250.0
    e = 0.2
    inc = 160.0
    node = 10.0
    peri_arg = 120.0
    t_peri = 2002.0
    [[campaigns]]
    dataset = "imager"
    kind = "positions"
    start = 2000.0
    end = 2020.0
    cadence = 1.0
    error = [0.5, 0.8]
    [[campaigns]]
    dataset = "spectra"
    kind = "velocities"
    start = 2004.0
    end = 2020.0
    cadence = 1.0
    error = [10.0, 15.0]
    coverage = 0.8
""")

# True positions relative to the mass for 2020-2025 (error 1e-3 mas, the
# smallest the simulator allows), never fitted.
TRUTH_CAMPAIGN = textwrap.dedent("""
    [[campaigns]]
    dataset = "truth"
    kind = "positions"
    relative_to = "mass"
    start = 2020.0
    end = 2025.0
    cadence = 2.0
    scatter_days = 0.0
    error = 0.001
""")


def _single_epoch_campaigns(epochs, pos_err, vel_err):
    """Campaigns that observe every star once at each epoch (TOML text)."""
    out = []
    for t in epochs:
        for kind, err in (("positions", pos_err), ("velocities", vel_err)):
            out.append(f"""
[[campaigns]]
dataset = "new-{kind}"
kind = "{kind}"
start = {t - 0.005:.6f}
end = {t + 0.005:.6f}
cadence = 100.0
scatter_days = 0.0
error = {err}
""")
    return "".join(out)


def _scenario(tmp_path, text, name):
    (tmp_path / f"{name}.toml").write_text(text)
    return write_scenario(tmp_path / f"{name}.toml", tmp_path / name)


def _without(obs, dataset):
    """The observations with one data set's rows excluded."""
    pos = obs.positions.copy()
    pos["exclude"] = pos["exclude"] | (pos["dataset"] == dataset)
    return Observations(pos, obs.velocities, obs.dropped_stars, obs.checksums, obs.folder)


def _band_fit(root, seed):
    text = BAND_SCENARIO.replace("seed = 777", f"seed = {seed}")
    folder = _scenario(root, text + TRUTH_CAMPAIGN + NEWTONIAN, f"data{seed}")
    obs = read_observations(folder)
    res = fit_joint(_without(obs, "truth"), effects_from_args(Settings(), newtonian=True))
    return res, obs


@pytest.fixture(scope="module")
def newtonian_fit(tmp_path_factory):
    """BAND_SCENARIO fitted on 2000-2020 (Newtonian data and model, for speed)."""
    return _band_fit(tmp_path_factory.mktemp("plan_newton"), 777)


# ------------------------------------------------------------ linear algebra
def test_straight_line_slope_variance_follows_normal_equations():
    """Common practice: for y = a + b t with equal errors s, var(b) = s^2 / sum (t - mean t)^2.

    Closed form of the normal equations of a straight line (e.g. Press et al.
    2007, Numerical Recipes, sect. 15.2).  The forecast adds the rows of the new
    points to the information of the old ones; the result must equal the closed
    form for old + new points to rounding.
    """
    s = 0.3
    t_old = np.array([0.0, 1.0, 2.0, 3.0])
    t_new = np.array([7.0, 10.0])

    def line(vec, t):
        return (vec[..., 0:1] + vec[..., 1:2] * t) / s

    jac_old = numerical_jacobian(lambda v: line(v, t_old), np.array([1.0, 2.0]),
                                 np.ones(2, bool), np.array([1e-3, 1e-3]))
    jac_new = numerical_jacobian(lambda v: line(v, t_new), np.array([1.0, 2.0]),
                                 np.ones(2, bool), np.array([1e-3, 1e-3]))
    sets = [np.array([True, False]), np.array([False, True]), np.array([True, True])]
    now, after = information_gain(jac_old.T @ jac_old, jac_new, sets)

    def sigma_b(t):
        return s / np.sqrt(np.sum((t - t.mean()) ** 2))

    assert now[1] == pytest.approx(sigma_b(t_old), rel=1e-9)
    for sel, got in zip(sets, after, strict=True):
        assert got[1] == pytest.approx(sigma_b(np.concatenate([t_old, t_new[sel]])), rel=1e-9)


def test_months_and_seasons():
    assert parse_months("11-2") == (11, 12, 1, 2)
    assert parse_months("3,4,5") == (3, 4, 5)
    with pytest.raises(InputError):
        parse_months("0-3")
    # March to September: the season is [y + 2/12, y + 9/12), its middle y + 11/24
    t = candidate_epochs(2020.0, 2023.0, months=parse_months("3-9"))
    np.testing.assert_allclose(t, 2020 + np.arange(3) + 11 / 24, atol=1e-4)
    # a window over the new year: November to February, centred on 1 January
    t = candidate_epochs(2020.5, 2023.5, months=parse_months("11-2"))
    np.testing.assert_allclose(t, [2021.0, 2022.0, 2023.0], atol=1e-4)
    # a user's list is filtered by the window
    t = candidate_epochs(2020.0, 2030.0, months=(6,), epochs=[2021.45, 2021.9, 2040.4])
    np.testing.assert_allclose(t, [2021.45])


# ---------------------------------------------------------------- passages
def test_pericentre_epochs_are_t_peri_plus_whole_periods(newtonian_fit):
    """Keplerian stars: next pericentre t_p + n P; sigma by the delta method.

    var = var(t_p) + n^2 var(P) + 2 n cov(t_p, P) from the fit's covariance (an
    independent computation from the reported covariance); the draw-based
    sigma of 4000 draws scatters by ~1/sqrt(2 * 4000) ~ 1.1%, tolerance 8%.
    """
    res, _ = newtonian_fit
    draws = draw_vectors(res, 4000, np.random.default_rng(1))
    table = next_passages(res, 2027.3, draws).set_index("star")
    for star in res.stars:
        tp, per = res.value(f"{star}:t_peri"), res.value(f"{star}:period")
        n = np.ceil((2027.3 - tp) / per)
        assert table.loc[star, "pericentre"] == pytest.approx(tp + n * per, abs=1e-9)
        m = np.ceil((2027.3 - tp) / per - 0.5)
        assert table.loc[star, "apocentre"] == pytest.approx(tp + (m + 0.5) * per, abs=1e-9)
        i, j = res.labels.index(f"{star}:t_peri"), res.labels.index(f"{star}:period")
        var = res.cov[i, i] + n**2 * res.cov[j, j] + 2 * n * res.cov[i, j]
        assert table.loc[star, "pericentre_sigma"] == pytest.approx(np.sqrt(var), rel=0.08)


# ------------------------------------------------------------------ check 1
def _inside_ellipse(table):
    """Whether the true position lies in the table's 95% ellipse around the best fit.

    The ellipse is rebuilt from its semi-axes and position angle (east of
    north): inside when (d.u / major)^2 + (d.v / minor)^2 <= 1, u along the
    major axis, v perpendicular to it.
    """
    pa = np.radians(table["pos95_pa"].to_numpy())
    u = np.stack([np.sin(pa), np.cos(pa)])
    v = np.stack([np.cos(pa), -np.sin(pa)])
    d = np.stack([table["ra_true"] - table["ra"], table["dec_true"] - table["dec"]])
    return ((d * u).sum(0) / table["pos95_major"]) ** 2 \
        + ((d * v).sum(0) / table["pos95_minor"]) ** 2 <= 1.0


@pytest.mark.slow
# lmfit's own stderr step inside fit_joint warns on one realisation (seed 107): not ours
@pytest.mark.filterwarnings("ignore:invalid value encountered in sqrt:RuntimeWarning")
def test_prediction_band_holds_the_next_five_years(tmp_path):
    """Check: a fit of 2000-2020 predicts the true 2020-2025 positions in its 95% band.

    The band of a sky position is its 95% error ellipse.  Counted over star
    and epoch, pooled over twelve noise realisations (seeds 100-111) of eight
    stars: one realisation has too few stars for a stable fraction, since a
    star that is off stays off at every epoch (single realisations ranged from
    75% to 100%; pooled 91.7% when written, below the nominal 95%: the
    Gaussian draws miss the non-Gaussian tails of long-period stars); the
    brief asks for at least 90%.  The bands
    must not be trivially wide: median 95% semi-major axis below 2% of the
    separation.  The per-coordinate 68% bands are checked loosely too.
    """
    merged = []
    for seed in range(100, 112):
        res, obs = _band_fit(tmp_path, seed)
        truth = obs.positions[obs.positions["dataset"] == "truth"]
        epochs = np.unique(truth["epoch"].to_numpy())
        draws = draw_vectors(res, 1000, np.random.default_rng(2))
        table, _ = predict_grid(res, epochs, draws)
        merged.append(table.merge(truth, on=["star", "epoch"], suffixes=("", "_true")))
        assert len(merged[-1]) == len(truth)
    merged = pd.concat(merged, ignore_index=True)
    inside = _inside_ellipse(merged)
    print(f"95% ellipse coverage: {inside.mean():.3f} of {len(merged)} star-epochs")
    assert inside.mean() >= 0.90
    assert np.median(merged["pos95_major"] / merged["sep"]) < 0.02
    in68 = (merged["ra_lo68"] <= merged["ra_true"]) & (merged["ra_true"] <= merged["ra_hi68"])
    assert 0.45 <= in68.mean() <= 0.9
# ------------------------------------------------------------------ check 2
@pytest.mark.slow
def test_forecast_agrees_with_refit_of_suggested_epochs(tmp_path):
    """Check: the Fisher forecast matches the errors of a refit within 30%.

    The three best single epochs for the mass (observing seasons March to
    September, 2020-2030) are simulated with the stated errors and the whole
    data set refitted; the refit's errors of mass and distance are compared
    with the forecast for those three epochs together.
    """
    folder = _scenario(tmp_path, BAND_SCENARIO + NEWTONIAN, "before")
    settings = effects_from_args(Settings(), newtonian=True)
    res = fit_joint(read_observations(folder), settings)
    cand = candidate_epochs(2020.0, 2030.0, months=parse_months("3-9"))
    single, _ = fisher_forecast(res, cand, 0.5, 10.0)
    best = single.iloc[:-1].sort_values("rank_mass")["epoch"].to_numpy()[:3]
    both, _ = fisher_forecast(res, best, 0.5, 10.0)
    after = both.iloc[-1]
    extra = _single_epoch_campaigns(best, 0.5, 10.0)
    folder2 = _scenario(tmp_path, BAND_SCENARIO + extra + NEWTONIAN, "after")
    res2 = fit_joint(read_observations(folder2), settings)
    for q in ("mass", "distance"):
        forecast_ratio = after[f"sigma_after_{q}"] / res.sigma(q)
        actual_ratio = res2.sigma(q) / res.sigma(q)
        print(f"{q}: forecast sigma ratio {forecast_ratio:.3f}, refit {actual_ratio:.3f}")
        assert forecast_ratio == pytest.approx(actual_ratio, rel=0.30)
        forecast_gain, actual_gain = 1 - forecast_ratio, 1 - actual_ratio
        assert forecast_gain == pytest.approx(actual_gain, rel=0.30)


# ------------------------------------------------------------------ check 3
TIGHT_SCENARIO = textwrap.dedent("""
    name = "one tight star"
    story = "invented: one star on a tight, eccentric orbit and three wide ones"
    seed = 2468
    reference_epoch = 2010.0
    [truth]
    mass = 4.0e6
    distance = 8000.0
    vz0 = -3.0
    [stars.q-1]
    a = 125.0
    e = 0.88
    inc = 130.0
    node = 225.0
    peri_arg = 65.0
    t_peri = 2026.45
    [stars.q-2]
    a = 330.0
    e = 0.5
    inc = 60.0
    node = 100.0
    peri_arg = 200.0
    t_peri = 2001.0
    [stars.q-3]
    a = 450.0
    e = 0.3
    inc = 20.0
    node = 300.0
    peri_arg = 40.0
    t_peri = 2015.0
    [stars.q-4]
    a = 280.0
    e = 0.7
    inc = 100.0
    node = 30.0
    peri_arg = 320.0
    t_peri = 2008.0
    [[campaigns]]
    dataset = "imager"
    kind = "positions"
    start = 2000.0
    end = 2022.5
    cadence = 1.0
    error = [0.4, 0.6]
    [[campaigns]]
    dataset = "spectra"
    kind = "velocities"
    start = 2003.0
    end = 2022.5
    cadence = 1.0
    error = [8.0, 12.0]
""")


@pytest.fixture(scope="module")
def tight_fit(tmp_path_factory):
    """Relativistic data, relativistic fit with f and f_sp held at 1 (the default)."""
    root = tmp_path_factory.mktemp("plan_tight")
    folder = _scenario(root, TIGHT_SCENARIO, "data")
    return fit_joint(read_observations(folder), Settings()), folder


def test_pericentre_season_ranks_first_for_redshift_and_precession(tight_fit):
    """Check: with one tight star, the season of its pericentre (2026) ranks first for f, f_sp."""
    res, _ = tight_fit
    cand = candidate_epochs(2023.0, 2030.0, months=parse_months("3-9"))
    table, notes = fisher_forecast(res, cand, 0.5, 10.0)
    single = table.iloc[:-1]
    for q in ("f", "f_sp"):
        top = single.sort_values(f"rank_{q}").iloc[0]
        print(q, single[["epoch", f"gain_{q}"]].round(4).to_numpy().tolist())
        assert int(top["epoch"]) == 2026
    assert any("frees them" in n for n in notes)


def test_freed_strength_matches_a_fit_with_it_free(tight_fit):
    """f held at 1 in the fit: its forecast 'now' error equals that of a fit with f free.

    Independent value: the covariance of a refit with f and f_sp free (the
    same data); the two differ only by the solution moving slightly, so 10%.
    """
    res, folder = tight_fit
    free_fit = fit_joint(read_observations(folder),
                         effects_from_args(Settings(), fit_f=True, fit_f_sp=True))
    table, _ = fisher_forecast(res, [2026.46], 0.5, 10.0)
    for q in ("f", "f_sp", "mass"):
        assert table[f"sigma_now_{q}"].iloc[0] == pytest.approx(free_fit.sigma(q), rel=0.10)


def test_newtonian_fit_skips_the_strengths(newtonian_fit):
    res, _ = newtonian_fit
    table, notes = fisher_forecast(res, [2021.5, 2022.5], 0.5, 10.0)
    assert "gain_f" not in table and "gain_mass" in table
    assert any("f is not in the model" in n for n in notes)
    assert (table["gain_mass"] > 0).all()


# -------------------------------------------------------------- command line
def _digests(folder):
    return {p.relative_to(folder).as_posix(): hashlib.sha256(p.read_bytes()).hexdigest()
            for p in sorted(folder.rglob("*")) if p.is_file()}


def test_command_writes_plan_folder_and_refuses_to_overwrite(newtonian_fit, tmp_path):
    res, _ = newtonian_fit
    report = tmp_path / "report"
    write_report(res, report, analyse(res), figures=False)
    before = _digests(report)
    parser = argparse.ArgumentParser()
    add_plan_parser(parser.add_subparsers())
    argv = ["plan", str(report), "--from", "2020.0", "--to", "2030.0", "--months", "4-8",
            "--astrometry-error", "0.5", "--velocity-error", "10", "--draws", "100",
            "--resolution", "40", "--stars", "p-1", "p-2"]
    args = parser.parse_args(argv)
    assert args.func(args) == 0
    plan_dir = report / "plan"
    for name in ("predictions.ecsv", "passages.ecsv", "approaches.ecsv", "forecast.ecsv",
                 "predictions.pdf", "predictions.png", "gain.pdf", "gain.png", "plan.md"):
        assert (plan_dir / name).is_file(), name
    text = (plan_dir / "plan.md").read_text()
    assert "assumes that the fitted model is right" in text
    from astropy.table import Table
    pred = Table.read(plan_dir / "predictions.ecsv")
    assert str(pred["sep_hi95"].unit) == "mas" and str(pred["vr"].unit) == "km / s"
    assert str(pred["pa"].unit) == "deg" and set(pred["star"]) == {"p-1", "p-2"}
    with pytest.raises(OutputError):
        run_plan(parser.parse_args(argv))
    assert run_plan(parser.parse_args(argv + ["--replace", "--no-figures"])) == 0
    assert not (plan_dir / "gain.png").exists()
    after = _digests(report)
    assert {k: v for k, v in after.items() if not k.startswith("plan/")} == before


def test_posterior_samples_are_used_and_checked(newtonian_fit, tmp_path):
    """Samples drawn from the fit's own Gaussian give the same errors as the covariance.

    3000 samples estimate a standard deviation to ~1.3%; tolerances 10% on the
    passage sigmas (2000 draws) and 5% on the forecast errors.
    """
    res, _ = newtonian_fit
    rng = np.random.default_rng(5)
    samples = draw_vectors(res, 3000, rng)
    path = tmp_path / "posterior-samples.npz"
    np.savez(path, internal_samples=samples, internal_names=np.array(res.model.layout.names()))
    loaded = load_samples(path, res)
    settings = PlanSettings(2021.0, 2024.0, n_draws=2000, seed=3, epochs=(2021.5, 2022.5))
    with_samples = make_plan(res, settings, samples=loaded)
    plain = make_plan(res, settings)
    assert with_samples.source == "posterior samples"
    np.testing.assert_allclose(with_samples.passages["pericentre_sigma"],
                               plain.passages["pericentre_sigma"], rtol=0.1)
    for col in ("sigma_now_mass", "sigma_after_mass", "sigma_after_distance"):
        np.testing.assert_allclose(with_samples.forecast[col], plain.forecast[col], rtol=0.05)
    np.savez(path, internal_samples=samples, internal_names=np.array(["x"] * samples.shape[1]))
    with pytest.raises(InputError, match="do not match"):
        load_samples(path, res)


# ------------------------------------------------------ RA, Dec, position angle
def _thiele_innes_sky(a, e, inc, node, peri_arg, t_peri, period, t):
    """East and north offsets from the classic visual-binary formulas (physics.md sect. 2).

    Independent of deepwell's kernels: Kepler's equation solved by scipy's brentq,
    angles in degrees, a in any angular unit.
    """
    i, om, w = np.radians(inc), np.radians(node), np.radians(peri_arg)
    big_a = a * (np.cos(w) * np.cos(om) - np.sin(w) * np.sin(om) * np.cos(i))
    big_b = a * (np.cos(w) * np.sin(om) + np.sin(w) * np.cos(om) * np.cos(i))
    big_f = a * (-np.sin(w) * np.cos(om) - np.cos(w) * np.sin(om) * np.cos(i))
    big_g = a * (-np.sin(w) * np.sin(om) + np.cos(w) * np.cos(om) * np.cos(i))
    east, north = [], []
    for tt in np.atleast_1d(t):
        mean = np.mod(2 * np.pi * (tt - t_peri) / period, 2 * np.pi)
        ecc = brentq(lambda x, m=mean: x - e * np.sin(x) - m, 0.0, 2 * np.pi)
        x, y = np.cos(ecc) - e, np.sqrt(1 - e**2) * np.sin(ecc)
        north.append(big_a * x + big_f * y)
        east.append(big_b * x + big_g * y)
    return np.array(east), np.array(north)


def test_position_angle_matches_meeus_worked_example():
    # Meeus, Astronomical Algorithms, 2nd ed. (1998), Example 57.a: at 1980.0 the pair is
    # at rho = 0.411 arcsec, theta = 318.4 deg (full precision 0.411018", 318.4243 deg,
    # physics.md sect. 2 [verified]); tolerances 1e-5 arcsec and 1e-3 deg.
    east, north = _thiele_innes_sky(0.907, 0.2763, 59.025, 23.717, 219.907, 1934.008, 41.623,
                                    1980.0)
    assert position_angle(east, north)[0] == pytest.approx(318.4243, abs=1e-3)
    assert np.hypot(east, north)[0] == pytest.approx(0.411018, abs=1e-5)
    # quadrants: due east is 90 deg, due south 180, due west 270 (common practice)
    np.testing.assert_allclose(position_angle([1.0, 0.0, -1.0, 0.0], [0.0, -1.0, 0.0, 1.0]),
                               [90.0, 180.0, 270.0, 0.0])


def test_predicted_offsets_and_position_angle_match_independent_computations(newtonian_fit):
    """RA, Dec from the visual-binary formulas; PA and separation from astropy.

    The fit is Newtonian without the Romer delay, so the best-fit offsets are the
    Thiele-Innes positions of the fitted elements (tolerance 1e-6 mas).  astropy's
    SkyCoord.position_angle and separation of the offset point from an invented
    centre (RA 150 deg, Dec -35 deg) agree to 1e-6 deg and 1e-6 mas: for offsets
    of a few hundred mas the tangent plane and the sphere differ by ~1e-12
    relative, and double precision of coordinates in degrees limits astropy to
    ~5e-8 mas.
    """
    res, _ = newtonian_fit
    epochs = np.array([2021.0, 2024.5, 2031.2])
    table, _ = predict_grid(res, epochs, draw_vectors(res, 50, np.random.default_rng(0)))
    centre = SkyCoord(150.0 * u.deg, -35.0 * u.deg)
    for star in res.stars:
        rows = table[table["star"] == star]
        el = [res.value(f"{star}:{q}") for q in ("a", "e", "inc", "node", "peri_arg",
                                                 "t_peri", "period")]
        east, north = _thiele_innes_sky(*el, epochs)
        np.testing.assert_allclose(rows["ra"], east, atol=1e-6)
        np.testing.assert_allclose(rows["dec"], north, atol=1e-6)
        point = centre.spherical_offsets_by(rows["ra"].to_numpy() * u.mas,
                                            rows["dec"].to_numpy() * u.mas)
        pa = centre.position_angle(point).to_value(u.deg)
        assert np.all(np.abs((rows["pa"] - pa + 180.0) % 360.0 - 180.0) < 1e-6)
        np.testing.assert_allclose(rows["sep"], centre.separation(point).to_value(u.mas),
                                   rtol=0, atol=1e-6)
        assert np.all(rows["pa_lo95"] <= rows["pa"]) and np.all(rows["pa"] <= rows["pa_hi95"])


def test_star_selection_and_fields_of_view_limit_what_is_observed(newtonian_fit):
    res, _ = newtonian_fit
    base = PlanSettings(2021.0, 2025.0, n_draws=40, epochs=(2021.5, 2023.5),
                        astrometry_error=0.5, velocity_error=10.0)
    chosen = ("p-3", "p-1")
    plan = make_plan(res, dataclasses.replace(base, stars=chosen))
    assert set(plan.predictions["star"]) == set(plan.passages["star"]) == set(chosen)
    assert (plan.forecast["n_astrometry"].iloc[:-1] == 2).all()
    full = make_plan(res, base)
    # information only grows with more stars observed (normal equations, Press et al. 2007
    # sect. 15.4): now >= after(2 stars) >= after(all 8 stars)
    now, two, eight = (full.forecast["sigma_now_mass"], plan.forecast["sigma_after_mass"],
                       full.forecast["sigma_after_mass"])
    assert np.all(now >= two) and np.all(two > eight)
    # a field of view smaller than every separation observes nothing: no gain at all
    blind = make_plan(res, dataclasses.replace(base, astrometry_field=1e-3, velocity_field=1e-3))
    assert (blind.forecast["n_astrometry"] == 0).all()
    np.testing.assert_array_equal(blind.forecast["gain_mass"], 0.0)
    # a radius between the separations: counted against the Thiele-Innes separations
    radius = 300.0
    field = make_plan(res, dataclasses.replace(base, astrometry_field=radius))
    for t, n in zip((2021.5, 2023.5), field.forecast["n_astrometry"].iloc[:-1], strict=True):
        inside = 0
        for star in res.stars:
            el = [res.value(f"{star}:{q}") for q in ("a", "e", "inc", "node", "peri_arg",
                                                     "t_peri", "period")]
            inside += int(np.hypot(*_thiele_innes_sky(*el, t))[0] <= radius)
        assert 0 < n == inside < len(res.stars)
    with pytest.raises(InputError, match="--stars"):
        make_plan(res, dataclasses.replace(base, stars=("p-1", "nobody")))


def test_default_errors_name_the_latest_data_set(newtonian_fit):
    # The default error of a new epoch is that of the instrument in use (the data set
    # observed last), to two significant figures (common practice), not a median over all.
    res, _ = newtonian_fit
    m = res.model
    pos, vel, sources = default_errors(m)
    imager = m.pos.dataset == "imager"
    assert pos == float(f"{np.median(np.minimum(m.pos.ra_err, m.pos.dec_err)[imager]):.2g}")
    assert vel == float(f"{np.median(m.vel.vr_err[m.vel.dataset == 'spectra']):.2g}")
    assert "'imager'" in sources[0] and "'spectra'" in sources[1]


def test_all_year_observability_gives_one_candidate_per_year():
    # without an observability window every Julian year is one season (common practice:
    # one observing campaign per year)
    from deepwell.tools.plan import candidate_epochs

    t = candidate_epochs(2025.0, 2035.0)
    assert len(t) == 10
    assert np.allclose(np.diff(t), 1.0)
