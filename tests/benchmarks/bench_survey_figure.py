"""Sky figure of survey-scale data: file sizes and drawing time against a small case.

An invented nucleus with N_STARS stars on random orbits, each observed at
N_EPOCHS epochs (synthetic arrays: the positions are the model's own plus
Gaussian scatter of 0.5 mas), so that the figure holds N_STARS * N_EPOCHS
points (one million by default).  Above ``RASTER_POINTS`` positions the sky
figure draws its points as rasterised dots without error bars (and its orbit
lines rasterised above that many vertices), so the PDF stays small.  The
script prints the file sizes and the time of the big case as ratios to the
small case (50 stars, 20 epochs) measured in the same run; it asserts nothing.

    python tests/benchmarks/bench_survey_figure.py [n_stars n_epochs [folder]]

The figures are kept in ``folder`` when it is given.
"""

import sys
import tempfile
import time
from pathlib import Path
from types import SimpleNamespace

import numpy as np

from deepwell.model.epochs import observations_at
from deepwell.model.joint import JointModel
from deepwell.model.kernels.orbit import period_from_a
from deepwell.model.layout import internal_star_values
from deepwell.report.figures.orbits import sky_figure
from deepwell.report.figures.style import RASTER_POINTS, save_figure

MASS, DISTANCE = 3.0e6, 7000.0  # Msun, pc: an invented nucleus


def survey(n_stars, n_epochs, seed=1):
    """A duck-typed fit result (model, internal vector) of an invented survey."""
    rng = np.random.default_rng(seed)
    stars = [f"s-{k:05d}" for k in range(n_stars)]
    epochs = np.linspace(2000.0, 2025.0, n_epochs)
    obs = observations_at(stars, epochs, [], 0.5, 10.0, relative_to="mass", dataset="survey")
    model = JointModel(obs, reference_epoch=2000.0, stars=stars)
    shared = {"mass": MASS, "distance": DISTANCE}
    vec = [shared.get(n, 0.0) for n in model.layout.shared_names]
    a = rng.uniform(50.0, 2000.0, n_stars)  # mas
    period = period_from_a(a, MASS, DISTANCE)
    for k in range(n_stars):
        vec += list(internal_star_values(period[k], rng.uniform(0.0, 0.95),
                                         np.radians(rng.uniform(0, 180)),
                                         np.radians(rng.uniform(0, 360)),
                                         np.radians(rng.uniform(0, 360)),
                                         2000.0 + rng.uniform(0.0, period[k])))
    vec = np.array(vec)
    pred = model.predict(vec)
    obs.positions["ra"] = pred.ra + rng.normal(0.0, 0.5, pred.ra.size)
    obs.positions["dec"] = pred.dec + rng.normal(0.0, 0.5, pred.dec.size)
    return SimpleNamespace(model=JointModel(obs, reference_epoch=2000.0, stars=stars),
                           internal=vec)


def measure(n_stars, n_epochs, folder):
    result = survey(n_stars, n_epochs)
    start = time.perf_counter()
    paths = save_figure(sky_figure(result), folder, f"sky_{n_stars}x{n_epochs}")
    seconds = time.perf_counter() - start
    sizes = {p.suffix[1:]: p.stat().st_size for p in paths}
    print(f"{n_stars} stars x {n_epochs} epochs = {n_stars * n_epochs} points: "
          f"PDF {sizes['pdf'] / 1e6:.2f} MB, PNG {sizes['png'] / 1e6:.2f} MB, "
          f"drawn and saved in {seconds:.1f} s")
    return sizes, seconds


def main(argv):
    n_stars, n_epochs = (int(argv[0]), int(argv[1])) if len(argv) >= 2 else (1000, 1000)
    print(f"points above {RASTER_POINTS} are rasterised")
    with tempfile.TemporaryDirectory() as tmp:
        folder = Path(argv[2]) if len(argv) == 3 else Path(tmp)
        small, t_small = measure(50, 20, folder)
        big, t_big = measure(n_stars, n_epochs, folder)
    print(f"ratios big / small: PDF {big['pdf'] / small['pdf']:.1f}, "
          f"PNG {big['png'] / small['png']:.1f}, time {t_big / t_small:.1f}")


if __name__ == "__main__":
    main(sys.argv[1:])
