"""Input an adversary (or an unlucky user) might give: each is refused with one line, or works.

Every refusal is checked through the command line: exit status 2, one ``error:`` line
on stderr naming the file and the settings key (or line and column), no traceback,
and an existing report folder left byte for byte as it was.  The invented small
scenario of conftest.py is the data.
"""

import logging
import re
import shutil

import h5py
import numpy as np
import pytest
from astropy import constants as const

import deepwell.cli.simulate as cli_simulate
from deepwell.cli import main
from deepwell.core.errors import InputError
from deepwell.core.text import plural
from deepwell.fit.sampling.backend import CheckpointError
from deepwell.fit.sampling.ensemble import LineProgress, make_progress, run_ensemble
from deepwell.model.kernels.relativity import redshift_velocity
from deepwell.report.figures.style import MARKERS, PALETTE, file_stem, style_of
from deepwell.tables.observations import read_velocities
from tests.conftest import SMALL_SCENARIO, one_line_error, snapshot

#: POSIX NAME_MAX of Linux (limits.h) and of most other file systems: 255 bytes per name.
NAME_MAX = 255


@pytest.fixture(scope="module")
def earlier_report(tmp_path_factory, small_scenario):
    """A scenario copy and a report folder written from it (no figures)."""
    root = tmp_path_factory.mktemp("earlier")
    scen = root / "scen"
    shutil.copytree(small_scenario, scen)
    out = root / "rep"
    assert main(["fit", str(scen), "--out", str(out), "--no-figures", "-q"]) == 0
    return scen, out


@pytest.fixture()
def replaceable(tmp_path, earlier_report):
    """(scenario, report folder, its bytes) in tmp_path: a failed --replace must keep them."""
    scen, out = earlier_report
    shutil.copytree(scen, tmp_path / "scen")
    shutil.copytree(out, tmp_path / "rep")
    return tmp_path / "scen", tmp_path / "rep", snapshot(tmp_path / "rep")


# ------------------------------------------------------------- star names -> file names
def test_long_and_colliding_star_names_each_get_their_own_figures(tmp_path, small_scenario):
    """Names that clash as file names ('a/b' and 'a b') or exceed NAME_MAX (300
    characters) still give one figure per star, with stems that are safe and stable."""
    long_name = "x" * 300
    names = {"t-1": "a/b", "t-2": "a b", "t-4": long_name}
    scen = tmp_path / "scen"
    shutil.copytree(small_scenario, scen)
    for table in ("positions.csv", "velocities.csv"):
        lines = (scen / table).read_text().splitlines()
        for old, new in names.items():
            lines = [f"{new},{ln[len(old) + 1:]}" if ln.startswith(old + ",") else ln
                     for ln in lines]
        (scen / table).write_text("\n".join(lines) + "\n")
    out = tmp_path / "rep"
    assert main(["fit", str(scen), "--out", str(out), "-q"]) == 0
    report = (out / "report.md").read_text()
    # each star's figure: an image line followed by its caption "*Star NAME: ..."
    found = dict(re.findall(r"!\[[^\]]+\]\(figures/(star_[^)]+)\.png\)\n\n\*Star (.+?): sky",
                            report))
    stars = ["a/b", "a b", "t-3", long_name]
    assert sorted(found.values()) == sorted(stars)
    assert len(set(found)) == 4  # four different files
    assert "own pair of colour and marker shape" in report  # the sky figure's caption
    for stem, star in found.items():
        assert stem == file_stem("star", star)  # the same name gives the same stem
        for ext in ("png", "pdf"):
            path = out / "figures" / f"{stem}.{ext}"
            assert path.stat().st_size > 0
            assert len(path.name.encode()) <= NAME_MAX
    assert file_stem("star", "t-3") == "star_t-3"  # plain names are kept as they are


def test_file_stems_differ_for_names_equal_up_to_case_or_unsafe_characters():
    # a case-insensitive file system (common practice on desktop systems) must not
    # merge "A" and "a"; unsafe characters must not merge "a/b", "a b", "a_b"
    stems = [file_stem("star", n) for n in ("A", "a", "a/b", "a b", "a_b", "é", "e", "../x")]
    assert len({s.casefold() for s in stems}) == len(stems)
    assert all(re.fullmatch(r"[A-Za-z0-9._-]+", s) for s in stems)
    assert not any(s.startswith(".") for s in stems)


