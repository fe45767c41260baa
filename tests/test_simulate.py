"""Tests of the scenario simulator (deepwell.tools.simulate).

The noiseless model used here is written from scratch in this file (explicit
rotation matrices, a Newton solver for Kepler's equation, the period from the
Gaussian gravitational constant), so a convention error in the library shows
up as residuals far from unit-normal.
"""

import json
import math
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from deepwell.cli import main
from deepwell.core.errors import OutputError, SettingsError
from deepwell.tables.observations import read_observations
from deepwell.tools.simulate import (
    OUTPUT_FILES,
    load_description,
    simulate,
    truth_parameters,
    write_scenario,
)

SCENARIOS = Path(__file__).resolve().parent.parent / "scenarios"

# Gaussian gravitational constant k_G = 0.01720209895 (IAU 1976 System of Astronomical
# Constants): a massless body at 1 au around 1 Msun has P = 2 pi / k_G days.
K_GAUSS = 0.01720209895
# au = 149 597 870 700 m (IAU 2012 Resolution B2); Julian year = 365.25 d of 86400 s.
KMS_PER_AU_PER_YR = 149_597_870.7 / (365.25 * 86400.0)

BASE = """\
name = "Test nucleus"
story = "Invented for the tests."
seed = 11
reference_epoch = 2010.0

[truth]
mass = 4.1e6
distance = 7700.0
x0 = 1.25
y0 = -0.75
vx0 = 0.125
vy0 = -0.0625
vz0 = 12.0

[effects]
romer = false
redshift = 0.0
precession = 0.0

[stars.t-a]
a = 120.0
e = 0.875
inc = 134.0
node = 228.0
peri_arg = 66.0
t_peri = 2018.3

[stars.t-b]
a = 95.0
e = 0.25
inc = 20.0
node = 40.0
peri_arg = 300.0
t_peri = 2005.1

[stars.t-c]
a = 240.0
e = 0.6
inc = 91.0
node = 355.0
peri_arg = 150.0
t_peri = 2012.9

[[campaigns]]
dataset = "pos"
kind = "positions"
relative_to = "frame"
start = 2000.0
end = 2025.0
cadence = 40.0
error = [0.05, 0.3]
corr = 0.3

[[campaigns]]
dataset = "rv"
kind = "velocities"
start = 2000.0
end = 2025.0
cadence = 40.0
error = [5.0, 15.0]
"""


def _write(tmp_path, text, name="d.toml"):
    path = tmp_path / name
    path.write_text(text, encoding="utf-8")
    return path


def _independent_model(t, star, mass, distance):
    """East, north (mas) and v_z (km/s) from explicit rotations.

    Independent of deepwell.model.kernels.orbit.

    Position in the orbital plane (xi toward pericentre, eta 90 deg ahead in the
    direction of motion) rotated by R = Rz(node) Rx(inc) Rz(peri_arg) into
    (north, east, z away from the observer): the standard Euler-angle form
    (Murray & Dermott 1999, Solar System Dynamics, section 2.8) with the
    visual-binary axes of Heintz 1978, Double Stars, ch. 4 (from memory).
    """
    a_au = star["a"] * 1e-3 * distance  # small-angle identity: a[au] = a["] R0[pc]
    period = 2.0 * math.pi / K_GAUSS / 365.25 * math.sqrt(a_au**3 / mass)
    e = star["e"]
    mean = np.mod(2.0 * math.pi * (np.asarray(t) - star["t_peri"]) / period, 2.0 * math.pi)
    ecc_anom = np.full_like(mean, math.pi)
    # Newton's method on E - e sin E = M from E = pi converges for every M in [0, 2 pi)
    # and 0 <= e < 1 (Charles & Tatum 1998, Celest. Mech. Dyn. Astron. 69, 357; from memory).
    for _ in range(60):
        ecc_anom = ecc_anom - (ecc_anom - e * np.sin(ecc_anom) - mean) / (1 - e * np.cos(ecc_anom))
    xi = star["a"] * (np.cos(ecc_anom) - e)
    eta = star["a"] * math.sqrt(1 - e * e) * np.sin(ecc_anom)
    i, w, n = (math.radians(star[k]) for k in ("inc", "peri_arg", "node"))

    def rz(x):
        return np.array([[math.cos(x), -math.sin(x), 0], [math.sin(x), math.cos(x), 0], [0, 0, 1]])

    rx = np.array([[1, 0, 0], [0, math.cos(i), -math.sin(i)], [0, math.sin(i), math.cos(i)]])
    north, east, _ = rz(n) @ rx @ rz(w) @ np.vstack([xi, eta, np.zeros_like(xi)])
    # Radial velocity K [cos(nu + w) + e cos w], K = 2 pi a sin i / (P sqrt(1 - e^2))
    # (textbook spectroscopic-binary formula, e.g. Heintz 1978, ch. 5; from memory).
    half = ecc_anom / 2
    nu = 2.0 * np.arctan2(math.sqrt(1 + e) * np.sin(half), math.sqrt(1 - e) * np.cos(half))
    k_amp = 2 * math.pi * a_au * math.sin(i) / (period * math.sqrt(1 - e * e)) * KMS_PER_AU_PER_YR
    return east, north, k_amp * (np.cos(nu + w) + e * math.cos(w))


