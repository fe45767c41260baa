"""Shared fixtures: small invented scenarios, simulated once per session."""

import os
import textwrap
from pathlib import Path

# One BLAS thread per test process: the matrices are small, and threads fighting
# over 2 cores made single SVDs a hundred times slower (common practice).
for _var in ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ.setdefault(_var, "1")

import pytest  # noqa: E402

from deepwell.tools.simulate import write_scenario  # noqa: E402

# An invented nucleus for injection-recovery tests (no real object behind it).
SMALL_SCENARIO = textwrap.dedent("""
    name = "test nucleus"
    story = "invented for injection-recovery tests"
    seed = {seed}
    reference_epoch = 2000.0

    [truth]
    mass = 2.6e6
    distance = 5200.0
    x0 = 0.4
    y0 = -0.7
    vx0 = 0.03
    vy0 = 0.02
    vz0 = 6.0

    [stars.t-1]
    a = 150.0
    e = 0.86
    inc = 132.0
    node = 228.0
    peri_arg = 63.0
    t_peri = 2012.3

    [stars.t-2]
    a = 120.0
    e = 0.35
    inc = 48.0
    node = 140.0
    peri_arg = 300.0
    t_peri = 2004.8

    [stars.t-3]
    a = 260.0
    e = 0.70
    inc = 96.0
    node = 20.0
    peri_arg = 150.0
    t_peri = 2008.9

    [stars.t-4]
    a = 420.0
    e = 0.50
    inc = 20.0
    node = 300.0
    peri_arg = 210.0
    t_peri = 1993.0

    [[campaigns]]
    dataset = "imager"
    kind = "positions"
    relative_to = "frame"
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
    coverage = 0.8
""")


@pytest.fixture(scope="session")
def small_scenario(tmp_path_factory):
    """Folder with positions.csv, velocities.csv and truth.json of SMALL_SCENARIO."""
    root = tmp_path_factory.mktemp("small")
    desc = root / "description.toml"
    desc.write_text(SMALL_SCENARIO.format(seed=4242))
    return write_scenario(desc, root / "data")


# ------------------------------------------------------------ helpers shared by test files
def one_line_error(capsys):
    """The single ``error:`` line a refused command printed (and no traceback)."""
    err = capsys.readouterr().err
    assert "Traceback" not in err
    errors = [line for line in err.strip().splitlines() if "error:" in line]
    assert len(errors) == 1, err
    return errors[0]


def snapshot(folder):
    """Every regular file under ``folder`` and its bytes (to show a folder is untouched)."""
    return {p.relative_to(folder).as_posix(): p.read_bytes()
            for p in sorted(Path(folder).rglob("*")) if p.is_file()}
