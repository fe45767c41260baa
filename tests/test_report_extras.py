"""Tests of the newer report content: effects, enclosed mass, extended mass, posterior.

Fits use the invented ``small_scenario`` of conftest.py; every check compares the
report with an independent computation (numpy percentiles of the samples, the
effect_summary dict, the profile's own masses, a direct chi-square) within a
stated tolerance.
"""

import json
import math
from dataclasses import replace
from types import SimpleNamespace

import matplotlib.text
import numpy as np
import pytest
from astropy.table import Table

from deepwell.fit.joint import fit_joint
from deepwell.fit.sampling import SamplerOptions, SamplingWarning, sample_posterior
from deepwell.report.figures.effects import effect_figure_jobs, precession_curves, redshift_curves
from deepwell.report.figures.enclosed import enclosed_figure
from deepwell.report.figures.orbits import sky_figure, star_figure
from deepwell.report.figures.posterior import (
    CONTOUR_LEVELS,
    corner_figure,
    mass_distance_data,
    mass_distance_figure,
)
from deepwell.report.figures.style import _metadata
from deepwell.report.sections import OSCULATING_STATEMENT
from deepwell.report.tables import format_asymmetric
from deepwell.report.writer import compactness_choice, write_report
from deepwell.results import analyse
from deepwell.results.effect_sizes import star_effect_sizes
from deepwell.results.enclosed import enclosed_mass_profile
from deepwell.results.newtonian import newtonian_refit
from deepwell.tables.effects import effects_from_args
from deepwell.tables.observations import read_observations
from deepwell.tables.settings import Settings

PDF_MAGIC = b"%PDF"  # PDF 1.7 (ISO 32000-1) sect. 7.5.2
PNG_MAGIC = b"\x89PNG\r\n\x1a\n"  # PNG (ISO/IEC 15948) sect. 5.2

#: Hand-made limits in the format of effect_summary.extended_mass_limits (that
#: function needs one fit per radius: too slow for the fast suite).
LIMITS = [{"scale_radius_au": 500.0, "reference_radius_au": 1500.0, "ext_fraction": 0.001,
           "ext_fraction_sigma": 0.002, "ext_mass_msun": 2.6e3, "ext_mass_sigma_msun": 5.2e3,
           "upper_95_fraction": 0.0043, "upper_997_fraction": 0.0062, "upper_95_msun": 1.1e4,
           "upper_997_msun": 1.6e4, "lower_997_fraction": -0.005, "detected": False,
           "chi2": 240.0, "method": "hand-made for the test"}]


@pytest.fixture(scope="module")
def obs(small_scenario):
    return read_observations(small_scenario)


@pytest.fixture(scope="module")
def rel_fit(obs):
    """Fit with the default (relativistic) effects."""
    return fit_joint(obs, Settings())


@pytest.fixture(scope="module")
def rel_sizes(rel_fit):
    return star_effect_sizes(rel_fit)


@pytest.fixture(scope="module")
def rel_newton(rel_fit):
    return newtonian_refit(rel_fit)


@pytest.fixture(scope="module")
def rel_report(rel_fit, rel_sizes, tmp_path_factory):
    folder = tmp_path_factory.mktemp("rel")
    write_report(rel_fit, folder, replace(analyse(rel_fit), effect_sizes=rel_sizes),
                 figures=False)
    return folder


@pytest.fixture(scope="module")
def newt_fit(obs):
    return fit_joint(obs, effects_from_args(Settings(), newtonian=True))


@pytest.fixture(scope="module")
def posterior(newt_fit):
    """A deliberately short NUTS run (30 draws < 50 autocorrelation times of at
    least one transition): must say NOT CONVERGED."""
    with pytest.warns(SamplingWarning, match="NOT CONVERGED"):
        return sample_posterior(newt_fit, SamplerOptions(n_steps=30, n_warmup=20, n_chains=2,
                                                         progress=False, processes=1))


@pytest.fixture(scope="module")
def post_report(newt_fit, posterior, tmp_path_factory):
    folder = tmp_path_factory.mktemp("post")
    write_report(newt_fit, folder, replace(analyse(newt_fit, posterior=posterior),
                                           extended_limits=LIMITS), figures=False)
    return folder


def _summary(folder):
    return json.loads((folder / "summary.json").read_text())


def _samples(posterior, label):
    return posterior.samples[..., posterior.labels.index(label)].ravel()


