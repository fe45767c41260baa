"""Model comparison: the ladder, the bootstrap's statistics, injection-recovery, the command.

Invented scenarios only (injection-recovery); the statistical laws checked are
named beside each test.
"""

import dataclasses
import textwrap

import numpy as np
import pytest
from astropy.table import Table
from scipy import stats

import deepwell.report.comparison as report_comparison
from deepwell.cli import main
from deepwell.core.errors import DeepwellError
from deepwell.fit.joint import fit_joint
from deepwell.fit.ladder import fit_ladder, refit_simulated, simulate_measurements
from deepwell.fit.result import assemble_result
from deepwell.results.comparison import bootstrap_p, compare_models, extrapolated_p, with_evidence
from deepwell.tables.settings import Settings, SharedSetting
from deepwell.tools.calibrate import observations_from, open_client
from deepwell.tools.compare import run_bootstrap
from deepwell.tools.simulate import load_description, simulate
from tests.conftest import one_line_error, snapshot

# Invented for these tests: one star on a tight, eccentric, well-sampled orbit
# (P ~ 15.6 yr, two pericentre passages), interferometric positions relative to the mass.
TIGHT = textwrap.dedent("""
    name = "tight test nucleus"
    story = "one invented star on a tight, well-sampled orbit"
    seed = 5
    reference_epoch = 2000.0

    [truth]
    mass = 4.0e6
    distance = 8000.0

    [effects]
    romer = true
    redshift = 1.0
    precession = 1.0

    [stars.q-1]
    a = 125.0
    e = 0.88
    inc = 134.0
    node = 228.0
    peri_arg = 66.0
    t_peri = 2010.0

    [[campaigns]]
    dataset = "interferometer"
    kind = "positions"
    relative_to = "mass"
    start = 2000.0
    end = 2034.0
    cadence = 3.0
    error = 0.05

    [[campaigns]]
    dataset = "spectra"
    kind = "velocities"
    start = 2000.0
    end = 2034.0
    cadence = 3.0
    error = 10.0
""")

# Invented: two Newtonian stars in a drifting frame, correlated position errors.
LINEAR = textwrap.dedent("""
    name = "frame test nucleus"
    story = "two invented stars for the linear frame-term check"
    seed = 3
    reference_epoch = 2000.0

    [truth]
    mass = 4.0e6
    distance = 8000.0
    x0 = 0.3
    y0 = -0.2

    [effects]
    romer = false
    redshift = 0.0
    precession = 0.0

    [stars.s-1]
    a = 120.0
    e = 0.6
    inc = 60.0
    node = 100.0
    peri_arg = 40.0
    t_peri = 2005.0

    [[campaigns]]
    dataset = "imager"
    kind = "positions"
    start = 2000.0
    end = 2020.0
    cadence = 2.0
    error = [0.4, 0.7]
    corr = 0.5
""")


def _description(tmp_path, text, name):
    path = tmp_path / f"{name}.toml"
    path.write_text(text, encoding="utf-8")
    return load_description(path)


def _observations(desc, seed, **effects):
    if effects:
        desc = dataclasses.replace(desc, effects=dataclasses.replace(desc.effects, **effects))
    return observations_from(simulate(desc, np.random.default_rng(seed)))


@pytest.fixture(scope="module")
def tight(tmp_path_factory):
    return _description(tmp_path_factory.mktemp("tight"), TIGHT, "tight")


@pytest.fixture(scope="module")
def gr_ladder(tight):
    """The ladder fitted to data made with f = f_sp = 1 (seed 11)."""
    return fit_ladder(_observations(tight, 11), Settings())


@pytest.fixture(scope="module")
def client():
    with open_client(n_workers=2, processes=False) as c:
        yield c


