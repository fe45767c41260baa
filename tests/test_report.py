"""Tests of the report layer: summary.json, tables, the value ± error formatter,
the safe output folder and (once) the figures.

The fit result used here is built by hand from the invented ``rich`` scenario: the
true elements of its truth.json and a chosen covariance, so that every expected
number is known independently of the fitter.
"""

import dataclasses
import json
import math
import re
from pathlib import Path
from types import SimpleNamespace

import numpy as np
import pytest
from astropy import constants as const
from astropy import units as u
from astropy.table import Table
from matplotlib.collections import QuadMesh

from deepwell.core.errors import OutputError
from deepwell.fit.result import FitResult, physical_labels, physical_vector
from deepwell.model.epochs import observations_at
from deepwell.model.joint import JointModel
from deepwell.model.layout import internal_star_values
from deepwell.report.figures.marks import error_classes
from deepwell.report.figures.orbits import LEGEND_STARS, sky_figure, star_figure
from deepwell.report.figures.style import RASTER_POINTS
from deepwell.report.outdir import MANIFEST, install_output, prepare_output, staged_output
from deepwell.report.tables import format_value_error, star_numbers
from deepwell.report.writer import compactness_choice, save_report, summary_dict, write_report
from deepwell.results import analyse
from deepwell.tables.observations import read_observations
from deepwell.tables.settings import Settings
from tests.conftest import snapshot

RICH = Path(__file__).resolve().parents[1] / "scenarios" / "rich"
STARS = ("br-01", "br-04", "br-11", "br-12")
NO_RV_STAR = "br-11"  # its velocities are removed below
MASS_SIGMA_FRAC, DIST_SIGMA_FRAC, RHO = 0.01, 0.008, 0.9  # chosen covariance of the hand result


def _jacobian(func, vec, rel=1e-6):
    """Central differences, one parameter at a time (independent of deepwell.fit.least_squares)."""
    cols = []
    for i in range(vec.size):
        h = rel * max(abs(vec[i]), 1e-3)
        up, dn = vec.copy(), vec.copy()
        up[i] += h
        dn[i] -= h
        cols.append((func(up) - func(dn)) / (2 * h))
    return np.stack(cols, axis=-1)


@pytest.fixture(scope="module")
def result():
    """A FitResult at the true elements of four stars, one of them without velocities."""
    obs = read_observations(RICH)
    vel = obs.velocities[obs.velocities["star"] != NO_RV_STAR].reset_index(drop=True)
    obs = dataclasses.replace(obs, velocities=vel)
    settings = Settings()
    model = JointModel(obs, reference_epoch=settings.reference_epoch, stars=STARS)
    truth = json.loads((RICH / "truth.json").read_text())
    vec = [truth["shared"][n] for n in model.layout.shared_names]
    for s in model.stars:
        t = truth["stars"][s]
        vec += list(internal_star_values(t["period"], t["e"], np.radians(t["inc"]),
                                         np.radians(t["node"]), np.radians(t["peri_arg"]),
                                         t["t_peri"]))
    vec = np.array(vec)
    sig = np.full(vec.size, 1e-3)
    sig[0], sig[1] = MASS_SIGMA_FRAC * vec[0], DIST_SIGMA_FRAC * vec[1]
    cov = np.diag(sig**2)
    cov[0, 1] = cov[1, 0] = RHO * sig[0] * sig[1]
    jac = _jacobian(lambda v: physical_vector(model.layout, v), vec)
    chi, nd = model.star_chi2(vec)
    return FitResult(model=model, internal=vec, internal_cov=cov, free=np.ones(vec.size, bool),
                     values=physical_vector(model.layout, vec), cov=jac @ cov @ jac.T,
                     labels=physical_labels(model.layout), chi2=float(model.chi2(vec)),
                     n_data=model.n_data, n_free=vec.size, star_chi2=chi, star_ndata=nd,
                     converged=True, nfev=1, notes=("a note from the fit",), settings=settings,
                     observations=obs)


@pytest.fixture(scope="module")
def report_dir(result, tmp_path_factory):
    folder = tmp_path_factory.mktemp("report")
    write_report(result, folder, analyse(result), figures=False)
    return folder


# ------------------------------------------------------------------ summary.json
SHARED_UNITS = {"mass": "solMass", "distance": "pc", "x0": "mas", "y0": "mas",
                "vx0": "mas / yr", "vy0": "mas / yr", "vz0": "km / s"}
