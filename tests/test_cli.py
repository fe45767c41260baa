"""The command line, called in-process: exit codes, one-line errors, safe output."""

import json
import shutil

import pytest

from deepwell.cli import main
from tests.conftest import SMALL_SCENARIO, one_line_error

GOOD_POS = "star,epoch,ra,dec,ra_err,dec_err\n"


@pytest.fixture()
def scenario(tmp_path, small_scenario):
    """A writable copy of the small simulated scenario."""
    dest = tmp_path / "scen"
    shutil.copytree(small_scenario, dest)
    return dest


def _corrupt(folder, old, new, table="positions.csv", line=3):
    path = folder / table
    lines = path.read_text().splitlines()
    lines[line - 1] = lines[line - 1].replace(old, new, 1) if old else new
    path.write_text("\n".join(lines) + "\n")


@pytest.mark.parametrize("edit, column, words", [
    (lambda f: _corrupt(f, None, "t-1,2001.5,abc,1.0,0.5,0.5,imager,frame"), "ra", "number"),
    (lambda f: _corrupt(f, None, "t-1,2001.5,1.0,nan,0.5,0.5,imager,frame"), "dec", ""),
    (lambda f: _corrupt(f, None, "t-1,2001.5,1.0,2.0,-0.5,0.5,imager,frame"), "ra_err", ""),
    (lambda f: _corrupt(f, None, "t-1,2001.5,1.0,2.0,0.5,0.0,imager,frame"), "dec_err", ""),
])
def test_bad_cell_gives_one_line_with_file_line_and_column(scenario, tmp_path, capsys, edit,
                                                            column, words):
    edit(scenario)
    code = main(["fit", str(scenario), "--out", str(tmp_path / "rep")])
    assert code == 2
    msg = one_line_error(capsys)
    assert "positions.csv" in msg and "line 3" in msg and f"'{column}'" in msg
    assert words in msg
    assert not (tmp_path / "rep").exists()


def test_missing_column_is_named(scenario, tmp_path, capsys):
    text = (scenario / "positions.csv").read_text().replace("dec_err", "dec_error", 1)
    (scenario / "positions.csv").write_text(text)
    assert main(["fit", str(scenario), "--out", str(tmp_path / "rep")]) == 2
    assert "dec_err" in one_line_error(capsys)


def test_correlation_of_one_is_refused(tmp_path, capsys):
    scen = tmp_path / "s"
    scen.mkdir()
    (scen / "positions.csv").write_text(
        "star,epoch,ra,dec,ra_err,dec_err,corr\nx,2001,1,2,0.5,0.5,1.0\n")
    assert main(["fit", str(scen), "--out", str(tmp_path / "rep")]) == 2
    msg = one_line_error(capsys)
    assert "'corr'" in msg and "line 2" in msg


def test_duplicate_rows_name_both_lines(scenario, tmp_path, capsys):
    lines = (scenario / "positions.csv").read_text().splitlines()
    lines.append(lines[1])
    (scenario / "positions.csv").write_text("\n".join(lines) + "\n")
    assert main(["fit", str(scenario), "--out", str(tmp_path / "rep")]) == 2
    msg = one_line_error(capsys)
    assert "line 2" in msg and f"line {len(lines)}" in msg


def test_empty_file_and_wrong_delimiter(tmp_path, capsys):
    scen = tmp_path / "s"
    scen.mkdir()
    (scen / "positions.csv").write_text("")
    assert main(["fit", str(scen), "--out", str(tmp_path / "r1")]) == 2
    assert "positions.csv" in one_line_error(capsys)
    (scen / "positions.csv").write_text(GOOD_POS.replace(",", ";") + "x;2001;1;2;0.5;0.5\n")
    assert main(["fit", str(scen), "--out", str(tmp_path / "r2")]) == 2
    assert "';'" in one_line_error(capsys)