# ------------------------------------------------------------------ statistics
def test_delta_chi2_of_a_linear_nested_model_follows_chi2_with_the_added_dof(tmp_path):
    # Wilks 1938 (Ann. Math. Stat. 9, 60); for a model linear in its parameters with
    # Gaussian errors the law chi2(k) is exact, not asymptotic (common practice).
    # The orbit, mass and distance are held: positions are then linear in x0, y0, vx0,
    # vy0; the null holds vx0 = vy0 = 0, the richer model frees them (k = 2).
    obs = _observations(_description(tmp_path, LINEAR, "linear"), 1)
    fit = fit_joint(obs, Settings(shared={"distance": SharedSetting(value=8000.0, fixed=True)}))
    lay = fit.model.layout
    frame = [lay.index(n) for n in ("x0", "y0", "vx0", "vy0")]
    alt_free = np.zeros(lay.size, bool)
    alt_free[frame] = True
    null_free = alt_free.copy()
    null_free[frame[2:]] = False
    vec = fit.internal.copy()
    vec[frame[2:]] = 0.0
    null = assemble_result(fit.model, vec, null_free, fit.settings, obs)
    alt = assemble_result(fit.model, fit.internal, alt_free, fit.settings, obs)
    rng = np.random.default_rng(2024)
    deltas = np.array([refit_simulated(null, alt, simulate_measurements(null, rng))["delta"]
                       for _ in range(150)])
    assert stats.kstest(deltas, stats.chi2(2).cdf).pvalue > 1e-3
    # mean of chi2(2) is 2, its standard error over 150 draws 2/sqrt(150) = 0.16
    assert abs(deltas.mean() - 2.0) < 4 * 2.0 / np.sqrt(150)
    # and the law is not chi2(1) or chi2(3): a wrong dof would be told apart
    assert stats.kstest(deltas, stats.chi2(1).cdf).pvalue < 1e-3


def test_bootstrap_p_is_the_count_fraction_with_the_clopper_pearson_interval():
    # Clopper & Pearson 1934, Biometrika 26, 404: bounds are beta quantiles
    # (scipy.stats.beta as the reference); for k = 0 the upper bound is
    # 1 - (alpha/2)^(1/n) (from memory, the same formula at k = 0).
    null = np.array([0.5, 1.0, 2.0, 3.0, 4.0, 5.0, np.nan, 6.0, 0.1, 0.2])
    p, (lo, hi), z, z_lower = bootstrap_p(3.0, null)
    assert p == pytest.approx(4 / 9, abs=1e-15)
    assert lo == pytest.approx(stats.beta.ppf(0.025, 4, 6), rel=1e-9)
    assert hi == pytest.approx(stats.beta.ppf(0.975, 5, 5), rel=1e-9)
    assert z == pytest.approx(stats.norm.isf(4 / 9), rel=1e-12) and z_lower is None
    p, (lo, hi), z, z_lower = bootstrap_p(100.0, np.arange(50.0))
    assert p == 0.0 and lo == 0.0 and z is None
    assert hi == pytest.approx(1.0 - 0.025 ** (1 / 50), rel=1e-9)
    assert z_lower == pytest.approx(stats.norm.isf(hi), rel=1e-12)


def test_extrapolated_tail_matches_the_law_the_null_was_drawn_from():
    # Reference tails from scipy.stats; moment matching of c chi2(nu): Satterthwaite 1946.
    rng = np.random.default_rng(7)
    gauss = rng.normal(-25.0, 10.0, 20000)
    p, law = extrapolated_p(25.0, gauss)
    assert law == "Gaussian" and p == pytest.approx(stats.norm.sf(5.0), rel=0.5)
    scaled = 2.0 * rng.chisquare(3, 20000)
    p, law = extrapolated_p(2.0 * 20.0, scaled)
    assert law == "scaled chi-square" and p == pytest.approx(stats.chi2.sf(20.0, 3), rel=0.5)


# ------------------------------------------------------------------ injection-recovery
def test_injected_precession_redshift_and_romer_are_detected_and_recovered(gr_ladder, client):
    # Injection-recovery: data made with f = f_sp = 1 on a tight, well-sampled orbit.
    ladder = gr_ladder
    deltas, info = run_bootstrap(ladder, 20, ("precession", "no-redshift", "no-romer"),
                                 seed=3, client=client)
    comparison = compare_models(ladder, deltas, info)
    tests = {t.key: t for t in comparison.tests}
    for key in ("precession", "no-redshift", "no-romer"):
        t = tests[key]
        assert t.p == 0.0 and t.null_deltas.size == 20  # no simulated set reaches it
        p_x, _ = extrapolated_p(t.delta, t.null_deltas)
        assert p_x < 1e-3
        assert "detected" in t.verdict and "not detected" not in t.verdict
    for key, name in (("f_sp-free", "f_sp"), ("f-free", "f")):
        v, s = getattr(comparison.row(key), name)
        assert abs(v - 1.0) < 3 * s and v / s > 3  # within 3 sigma of 1, far from 0
    assert comparison.row("precession").mass[0] == pytest.approx(4.0e6, rel=0.01)