STAR_UNITS = {"period": "yr", "e": "", "a": "mas", "inc": "deg", "node": "deg",
              "peri_arg": "deg", "t_peri": "yr", "r_peri": "AU"}


def test_summary_has_the_contract_keys_and_astropy_units(report_dir):
    data = json.loads((report_dir / "summary.json").read_text())
    # effect sizes and the enclosed-mass profile are always computed by analyse();
    # posterior, sampling, extended-mass and jackknife entries appear only when given;
    # the per-data-set summary and the list of points beyond 4 sigma are always there
    assert set(data) == {"parameters", "stars", "fit", "mass_distance", "reference_epoch",
                         "software", "inputs", "settings", "notes", "dropped_stars",
                         "compactness", "effects", "enclosed_mass", "datasets", "outliers"}
    assert {k: v["unit"] for k, v in data["parameters"].items()} == SHARED_UNITS
    assert set(data["stars"]) == set(STARS)
    beside = {"integrated_period": "yr", "pericentre_observed": "yr"}
    for star in STARS:
        entries = {k: v for k, v in data["stars"][star].items() if k != "effect_sizes"}
        assert {k: v["unit"] for k, v in entries.items()} == {**STAR_UNITS, **beside}
        assert set(data["fit"]["stars"][star]) == {"reduced_chi2", "n_positions",
                                                   "n_velocities", "coverage"}
    for unit in [*SHARED_UNITS.values(), *STAR_UNITS.values()]:
        u.Unit(unit)  # every unit string parses in astropy
    assert set(data["fit"]) == {"chi2", "dof", "reduced_chi2", "stars", "converged"}
    assert data["software"]["name"] == "deepwell"
    assert set(data["inputs"]["checksums"]) == {"positions.csv", "velocities.csv"}


def test_summary_numbers_equal_the_result(result, report_dir):
    data = json.loads((report_dir / "summary.json").read_text())
    for name in SHARED_UNITS:
        assert data["parameters"][name]["value"] == pytest.approx(result.value(name), rel=1e-15)
        assert data["parameters"][name]["sigma"] == pytest.approx(result.sigma(name), rel=1e-15)
    for star in STARS:
        for q in STAR_UNITS:
            entry = data["stars"][star][q]
            assert entry["value"] == pytest.approx(result.value(f"{star}:{q}"), rel=1e-15)
            assert entry["sigma"] == pytest.approx(result.sigma(f"{star}:{q}"), rel=1e-15)
        for q in ("node", "peri_arg"):
            assert 0.0 <= data["stars"][star][q]["value"] < 360.0
    assert data["fit"]["chi2"] == pytest.approx(result.chi2, rel=1e-15)
    assert data["fit"]["dof"] == result.n_data - result.n_free


def test_summary_mass_sigma_matches_the_covariance_directly(result, report_dir):
    data = json.loads((report_dir / "summary.json").read_text())
    i = result.labels.index("mass")
    # independent: the diagonal of the reported covariance, and the chosen input sigma
    assert data["parameters"]["mass"]["sigma"] == pytest.approx(
        math.sqrt(result.cov[i, i]), rel=1e-12)
    assert data["parameters"]["mass"]["sigma"] == pytest.approx(
        MASS_SIGMA_FRAC * result.value("mass"), rel=1e-6)  # finite-difference tolerance
    assert data["mass_distance"]["correlation"] == pytest.approx(RHO, abs=1e-6)
    # exponent alpha = cov(ln M, ln R0) / var(ln R0) = RHO * sM/M / (sR/R) for the chosen cov
    assert data["mass_distance"]["exponent"] == pytest.approx(
        RHO * MASS_SIGMA_FRAC / DIST_SIGMA_FRAC, rel=1e-6)


def test_summary_extra_entries_cannot_replace_contract_keys(result):
    assert summary_dict(result, extra={"command": "x"})["command"] == "x"
    with pytest.raises(ValueError, match="notes"):
        summary_dict(result, extra={"notes": []})


