"""Tests of deepwell.tables.observations: reading and validating the input tables."""

import hashlib
import warnings

import numpy as np
import pytest

from deepwell.core.errors import InputError
from deepwell.tables.observations import (
    DataWarning,
    Observations,
    read_observations,
    read_positions,
    read_velocities,
)

HEAD = "star,epoch,ra,dec,ra_err,dec_err"
ROW = "tb-2,2019.5,1.5,-2.5,0.3,0.4"


def write(path, text, encoding="utf-8"):
    """Write ``text`` to ``path`` and return the path."""
    path.write_bytes(text.encode(encoding) if isinstance(text, str) else text)
    return path


def positions(n_epochs=3, star="tb-2", start=2010.0):
    """Rows of a valid positions table for one star."""
    return "".join(f"{star},{start + k},{k},{-k},0.5,0.5\n" for k in range(n_epochs))


def check_error(exc_info, path, row, column, fragment):
    """The InputError names file, line and column and says what is wrong."""
    exc = exc_info.value
    text = str(exc)
    assert str(path) in text and exc.file == str(path)
    assert exc.row == row
    assert exc.column == column
    if row is not None:
        assert f"line {row}" in text
    if column is not None:
        assert f"column '{column}'" in text
    assert fragment in text


# ---------------------------------------------------------------- good input


def test_round_trip_values_and_defaults(tmp_path):
    path = write(tmp_path / "positions.csv",
                 " Star , EPOCH,ra,dec,ra_err,dec_err,note\n"
                 "tb-2,2019.5,1.5,-2.5,0.3,0.4,hello\n"
                 "\n"
                 "tb-2, 2020.25 ,2,3,0.1,0.2,\n")
    df = read_positions(path)
    assert list(df.columns) == ["star", "epoch", "ra", "dec", "ra_err", "dec_err", "corr",
                                "dataset", "relative_to", "exclude", "line", "file"]
    assert list(df.star) == ["tb-2", "tb-2"]
    np.testing.assert_array_equal(df.epoch, [2019.5, 2020.25])
    np.testing.assert_array_equal(df.ra, [1.5, 2.0])
    np.testing.assert_array_equal(df.dec, [-2.5, 3.0])
    np.testing.assert_array_equal(df.ra_err, [0.3, 0.1])
    np.testing.assert_array_equal(df.dec_err, [0.4, 0.2])
    np.testing.assert_array_equal(df["corr"], [0.0, 0.0])
    assert list(df.dataset) == ["default", "default"]
    assert list(df.relative_to) == ["frame", "frame"]
    assert df.exclude.dtype == bool and not df.exclude.any()
    assert list(df.line) == [2, 4]  # the blank line 3 is skipped but still counted
    assert list(df.file) == [str(path), str(path)]
    assert "note" not in df.columns


def test_optional_columns(tmp_path):
    path = write(tmp_path / "p.csv",
                 f"{HEAD},corr,dataset,relative_to,exclude\n"
                 "tb-2,2001,1,1,1,1,0.5,imager-a,Mass,YES\n"
                 "tb-2,2002,1,1,1,1,-0.25,fringe-b,frame,no\n"
                 "tb-2,2003,1,1,1,1,,,,\n"
                 "tb-2,2004,1,1,1,1,0,x,mass,1\n"
                 "tb-2,2005,1,1,1,1,0,x,mass,False\n")
    df = read_positions(path)
    np.testing.assert_array_equal(df["corr"], [0.5, -0.25, 0.0, 0.0, 0.0])
    assert list(df.dataset) == ["imager-a", "fringe-b", "default", "x", "x"]
    assert list(df.relative_to) == ["mass", "frame", "frame", "mass", "mass"]
    assert list(df.exclude) == [True, False, False, True, False]


def test_byte_order_mark_accepted(tmp_path):
    path = write(tmp_path / "p.csv", "\ufeff" + HEAD + "\n" + ROW + "\n")
    df = read_positions(path)
    assert list(df.star) == ["tb-2"] and df.epoch[0] == 2019.5


