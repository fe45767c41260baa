"""Benchmark: the Bayesian evidence by Laplace approximation and by nested sampling.

Run from the repository root::

    python tests/benchmarks/bench_evidence.py [--budget SECONDS] [--only NAME ...]

For three invented nuclei -- the one-star nucleus of ``tests/test_evidence.py``
(13 parameters), the four-star nucleus of ``tests/conftest.py`` (31) and the
rich demo ``scenarios/rich`` (79, relativistic) -- prints, measured in the same
run:

* the baseline: the wall time of one log-likelihood call;
* the Laplace evidence (from the fit's covariance) and, separately, the J^T J
  covariance it needs, as time and as a multiple of one call;
* dynesty's nested sampling with the default settings, run to its stopping
  rule or for at most ``--budget`` seconds (default 300); an unfinished run is
  extrapolated to its stopping rule with the iteration count that nested
  sampling needs, n_live (ln L_max - ln Z - ln(e^dlogz - 1)) (Skilling 2004:
  the prior volume shrinks by e^(-1/n_live) per iteration), taking ln Z from
  Laplace, at the measured seconds per iteration.

The fits themselves are not timed here (see ``bench_fit.py``).
"""

import argparse
import math
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[2]
sys.path.insert(0, str(ROOT))

from deepwell.fit.evidence import (  # noqa: E402
    ModelLikelihood,
    laplace_evidence,
    nested_log_evidence,
)
from deepwell.fit.joint import fit_joint  # noqa: E402
from deepwell.fit.least_squares import covariance  # noqa: E402
from deepwell.fit.stated_prior import stated_prior  # noqa: E402
from deepwell.tables.observations import read_observations  # noqa: E402
from deepwell.tables.settings import Settings, parse_settings  # noqa: E402
from deepwell.tools.simulate import write_scenario  # noqa: E402
from tests.conftest import SMALL_SCENARIO  # noqa: E402
from tests.test_evidence import NEWTONIAN, ONE_STAR  # noqa: E402


def best_of(fn, repeat=20):
    best = math.inf
    for _ in range(repeat):
        t = time.perf_counter()
        fn()
        best = min(best, time.perf_counter() - t)
    return best


def simulated(text, tmp):
    folder = Path(tempfile.mkdtemp(dir=tmp))
    (folder / "description.toml").write_text(text)
    return read_observations(write_scenario(folder / "description.toml", folder / "data"))


def bench(name, result, budget, dlogz=0.5):
    like = ModelLikelihood(result)
    theta = result.internal[result.free]
    call = best_of(lambda: like(theta))
    lap = laplace_evidence(result)
    t_lap = best_of(lambda: laplace_evidence(result), repeat=5)
    t_cov = best_of(lambda: covariance(result.model, result.internal, result.free), repeat=3)
    print(f"\n== {name}: {lap.n_dim} parameters, {result.n_data} data")
    print(f"one log-likelihood call      {call * 1e3:9.3f} ms   (baseline, 1)")
    print(f"Laplace from the fit's cov.  {t_lap * 1e3:9.3f} ms   ({t_lap / call:8.1f} calls)"
          f"   ln Z = {lap.log_evidence:.3f}")
    print(f"J^T J covariance it needs    {t_cov * 1e3:9.1f} ms   ({t_cov / call:8.1f} calls)")
    t0 = time.perf_counter()
    run = nested_log_evidence(like, stated_prior(result), dlogz=dlogz, max_seconds=budget,
                              rng=np.random.default_rng(1))
    seconds = time.perf_counter() - t0
    n_it, n_calls = run["n_iterations"], run["n_calls"]
    per_call = seconds / max(n_calls, 1)
    recent = run["iteration_calls"][-max(n_it // 5, 1):]  # the last fifth of the run
    nlive = max(100, 10 * lap.n_dim)
    need = nlive * (lap.log_likelihood_max - lap.log_evidence - math.log(math.expm1(dlogz)))
    state = "finished" if run["finished"] else "STOPPED at the budget"
    print(f"nested (dynesty, {nlive} live) {seconds:9.1f} s    ({seconds / call:8.3g} x baseline; "
          f"{n_calls} calls, {per_call / call:.2f} x baseline each with dynesty's own work), "
          f"{n_it} iterations, {state}")
    print(f"  calls per iteration: {n_calls / max(n_it, 1):.0f} over the run, "
          f"{np.mean(recent):.0f} in its last fifth")
    if run["finished"]:
        diff = run["log_evidence"] - lap.log_evidence
        err = run["log_evidence_err"]
        print(f"  ln Z = {run['log_evidence']:.3f} +- {err:.3f}; minus Laplace {diff:+.3f} "
              f"({diff / err:+.1f} sigma); iterations predicted {need:.0f}")
    else:
        left = max(need - n_it, 0.0) * np.mean(recent) * per_call
        print(f"  iterations to the stopping rule ~{need:.0f}; the {need - n_it:.0f} left at "
              f"the last fifth's {np.mean(recent):.0f} calls each: about {left / 3600:.1f} h "
              f"more ({left / call:.3g} x baseline); ln Z so far {run['log_evidence']:.1f} "
              "(an underestimate)")


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--budget", type=float, default=300.0, help="seconds per nested run")
    ap.add_argument("--only", choices=("one-star", "four-star", "rich"), action="append",
                    help="run only this scenario (repeatable; default all three)")
    args = ap.parse_args(argv)
    only = args.only or ("one-star", "four-star", "rich")
    with tempfile.TemporaryDirectory() as tmp:
        newton = parse_settings({"effects": NEWTONIAN})
        redshift = parse_settings({"effects": dict(NEWTONIAN, redshift="exact")})
        if "one-star" in only:
            bench("one-star nucleus (redshift on)",
                  fit_joint(simulated(ONE_STAR.format(f=1.0), tmp), redshift), args.budget)
        if "four-star" in only:
            bench("four-star nucleus (Newtonian)",
                  fit_joint(simulated(SMALL_SCENARIO.format(seed=4242), tmp), newton),
                  args.budget)
    if "rich" in only:
        rich = fit_joint(read_observations(ROOT / "scenarios" / "rich"), Settings())
        bench("rich demo (Romer, redshift, 1PN)", rich, args.budget)


if __name__ == "__main__":
    main()