# ------------------------------------------------------------------ posterior
@pytest.mark.parametrize("label", ["mass", "distance", "vz0", "t-1:e", "t-2:period",
                                   "t-3:r_peri"])
def test_posterior_summary_is_median_and_16_84_percentiles(posterior, post_report, label):
    data = _summary(post_report)
    entry = (data["parameters"][label] if ":" not in label
             else data["stars"][label.split(":")[0]][label.split(":")[1]])
    p16, p50, p84 = np.percentile(_samples(posterior, label), [16, 50, 84])  # independent
    assert (entry["value"], entry["lower"], entry["upper"]) == pytest.approx(
        (p50, p16, p84), rel=1e-12)
    assert entry["sigma"] == pytest.approx(0.5 * (p84 - p16), rel=1e-12)


def test_least_squares_numbers_are_kept_beside_the_posterior(newt_fit, post_report):
    ls = _summary(post_report)["least_squares"]
    assert ls["parameters"]["mass"]["value"] == pytest.approx(newt_fit.value("mass"), rel=1e-15)
    assert ls["parameters"]["mass"]["sigma"] == pytest.approx(newt_fit.sigma("mass"), rel=1e-15)
    assert ls["stars"]["t-1"]["e"]["value"] == pytest.approx(newt_fit.value("t-1:e"), rel=1e-15)


def test_sampling_block_records_the_diagnostics(posterior, post_report):
    s = _summary(post_report)["sampling"]
    assert s["statement"] == posterior.statement
    assert s["converged"] is False
    assert s["n_walkers"] == posterior.n_walkers
    assert s["n_steps"] == [30, 30]
    assert s["sampler"] == "nuts" and len(s["diagnostics"]) >= 2
    assert set(s["tau"]) == set(posterior.sampled_names) == set(s["rhat"]) == set(s["ess"])
    assert s["implied_priors"] == list(posterior.implied_priors)


def test_posterior_is_written_as_inference_data_that_arviz_reads_back(posterior, post_report):
    # arviz's own netCDF reader (an outside library) must give back every draw with its unit.
    import warnings

    with warnings.catch_warnings():
        warnings.simplefilter("ignore", FutureWarning)
        import arviz as az
    data = az.from_netcdf(str(post_report / "posterior.nc"))
    value = data.posterior["value"]
    assert list(value.coords["quantity"].values) == list(posterior.labels)
    assert list(value.coords["unit"].values) == list(posterior.units)
    for label in ("mass", "distance", "t-1:e"):
        got = value.sel(quantity=label).values  # (chain, draw)
        np.testing.assert_array_equal(got.ravel(), _samples(posterior, label))
    assert data.posterior.sizes["chain"] == 2 and "lp" in data.sample_stats
    assert data.posterior.attrs["statement"] == posterior.statement
    assert data.posterior.attrs["converged"] == 0


def test_not_converged_warning_heads_the_report(posterior, post_report):
    lines = (post_report / "report.md").read_text().splitlines()
    assert lines[0].startswith("**WARNING") and "did NOT converge" in lines[0]
    i = lines.index("## Posterior")
    assert lines[i + 2] == posterior.statement  # the statement verbatim, first in the section
    assert posterior.statement.startswith("NOT CONVERGED")


def test_posterior_star_table_has_percentile_errors(posterior, post_report):
    t = Table.read(post_report / "tables" / "posterior_stars.ecsv", format="ascii.ecsv")
    row = list(t["star"]).index("t-2")
    p16, p50, p84 = np.percentile(_samples(posterior, "t-2:a"), [16, 50, 84])
    assert t["a"].unit == "mas"
    assert t["a"][row] == pytest.approx(p50, rel=1e-12)
    assert t["a_minus"][row] == pytest.approx(p50 - p16, rel=1e-9)
    assert t["a_plus"][row] == pytest.approx(p84 - p50, rel=1e-9)
    shared = Table.read(post_report / "tables" / "posterior_shared.ecsv", format="ascii.ecsv")
    k = list(shared["parameter"]).index("mass")
    assert shared["median"][k] == pytest.approx(np.median(_samples(posterior, "mass")), rel=1e-12)


def test_compactness_over_the_posterior_uses_the_samples(newt_fit, posterior, post_report):
    comp = _summary(post_report)["compactness_posterior"]
    star = compactness_choice(newt_fit)[0]
    assert comp["star"] == star
    r = _samples(posterior, f"{star}:r_peri")
    assert comp["r_peri"]["median"] == pytest.approx(np.median(r), rel=1e-12)
    # Schwarzschild radius 2GM/c^2 = 2 * 1.476625 km per Msun (IAU 2015 nominal GM_sun)
    rs_au = 2.0 * 1.476625e3 * _samples(posterior, "mass") / 1.495978707e11
    assert comp["r_peri_in_rs"]["median"] == pytest.approx(np.median(r / rs_au), rel=1e-5)