def test_iso_dates_are_utc_converted_to_tt_julian_epoch(tmp_path):
    # J2000.0 = 2000-01-01T12:00:00 TT = 2000-01-01T11:58:55.816 UTC (IAU definition of
    # J2000.0; TT - UTC = 32.184 s + 32 leap seconds) [common practice]
    path = write(tmp_path / "p.csv",
                 f"{HEAD}\n"
                 "tb-2,2000-01-01T11:58:55.816,1,1,1,1\n"
                 "tb-2,2000-01-02 11:58:55.816,1,1,1,1\n"
                 "tb-2,2019-05-03,1,1,1,1\n"
                 "tb-2,2019.5,1,1,1,1\n")
    df = read_positions(path)
    assert abs(df.epoch[0] - 2000.0) < 1e-9
    assert abs(df.epoch[1] - (2000.0 + 1 / 365.25)) < 1e-9  # space instead of 'T' is fine
    # 2019-05-03T00:00 UTC = 00:01:09.184 TT (TT - UTC = 32.184 s + 37 leap seconds since
    # 2017); 2000-01-01T12 to 2019-05-03T00 is 19*365 + 5 + 122 - 0.5 = 7061.5 days [computed]
    assert abs(df.epoch[2] - (2000 + (7061.5 + 69.184 / 86400) / 365.25)) < 1e-9
    assert df.epoch[3] == 2019.5


def test_future_dates_raise_no_warning(tmp_path):
    path = write(tmp_path / "p.csv", f"{HEAD}\ntb-2,2090-06-01T00:00:00,1,1,1,1\n")
    with warnings.catch_warnings():
        warnings.simplefilter("error")  # stricter than pyproject: nothing may leak out
        df = read_positions(path)
    assert 2090.4 < df.epoch[0] < 2090.5


def test_velocities_round_trip(tmp_path):
    path = write(tmp_path / "velocities.csv",
                 "star,epoch,vr,vr_err,dataset,exclude\ntb-2,2018.3,-1200.5,15,spec-c,\n")
    df = read_velocities(path)
    assert list(df.columns) == ["star", "epoch", "vr", "vr_err", "dataset", "exclude",
                                "line", "file"]
    assert (df.star[0], df.epoch[0], df.vr[0], df.vr_err[0]) == ("tb-2", 2018.3, -1200.5, 15.0)
    assert df.dataset[0] == "spec-c" and not df.exclude[0] and df.line[0] == 2


ECSV_HEAD = """# %ECSV 1.0
# ---
# datatype:
"""


def test_ecsv_units_converted(tmp_path):
    path = write(tmp_path / "positions.ecsv", ECSV_HEAD + """\
# - {name: star, datatype: string}
# - {name: epoch, unit: yr, datatype: float64}
# - {name: ra, unit: arcsec, datatype: float64}
# - {name: dec, unit: deg, datatype: float64}
# - {name: ra_err, unit: arcsec, datatype: float64}
# - {name: dec_err, unit: mas, datatype: float64}
# - {name: Comment, datatype: string}
star epoch ra dec ra_err dec_err Comment
tb-2 2019.5 0.1 0.000001 0.0005 0.4 x
tb-2 2020.5 -0.025 0.0 0.001 0.4 y
""")
    df = read_positions(path)
    np.testing.assert_allclose(df.ra, [100.0, -25.0], rtol=1e-12)
    np.testing.assert_allclose(df.dec, [3.6, 0.0], rtol=1e-12)
    np.testing.assert_allclose(df.ra_err, [0.5, 1.0], rtol=1e-12)
    np.testing.assert_array_equal(df.epoch, [2019.5, 2020.5])
    assert list(df.line) == [12, 13]
    assert "comment" not in df.columns