def _standard_normal_checks(z):
    """Mean, variance and the 1-sigma fraction of unit normals, at 5 sigma."""
    n = z.size
    # Mean of n unit normals has sd 1/sqrt(n); the sample variance has sd sqrt(2/(n-1))
    # (chi-square with n-1 degrees of freedom); the fraction inside |z| < 1 is binomial with
    # p = 0.682689 (normal distribution, common practice).
    assert abs(z.mean()) < 5.0 / math.sqrt(n)
    assert abs(z.var(ddof=1) - 1.0) < 5.0 * math.sqrt(2.0 / (n - 1))
    p = 0.6826894921
    assert abs(np.mean(np.abs(z) < 1.0) - p) < 5.0 * math.sqrt(p * (1 - p) / n)


def test_noise_is_unit_normal_about_independent_model(tmp_path):
    desc = load_description(_write(tmp_path, BASE))
    data = simulate(desc)
    truth = truth_parameters(desc)
    pos, vel = data.positions, data.velocities
    assert len(pos) > 2000 and len(vel) > 2000
    z_ra, z_dec, z_rv = [], [], []
    scale = truth["mass"], truth["distance"]
    for name, star in truth["stars"].items():
        p = pos[pos.star == name]
        east, north, _ = _independent_model(p.epoch.to_numpy(), star, *scale)
        dt = p.epoch.to_numpy() - 2010.0
        r1 = (p.ra.to_numpy() - truth["x0"] - truth["vx0"] * dt - east) / p.ra_err.to_numpy()
        r2 = (p.dec.to_numpy() - truth["y0"] - truth["vy0"] * dt - north) / p.dec_err.to_numpy()
        z_ra.append(r1)
        z_dec.append((r2 - 0.3 * r1) / math.sqrt(1 - 0.3**2))  # whiten with corr = 0.3
        v = vel[vel.star == name]
        _, _, vz = _independent_model(v.epoch.to_numpy(), star, *scale)
        z_rv.append((v.vr.to_numpy() - truth["vz0"] - vz) / v.vr_err.to_numpy())
    for z in (z_ra, z_dec, z_rv):
        _standard_normal_checks(np.concatenate(z))
    # Whitened ra and dec residuals are uncorrelated: sample correlation sd 1/sqrt(n).
    zr, zd = np.concatenate(z_ra), np.concatenate(z_dec)
    assert abs(np.corrcoef(zr, zd)[0, 1]) < 5.0 / math.sqrt(zr.size)
    # Per-point errors cover the stated range [0.05, 0.3] mas uniformly: mean 0.175.
    assert abs(pos.ra_err.mean() - 0.175) < 5 * 0.25 / math.sqrt(12 * len(pos))