# ---------------------------------------------------------------- settings numbers
@pytest.mark.parametrize(("toml", "key"), [
    # TOML 1.0.0 (toml.io) reads inf and nan as floats; none is a usable setting
    ("reference_epoch = inf", "reference_epoch"),
    ("reference_epoch = 1e300", "reference_epoch"),
    ("[shared.mass]\nvalue = nan\nfixed = true", "shared.mass.value"),
    ("[shared.distance]\nprior = { mean = inf, sigma = 100.0 }", "shared.distance.prior.mean"),
    ("[shared.distance]\nprior = { mean = 5000.0, sigma = nan }", "shared.distance.prior.sigma"),
    # a mass and a distance are positive; a bound orbit has 0 <= e < 1 and a > 0
    # (common practice: any celestial-mechanics text)
    ("[shared.mass]\nmin = -1e7\nmax = -1.0", "shared.mass.min"),
    ("[shared.mass]\nmax = -1.0", "shared.mass.max"),
    ("[shared.distance]\nvalue = 0.0", "shared.distance.value"),
    ("[stars.t-1]\ne = 1.0", "stars.t-1.e"),
    ("[stars.t-1]\na = -5.0", "stars.t-1.a"),
    ("[stars.t-1]\nprior = { e = { mean = 1.5, sigma = 0.1 } }", "stars.t-1.prior.e.mean"),
    ("[shared.x0]\nvalue = 3.0\nmax = 1.0", "shared.x0.value"),
    ("[effects]\nextended_mass = true\nextended_scale = inf", "effects.extended_scale"),
    ("[fit]\noutlier_width = nan", "fit.outlier_width"),
])
def test_impossible_settings_number_is_one_line_naming_the_key(replaceable, capsys, toml,
                                                                 key):
    scen, out, before = replaceable
    settings = out.parent / "bad.toml"
    settings.write_text(toml + "\n")
    code = main(["fit", str(scen), "--out", str(out), "--replace", "--settings", str(settings)])
    assert code == 2
    msg = one_line_error(capsys)
    assert f"key '{key}'" in msg and "bad.toml" in msg
    assert snapshot(out) == before


# ------------------------------------------------------------ table magnitudes
@pytest.mark.parametrize(("table", "column", "value"), [
    ("positions.csv", "ra", "1e300"),
    ("positions.csv", "dec", "-1e300"),
    ("positions.csv", "ra_err", "1e-30"),
    ("positions.csv", "dec_err", "1e300"),
    ("velocities.csv", "vr", "4e5"),
    ("velocities.csv", "vr_err", "1e-30"),
])
def test_extreme_table_number_is_refused_with_file_line_column_and_range(replaceable, capsys,
                                                                         table, column,
                                                                         value):
    scen, out, before = replaceable
    path = scen / table
    lines = path.read_text().splitlines()
    head = lines[0].split(",")
    cells = lines[4].split(",")
    cells[head.index(column)] = value
    lines[4] = ",".join(cells)
    path.write_text("\n".join(lines) + "\n")
    assert main(["fit", str(scen), "--out", str(out), "--replace"]) == 2
    msg = one_line_error(capsys)
    assert table in msg and "line 5" in msg and f"column '{column}'" in msg
    assert "out of range" in msg and "expected" in msg
    assert snapshot(out) == before


def test_radial_velocity_limit_is_the_speed_of_light(tmp_path):
    c_kms = const.c.to_value("km/s")  # astropy's c: 299792.458 km/s (SI definition)
    path = tmp_path / "velocities.csv"
    path.write_text(f"star,epoch,vr,vr_err\nx,2010.0,{-0.999 * c_kms},10.0\n")
    assert read_velocities(path).vr.iloc[0] == pytest.approx(-0.999 * c_kms, rel=1e-12)
    path.write_text(f"star,epoch,vr,vr_err\nx,2010.0,{1.001 * c_kms},10.0\n")
    with pytest.raises(InputError) as info:
        read_velocities(path)
    assert (info.value.row, info.value.column) == (2, "vr")


# --------------------------------------------------------- damaged checkpoints
@pytest.fixture(scope="module")
def sampled_report(tmp_path_factory, small_scenario):
    """A report sampled with two short NUTS chains, and its checkpoints."""
    root = tmp_path_factory.mktemp("sampled")
    out = root / "rep"
    assert main(["fit", str(small_scenario), "--out", str(out), "--no-figures", "-q",
                 "--sample", "--steps", "10", "--warmup", "10", "--chains", "2"]) == 0
    return out