def test_ecsv_velocity_units_and_time_column(tmp_path):
    path = write(tmp_path / "velocities.ecsv", ECSV_HEAD + """\
# - {name: star, datatype: string}
# - {name: epoch, datatype: string}
# - {name: vr, unit: m / s, datatype: float64}
# - {name: vr_err, unit: km / s, datatype: float64}
# meta: !!omap
# - __serialized_columns__:
#     epoch:
#       __class__: astropy.time.core.Time
#       format: jyear
#       scale: tt
#       value: !astropy.table.SerializedColumn {name: epoch}
star epoch vr vr_err
tb-2 2018.25 -1500000.0 10
""")
    df = read_velocities(path)
    assert df.vr[0] == pytest.approx(-1500.0, rel=1e-12) and df.vr_err[0] == 10.0
    assert df.epoch[0] == pytest.approx(2018.25, abs=1e-12)


def test_ecsv_bad_unit(tmp_path):
    path = write(tmp_path / "positions.ecsv", ECSV_HEAD + """\
# - {name: star, datatype: string}
# - {name: epoch, datatype: float64}
# - {name: ra, unit: km, datatype: float64}
# - {name: dec, datatype: float64}
# - {name: ra_err, datatype: float64}
# - {name: dec_err, datatype: float64}
star epoch ra dec ra_err dec_err
tb-2 2019.5 1 1 1 1
""")
    with pytest.raises(InputError) as info:
        read_positions(path)
    check_error(info, path, None, "ra", "unit 'km'")


def test_ecsv_bad_value_names_line(tmp_path):
    path = write(tmp_path / "positions.ecsv", ECSV_HEAD + """\
# - {name: star, datatype: string}
# - {name: epoch, datatype: float64}
# - {name: ra, datatype: float64}
# - {name: dec, datatype: float64}
# - {name: ra_err, datatype: float64}
# - {name: dec_err, datatype: float64}
star epoch ra dec ra_err dec_err
tb-2 2019.5 1 1 1 1
tb-2 2020.5 1 1 -1 1
""")
    with pytest.raises(InputError) as info:
        read_positions(path)
    check_error(info, path, 12, "ra_err", "must be positive")


# ----------------------------------------------------------------- bad input

BAD = [
    # (file text, line, column, what the message says)
    (f"{HEAD}\n{ROW}\ntb-2,2020,abc,1,1,1\n", 3, "ra", "not a number: 'abc'"),
    (f"{HEAD}\ntb-2,2020,1,,1,1\n", 2, "dec", "empty cell"),
    (f"{HEAD}\ntb-2,2020,1,nan,1,1\n", 2, "dec", "not a finite number"),
    (f"{HEAD}\ntb-2,2020,1,1,inf,1\n", 2, "ra_err", "not a finite number"),
    (f"{HEAD}\n{ROW}\n\ntb-2,2020,1,1,-0.5,1\n", 4, "ra_err", "positive: '-0.5'"),
    (f"{HEAD}\ntb-2,2020,1,1,1,0\n", 2, "dec_err", "positive: '0'"),
    (f"{HEAD},corr\ntb-2,2020,1,1,1,1,1.0\n", 2, "corr", "between -1 and 1"),
    (f"{HEAD},corr\ntb-2,2020,1,1,1,1,-1.5\n", 2, "corr", "between -1 and 1"),
    (f"{HEAD},relative_to\ntb-2,2020,1,1,1,1,sun\n", 2, "relative_to", "'sun'"),
    (f"{HEAD},exclude\ntb-2,2020,1,1,1,1,maybe\n", 2, "exclude", "'maybe'"),
    (f"{HEAD}\n{ROW}\n ,2020,1,1,1,1\n", 3, "star", "empty star name"),
    (f"{HEAD}\ntb-2,2019-02-30,1,1,1,1\n", 2, "epoch", "'2019-02-30'"),
    (f"{HEAD}\ntb-2,yesterday,1,1,1,1\n", 2, "epoch", "not a number or ISO date"),
    (f"{HEAD}\ntb-2,2020,1,1,1\n", 2, "dec_err", "empty cell"),  # a cell short
    (f"{HEAD}\ntb-2,2020,1,1,1,1,7\n", 2, None, "7 cells but the header has 6"),
    (f"{HEAD}\n{ROW}\ntb-1,2020,1,1,1,1\n{ROW}\n", 4, None, "already on line 2"),
    (f"Star,epoch,ra,DEC,ra_err,dec_err,dec\n{ROW}\n", 1, "dec", "appears twice"),
    ("star;epoch;ra;dec;ra_err;dec_err\ntb-2;2020;1;1;1;1\n", 1, None,
     "expected comma-separated columns; found ';'"),
    ("star\tepoch\tra\tdec\tra_err\tdec_err\ntb-2\t2020\t1\t1\t1\t1\n", 1, None,
     "expected comma-separated columns; found tabs"),
    (f"{HEAD}\n", None, None, "no data rows"),
    (f"{HEAD}\n\n  \n", None, None, "no data rows"),
    ("", None, None, "no data rows"),
    ("star,epoch,ra,dec,dec_err\ntb-2,2020,1,1,1\n", None, "ra_err",
     "missing required column 'ra_err'"),
]