def test_frame_and_mass_positions_differ_by_frame_offset_and_drift(tmp_path):
    frame = simulate(load_description(_write(tmp_path, BASE, "f.toml"))).positions
    mass_text = BASE.replace('relative_to = "frame"', 'relative_to = "mass"')
    mass = simulate(load_description(_write(tmp_path, mass_text, "m.toml"))).positions
    assert frame.epoch.tolist() == mass.epoch.tolist()
    dt = frame.epoch.to_numpy() - 2010.0
    # physics.md section 3: frame positions = x0 + vx0 (t - t_ref) + orbit; each value is
    # rounded to 1e-4 mas, so the difference is exact to 1e-4 mas.
    assert np.max(np.abs(frame.ra - mass.ra - (1.25 + 0.125 * dt))) <= 1.0001e-4
    assert np.max(np.abs(frame.dec - mass.dec - (-0.75 - 0.0625 * dt))) <= 1.0001e-4
    assert set(mass.relative_to) == {"mass"}


def test_truth_periods_follow_keplers_third_law(tmp_path):
    out = write_scenario(SCENARIOS / "rich" / "description.toml", tmp_path / "rich")
    truth = json.loads((out / "truth.json").read_text())
    mass, distance = truth["shared"]["mass"], truth["shared"]["distance"]
    assert len(truth["stars"]) >= 10
    for star in truth["stars"].values():
        a_au = star["a"] * 1e-3 * distance  # small-angle identity (physics.md section 1)
        # Gaussian gravitational constant (IAU 1976): P = 2 pi / k_G days for 1 au, 1 Msun;
        # agrees with the IAU 2015 constants to ~2e-10 (physics.md section 1, computed).
        expected = 2 * math.pi / K_GAUSS / 365.25 * math.sqrt(a_au**3 / mass)
        assert star["period"] == pytest.approx(expected, rel=1e-8)
        # k = P^2 M / a^3 = 1.0000377738 for Julian years (physics.md section 1, computed).
        assert star["period"] ** 2 * mass / a_au**3 == pytest.approx(1.0000377738, rel=1e-9)
        assert star["pericentre"] == pytest.approx(a_au * (1 - star["e"]), rel=1e-12)
    assert truth["units"]["period"] == "yr" and truth["units"]["pericentre"] == "AU"


@pytest.mark.parametrize("scenario", ["rich", "sparse"])
def test_bundled_csvs_match_their_description(scenario):
    # The committed CSVs are regenerated by the documented command; they must agree
    # with a fresh simulation to the written rounding (1e-4 mas, 1e-3 km/s).
    data = simulate(load_description(SCENARIOS / scenario / "description.toml"))
    for table, fresh in (("positions", data.positions), ("velocities", data.velocities)):
        stored = pd.read_csv(SCENARIOS / scenario / f"{table}.csv")
        assert list(stored.columns) == list(fresh.columns)
        assert len(stored) == len(fresh)
        numeric = fresh.select_dtypes("number").columns
        assert np.max(np.abs(stored[numeric].to_numpy() - fresh[numeric].to_numpy())) < 1e-9


def _line_of(text, needle):
    return text.splitlines().index(needle) + 1


BAD = [  # (old line, new line or None to delete, key reported); TOML syntax: toml.io v1.0.0
    ("e = 0.875", "e = 1.0", "e"),
    ("inc = 20.0", "inc = 200.0", "inc"),
    ("vz0 = 12.0", "vz0 = 12.0\nmassive = 3.0", "massive"),
    ('kind = "velocities"', 'kind = "spectra"', "kind"),
    ("error = [5.0, 15.0]", "error = 0.0", "error"),
    ("redshift = 0.0", 'redshift = "on"', "redshift"),
    ("precession = 0.0", "precession = 20.0", "precession"),
    ("seed = 11", 'seed = "eleven"', "seed"),
    ("end = 2025.0\ncadence = 40.0\nerror = [0.05", "end = 1999.0\ncadence = 40.0\nerror = [0.05",
     "end"),
    ('dataset = "rv"', 'dataset = "rv"\nrelative_to = "mass"', "relative_to"),
    ("corr = 0.3", 'corr = 0.3\nstars = ["t-z"]', "stars"),
]


@pytest.mark.parametrize(("old", "new", "key"), BAD)
def test_bad_description_names_key_and_line(tmp_path, old, new, key):
    assert BASE.count(old) == 1
    text = BASE.replace(old, new)
    bad_line = next(line for line in new.splitlines() if line.startswith(key))
    with pytest.raises(SettingsError) as info:
        load_description(_write(tmp_path, text))
    assert info.value.column == key
    assert info.value.row == _line_of(text, bad_line)