def test_no_precession_injected_gives_no_detection(tight):
    # Injection-recovery: f_sp = 0 in the data; the precession step must not be detected
    # (the bootstrap version, 40 trials, is the slow test below).
    obs = _observations(tight, 12, precession=0.0)
    comparison = compare_models(fit_ladder(obs, Settings()))
    v, s = comparison.row("f_sp-free").f_sp
    assert abs(v) < 3 * s and abs(v - 1.0) > 3 * s  # consistent with 0, not with 1
    t = next(t for t in comparison.tests if t.key == "precession")
    assert t.delta < 0 and "not supported" in t.verdict  # GR fits these data worse


def test_an_injected_plummer_mass_is_found_and_none_gives_an_upper_limit(tight, client):
    # Injection-recovery: a Plummer sphere of 2e4 Msun (0.5% of the point mass), b = 500 au.
    obs = _observations(tight, 13, plummer_mass=2.0e4, plummer_scale=500.0)
    ladder = fit_ladder(obs, Settings(), scale_radii=(500.0,))
    deltas, info = run_bootstrap(ladder, 20, ("extended-500",), seed=5, client=client)
    comparison = compare_models(ladder, deltas, info)
    row = comparison.row("extended-500")
    x, s = row.ext
    true_inside = 2.0e4 * (comparison.reference_radius**3
                           / (comparison.reference_radius**2 + 500.0**2) ** 1.5) / 4.0e6
    assert abs(x - true_inside) < 3 * s and x / s > 3
    t = next(t for t in comparison.tests if t.key == "extended-500")
    assert t.p == 0.0 and "extended mass preferred" in t.verdict


# ------------------------------------------------------------------ command and report
def test_compare_command_writes_tables_figure_and_keeps_the_folder_on_failure(
        tmp_path, tight, capsys, monkeypatch):
    drawn = []

    def recording(comparison):
        drawn.append(real_figure(comparison))
        return drawn[-1]

    real_figure = report_comparison.comparison_figure
    monkeypatch.setattr(report_comparison, "comparison_figure", recording)
    folder = tmp_path / "scenario"
    folder.mkdir()
    obs = _observations(tight, 21)
    obs.positions.drop(columns=["exclude", "line", "file"]).to_csv(folder / "positions.csv",
                                                                   index=False)
    obs.velocities.drop(columns=["exclude", "line", "file"]).to_csv(folder / "velocities.csv",
                                                                    index=False)
    out = tmp_path / "cmp"
    assert main(["compare", str(folder), "--out", str(out), "--bootstrap", "3", "--test",
                 "precession", "--in-process", "--workers", "2", "-q"]) == 0
    models = Table.read(out / "models.ecsv")
    assert list(models["key"])[:4] == ["newtonian", "romer", "redshift", "precession"]
    # AIC and BIC by their definitions (Akaike 1974; Schwarz 1978): chi2 + 2k, chi2 + k ln n
    n = models.meta["n_data"]
    assert np.allclose(models["aic"], models["chi2"] + 2 * models["n_free"], rtol=1e-12)
    assert np.allclose(models["bic"], models["chi2"] + models["n_free"] * np.log(n), rtol=1e-12)
    assert bool(models["f_fixed"][models["key"] == "redshift"][0])
    # Laplace evidences by default (deepwell.results.evidence), their prior stated
    assert set(models["evidence_method"]) == {"laplace"}
    assert np.all(np.isfinite(models["log_evidence"]))
    text = (out / "comparison.md").read_text(encoding="utf-8")
    assert "## Verdicts" in text and "comparison.png" in text and "ln Z" in text
    # figures carry no titles (journals set captions outside; common practice): the
    # caption is in the markdown, every axis label ends with its unit in parentheses
    assert "*Figure.* Delta chi-square of each step" in text and "(precession)" in text
    assert len(drawn) == 1
    for ax in drawn[0].axes:
        assert not any(ax.get_title(loc) for loc in ("left", "center", "right"))
        assert not ax.get_xlabel() or ax.get_xlabel().endswith(")")
        assert not ax.get_ylabel() or ax.get_ylabel().endswith(")")
    assert "- mass: uniform on [" in text and "ln B vs simpler" in text
    assert (out / "models.tex").read_text(encoding="utf-8").count(r"\\") >= 9
    assert len(Table.read(out / "bootstrap.ecsv")) == 3
    before = snapshot(out)
    assert main(["compare", str(tmp_path / "missing"), "--out", str(out), "--replace",
                 "-q"]) == 2
    assert "missing" in one_line_error(capsys)
    assert snapshot(out) == before