@pytest.mark.parametrize("text, line, column, fragment", BAD)
def test_bad_positions(tmp_path, text, line, column, fragment):
    path = write(tmp_path / "positions.csv", text)
    with pytest.raises(InputError) as info:
        read_positions(path)
    check_error(info, path, line, column, fragment)


def test_duplicate_names_both_lines(tmp_path):
    path = write(tmp_path / "p.csv", f"{HEAD}\n{ROW}\ntb-2,2019.5,9,9,1,1\n")
    with pytest.raises(InputError) as info:
        read_positions(path)
    check_error(info, path, 3, None, "already on line 2")


def test_same_epoch_other_dataset_is_no_duplicate(tmp_path):
    path = write(tmp_path / "p.csv", f"{HEAD},dataset\n{ROW},A\n{ROW},B\n")
    assert len(read_positions(path)) == 2


@pytest.mark.parametrize("text, line, column, fragment", [
    ("star,epoch,vr\ntb-2,2020,1\n", None, "vr_err", "missing required column"),
    ("star,epoch,vr,vr_err\ntb-2,2020,fast,1\n", 2, "vr", "not a number: 'fast'"),
    ("star,epoch,vr,vr_err\ntb-2,2020,1,-3\n", 2, "vr_err", "positive"),
    ("star,epoch,vr,vr_err,exclude\ntb-2,2020,1,3,2\n", 2, "exclude", "'2'"),
])
def test_bad_velocities(tmp_path, text, line, column, fragment):
    path = write(tmp_path / "velocities.csv", text)
    with pytest.raises(InputError) as info:
        read_velocities(path)
    check_error(info, path, line, column, fragment)


def test_not_utf8(tmp_path):
    path = write(tmp_path / "p.csv", f"{HEAD}\n{ROW}\n".encode() + b"S\xe9,2020,1,1,1,1\n")
    with pytest.raises(InputError) as info:
        read_positions(path)
    check_error(info, path, 3, None, "not UTF-8")


def test_unreadable_file(tmp_path):
    path = tmp_path / "missing.csv"
    with pytest.raises(InputError) as info:
        read_positions(path)
    check_error(info, path, None, None, "cannot read file")


# ------------------------------------------------------------ whole folders


def test_read_observations(tmp_path):
    pos = write(tmp_path / "positions.csv", HEAD + "\n" + positions(3))
    vel = write(tmp_path / "velocities.csv", "star,epoch,vr,vr_err\ntb-2,2011,100,10\n")
    obs = read_observations(tmp_path)
    assert isinstance(obs, Observations)
    assert len(obs.positions) == 3 and len(obs.velocities) == 1
    assert obs.dropped_stars == () and obs.folder == str(tmp_path)
    assert obs.checksums == {
        "positions.csv": hashlib.sha256(pos.read_bytes()).hexdigest(),
        "velocities.csv": hashlib.sha256(vel.read_bytes()).hexdigest(),
    }