def test_missing_key_points_at_its_table(tmp_path):
    text = BASE.replace("mass = 4.1e6\n", "")
    with pytest.raises(SettingsError) as info:
        load_description(_write(tmp_path, text))
    assert info.value.column == "mass"
    assert info.value.row == _line_of(text, "[truth]")


def test_toml_syntax_error_reports_line(tmp_path):
    text = BASE.replace("x0 = 1.25", "x0 = = 1.25")
    with pytest.raises(SettingsError) as info:
        load_description(_write(tmp_path, text))
    assert info.value.row == _line_of(text, "x0 = = 1.25")


def test_refuses_non_empty_foreign_folder_and_leaves_it_untouched(tmp_path):
    desc = _write(tmp_path, BASE)
    out = tmp_path / "out"
    out.mkdir()
    (out / "notes.txt").write_text("mine\n")
    before = sorted(p.name for p in tmp_path.iterdir())
    with pytest.raises(OutputError):
        write_scenario(desc, out)
    assert sorted(p.name for p in out.iterdir()) == ["notes.txt"]
    assert (out / "notes.txt").read_text() == "mine\n"
    assert sorted(p.name for p in tmp_path.iterdir()) == before  # no temporary folder left


def test_replace_overwrites_only_own_files(tmp_path):
    desc = _write(tmp_path, BASE)
    out = tmp_path / "out"
    out.mkdir()
    (out / "notes.txt").write_text("mine\n")
    (out / "positions.csv").write_text("stale\n")
    write_scenario(desc, out, replace=True)
    assert sorted(p.name for p in out.iterdir()) == sorted(OUTPUT_FILES + ("notes.txt",))
    assert (out / "notes.txt").read_text() == "mine\n"
    expected = len(simulate(load_description(desc)).positions)
    assert len(pd.read_csv(out / "positions.csv")) == expected
    assert (out / "description.toml").read_text() == BASE
    assert len(list(tmp_path.iterdir())) == 2  # d.toml and out: no temporary folder left


def test_simulate_command_writes_new_folder(tmp_path):
    desc = _write(tmp_path, BASE)
    assert main(["simulate", str(desc), "--out", str(tmp_path / "new")]) == 0
    assert main(["simulate", str(desc), "--out", str(tmp_path / "new")]) == 2  # now non-empty
    velocities = pd.read_csv(tmp_path / "new" / "velocities.csv")
    assert len(velocities) == len(simulate(load_description(desc)).velocities)


def test_fit_of_a_simulated_scenario_uses_the_reference_epoch_it_states(tmp_path, capsys):
    # The description states reference_epoch = 2010 (x0 = 1.25 mas then; 0 at 2000 with the
    # drift of 0.125 mas/yr): a fit of the folder alone must quote x0 at 2010, and a
    # settings file that chooses another epoch wins with a warning.
    light = BASE.replace("cadence = 40.0", "cadence = 2.0")  # 50 epochs per campaign
    folder = write_scenario(_write(tmp_path, light), tmp_path / "scen")
    out = tmp_path / "rep"
    assert main(["fit", str(folder), "--out", str(out), "--newtonian", "--no-figures",
                 "-q"]) == 0
    summary = json.loads((out / "summary.json").read_text())
    x0 = summary["parameters"]["x0"]
    assert summary["reference_epoch"] == 2010.0
    assert abs(x0["value"] - 1.25) < 3 * x0["sigma"]
    settings = tmp_path / "s.toml"
    settings.write_text("reference_epoch = 2000.0\n")
    assert main(["fit", str(folder), "--out", str(tmp_path / "rep2"), "--newtonian",
                 "--no-figures", "--settings", str(settings)]) == 0
    assert "states reference_epoch = 2010" in capsys.readouterr().err
    assert json.loads((tmp_path / "rep2" / "summary.json").read_text())["reference_epoch"] \
        == 2000.0