def test_compactness_uses_smallest_well_constrained_pericentre(result, report_dir):
    data = json.loads((report_dir / "summary.json").read_text())
    # independent selection: coverage >= 0.5 and sigma/r < 20 % (project rule), then min r
    ok = [(result.value(f"{s}:r_peri"), s) for s in STARS
          if result.star_summary(s)["coverage"] >= 0.5
          and result.sigma(f"{s}:r_peri") < 0.2 * result.value(f"{s}:r_peri")]
    expected = min(ok)[1]
    assert compactness_choice(result)[0] == expected
    assert data["compactness"]["star"] == expected
    assert data["compactness"]["r_peri"]["value"] == pytest.approx(
        result.value(f"{expected}:r_peri"), rel=1e-15)
    assert f"star {expected}" in (report_dir / "report.md").read_text()


def test_report_states_errors_assumptions_and_warnings(result, report_dir):
    text = (report_dir / "report.md").read_text()
    assert "not** rescaled by the reduced χ²" in text
    assert "Newtonian point mass" in text and "No relativistic effects were modelled" in text
    # Settings() asks for the relativistic effects, the hand-made model has none
    assert "the difference was NOT applied" in text
    assert f"Star {NO_RV_STAR} has no radial velocities" in text and "180 deg" in text
    assert "a note from the fit" in text
    # br-11 (~320 yr period, 25 yr of data) covers far less than half its orbit
    assert result.star_summary("br-11")["coverage"] < 0.5
    assert "Star br-11 is poorly constrained" in text
    assert "Figures were not drawn" in text


def test_pericentre_speed_error_matches_numerical_propagation(result):
    star = "br-01"
    labels = ["mass", "distance", f"{star}:a", f"{star}:e"]
    idx = [result.labels.index(k) for k in labels]
    x0 = np.array([result.value(k) for k in labels])

    def vis_viva(x):  # astropy units: v^2 = GM (1 + e) / (a (1 - e)), a = a_mas * R0
        m, d, a_mas, e = x
        a = (a_mas * 1e-3 * d * u.au)
        return float(np.sqrt(const.GM_sun * m * (1 + e) / (a * (1 - e))).to_value(u.km / u.s))

    g = _jacobian(lambda x: np.array([vis_viva(x)]), x0)[0]
    sigma = math.sqrt(g @ result.cov[np.ix_(idx, idx)] @ g)
    got = star_numbers(result, star)
    assert got["v_peri_kms"] == pytest.approx(vis_viva(x0), rel=1e-9)
    assert got["v_peri_kms_err"] == pytest.approx(sigma, rel=1e-5)


# ------------------------------------------------------------------ tables
def test_stars_ecsv_round_trip_with_units(result, report_dir):
    t = Table.read(report_dir / "tables" / "stars.ecsv", format="ascii.ecsv")
    assert list(t["star"]) == list(STARS)
    for k, star in enumerate(STARS):
        a = t["a"].quantity[k]
        assert a.to_value(u.arcsec) == pytest.approx(result.value(f"{star}:a") / 1e3, rel=1e-12)
        r_p = t["r_peri"].quantity[k]
        assert r_p.to_value(u.m) == pytest.approx(
            result.value(f"{star}:r_peri") * const.au.value, rel=1e-12)
        assert t["period_err"].quantity[k].to_value(u.d) == pytest.approx(
            result.sigma(f"{star}:period") * 365.25, rel=1e-12)  # Julian year = 365.25 d
        assert t["node"].quantity[k].to_value(u.rad) == pytest.approx(
            math.radians(result.value(f"{star}:node")), rel=1e-12)
        assert t["n_velocities"][k] == (0 if star == NO_RV_STAR else
                                        result.star_summary(star)["n_velocities"])
    # R_s = 2 GM/c^2 from astropy (IAU 2015 nominal GM_sun)
    rs_au = (2 * const.GM_sun * result.value("mass") / const.c**2).to_value(u.au)
    assert t["r_peri_rs"][0] == pytest.approx(result.value("br-01:r_peri") / rs_au, rel=1e-9)


def test_shared_ecsv_round_trip_with_units(result, report_dir):
    t = Table.read(report_dir / "tables" / "shared.ecsv", format="ascii.ecsv")
    assert t["mass"].quantity[0].to_value(u.kg) == pytest.approx(
        result.value("mass") * const.M_sun.value, rel=1e-12)
    assert t["distance"].quantity[0].to_value(u.kpc) == pytest.approx(
        result.value("distance") / 1e3, rel=1e-12)
    assert t["vx0"].unit == u.mas / u.yr and t["vz0"].unit == u.km / u.s


