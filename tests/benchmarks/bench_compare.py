"""Cost of the model ladder and of bootstrap refits against one plain fit, rich demo.

Run: ``python tests/benchmarks/bench_compare.py [--trials 100] [--workers 2]``.
Uses the bundled "rich" demo scenario (data made with general relativity).
Measured in the same run, after one warm-up fit (numba caches loaded):

* baseline: one ``fit_joint`` with the default model (start search, fit,
  covariance);
* the whole ladder (:func:`deepwell.fit.ladder.fit_ladder`, with one
  extended-mass radius), in total and per model;
* ``--trials`` bootstrap trials of the precession step on a local Dask
  cluster of ``--workers`` processes (each trial refits both models), with
  the cluster start-up excluded.

The issue's goals: the ladder in under 1 min and 100 bootstrap refits in
under 10 min on 2 cores.  No assertions; the figures are printed as times and
as ratios to the baseline.
"""

import argparse
import time
from pathlib import Path

from deepwell.fit.joint import fit_joint
from deepwell.fit.ladder import fit_ladder
from deepwell.tables.observations import read_observations
from deepwell.tables.settings import Settings
from deepwell.tools.calibrate import open_client
from deepwell.tools.compare import run_bootstrap

RICH = Path(__file__).resolve().parents[2] / "scenarios" / "rich"


def main(argv=None):
    p = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    p.add_argument("--trials", type=int, default=100, help="bootstrap trials (default 100)")
    p.add_argument("--workers", type=int, default=2, help="Dask worker processes (default 2)")
    p.add_argument("--test", default="precession", help="ladder step to bootstrap")
    args = p.parse_args(argv)
    obs = read_observations(RICH)
    settings = Settings()
    fit_joint(obs, settings)  # warm-up: numba caches, imports
    t0 = time.perf_counter()
    fit_joint(obs, settings)
    base = time.perf_counter() - t0
    print(f"baseline: one plain fit (default model) {base:7.1f} s")
    t0 = time.perf_counter()
    ladder = fit_ladder(obs, settings, scale_radii=(1000.0,))
    whole = time.perf_counter() - t0
    for f in ladder:
        print(f"  {f.rung.key:<16} {f.seconds:6.1f} s  chi2 {f.result.chi2:9.2f}")
    print(f"ladder of {len(ladder)} models: {whole:7.1f} s = {whole / base:5.2f} x baseline "
          f"(goal < 60 s)")
    with open_client(n_workers=args.workers) as client:
        client.run(lambda: None)
        t0 = time.perf_counter()
        deltas, info = run_bootstrap(ladder, args.trials, (args.test,), seed=0, client=client,
                                     progress=False)
        boot = time.perf_counter() - t0
    ok = deltas[args.test][0].size
    print(f"bootstrap of {args.test!r}: {args.trials} trials ({ok} usable, "
          f"{info['not_converged']} not converged) on {args.workers} workers: {boot:7.1f} s = "
          f"{boot / base:5.2f} x baseline; {boot / args.trials:5.2f} s per trial "
          f"(two refits each); 100 trials would take {100 * boot / args.trials:6.0f} s "
          f"(goal < 600 s)")


if __name__ == "__main__":
    main()