def test_no_velocity_table_gives_empty_frame(tmp_path):
    write(tmp_path / "positions.csv", HEAD + "\n" + positions(3))
    obs = read_observations(tmp_path)
    assert obs.velocities.empty
    assert list(obs.velocities.columns) == ["star", "epoch", "vr", "vr_err", "dataset",
                                            "exclude", "line", "file"]
    assert list(obs.checksums) == ["positions.csv"]


def test_star_with_two_epochs_dropped(tmp_path):
    pos = write(tmp_path / "positions.csv",
                HEAD + "\n" + positions(3) + positions(2, star="tb-29"))
    write(tmp_path / "velocities.csv", "star,epoch,vr,vr_err\ntb-29,2011,100,10\n")
    with pytest.warns(DataWarning, match=r"positions\.csv.*tb-29"):
        obs = read_observations(tmp_path)
    assert set(obs.positions.star) == {"tb-2"}
    assert obs.velocities.empty  # dropped from both tables
    assert obs.dropped_stars == (("tb-29", str(pos), "only 2 usable position epochs (need 3)"),)
    assert len(read_observations(tmp_path, min_epochs=2).positions) == 5


def test_star_with_two_epochs_strict(tmp_path):
    pos = write(tmp_path / "positions.csv",
                HEAD + "\n" + positions(3) + positions(2, star="tb-29"))
    with pytest.raises(InputError) as info:
        read_observations(tmp_path, strict=True)
    check_error(info, pos, 5, "star", "'tb-29'")


def test_excluded_epochs_do_not_count(tmp_path):
    write(tmp_path / "positions.csv", f"{HEAD},exclude\n"
          "tb-2,2001,1,1,1,1,yes\ntb-2,2002,1,1,1,1,\ntb-2,2003,1,1,1,1,no\n"
          "tb-1,2001,1,1,1,1,\ntb-1,2002,1,1,1,1,\ntb-1,2003,1,1,1,1,\n")
    with pytest.warns(DataWarning, match="tb-2"):
        obs = read_observations(tmp_path)
    assert set(obs.positions.star) == {"tb-1"}


def test_velocities_for_unknown_star_dropped(tmp_path):
    write(tmp_path / "positions.csv", HEAD + "\n" + positions(3))
    vel = write(tmp_path / "velocities.csv",
                "star,epoch,vr,vr_err\ntb-2,2011,100,10\ntb-99,2011,100,10\n")
    with pytest.warns(DataWarning, match=r"velocities\.csv.*tb-99"):
        obs = read_observations(tmp_path)
    assert list(obs.velocities.star) == ["tb-2"]
    assert obs.dropped_stars == (("tb-99", str(vel), "velocities but no positions"),)
    with pytest.raises(InputError) as info:
        read_observations(tmp_path, strict=True)
    check_error(info, vel, 3, "star", "'tb-99'")


def test_every_star_dropped(tmp_path):
    pos = write(tmp_path / "positions.csv", HEAD + "\n" + positions(1))
    with pytest.warns(DataWarning), pytest.raises(InputError) as info:
        read_observations(tmp_path)
    check_error(info, pos, None, None, "no star left")


def test_folder_without_positions(tmp_path):
    write(tmp_path / "velocities.csv", "star,epoch,vr,vr_err\ntb-2,2011,100,10\n")
    with pytest.raises(InputError) as info:
        read_observations(tmp_path)
    check_error(info, tmp_path, None, None, "no positions table")


def test_csv_and_ecsv_both_present(tmp_path):
    write(tmp_path / "positions.csv", HEAD + "\n" + positions(3))
    write(tmp_path / "positions.ecsv", "# %ECSV 1.0\n")
    with pytest.raises(InputError) as info:
        read_observations(tmp_path)
    assert "positions.csv" in str(info.value) and "positions.ecsv" in str(info.value)


def test_bad_table_in_folder_names_its_file(tmp_path):
    write(tmp_path / "positions.csv", HEAD + "\n" + positions(3))
    vel = write(tmp_path / "velocities.csv", "star,epoch,vr,vr_err\ntb-2,2011,100,0\n")
    with pytest.raises(InputError) as info:
        read_observations(tmp_path)
    check_error(info, vel, 2, "vr_err", "positive")