def test_high_cadence_campaigns_give_no_duplicate_rows(tmp_path):
    # A star is observed at most once per epoch by one data set (our reader refuses
    # duplicates): 2000 epochs per year with the default jitter must stay unique after
    # the 1e-5 yr rounding, also where jittered epochs pile up at the campaign's ends.
    dense = BASE.replace("cadence = 40.0", "cadence = 2000.0").replace(
        "start = 2000.0\nend = 2025.0", "start = 2000.0\nend = 2002.0")
    data = simulate(load_description(_write(tmp_path, dense)))
    pos = data.positions
    assert len(pos) > 3 * 3000
    assert not pos.duplicated(["star", "epoch", "dataset"]).any()
    folder = write_scenario(_write(tmp_path, dense, "e.toml"), tmp_path / "scen")
    assert len(read_observations(folder).positions) == len(pos)


SYSTEMATICS = """
[systematics.pos]
offset = [2.5, -1.5]
error_factor = 3.0

[systematics.rv]
zero_point = 25.0
error_factor = 0.5
"""


def test_systematics_shift_the_data_and_scale_the_true_scatter(tmp_path):
    # Same seed with and without systematics: the random draws are the same, so the
    # difference is the offset (zero-point) plus (factor - 1) times the honest noise,
    # and the noise about the independent model is unit-normal once divided by
    # factor x stated error (physics.md section 3 for the model; rounding 1e-4 mas,
    # 1e-3 km/s).
    plain = simulate(load_description(_write(tmp_path, BASE, "p.toml")))
    desc = load_description(_write(tmp_path, BASE + SYSTEMATICS, "s.toml"))
    data = simulate(desc)
    truth = truth_parameters(desc)
    pos, vel = data.positions, data.velocities
    assert pos.epoch.tolist() == plain.positions.epoch.tolist()
    scale = truth["mass"], truth["distance"]
    z_ra, z_rv = [], []
    for name, star in truth["stars"].items():
        p = pos[pos.star == name]
        east, _, _ = _independent_model(p.epoch.to_numpy(), star, *scale)
        dt = p.epoch.to_numpy() - 2010.0
        honest = p.ra.to_numpy() - truth["x0"] - truth["vx0"] * dt - east - 2.5
        z_ra.append(honest / (3.0 * p.ra_err.to_numpy()))
        v = vel[vel.star == name]
        _, _, vz = _independent_model(v.epoch.to_numpy(), star, *scale)
        z_rv.append((v.vr.to_numpy() - truth["vz0"] - vz - 25.0) / (0.5 * v.vr_err.to_numpy()))
    for z in (z_ra, z_rv):
        _standard_normal_checks(np.concatenate(z))
    # exact: with - without = offset + (f - 1) (without - noiseless); check on the mean
    d_dec = pos.dec.to_numpy() - plain.positions.dec.to_numpy()
    assert abs(np.mean(d_dec) - (-1.5)) < 5 * 2.0 * np.sqrt(np.mean(pos.dec_err**2) / len(pos))
    record = json.loads(json.dumps(data.truth))
    assert record["systematics"] == {
        "pos": {"offset": [2.5, -1.5], "zero_point": 0.0, "error_factor": 3.0},
        "rv": {"offset": [0.0, 0.0], "zero_point": 25.0, "error_factor": 0.5}}
    assert record["units"]["offset"] == "mas" and record["units"]["zero_point"] == "km / s"


@pytest.mark.parametrize(("text", "key", "match"), [
    ("[systematics.rv]\noffset = [1.0, 2.0]\n", "offset", "frame-relative positions only"),
    ("[systematics.pos]\nzero_point = 3.0\n", "zero_point", "velocity data sets only"),
    ("[systematics.nowhere]\nzero_point = 3.0\n", "zero_point", "observed by no campaign"),
    ("[systematics.pos]\nerror_factor = 0.0\n", "error_factor", "must be in"),
    ("[systematics.pos]\nwobble = 1.0\n", "wobble", "unknown key"),
])
def test_bad_systematics_name_key_and_line(tmp_path, text, key, match):
    full = BASE + "\n" + text
    with pytest.raises(SettingsError, match=match) as info:
        load_description(_write(tmp_path, full))
    assert info.value.column == key
    assert info.value.row == _line_of(full, next(x for x in text.splitlines()
                                                 if x.startswith(key)))
