"""Benchmark: the fit of the rich demo from the automatic start, phase by phase.

Run from the repository root::

    python tests/benchmarks/bench_fit.py [scenario-folder]

Prints the wall time of each phase (imports, reading, start search, joint fit,
uncertainties, report tables, figures) and the model evaluation time per data
point, with the time of one numpy.sin + numpy.cos pass over an array of the
same size measured in the same run as the baseline.
"""

import sys
import tempfile
import time

t0 = time.perf_counter()
import numpy as np  # noqa: E402

from deepwell.fit.joint import build_model  # noqa: E402
from deepwell.fit.least_squares import bounds, covariance, minimise  # noqa: E402
from deepwell.fit.start import find_start  # noqa: E402
from deepwell.tables.observations import read_observations  # noqa: E402
from deepwell.tables.settings import Settings  # noqa: E402

t_import = time.perf_counter() - t0


def best_of(fn, repeat=5):
    best = np.inf
    for _ in range(repeat):
        t = time.perf_counter()
        fn()
        best = min(best, time.perf_counter() - t)
    return best


def main(folder="scenarios/rich"):
    times = {"imports": t_import}
    t = time.perf_counter()
    obs = read_observations(folder)
    settings = Settings()
    model = build_model(obs, settings)
    times["reading"] = time.perf_counter() - t
    model.residuals(np.ones(model.layout.size))  # compile / load the Kepler kernel
    t = time.perf_counter()
    start = find_start(model.keplerian(), settings)
    model, start_vec = model.start_from(start.vec, settings)
    times["start search"] = time.perf_counter() - t
    lo, hi, free = bounds(model, settings)
    t = time.perf_counter()
    vec, sol = minimise(model, start_vec, free, lo, hi)
    times["joint fit"] = time.perf_counter() - t
    t = time.perf_counter()
    covariance(model, vec, free)
    times["uncertainties"] = time.perf_counter() - t

    from deepwell.fit.joint import fit_joint
    from deepwell.report.figures.gallery import write_figures
    from deepwell.report.writer import write_report
    from deepwell.results import analyse

    result = fit_joint(obs, settings)
    with tempfile.TemporaryDirectory() as tmp:
        t = time.perf_counter()
        write_report(result, tmp, analyse(result), figures=False)
        times["report (no figures)"] = time.perf_counter() - t
        t = time.perf_counter()
        write_figures(result, tmp)
        times["figures"] = time.perf_counter() - t

    n = model.n_data
    t_model = best_of(lambda: model.residuals(vec), 20)
    x = np.random.default_rng(1).uniform(-10, 10, n)
    t_trig = best_of(lambda: (np.sin(x), np.cos(x)), 20)
    walkers = np.repeat(vec[None], 64, axis=0)
    t_batch = best_of(lambda: model.residuals(walkers), 5) / 64

    print(f"rich demo: {len(model.stars)} stars, {n} data, {int(free.sum())} fitted parameters;"
          f" effects: {model.effects.describe()}")
    for k, v in times.items():
        print(f"  {k:22s} {v:8.2f} s")
    print(f"  start search + joint fit {times['start search'] + times['joint fit']:8.2f} s"
          "   (goal: under 10 s on 2 cores)")
    print(f"model evaluation: {t_model * 1e6:.0f} us per call, {t_model / n * 1e9:.0f} ns per "
          f"data point; {t_model / t_trig:.1f}x one sin+cos pass over {n} values")
    print(f"model evaluation vectorised over 64 walkers: {t_batch / n * 1e9:.0f} ns per data "
          f"point per walker ({t_batch / t_model:.2f}x a single call)")
    print(f"optimiser: {sol.nfev} evaluations, status: {sol.message}")


if __name__ == "__main__":
    main(*sys.argv[1:])