def test_corner_and_mass_distance_figures_are_valid_files(posterior, tmp_path):
    for stem, fig in (("corner", corner_figure(posterior, ["mass", "distance", "vz0"])),
                      ("mass_distance", mass_distance_figure(posterior))):
        for fmt, magic in (("pdf", PDF_MAGIC), ("png", PNG_MAGIC)):
            path = tmp_path / f"{stem}.{fmt}"
            fig.savefig(path, format=fmt, metadata=_metadata(fmt))
            assert path.read_bytes()[:len(magic)] == magic


def test_mass_distance_contours_match_a_gaussian_posterior():
    """For a correlated Gaussian the 68.3% / 95.4% highest-density regions are the
    ellipses of squared Mahalanobis distance -2 ln(1 - q) (chi-square with 2 dof):
    the gridded contours must hold those fractions of the samples."""
    rng = np.random.Generator(np.random.PCG64(7))
    cov = np.array([[1.0, 0.9], [0.9, 1.0]])
    z = rng.multivariate_normal([0.0, 0.0], cov, size=40000)
    mass, dist = 4e6 + 4e4 * z[:, 0], 8000.0 + 100.0 * z[:, 1]
    post = SimpleNamespace(labels=("mass", "distance"), flat_samples=np.stack([mass, dist], 1))
    d = mass_distance_data(post)

    def cell(x, centres):  # index of the cell holding x (evenly spaced centres)
        w = centres[1] - centres[0]
        return np.clip(np.floor((x - centres[0] + 0.5 * w) / w).astype(int), 0, len(centres) - 1)

    dens = d["density"][cell(dist, d["distance"]), cell(mass, d["mass"])]
    maha = np.einsum("ij,jk,ik->i", z, np.linalg.inv(cov), z)
    for level, threshold in zip(CONTOUR_LEVELS, d["thresholds"], strict=True):
        inside = dens >= threshold
        assert inside.mean() == pytest.approx(level, abs=0.01)  # binning: 1 point
        ellipse = maha < -2.0 * np.log(1.0 - level)
        # the grid region and the exact ellipse agree on >= 95% of the samples (edge cells)
        assert np.mean(inside == ellipse) > 0.95


# ------------------------------------------------------------------ extended mass
def test_extended_mass_limits_in_summary_table_and_text(post_report):
    entry = _summary(post_report)["extended_mass"][0]
    assert entry["upper_95"] == {"value": LIMITS[0]["upper_95_msun"], "unit": "solMass"}
    assert entry["upper_997_fraction"]["value"] == LIMITS[0]["upper_997_fraction"]
    assert entry["reference_radius"]["value"] == LIMITS[0]["reference_radius_au"]
    assert entry["detected"] is False
    t = Table.read(post_report / "tables" / "extended_mass.ecsv", format="ascii.ecsv")
    assert t["upper_997"][0] == LIMITS[0]["upper_997_msun"]
    assert str(t["upper_997"].unit) == "solMass"
    text = (post_report / "report.md").read_text()
    assert "assume a Plummer density profile" in text


# ------------------------------------------------------------------ effects
def test_effect_table_equals_the_effect_summary(rel_fit, rel_sizes, rel_report):
    t = Table.read(rel_report / "tables" / "effects.ecsv", format="ascii.ecsv")
    for row, star in enumerate(t["star"]):
        d = rel_sizes[star]
        assert t["redshift_excess"][row] == pytest.approx(d["redshift_excess_kms"], rel=1e-12)
        assert t["precession"][row] == pytest.approx(d["precession_arcmin"], rel=1e-12)
        assert t["romer_range"][row] == pytest.approx(d["romer_range_days"], rel=1e-12)
        assert t["integrated_period"][row] == pytest.approx(d["integrated_period"], rel=1e-12)
        assert bool(t["detectable_redshift"][row]) == d["detectable_redshift"]
        assert t["t_peri_fit"][row] == pytest.approx(rel_fit.value(f"{star}:t_peri"), rel=1e-12)
    assert str(t["redshift_excess"].unit) == "km / s"
    assert str(t["precession"].unit) == "arcmin"