def test_byte_order_mark_is_accepted_and_report_written(scenario, tmp_path):
    path = scenario / "positions.csv"
    path.write_bytes(b"\xef\xbb\xbf" + path.read_bytes())
    out = tmp_path / "rep"
    assert main(["fit", str(scenario), "--out", str(out), "--no-figures", "-q"]) == 0
    summary = json.loads((out / "summary.json").read_text())
    # the simulated truth of the small scenario is 2.6e6 solMass (conftest); a loose
    # 10% check here, the statistical check is in test_fit.py
    assert summary["parameters"]["mass"]["unit"] == "solMass"
    assert summary["parameters"]["mass"]["value"] == pytest.approx(2.6e6, rel=0.1)


def test_star_with_too_few_epochs_is_set_aside_or_refused_under_strict(scenario, tmp_path,
                                                                        capsys):
    with (scenario / "positions.csv").open("a") as fh:
        fh.write("lonely,2010.0,5.0,5.0,0.5,0.5,imager,frame\n")
        fh.write("lonely,2011.0,5.5,5.0,0.5,0.5,imager,frame\n")
    out = tmp_path / "rep"
    assert main(["fit", str(scenario), "--out", str(out), "--no-figures", "-q"]) == 0
    summary = json.loads((out / "summary.json").read_text())
    assert any("lonely" in str(d) for d in summary["dropped_stars"])
    assert "lonely" in (out / "report.md").read_text()
    capsys.readouterr()
    assert main(["fit", str(scenario), "--out", str(tmp_path / "r2"), "--strict"]) == 2
    assert "lonely" in one_line_error(capsys)


def test_foreign_folder_is_refused_and_left_untouched(scenario, tmp_path, capsys):
    out = tmp_path / "mine"
    out.mkdir()
    (out / "notes.txt").write_text("my own notes")
    assert main(["fit", str(scenario), "--out", str(out), "--no-figures"]) == 2
    one_line_error(capsys)
    assert [p.name for p in out.iterdir()] == ["notes.txt"]
    assert (out / "notes.txt").read_text() == "my own notes"


def test_failed_run_leaves_an_earlier_report_intact(scenario, tmp_path, capsys):
    out = tmp_path / "rep"
    assert main(["fit", str(scenario), "--out", str(out), "--no-figures", "-q"]) == 0
    before = {p.name: p.read_bytes() for p in out.rglob("*") if p.is_file()}
    _corrupt(scenario, None, "t-1,2001.5,abc,1.0,0.5,0.5,imager,frame")
    assert main(["fit", str(scenario), "--out", str(out), "--replace"]) == 2
    after = {p.name: p.read_bytes() for p in out.rglob("*") if p.is_file()}
    assert before == after
    assert len(list(tmp_path.iterdir())) == 2  # no temporary folder left behind


def test_simulate_command_writes_tables(tmp_path):
    desc = tmp_path / "d.toml"
    desc.write_text(SMALL_SCENARIO.format(seed=1))
    assert main(["simulate", str(desc), "--out", str(tmp_path / "sim"), "-q"]) == 0
    header = (tmp_path / "sim" / "positions.csv").read_text().splitlines()[0]
    assert header.startswith("star,epoch,ra,dec,ra_err,dec_err")


def test_settings_error_is_one_line(scenario, tmp_path, capsys):
    bad = tmp_path / "s.toml"
    bad.write_text("[shared.mass]\nvalue = 'heavy'\n")
    assert main(["fit", str(scenario), "--out", str(tmp_path / "r"), "--settings", str(bad)]) == 2
    assert "shared.mass.value" in one_line_error(capsys)


def test_effect_switches_reach_the_fit(scenario, tmp_path):
    out = tmp_path / "rep"
    assert main(["fit", str(scenario), "--out", str(out), "--no-figures", "-q",
                 "--fit-f", "--fit-f-sp"]) == 0
    pars = json.loads((out / "summary.json").read_text())["parameters"]
    # the small scenario is simulated with general relativity (f = f_sp = 1):
    # both strengths are fitted and agree with 1 within 4 sigma (injection-recovery)
    for name in ("f", "f_sp"):
        assert pars[name]["sigma"] > 0
        assert abs(pars[name]["value"] - 1.0) < 4 * pars[name]["sigma"]
    out2 = tmp_path / "rep2"
    assert main(["fit", str(scenario), "--out", str(out2), "--no-figures", "-q",
                 "--newtonian"]) == 0
    pars2 = json.loads((out2 / "summary.json").read_text())["parameters"]
    assert "f" not in pars2 and "f_sp" not in pars2