def _parse_pm(cell):
    """'(a \\pm b) \\times 10^{n}' or 'a \\pm b' -> (value, error) (test helper)."""
    m = re.fullmatch(r"\$\(?(-?[\d.]+) \\pm ([\d.]+)\)?(?: \\times 10\^\{(-?\d+)\})?\$",
                     cell.strip())
    scale = 10.0 ** int(m.group(3)) if m.group(3) else 1.0
    return float(m.group(1)) * scale, float(m.group(2)) * scale


def test_latex_tables_are_booktabs_and_round_to_the_error(result, report_dir):
    shared = (report_dir / "tables" / "shared.tex").read_text()
    stars = (report_dir / "tables" / "stars.tex").read_text()
    numbers = (report_dir / "tables" / "star_numbers.tex").read_text()
    for tex in (shared, stars, numbers):
        for rule in (r"\toprule", r"\midrule", r"\bottomrule"):
            assert tex.count(rule) >= 1
        assert tex.count(r"\begin{tabular}") == tex.count(r"\end{tabular}") == 1
    mass_row = next(line for line in shared.splitlines() if line.startswith("Central point"))
    value, error = _parse_pm(mass_row.split("&")[2])
    # 2 significant digits of the error (common practice): error within 5 % of its first digit
    assert error == pytest.approx(result.sigma("mass"), rel=0.05)
    assert abs(value - result.value("mass")) <= 0.5 * error / 10
    row = next(line for line in stars.splitlines() if line.startswith("br-04"))
    cells = row.rstrip(" \\").split("&")
    assert len(cells) == 8  # star and seven elements; derived numbers in star_numbers.tex
    e_val, e_err = _parse_pm(cells[3])
    assert e_val == pytest.approx(result.value("br-04:e"), abs=0.5 * e_err / 10)


# ------------------------------------------------------------------ formatter
@pytest.mark.parametrize(("value", "error", "expected"), [
    # hand-worked; rounding the error to 2 significant digits is common practice
    (3.2153e6, 0.0481e6, r"(3.215 \pm 0.048) \times 10^{6}"),
    (0.88015, 0.000113, r"0.88015 \pm 0.00011"),
    (141.283, 1.49, r"141.3 \pm 1.5"),
    (6412.0, 123.0, r"6410 \pm 120"),
    (0.5, 0.0996, r"0.50 \pm 0.10"),  # 0.0996 rounds up to the next decade
    (1.2e-5, 3.04e-7, r"(1.200 \pm 0.030) \times 10^{-5}"),
    (-0.35, 0.17, r"-0.35 \pm 0.17"),
    (2019.30061, 0.000204, r"2019.30061 \pm 0.00020"),
    (0.3, 12.0, r"0 \pm 12"),
    (4.0, 0.0, "4"),  # no usable error: value alone
])
def test_value_error_formatter_hand_worked(value, error, expected):
    assert format_value_error(value, error) == expected


def test_value_error_formatter_text_style():
    assert format_value_error(3.2153e6, 0.0481e6, "text") == "(3.215 ± 0.048) × 10^6"


# ------------------------------------------------------------------ output folder
def _fake_report(tmp, names=("summary.json", "tables/a.ecsv")):
    for n in names:
        (tmp / n).parent.mkdir(parents=True, exist_ok=True)
        (tmp / n).write_text(f"new {n}")


def _no_temp_left(final):
    return not [p for p in Path(final).absolute().parent.iterdir() if "deepwell-tmp" in p.name]


def test_foreign_non_empty_folder_is_refused_and_untouched(tmp_path):
    final = tmp_path / "out"
    final.mkdir()
    (final / "notes.txt").write_text("mine")
    before = snapshot(final)
    with pytest.raises(OutputError, match="not made by deepwell") as exc:
        prepare_output(final)
    assert "\n" not in str(exc.value)
    assert snapshot(final) == before and _no_temp_left(final)


def test_foreign_file_is_never_overwritten_even_with_replace(tmp_path):
    final = tmp_path / "out"
    final.mkdir()
    (final / "summary.json").write_text("someone else's")
    (final / "keep.txt").write_text("keep")
    before = snapshot(final)
    tmp = prepare_output(final, replace=True)
    _fake_report(tmp)
    with pytest.raises(OutputError, match="summary.json: not written by deepwell"):
        install_output(tmp, final, replace=True)
    assert snapshot(final) == before and _no_temp_left(final)