def test_summary_carries_effects_block_and_sizes(rel_fit, rel_sizes, rel_newton, rel_report):
    data = _summary(rel_report)
    # the Newtonian refit's delta chi-square, recomputed from the two fits' own residuals
    block = data["newtonian_refit"]
    newt = rel_newton.result
    direct = float(np.sum(newt.model.data_residuals(newt.internal) ** 2)
                   - np.sum(rel_fit.model.data_residuals(rel_fit.internal) ** 2))
    assert block["delta_chi2"] == pytest.approx(direct, rel=1e-9, abs=1e-9)
    assert block["fewer_parameters"] == 0 and block["switched_off"] == list(
        rel_newton.switched_off)
    assert data["parameters"]["f"]["unit"] == "" and data["parameters"]["f_sp"]["unit"] == ""
    fx = data["effects"]
    assert fx["modelled"] == rel_fit.model.effects.describe()
    assert fx["osculating_elements"] == OSCULATING_STATEMENT
    assert fx["integrated_stars"] == [s for s, i in zip(rel_fit.stars, rel_fit.model.integrated,
                                                        strict=True) if i]
    for star, d in rel_sizes.items():
        entry = data["stars"][star]
        assert entry["effect_sizes"]["redshift_excess_kms"] == pytest.approx(
            d["redshift_excess_kms"], rel=1e-15)
        assert entry["pericentre_observed"]["value"] == pytest.approx(
            d["pericentre_observed"], rel=1e-15)
    text = (rel_report / "report.md").read_text()
    assert "## Relativistic effects" in text and rel_fit.model.effects.describe() in text
    assert "No relativistic effects were modelled" not in text
    assert f"Δχ² = {block['delta_chi2']:.1f} with the same number of free parameters" in text
    assert "OSCULATING" in text  # the model's own note on integrated stars


def test_redshift_curve_at_pericentre_equals_the_effect_size(obs):
    """Redshift only (no Romer delay, no precession): at pericentre the f = 1 model minus
    the f = 0 model (both against the refitted Newtonian model, which cancels) is the
    redshift excess of effect_summary (computed there from the analytic pericentre speed,
    physics.md sect. 5); the curve as drawn (f held at 1) is the f = 1 curve."""
    fit = fit_joint(obs, effects_from_args(Settings(), romer=False, precession=False))
    sizes = star_effect_sizes(fit)
    newt = newtonian_refit(fit)
    assert newt.switched_off == ("redshift (exact)",)
    for star in ("t-1", "t-3"):
        d = redshift_curves(fit, star, newt, sizes[star])
        at_peri = np.interp(d["t_peri"], d["t"], d["f1"] - d["f0"])
        assert at_peri == pytest.approx(sizes[star]["redshift_excess_kms"], rel=0.10)
        assert np.array_equal(d["model"], d["f1"]) and d["ffit"] is None


def test_redshift_difference_of_f1_and_f0_with_all_effects(rel_fit, rel_sizes, rel_newton):
    d = redshift_curves(rel_fit, "t-1", rel_newton, rel_sizes["t-1"])
    diff = np.interp(d["t_peri"], d["t"], d["f1"] - d["f0"])
    assert diff == pytest.approx(rel_sizes["t-1"]["redshift_excess_kms"], rel=0.10)


def test_precession_on_minus_off_exceeds_a_tenth_of_the_precession(rel_fit, rel_sizes,
                                                                    rel_newton):
    """f_SP = 1 minus f_SP = 0 (the comparison model cancels) moves the track by a sizeable
    part of the per-orbit sky precession of effect_summary (physics.md sect. 6; the data
    span covers about two orbits of t-1, so a tenth is a loose floor, common practice)."""
    d = precession_curves(rel_fit, "t-1", rel_newton)
    assert np.hypot(*(d["sp1"] - d["sp0"])).max() > 0.1 * rel_sizes["t-1"]["precession_mas"]
    # frame-relative imaging: the drawn curves carry the two fits' frame difference
    (panel,) = d["panels"]
    assert panel["relative_to"] == "frame"
    np.testing.assert_allclose(panel["model"] - d["model"], d["frame_shift"], atol=1e-12)


