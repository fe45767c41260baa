"""Survey-scale input: the normal-equation fit, large injection-recovery, the memory refusal.

All data are invented (deepwell's simulator) for injection-recovery only.
"""

import json
import textwrap

import numpy as np
import pandas as pd
import pytest

import deepwell.fit.least_squares as least_squares
import deepwell.tables.size as size
from deepwell.cli import main
from deepwell.fit.jacobian import default_steps, grouped_jacobian, numerical_jacobian
from deepwell.fit.joint import fit_joint
from deepwell.tables.effects import effects_from_args
from deepwell.tables.observations import read_observations
from deepwell.tables.settings import Settings
from deepwell.tools.simulate import write_scenario

from .conftest import one_line_error, snapshot

NEWTONIAN = effects_from_args(Settings(), newtonian=True)


def survey(tmp_path, n_pos, n_vel=None, n_stars=3, seed=11, a_range=(90.0, 250.0)):
    """An invented nucleus of ``n_stars`` stars with about ``n_pos`` position rows."""
    rng = np.random.default_rng(seed)
    text = (f'name = "survey"\nstory = "invented"\nseed = {seed}\n[truth]\nmass = 4.0e6\n'
            "distance = 8000.0\nx0 = 0.5\ny0 = -0.4\nvx0 = 0.05\nvy0 = 0.03\nvz0 = 5.0\n"
            "[effects]\nromer = false\nredshift = 0.0\nprecession = 0.0\n")
    for k in range(n_stars):
        text += (f"[stars.sv-{k:03d}]\na = {rng.uniform(*a_range):.2f}\n"
                 f"e = {rng.uniform(0.2, 0.8):.3f}\ninc = {rng.uniform(20, 160):.1f}\n"
                 f"node = {rng.uniform(0, 360):.1f}\nperi_arg = {rng.uniform(0, 360):.1f}\n"
                 f"t_peri = {rng.uniform(2000, 2020):.2f}\n")
    n_vel = n_vel or 25 * n_stars
    text += ('[[campaigns]]\ndataset = "img"\nkind = "positions"\nstart = 1995.0\n'
             f"end = 2025.0\ncadence = {n_pos / n_stars / 30.0:.8g}\nerror = 0.8\n"
             '[[campaigns]]\ndataset = "spec"\nkind = "velocities"\nstart = 2000.0\n'
             f"end = 2025.0\ncadence = {n_vel / n_stars / 25.0:.8g}\nerror = 10.0\n")
    tmp_path.mkdir(parents=True, exist_ok=True)
    (tmp_path / "d.toml").write_text(text)
    return write_scenario(tmp_path / "d.toml", tmp_path / "data")


def every_tenth(folder, out):
    """A copy of a scenario with every tenth row of each table."""
    out.mkdir()
    for name in ("positions.csv", "velocities.csv"):
        pd.read_csv(folder / name).iloc[::10].to_csv(out / name, index=False)
    return out


@pytest.fixture(scope="module")
def sparse_fits():
    """The sparse demo fitted by scipy's TRF (dense Jacobian) and on the normal equations."""
    obs = read_observations("scenarios/sparse")
    dense = fit_joint(obs, Settings())
    limit = least_squares.DENSE_CELLS
    least_squares.DENSE_CELLS = 0
    try:
        normal = fit_joint(obs, Settings())
    finally:
        least_squares.DENSE_CELLS = limit
    return dense, normal


def test_normal_equations_reach_the_minimum_found_by_scipys_trust_region_solver(sparse_fits):
    # Reference library: scipy.optimize.least_squares (TRF on the dense Jacobian) on the
    # same model; both stop at ftol = 1e-10, so values agree far inside 1e-6 relative.
    dense, normal = sparse_fits
    assert not least_squares.uses_normal_equations(dense.model, dense.free)
    for label in ("mass", "distance"):
        assert normal.value(label) == pytest.approx(dense.value(label), rel=1e-6)
        # the covariance is J^T J-based in both (SVD of J, eigenvalues of J^T J)
        assert normal.sigma(label) == pytest.approx(dense.sigma(label), rel=1e-4)
    assert normal.chi2 == pytest.approx(dense.chi2, rel=1e-6)


def test_normal_matrix_accumulated_by_star_equals_numpys_dense_product(sparse_fits):
    # numpy's J^T J and J^T r of the dense grouped Jacobian at the same vector and steps
    # are the reference (the block form must not lose or double any entry).
    model, vec, free = sparse_fits[0].model, sparse_fits[0].internal, sparse_fits[0].free
    steps = default_steps(model, vec)
    free = free.copy()
    free[model.layout.n_shared + 6 + 2] = False  # one fixed element of the second star
    owner = model.residual_owner()
    J = numerical_jacobian(model.residuals, vec, free, steps, model.layout, owner)
    r = model.residuals(vec)
    A, g = grouped_jacobian(model.residuals, vec, free, steps, model.layout, owner).normal(r)
    assert np.max(np.abs(A - J.T @ J)) <= 1e-12 * np.max(np.abs(J.T @ J))
    assert np.max(np.abs(g - J.T @ r)) <= 1e-12 * np.max(np.abs(J.T @ np.abs(r)))