def test_replace_into_foreign_folder_adds_beside_foreign_files(tmp_path):
    final = tmp_path / "out"
    final.mkdir()
    (final / "keep.txt").write_text("keep")
    tmp = prepare_output(final, replace=True)
    _fake_report(tmp)
    install_output(tmp, final, replace=True)
    snap = snapshot(final)
    assert snap["keep.txt"] == b"keep" and snap["summary.json"] == b"new summary.json"
    assert set(json.loads(snap[MANIFEST])["files"]) == {"summary.json", "tables/a.ecsv"}


def test_earlier_report_needs_replace(tmp_path):
    final = tmp_path / "out"
    with staged_output(final) as tmp:
        _fake_report(tmp)
    with pytest.raises(OutputError, match="holds an earlier report; use --replace"):
        prepare_output(final)


def test_failed_run_leaves_existing_folder_byte_identical(tmp_path):
    final = tmp_path / "out"
    with staged_output(final) as tmp:
        _fake_report(tmp)
    (final / "keep.txt").write_text("user file")
    before = snapshot(final)
    with pytest.raises(RuntimeError, match="fit exploded"):
        with staged_output(final, replace=True) as tmp:
            _fake_report(tmp, ("summary.json", "other.txt"))
            raise RuntimeError("fit exploded")
    assert snapshot(final) == before and _no_temp_left(final)


def test_replace_removes_only_manifest_files(tmp_path):
    final = tmp_path / "out"
    with staged_output(final) as tmp:
        _fake_report(tmp, ("summary.json", "old_only.txt", "sub/old.txt"))
    (final / "keep.txt").write_text("user file")
    (final / "sub" / "user.txt").write_text("user file in a report folder")
    with staged_output(final, replace=True) as tmp:
        _fake_report(tmp, ("summary.json", "tables/a.ecsv"))
    snap = snapshot(final)
    assert set(snap) == {MANIFEST, "summary.json", "tables/a.ecsv", "keep.txt", "sub/user.txt"}
    assert snap["keep.txt"] == b"user file" and snap["summary.json"] == b"new summary.json"


def test_replace_refuses_a_report_file_edited_by_hand(tmp_path):
    final = tmp_path / "out"
    with staged_output(final) as tmp:
        _fake_report(tmp)
    (final / "summary.json").write_text("edited by hand")
    before = snapshot(final)
    with pytest.raises(OutputError, match="changed since deepwell wrote it"):
        with staged_output(final, replace=True) as tmp:
            _fake_report(tmp)
    assert snapshot(final) == before


def test_manifest_pointing_outside_the_folder_is_refused(tmp_path):
    final = tmp_path / "out"
    final.mkdir()
    (tmp_path / "precious.txt").write_text("outside")
    (final / MANIFEST).write_text(json.dumps({"files": {"../precious.txt": "0"}}))
    with pytest.raises(OutputError, match="invalid entry"):
        prepare_output(final, replace=True)
    assert (tmp_path / "precious.txt").read_text() == "outside"


# ------------------------------------------------------------------ figures (once)
def test_full_report_with_figures(result, tmp_path):
    final = save_report(result, tmp_path / "report", analyse(result))
    figs = final / "figures"
    stems = ["sky"] + [f"star_{s}" for s in STARS] + ["enclosed_mass"]
    for stem in stems:
        assert (figs / f"{stem}.pdf").read_bytes()[:4] == b"%PDF"  # PDF magic number
        assert (figs / f"{stem}.png").read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"  # PNG signature
    text = (final / "report.md").read_text()
    links = re.findall(r"!\[[^\]]*\]\(([^)]+\.png)\)", text)
    assert sorted(links) == sorted(f"figures/{s}.png" for s in stems)
    manifest = json.loads((final / MANIFEST).read_text())["files"]
    on_disk = {p.relative_to(final).as_posix() for p in final.rglob("*") if p.is_file()}
    assert set(manifest) == on_disk - {MANIFEST}