def test_evidence_columns_appear_only_when_filled(gr_ladder):
    plain = compare_models(gr_ladder)
    assert not plain.has_evidence
    filled = with_evidence(plain, {"redshift": (-10.0, 0.2, "test"),
                                   "precession": (-4.0, 0.3, "test")})
    assert filled.has_evidence and filled.row("precession").log_evidence == -4.0
    assert filled.row("romer").log_evidence is None


# ------------------------------------------------------------------ slow statistical loops
def _null_p_values(tight, n_data_sets, n_boot, client, first_seed):
    """Bootstrap p of the f_sp-free step on data sets made with f_sp = 0 (the null)."""
    out = []
    for i in range(n_data_sets):
        obs = _observations(tight, first_seed + i, precession=0.0)
        ladder = fit_ladder(obs, Settings())
        deltas, _ = run_bootstrap(ladder, n_boot, ("f_sp-free",), seed=first_seed + i,
                                  client=client)
        d = deltas["f_sp-free"][0]
        d = d[np.isfinite(d)]
        observed = next(f.result.chi2 for f in ladder if f.rung.key == "redshift") \
            - next(f.result.chi2 for f in ladder if f.rung.key == "f_sp-free")
        k = int(np.sum(d >= observed))
        out.append(((k + 1) / (d.size + 1), k / d.size))
    return np.array(out)


@pytest.mark.slow
def test_no_injected_precession_gives_bootstrap_p_above_001_in_95_percent_of_40_trials(
        tight, client):
    # Injection-recovery under the null f_sp = 0; 40 trials, 100 bootstrap sets each.
    p = _null_p_values(tight, 40, 100, client, 1000)[:, 1]
    assert np.mean(p > 0.01) >= 0.95


@pytest.mark.slow
def test_bootstrap_p_values_under_the_null_are_uniform(tight, client):
    # Kolmogorov-Smirnov test (scipy.stats.kstest) of 100 null p-values against U(0, 1);
    # p = (k + 1)/(n + 1) is uniform on its grid under the null (Davison & Hinkley 1997,
    # Bootstrap Methods and their Application, section 4.2; from memory).
    p = _null_p_values(tight, 100, 50, client, 2000)[:, 0]
    assert stats.kstest(p, "uniform").pvalue > 1e-3


def test_a_resumed_bootstrap_equals_the_uninterrupted_one(gr_ladder, client, tmp_path):
    # Same seeds per trial index (SeedSequence spawn keys), so a resumed run must
    # reproduce the journalled trials exactly (common practice for seeded trials).
    journal = tmp_path / "cmp.trials.jsonl"
    first, _ = run_bootstrap(gr_ladder, 3, ("precession",),
                             seed=9, client=client, journal=journal)
    with pytest.raises(DeepwellError, match="--resume"):
        run_bootstrap(gr_ladder, 3, ("precession",), seed=9, client=client, journal=journal)
    again, _ = run_bootstrap(gr_ladder, 3, ("precession",), seed=9, client=client,
                             journal=journal, resume=True)
    assert np.array_equal(first["precession"][0], again["precession"][0])
    fresh, _ = run_bootstrap(gr_ladder, 3, ("precession",), seed=9, client=client)
    assert np.allclose(first["precession"][0], fresh["precession"][0], rtol=1e-9)