def _resume(scenario, out, capsys):
    code = main(["fit", str(scenario), "--out", str(out), "--no-figures", "-q",
                 "--replace", "--sample", "--steps", "20", "--warmup", "10", "--chains", "2",
                 "--resume"])
    return code, one_line_error(capsys)


def _replace_dataset(path, name, value=None):
    with h5py.File(path, "a") as f:
        old = f[name][...]
        del f[name]
        if value is not None:
            f[name] = value(old)


@pytest.mark.parametrize(("damage", "words"), [
    (lambda p: _replace_dataset(p, "z"), "'z' is missing"),
    (lambda p: _replace_dataset(p, "chain", lambda a: np.concatenate([a, a])), "'log_prob'"),
    (lambda p: _replace_dataset(p, "metric", lambda a: np.eye(len(a) + 1)), "'metric'"),
    (lambda p: _replace_dataset(p, "grad", lambda a: np.full_like(a, np.nan)), "not finite"),
])
def test_damaged_checkpoint_is_refused_with_one_line_naming_the_file(tmp_path, small_scenario,
                                                                     sampled_report, capsys,
                                                                     damage, words):
    out = tmp_path / "rep"
    shutil.copytree(sampled_report, out)
    shutil.copytree(str(sampled_report) + ".chains", str(out) + ".chains")
    before = snapshot(out)
    damage(tmp_path / "rep.chains" / "chain_1.h5")
    chain_0 = (tmp_path / "rep.chains" / "chain_0.h5").read_bytes()
    code, msg = _resume(small_scenario, out, capsys)
    assert code == 2
    assert "chain_1.h5" in msg and "damaged checkpoint" in msg and words in msg
    assert snapshot(out) == before
    # every checkpoint is checked before any chain runs on: chain 0 did not continue
    assert (tmp_path / "rep.chains" / "chain_0.h5").read_bytes() == chain_0


def test_ensemble_checkpoint_with_other_shapes_or_a_missing_array_is_refused(tmp_path):
    def log_prob(x):  # standard normal in 3 dimensions
        return -0.5 * np.sum(np.asarray(x) ** 2, axis=-1)

    p0 = np.random.default_rng(3).standard_normal((8, 3))
    path = tmp_path / "ens.h5"
    run_ensemble(log_prob, p0, np.random.default_rng(1), n_steps=10, checkpoint=path)
    good = path.read_bytes()
    for name, value in (("coords", lambda a: a[:, :2]), ("accepted", None),
                        ("chain", lambda a: a[:5])):
        path.write_bytes(good)
        _replace_dataset(path, name, value)
        with pytest.raises(CheckpointError, match="damaged checkpoint") as info:
            run_ensemble(log_prob, p0, np.random.default_rng(1), n_steps=20, checkpoint=path,
                         resume=True)
        assert str(path) in str(info.value)


# -------------------------------------------------------------------- progress
def test_progress_without_a_terminal_is_one_line_every_five_percent(capsys, caplog):
    bar = make_progress(True, total=200, desc="chain 0")  # stderr is captured: no terminal
    assert isinstance(bar, LineProgress)
    with caplog.at_level(logging.INFO, logger="deepwell"):
        for _ in range(200):
            bar.update(1)
            bar.set_postfix_str("step 0.3", refresh=False)
        bar.close()
    lines = [r.getMessage() for r in caplog.records]
    assert len(lines) == 20  # 200 steps / (5% of 200 = 10 steps)
    assert lines[0].startswith("chain 0: 10/200 steps (5%)")
    assert lines[-1].startswith("chain 0: 200/200 steps (100%)")
    assert "\r" not in capsys.readouterr().err


# ---------------------------------------------------------------------- wording
def test_counts_take_the_right_number():
    assert [plural(n, "star") for n in (0, 1, 2)] == ["0 stars", "1 star", "2 stars"]
    assert plural(1, "radial velocity", "radial velocities") == "1 radial velocity"
    assert plural(3, "radial velocity", "radial velocities") == "3 radial velocities"