def test_200k_rows_recover_the_injected_mass_and_distance_with_sigma_scaling_as_root_n(tmp_path):
    # Injection-recovery (invented data): 200 000 position rows of 3 stars.  The fit must
    # go through the normal equations, recover mass and distance within 3 sigma, and its
    # sigma must match the sigma of a tenth of the rows divided by sqrt(10) within 20 %
    # (errors of a linear least-squares fit fall as 1/sqrt(N), common practice).
    folder = survey(tmp_path / "full", 200_000, n_vel=6000)
    obs = read_observations(folder)
    lines = []
    res = fit_joint(obs, NEWTONIAN, progress=lines.append)
    assert least_squares.uses_normal_equations(res.model, res.free)
    truth = json.loads((folder / "truth.json").read_text())["shared"]
    for label in ("mass", "distance"):
        assert abs(res.value(label) - truth[label]) < 3 * res.sigma(label)
    sub = fit_joint(read_observations(every_tenth(folder, tmp_path / "tenth")), NEWTONIAN)
    for label in ("mass", "distance"):
        expected = sub.sigma(label) * np.sqrt(sub.n_data / res.n_data)
        assert res.sigma(label) == pytest.approx(expected, rel=0.2)
    # progress: one line per star of the start search, one per joint-fit iteration
    assert sum(t.startswith("starting orbit of") for t in lines) == len(res.stars)
    assert any(t.startswith("joint fit: iteration") for t in lines)


@pytest.mark.slow
def test_a_million_rows_recover_the_injected_mass_and_distance(tmp_path):
    # Injection-recovery (invented data) at survey scale: 10^6 position rows of 3 stars.
    folder = survey(tmp_path, 1_000_000, n_vel=30_000)
    res = fit_joint(read_observations(folder), NEWTONIAN)
    truth = json.loads((folder / "truth.json").read_text())["shared"]
    assert res.n_data > 1_900_000
    for label in ("mass", "distance"):
        assert abs(res.value(label) - truth[label]) < 3 * res.sigma(label)


@pytest.mark.slow
def test_hundred_star_nucleus_from_tables_alone_recovers_mass_distance_and_every_period(
        tmp_path):
    # Injection-recovery (invented data): 100 stars, 40 position epochs each, fitted from
    # the tables alone.  For Gaussian errors all 100 periods fall within 3 sigma with
    # probability 0.9973^100 = 0.76 (common practice), so this fixed seed was checked once.
    folder = survey(tmp_path, 4000, n_stars=100, seed=12, a_range=(60.0, 200.0))
    res = fit_joint(read_observations(folder), NEWTONIAN)
    truth = json.loads((folder / "truth.json").read_text())
    for label in ("mass", "distance"):
        assert abs(res.value(label) - truth["shared"][label]) < 3 * res.sigma(label)
    for star, el in truth["stars"].items():
        label = f"{star}:period"
        assert abs(res.value(label) - el["period"]) < 3 * res.sigma(label), star


def test_line_count_matches_pythons_splitlines(tmp_path):
    # Reference: Python's str.splitlines on the same text (with and without a final newline).
    for text in ("a,b\n1,2\n3,4\n", "a,b\n1,2\n3,4", "", "x\n" * 5000):
        path = tmp_path / "t.csv"
        path.write_text(text)
        assert size.count_lines(path, block=7) == len(text.splitlines())


def test_input_beyond_the_available_memory_is_refused_in_one_line(tmp_path, capsys,
                                                                 monkeypatch):
    # With 10 kB "available", the sparse demo (BYTES_PER_ROW per line) cannot be fitted:
    # the run stops before reading, with exit status 2 and one line naming the file and
    # its size; no output folder is made.
    monkeypatch.setattr(size, "memory_available", lambda: 10_000)
    out = tmp_path / "report"
    before = snapshot(tmp_path)
    assert main(["fit", "scenarios/sparse", "--out", str(out), "--no-figures"]) == 2
    err = one_line_error(capsys)
    n_lines = size.count_lines("scenarios/sparse/positions.csv")
    assert "positions.csv" in err and f"({n_lines} lines)" in err and "memory" in err
    assert not out.exists() and snapshot(tmp_path) == before


def test_memory_estimate_is_linear_in_the_lines(tmp_path):
    # The refusal threshold: BYTES_PER_ROW per line, against the stated available bytes.
    path = tmp_path / "positions.csv"
    path.write_text(textwrap.dedent("star,epoch\n") + "s,2000.0\n" * 999)
    size.check_memory([path], available=1000 * size.BYTES_PER_ROW)  # exactly enough
    with pytest.raises(Exception, match="positions.csv"):
        size.check_memory([path], available=1000 * size.BYTES_PER_ROW - 1)