def test_residual_panels_split_data_sets_whose_errors_differ_by_more_than_ten(result):
    # Common practice (one residual panel per instrument class): data sets whose typical
    # stated errors differ by more than a factor 10 never share an axis, or the precise
    # ones vanish.  Hand-worked grouping first, then br-01 of the rich scenario (fringe
    # 0.04-0.06 mas, imagers 0.5-1.0 mas).
    assert error_classes(["a", "a", "b", "c"], [0.05, 0.06, 0.8, 0.5]) == [["a"], ["b", "c"]]
    assert error_classes(["a", "b"], [1.0, 9.9]) == [["a", "b"]]
    # the cut falls at the jump
    assert error_classes(["a", "b", "c"], [1.0, 9.9, 10.1]) == [["a"], ["b", "c"]]
    m = result.model
    sel = m.pos.star == m.stars.index("br-01")
    err = np.minimum(m.pos.ra_err, m.pos.dec_err)[sel]
    median = {d: np.median(err[m.pos.dataset[sel] == d]) for d in set(m.pos.dataset[sel])}
    assert max(median.values()) > 10 * min(median.values())  # the case the rule is for
    fig = star_figure(result, "br-01")
    panels = [ax for ax in fig.axes if ax.get_ylabel().endswith("res. (mas)")]
    assert len(panels) == 4  # east and north for each of the two classes
    drawn = set()
    for ax in panels:
        names = {c.get_label() for c in ax.containers}
        drawn |= names
        assert max(median[n] for n in names) <= 10 * min(median[n] for n in names)
    assert drawn == set(median)


def _survey(n_stars, n_epochs, rng):
    """An invented survey as a duck-typed result: positions on random Keplerian orbits."""
    stars = [f"s-{k:03d}" for k in range(n_stars)]
    obs = observations_at(stars, np.linspace(2000.0, 2025.0, n_epochs), [], 0.5, 10.0,
                          relative_to="mass", dataset="survey")
    model = JointModel(obs, reference_epoch=2000.0, stars=stars)
    vec = [{"mass": 3e6, "distance": 7000.0}.get(n, 0.0) for n in model.layout.shared_names]
    for _ in stars:
        vec += list(internal_star_values(rng.uniform(20.0, 200.0), rng.uniform(0.0, 0.9),
                                         rng.uniform(0, np.pi), rng.uniform(0, 2 * np.pi),
                                         rng.uniform(0, 2 * np.pi), rng.uniform(2000, 2020)))
    vec = np.array(vec)
    pred = model.predict(vec)
    obs.positions["ra"], obs.positions["dec"] = pred.ra, pred.dec
    return SimpleNamespace(model=JointModel(obs, reference_epoch=2000.0, stars=stars),
                           internal=vec)


def test_survey_scale_sky_figure_draws_a_rasterised_density(result):
    # Above RASTER_POINTS positions and LEGEND_STARS stars the sky figure counts the
    # positions in cells (every position is counted once in the full panel: the sum of
    # the cells equals the number of rows) and rasterises every layer of more than
    # RASTER_POINTS points or vertices, so the PDF stays small (common practice).
    survey = _survey(LEGEND_STARS + 12, RASTER_POINTS // (LEGEND_STARS + 12) + 20,
                     np.random.default_rng(3))
    fig = sky_figure(survey)
    meshes = [c for c in fig.axes[0].collections if isinstance(c, QuadMesh)]
    assert len(meshes) == 1 and meshes[0].get_rasterized()
    assert np.nansum(meshes[0].get_array()) == survey.model.pos.n > RASTER_POINTS
    assert all(ax.get_legend() is None for ax in fig.axes)
    for ax in fig.axes:
        for art in ax.lines:
            assert art.get_rasterized() or len(art.get_xdata()) <= RASTER_POINTS
    # a few stars keep their own colours, error bars and legend
    small = sky_figure(result)
    assert small.axes[-1].get_legend() is not None
    assert not any(isinstance(c, QuadMesh) for ax in small.axes for c in ax.collections)


def test_latex_tables_mark_fixed_values_and_order_stars_by_name(result, report_dir):
    # Journal-ready tables (common practice): every symbol in maths, held parameters marked
    # as fixed rather than given an error of zero, stars in natural name order, at most
    # nine columns per table.
    shared = (report_dir / "tables" / "shared.tex").read_text()
    assert "(fixed)" not in shared  # every parameter of this fit is free
    stars = (report_dir / "tables" / "stars.tex").read_text().splitlines()
    names = [line.split("&")[0].split("$")[0].strip() for line in stars
             if line.startswith("br-")]
    assert names == sorted(names, key=lambda s: int(s.split("-")[1]))
    for tex in ("stars.tex", "star_numbers.tex"):
        body = (report_dir / "tables" / tex).read_text()
        spec = body[body.index(r"\begin{tabular}{") + len(r"\begin{tabular}{"):].split("}")[0]
        assert len(spec) <= 9