def test_other_libraries_info_lines_do_not_reach_the_user(tmp_path, monkeypatch, capsys):
    """matplotlib announces a rebuilt font cache at INFO level; only our own lines show."""
    real = cli_simulate.write_scenario

    def chatty(*args, **kw):
        logging.getLogger("matplotlib.font_manager").info("generated new fontManager")
        return real(*args, **kw)

    monkeypatch.setattr(cli_simulate, "write_scenario", chatty)
    desc = tmp_path / "d.toml"
    desc.write_text(SMALL_SCENARIO.format(seed=1))
    assert main(["simulate", str(desc), "--out", str(tmp_path / "sim")]) == 0
    err = capsys.readouterr().err
    assert "fontManager" not in err
    assert "scenario written" in err


# ------------------------------------------------------------------ sky figure
def test_every_star_of_a_large_set_has_its_own_colour_and_marker():
    # 49 = 7 Okabe-Ito colours x 7 marker shapes (style.PALETTE, style.MARKERS); colour
    # is never the only cue (common practice for figures read in grey or by colour-blind
    # readers), and neighbours differ in both
    pairs = [style_of(k) for k in range(len(PALETTE) * len(MARKERS))]
    assert len(set(pairs)) == len(pairs)
    assert all(a[0] != b[0] and a[1] != b[1] for a, b in zip(pairs[:-1], pairs[1:], strict=True))


@pytest.mark.parametrize(("option", "value"), [
    ("--steps", "0"), ("--chains", "-2"), ("--max-time", "nan"), ("--max-time", "inf"),
    ("--extended-mass", "-5"), ("--reference-radius", "0"), ("--walkers", "x"),
])
def test_impossible_command_line_number_is_refused_before_any_work(tmp_path, capsys, option,
                                                                   value):
    with pytest.raises(SystemExit) as info:  # argparse's own exit, status 2
        main(["fit", str(tmp_path), "--out", str(tmp_path / "rep"), option, value])
    assert info.value.code == 2
    err = capsys.readouterr().err
    assert "Traceback" not in err
    assert f"argument {option}" in err.splitlines()[-1]
    assert not (tmp_path / "rep").exists()


def test_redshift_of_a_trial_orbit_faster_than_light_is_nan_without_a_warning():
    # special relativity: gamma = (1 - v^2/c^2)^(-1/2) has no value for v >= c (common
    # practice); a fitter's trial orbit may get there, and the user must not see numpy's
    # RuntimeWarning for it (warnings are errors in this suite)
    c = const.c.to_value("km/s")
    v = np.array([0.5 * c, 1.01 * c])
    rv = redshift_velocity(v_z=v, v_sq=v**2, r_au=np.array([1e3, 1e3]), mass=4e6)
    # below c the exact form holds: 1 + z = gamma (1 + v/c) (1 - R_s/r)^(-1/2), R_s from
    # astropy's G, M_sun and c
    r_s_au = (2 * const.G * 4e6 * const.M_sun / const.c**2).to_value("au")
    expected = c * (1.0 / np.sqrt(1 - 0.25) * 1.5 / np.sqrt(1 - r_s_au / 1e3) - 1.0)
    assert rv[0] == pytest.approx(expected, rel=1e-9)
    assert np.isnan(rv[1])


def test_progress_of_a_run_to_convergence_promises_no_percentage(caplog):
    # A run to a stop rule may end long before its step bound: the lines give the bound
    # as "at most", never a share of it (common practice: no progress claim a run won't keep).
    bar = make_progress(True, total=20_300, desc="chain 1", open_ended=True)
    with caplog.at_level(logging.INFO, logger="deepwell"):
        for _ in range(2_100):
            bar.update(1)
        bar.close()
    lines = [r.getMessage() for r in caplog.records]
    assert len(lines) == 3  # 2100 steps / (5% of 20300 = 1015 steps), then the close
    assert lines[0].startswith("chain 1: 1015 steps (at most 20300; stops when converged)")
    assert all("%" not in line for line in lines)


def test_progress_under_a_time_limit_counts_time_against_the_limit(caplog, monkeypatch):
    now = [0.0]
    monkeypatch.setattr("deepwell.fit.sampling.progress.time.monotonic", lambda: now[0])
    bar = make_progress(True, total=20_300, desc="chain 0", max_time=100.0)
    with caplog.at_level(logging.INFO, logger="deepwell"):
        for _ in range(40):  # one second per step on the fake clock
            now[0] += 1.0
            bar.update(1)
    lines = [r.getMessage() for r in caplog.records]
    assert lines[0].startswith("chain 0: 5 steps, 5 s of the 100 s limit (5%)")
    assert len(lines) == 8  # 40 s / (5% of 100 s)
    assert "20300" not in " ".join(lines)
