"""Leave-one-star-out refits on invented data where one star was simulated with a wrong mass.

Stars t-1..t-3 orbit 2.6e6 Msun; star t-5 was simulated around 1.3 times that
mass (same distance and frame) and merged into the same tables.  Its
leave-one-out shift must stand out: largest nested chi-square by a wide
margin (factor 3, a loose margin chosen for this scenario) and nested p below
0.0027 (3 sigma, common practice).
"""

import textwrap

import numpy as np
import pandas as pd
import pytest

from deepwell.report.figures.jackknife import plot_jackknife
from deepwell.results.jackknife import STAND_OUT_P, jackknife
from deepwell.tables.effects import effects_from_args
from deepwell.tables.observations import read_observations
from deepwell.tables.settings import Settings
from deepwell.tools.simulate import write_scenario

HEAD = textwrap.dedent("""
    name = "jackknife test nucleus"
    story = "invented for the jackknife test"
    seed = {seed}
    reference_epoch = 2000.0
    [truth]
    mass = {mass}
    distance = 5200.0
    vz0 = 6.0
    [effects]
    romer = false
    redshift = 0.0
    precession = 0.0
""")
CAMPAIGNS = textwrap.dedent("""
    [[campaigns]]
    dataset = "imager"
    kind = "positions"
    start = 1996.0
    end = 2022.0
    cadence = 1.0
    error = [0.6, 0.9]
    [[campaigns]]
    dataset = "spectra"
    kind = "velocities"
    start = 2002.0
    end = 2022.0
    cadence = 1.0
    error = [12.0, 18.0]
""")
STARS = {"t-1": (150, .86, 132, 228, 63, 2012.3), "t-2": (120, .35, 48, 140, 300, 2004.8),
         "t-3": (260, .7, 96, 20, 150, 2008.9), "t-5": (200, .6, 70, 80, 30, 2010.5)}


def _star(name):
    a, e, i, o, w, t = STARS[name]
    return (f"[stars.{name}]\na = {a}\ne = {e}\ninc = {i}\nnode = {o}\nperi_arg = {w}\n"
            f"t_peri = {t}\n")


@pytest.fixture(scope="module")
def jk_by_star(tmp_path_factory):
    root = tmp_path_factory.mktemp("jackknife")
    (root / "good.toml").write_text(HEAD.format(seed=5, mass=2.6e6)
                                    + "".join(_star(s) for s in ("t-1", "t-2", "t-3"))
                                    + CAMPAIGNS)
    (root / "bad.toml").write_text(HEAD.format(seed=6, mass=2.6e6 * 1.3) + _star("t-5")
                                   + CAMPAIGNS)
    good = write_scenario(root / "good.toml", root / "good")
    bad = write_scenario(root / "bad.toml", root / "bad")
    for name in ("positions.csv", "velocities.csv"):
        pd.concat([pd.read_csv(good / name), pd.read_csv(bad / name)]).to_csv(good / name,
                                                                            index=False)
    obs = read_observations(good)
    return jackknife(obs, effects_from_args(Settings(), newtonian=True), by="star"), root


def test_wrong_mass_star_stands_out(jk_by_star):
    jk, _ = jk_by_star
    rows = {r["left_out"]: r for r in jk.rows}
    assert set(rows) == {"t-1", "t-2", "t-3", "t-5"}
    assert rows["t-5"]["stands_out"] and rows["t-5"]["nested_p"] < STAND_OUT_P
    others = max(r["nested_chi2"] for s, r in rows.items() if s != "t-5")
    assert rows["t-5"]["nested_chi2"] > 3 * others


def test_jackknife_error_is_the_delete_one_formula(jk_by_star):
    # sigma^2 = (n-1)/n sum (theta_i - mean)^2 (Quenouille-Tukey jackknife, from memory)
    jk, _ = jk_by_star
    m = np.array([r["mass"] for r in jk.rows])
    n = len(m)
    assert jk.jackknife_sigma["mass"] == pytest.approx(
        np.sqrt((n - 1) / n * np.sum((m - m.mean()) ** 2)), rel=1e-12)
    # the tension between stars shows: jackknife error well above the statistical one
    assert jk.jackknife_sigma["mass"] > 2 * jk.statistical_sigma["mass"]
    assert any("statistical error is probably too small" in n for n in jk.notes)


def test_jackknife_figure_is_written(jk_by_star):
    jk, root = jk_by_star
    paths = plot_jackknife(jk, root / "jackknife")
    assert [p.suffix for p in paths] == [".pdf", ".png"] and all(p.stat().st_size > 0
                                                                 for p in paths)


def test_unknown_grouping_is_refused():
    with pytest.raises(ValueError):
        jackknife(None, Settings(), by="epoch")