def test_effect_figures_only_for_stars_above_their_errors(rel_fit, rel_sizes, rel_newton,
                                                          tmp_path):
    assert effect_figure_jobs(rel_fit, rel_sizes, None) == []  # no comparison model
    jobs = effect_figure_jobs(rel_fit, rel_sizes, rel_newton)
    expected = {f"redshift_{s}" for s, d in rel_sizes.items() if d["detectable_redshift"]}
    expected |= {f"precession_{s}" for s, d in rel_sizes.items() if d["detectable_precession"]}
    assert {stem for stem, _, _ in jobs} == expected
    stem, build, caption = jobs[0]
    fig = build()
    fig.savefig(tmp_path / f"{stem}.png", format="png", metadata=_metadata("png"))
    assert (tmp_path / f"{stem}.png").read_bytes()[:8] == PNG_MAGIC
    assert "Newtonian" in caption


# ------------------------------------------------------------------ enclosed mass
def test_enclosed_mass_table_and_summary_equal_the_profile(rel_fit, rel_report):
    profile = enclosed_mass_profile(rel_fit)  # deterministic refits: same numbers again
    t = Table.read(rel_report / "tables" / "enclosed_mass.ecsv", format="ascii.ecsv")
    data = _summary(rel_report)["enclosed_mass"]
    for s in profile.stars:
        row = list(t["star"]).index(s.star)
        assert t["mass"][row] == pytest.approx(s.mass, rel=1e-9)
        assert data["stars"][s.star]["mass"]["value"] == pytest.approx(s.mass, rel=1e-9)
        assert data["stars"][s.star]["r_peri"]["value"] == pytest.approx(s.r_peri_au, rel=1e-9)
    # consistency chi-square recomputed directly: sum ((M_i - M) / sigma_i)^2, dof N - 1
    m = np.array([s.mass for s in profile.stars])
    sig = np.array([s.mass_sigma for s in profile.stars])
    chi2 = float(np.sum(((m - rel_fit.value("mass")) / sig) ** 2))
    assert data["consistency"]["chi2"] == pytest.approx(chi2, rel=1e-9)
    assert data["consistency"]["dof"] == len(m) - 1
    text = (rel_report / "report.md").read_text()
    assert "## Enclosed mass" in text
    assert "consistent with one point mass" in text


# ------------------------------------------------------------------ formatting
@pytest.mark.parametrize("value, minus, plus, style, expected", [
    (3.2154, 0.048, 0.052, "latex", "3.215^{+0.052}_{-0.048}"),
    (2.6e6, 2.1e4, 2.0e4, "text", "(2.600 +0.020/-0.021) × 10^6"),
    (13.49584, 0.0050, 0.0061, "text", "13.4958 +0.0061/-0.0050"),
])
def test_asymmetric_errors_round_to_the_smaller_error(value, minus, plus, style, expected):
    # hand-worked: two significant digits of the smaller error (common practice)
    assert format_asymmetric(value, minus, plus, style) == expected
    assert math.isfinite(value)


def test_star_tables_say_which_elements_are_osculating_and_give_the_observed_pericentre(
        rel_fit, rel_sizes, rel_report):
    # A reader copying t_peri into a paper must see that integrated stars' elements are
    # osculating at apocentre (common practice for 1PN fits) and find the observed epoch.
    t = Table.read(rel_report / "tables" / "stars.ecsv", format="ascii.ecsv")
    integrated = [s for s, i in zip(rel_fit.stars, rel_fit.model.integrated, strict=True) if i]
    assert integrated and [s for s, i in zip(t["star"], t["integrated"], strict=True) if i] \
        == integrated
    assert OSCULATING_STATEMENT in t.meta["elements"]
    for row in t:
        assert row["t_peri_observed"] == pytest.approx(
            rel_sizes[row["star"]]["pericentre_observed"], abs=1e-9)
    tex = (rel_report / "tables" / "stars.tex").read_text()
    assert "osculating Keplerian elements at the apocentre epoch" in tex
    assert all(f"{s}$^\\dagger$" in tex for s in integrated)