def test_more_free_parameters_than_data_is_refused(tmp_path, capsys):
    scen = tmp_path / "s"
    scen.mkdir()
    # one star, four positions and two velocities: 10 numbers for 7 shared + 6 star
    # parameters
    rows = "\n".join(f"x,{2015 + k},{10 + k},{20 - k},0.5,0.5" for k in range(4))
    (scen / "positions.csv").write_text(GOOD_POS + rows + "\n")
    (scen / "velocities.csv").write_text("star,epoch,vr,vr_err\nx,2016.0,100.0,10.0\n"
                                         "x,2017.0,150.0,10.0\n")
    assert main(["fit", str(scen), "--out", str(tmp_path / "rep"), "--newtonian"]) == 2
    assert "cannot determine" in one_line_error(capsys)


def test_extended_mass_limits_reach_the_report(scenario, tmp_path):
    out = tmp_path / "rep"
    assert main(["fit", str(scenario), "--out", str(out), "--no-figures", "-q",
                 "--extended-mass", "800"]) == 0
    limits = json.loads((out / "summary.json").read_text())["extended_mass"]
    assert len(limits) == 1 and limits[0]["scale_radius"]["value"] == 800.0
    # no extended mass was simulated: the 99.7% upper limit lies above the 95% one and
    # above zero (a truncated-Gaussian limit is positive by construction, common practice)
    lim = limits[0]
    up95, up997 = lim["upper_95"]["value"], lim["upper_997"]["value"]
    assert 0 < up95 < up997


@pytest.mark.parametrize("options, option", [
    (["--max-time", "100"], "--max-time"),        # a sampling option without --sample
    (["--steps", "500"], "--steps"),
    (["--extended-mass", "-5"], "--extended-mass"),  # radii must be positive
    (["--reference-radius", "0"], "--reference-radius"),
    (["--sample", "--chains", "0"], "--chains"),
    (["--figure-stars", "t-99"], "--figure-stars"),  # no such star in the data
    (["--no-figures", "--figure-stars", "t-1"], "--figure-stars"),  # figures asked and refused
    (["--no-figures", "--all-star-figures"], "--all-star-figures"),
])
def test_options_that_cannot_be_used_are_refused_before_the_fit(scenario, tmp_path, capsys,
                                                                 options, option):
    # Common practice: a mistake in an option costs no fit; the line names the option
    # (not a "column") and nothing is written.
    out = tmp_path / "out"
    try:
        code = main(["fit", str(scenario), "--out", str(out)] + options)
    except SystemExit as exc:  # refused by the option's own type check (argparse)
        code = exc.code
    assert code == 2
    err = capsys.readouterr().err
    line = [x for x in err.splitlines() if "error:" in x]
    assert len(line) == 1 and option in line[0] and "column" not in line[0]
    assert "searching starting orbits" not in err and "Traceback" not in err
    assert not out.exists()


def test_a_mistyped_option_gets_the_closest_real_one(scenario, tmp_path, capsys):
    # argparse exits with status 2 on an unknown option (Python docs, argparse); deepwell
    # adds the nearest option by difflib's ratio as a hint.
    with pytest.raises(SystemExit) as info:
        main(["fit", str(scenario), "--out", str(tmp_path / "out"), "--sampel"])
    assert info.value.code == 2
    err = capsys.readouterr().err
    assert "unrecognized arguments: --sampel" in err and "did you mean --sample?" in err
    assert not (tmp_path / "out").exists()


def test_settings_for_a_star_not_in_the_data_are_reported_not_silently_ignored(scenario,
                                                                               tmp_path):
    # Common practice: a settings section that matches nothing is most likely a typo.
    settings = tmp_path / "s.toml"
    settings.write_text("[stars.t-99]\na = 100.0\n")
    out = tmp_path / "out"
    assert main(["fit", str(scenario), "--out", str(out), "--settings", str(settings),
                 "--newtonian", "--no-figures", "-q"]) == 0
    notes = json.loads((out / "summary.json").read_text())["notes"]
    assert any("t-99" in n and "not in the data" in n for n in notes)
