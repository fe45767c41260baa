"""Published machine-readable tables (AAS MRT / CDS "ReadMe + data") with their own names.

The MRT files are written in the test by astropy itself (astropy.io.ascii, format
"ascii.mrt": the independent writer), in arcsec and with the column names a journal
table might use; the settings' [columns] map names our columns.  The fit of the MRT
tables must equal the fit of the same numbers as deepwell CSV.
"""

import json
import shutil

import astropy.units as u
import pytest
from astropy.table import Table

from deepwell.cli import main
from deepwell.core.errors import SettingsError
from deepwell.tables.settings import parse_settings

COLUMNS = """
[columns.positions]
star = "Name"
epoch = "Epoch"
ra = "dRA"
ra_err = "e_dRA"
dec = "dDE"
dec_err = "e_dDE"
dataset = "Inst"
relative_to = "Ref"

[columns.velocities]
star = "Name"
epoch = "Epoch"
vr = "RV"
vr_err = "e_RV"
dataset = "Inst"
"""


def _write_mrt(csv_folder, folder):
    """The scenario's CSV tables as MRT files: positions in arcsec, journal-style names."""
    folder.mkdir()
    p = Table.read(csv_folder / "positions.csv", format="ascii.csv")
    t = Table()
    t["Name"], t["Epoch"] = p["star"], p["epoch"] * u.yr
    for ours, theirs in (("ra", "dRA"), ("ra_err", "e_dRA"), ("dec", "dDE"),
                         ("dec_err", "e_dDE")):
        t[theirs] = (p[ours] * u.mas).to(u.arcsec)
        t[theirs].format = ".7f"  # the CSV's 4 decimals in mas, exactly
    t["Inst"], t["Ref"] = p["dataset"], p["relative_to"]
    t.write(folder / "positions.mrt", format="ascii.mrt")
    v = Table.read(csv_folder / "velocities.csv", format="ascii.csv")
    w = Table()
    w["Name"], w["Epoch"] = v["star"], v["epoch"] * u.yr
    w["RV"], w["e_RV"] = v["vr"] * u.km / u.s, v["vr_err"] * u.km / u.s
    w["Inst"] = v["dataset"]
    w.write(folder / "velocities.mrt", format="ascii.mrt")


def test_mrt_tables_with_their_own_names_and_units_give_the_csv_fit(tmp_path, small_scenario):
    _write_mrt(small_scenario, tmp_path / "mrt")
    settings = tmp_path / "columns.toml"
    settings.write_text(COLUMNS)
    fits = {}
    for name, folder, extra in (("csv", small_scenario, []),
                                ("mrt", tmp_path / "mrt", ["--settings", str(settings)])):
        out = tmp_path / f"rep-{name}"
        assert main(["fit", str(folder), "--out", str(out), "--no-figures", "-q",
                     "--newtonian", *extra]) == 0
        fits[name] = json.loads((out / "summary.json").read_text())
    for q in ("mass", "distance", "x0", "y0", "vz0"):
        a, b = fits["mrt"]["parameters"][q], fits["csv"]["parameters"][q]
        # the same numbers to double precision (arcsec -> mas by astropy): same fit
        assert a["value"] == pytest.approx(b["value"], rel=1e-7, abs=1e-7 * b["sigma"])
        assert a["sigma"] == pytest.approx(b["sigma"], rel=1e-5)
    assert fits["mrt"]["fit"]["chi2"] == pytest.approx(fits["csv"]["fit"]["chi2"], rel=1e-7)


def test_bad_cell_of_an_mrt_table_names_its_line_and_own_column(tmp_path, small_scenario,
                                                                 capsys):
    _write_mrt(small_scenario, tmp_path / "mrt")
    path = tmp_path / "mrt" / "velocities.mrt"
    text = path.read_text().splitlines()
    first = next(i for i, line in enumerate(text) if line.startswith("t-"))
    # a velocity above the speed of light (astropy's c = 299792.458 km/s)
    cells = text[first].split()
    text[first] = text[first].replace(cells[2], "4.0e5".rjust(len(cells[2])), 1)
    path.write_text("\n".join(text) + "\n")
    settings = tmp_path / "columns.toml"
    settings.write_text(COLUMNS)
    assert main(["fit", str(tmp_path / "mrt"), "--out", str(tmp_path / "rep"), "--settings",
                 str(settings)]) == 2
    err = capsys.readouterr().err
    assert "Traceback" not in err
    (line,) = [ln for ln in err.splitlines() if "error:" in ln]
    assert "velocities.mrt" in line and f"line {first + 1}" in line and "column 'RV'" in line


@pytest.mark.parametrize(("table", "key"), [
    ({"positions": {"right_ascension": "RA"}}, "columns.positions.right_ascension"),
    ({"positions": {"ra": "X", "dec": "X"}}, "columns.positions"),
    ({"photometry": {"star": "Name"}}, "columns.photometry"),
    ({"velocities": {"vr": ""}}, "columns.velocities.vr"),
])
def test_bad_column_map_names_its_key(table, key):
    with pytest.raises(SettingsError) as info:
        parse_settings({"columns": table})
    assert info.value.column == key


def test_column_map_survives_the_settings_round_trip():
    s = parse_settings({"columns": {"positions": {"star": "Name"}}})
    assert parse_settings(s.to_dict()).columns == {"positions": {"star": "Name"}}


def test_mapped_column_missing_from_the_table_is_named(tmp_path, small_scenario, capsys):
    scen = tmp_path / "scen"
    shutil.copytree(small_scenario, scen)
    settings = tmp_path / "columns.toml"
    settings.write_text('[columns.positions]\nra = "dRA"\n')
    assert main(["fit", str(scen), "--out", str(tmp_path / "rep"), "--settings",
                 str(settings)]) == 2
    err = capsys.readouterr().err
    assert "missing required column 'ra' (mapped to 'dRA')" in err