def test_effect_figure_captions_say_held_or_fitted(obs, rel_fit, rel_sizes, rel_newton):
    # A caption (figures carry no title) must never call a held parameter "fitted" (issue of
    # over-claiming labels); a fitted strength is quoted with its error and its own model
    # curve is drawn.
    jobs = effect_figure_jobs(rel_fit, rel_sizes, rel_newton)
    assert jobs
    for _, build, caption in jobs:
        fig = build()
        assert fig._suptitle is None
        symbol = "f_SP" if "1PN" in caption else "f"
        assert f"fitted {symbol} " not in caption and f"{symbol} held at 1" in caption
        labels = [t.get_text() for ax in fig.axes if ax.get_legend()
                  for t in ax.get_legend().get_texts()]
        assert labels and not any("fitted" in t for t in labels)
    free_fit = fit_joint(obs, effects_from_args(Settings(), fit_f=True))
    free_newton = newtonian_refit(free_fit)
    assert free_newton.fewer_parameters == 1  # f is fitted, the Newtonian model has none
    stem, build, caption = next(j for j in effect_figure_jobs(
        free_fit, star_effect_sizes(free_fit), free_newton) if j[0].startswith("redshift"))
    fig = build()
    f, s = free_fit.value("f"), free_fit.sigma("f")
    assert s > 0 and f"fitted f = {f:.3g} ± {s:.2g}" in caption
    star = stem.split("_", 1)[1]
    assert (f"refitted to the same data (Δχ² = {free_newton.delta_chi2:.1f} for 1 fewer "
            f"parameter, all data; {free_newton.star_delta_chi2[star]:.1f} from this "
            "star's)") in caption
    labels = [t.get_text() for t in fig.axes[0].get_legend().get_texts()]
    assert f"model, fitted f = {f:.3g}" in labels


#: Spellings of the solar mass that must not appear in figure text (one spelling,
#: mathtext $M_\odot$, is used; common practice in journals).
OTHER_SOLAR_MASS = ("Msun", "solMass", "M_sun", "M☉", "Msol")


def _texts(fig):
    """Every string drawn on a figure (labels, legends, annotations, tick labels)."""
    fig.canvas.draw()  # tick labels are made at drawing time
    return [t.get_text() for t in fig.findobj(matplotlib.text.Text) if t.get_text()]


def test_figures_have_no_titles_one_solar_mass_spelling_and_units_on_axes(
        rel_fit, rel_sizes, rel_newton, posterior, newt_fit):
    # Journals set captions outside the figure: no suptitle and no axes title anywhere;
    # the solar mass is written one way ($M_\odot$); every axis label states its unit in
    # parentheses (or "(dimensionless)") (common practice).
    figures = [sky_figure(rel_fit), *(star_figure(rel_fit, s) for s in rel_fit.stars[:2]),
               *(build() for _, build, _ in effect_figure_jobs(rel_fit, rel_sizes, rel_newton)),
               corner_figure(posterior, ["mass", "distance", "vz0"]),
               mass_distance_figure(posterior, ((newt_fit.value("mass"), 1e4),
                                                (newt_fit.value("distance"), 10.0)))]
    figures.append(enclosed_figure(analyse(rel_fit).profile))
    mass_labels = 0
    for fig in figures:
        assert fig._suptitle is None
        words = _texts(fig)
        assert not [w for w in words if any(o in w for o in OTHER_SOLAR_MASS)], words
        mass_labels += sum(r"$M_\odot$" in w for w in words)
        for ax in fig.axes:
            assert not any(ax.get_title(loc) for loc in ("left", "center", "right"))
            for label in (ax.get_xlabel(), ax.get_ylabel()):
                assert not label or ("(" in label and label.rstrip().endswith(")")), label
    assert mass_labels >= 3  # corner, mass-distance, enclosed mass


def test_assumptions_name_the_integrated_stars_without_a_phantom_rest(rel_fit, rel_report):
    # Wording check: "the others on fixed Keplerian ellipses" only when there are others.
    text = (rel_report / "report.md").read_text()
    integ = [s for s, i in zip(rel_fit.stars, rel_fit.model.integrated, strict=True) if i]
    assert integ
    if len(integ) == len(rel_fit.stars):
        assert "every star moves on an integrated orbit" in text
        assert "the others on fixed Keplerian" not in text
    else:
        assert "the others on fixed Keplerian ellipses" in text


def test_shared_latex_table_marks_held_strengths_as_fixed(rel_fit, rel_report):
    # f and f_sp are held at 1 by default: marked "(fixed)" with their own symbol and
    # description, never given a zero error.
    shared = (rel_report / "tables" / "shared.tex").read_text().splitlines()
    lay = rel_fit.model.layout
    for name in lay.shared_names:
        spec = lay.spec(name)
        row = next(line for line in shared if f"& ${spec.latex}$ &" in line)
        fixed = not rel_fit.free[lay.index(name)]
        assert ("(fixed)" in row) == fixed and ("\\pm" not in row) == fixed, row
    assert not rel_fit.free[lay.index("f")] and not rel_fit.free[lay.index("f_sp")]
