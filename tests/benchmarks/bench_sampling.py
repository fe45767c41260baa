"""Speed of posterior sampling on the rich demo; plain script, prints numbers and ratios.

Run from the repository root:

    python tests/benchmarks/bench_sampling.py [--newtonian] [--steps N] [--max-time S]

1. The default sampler (No-U-Turn chains, ``--chains`` on 2 processes) runs
   :func:`sample_posterior` until its convergence rule holds (or ``--max-time``
   per chain): wall time, convergence statement, effective samples per second
   of the slowest sampled shared parameter.
2. Baseline in the same run: one differential-evolution ensemble (the
   ``--sampler ensemble`` default, 2 n_dim + 2 walkers) for ``--steps`` steps
   in this process; its effective samples per second of the same parameter
   and its estimated time to the rule (55 tau, two ensembles on two cores).
   A run shorter than 50 tau gives a lower bound on tau, so that estimate is
   optimistic.
3. Cost ratios: one gradient (grouped forward differences) against one
   log-posterior call, both in this process.
"""

import argparse
import sys
import time
import warnings
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[2]))
ROOT = Path(__file__).resolve().parents[2]


def main(argv=None):
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--steps", type=int, default=1500, help="steps of the DE baseline")
    parser.add_argument("--newtonian", action="store_true",
                        help="plain Keplerian model (all relativistic effects off)")
    parser.add_argument("--max-time", type=float, default=1800.0,
                        help="wall-time budget per NUTS chain (s)")
    parser.add_argument("--chains", type=int, default=4, help="NUTS chains (2 at a time)")
    args = parser.parse_args(argv)

    from deepwell.fit.joint import fit_joint
    from deepwell.fit.sampling import LogPosterior, SamplerOptions, run_ensemble, sample_posterior
    from deepwell.fit.sampling.convergence import RUN_TAUS, autocorr_times, burn_in
    from deepwell.fit.sampling.gradient import WhitenedTarget
    from deepwell.fit.sampling.posterior import start_positions
    from deepwell.tables.observations import read_observations
    from deepwell.tables.settings import parse_settings

    effects = {"romer": False, "redshift": "off", "precession": False} if args.newtonian else {}
    settings = parse_settings({"effects": effects})
    t0 = time.perf_counter()
    result = fit_joint(read_observations(ROOT / "scenarios" / "rich"), settings)
    print(f"least-squares fit: {time.perf_counter() - t0:.1f} s, "
          f"{result.n_free} free parameters, effects: {'off' if args.newtonian else 'default'}")
    target = LogPosterior(result)
    shared = [i for i, n in enumerate(target.names) if ":" not in n]

    # 1. NUTS until the rule
    start = time.perf_counter()
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        post = sample_posterior(result, SamplerOptions(progress=False, max_time=args.max_time,
                                                       processes=2, n_chains=args.chains))
    wall = time.perf_counter() - start
    ess = post.ess
    k = shared[int(np.argmin(ess[shared]))]
    nuts_rate = ess[k] / wall
    print(f"\nNUTS, {len(post.n_steps)} chains on 2 processes: {wall:.0f} s wall until "
          f"{'the rule held' if post.converged else 'stopped (NOT converged)'}; draws "
          f"{post.n_steps}")
    print(post.statement)
    for line in post.diagnostics:
        print("  " + line)
    print(f"  slowest shared parameter {target.names[k]}: ESS {ess[k]:.0f}, "
          f"{nuts_rate:.2f} effective samples/s (wall, 2 cores)")
    m = post.quantity("mass")
    print(f"  mass {m.value:.5g} +{m.upper - m.value:.3g} -{m.value - m.lower:.3g} solMass")

    # 2. DE ensemble baseline, same parameter
    ndim = len(target.sampled)
    nw = 2 * ndim + 2
    rng = np.random.default_rng(2024)
    p0 = start_positions(target, result, nw, rng)
    cpu0 = time.process_time()
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        run = run_ensemble(target, p0, rng, n_steps=args.steps, thin=2)
    cpu = time.process_time() - cpu0
    burn = burn_in(run.chain, 2)
    tau = autocorr_times(run.chain[burn:], 2)
    kept = run.n_steps - 2 * burn
    de_ess = kept * nw / tau[k]
    de_rate = 2 * de_ess / cpu  # two ensembles on two cores
    t_rule = (RUN_TAUS + 5) * np.max(tau) * cpu / run.n_steps
    short = kept < RUN_TAUS * np.max(tau)
    print(f"\nDE ensemble baseline: {nw} walkers, {run.n_steps} steps, {cpu:.0f} s CPU; "
          f"{target.names[k]} tau {tau[k]:.0f} steps, {de_rate:.2f} effective samples/s "
          f"(2 cores); largest tau {np.max(tau):.0f} steps; estimated time to the rule "
          f"{t_rule / 60:.1f} min" + ("  [run < 50 tau: optimistic]" if short else ""))

    # 3. cost of a gradient against a log-posterior call
    wt = WhitenedTarget(target, target.base[target.sampled], target.start_cov(result.internal_cov))
    z = np.zeros(wt.n)
    cost_g, cost_l = [], []
    for _ in range(20):
        c = time.process_time()
        wt(z)
        cost_g.append(time.process_time() - c)
        c = time.process_time()
        target(target.base[target.sampled][None])
        cost_l.append(time.process_time() - c)
    g, lp = np.median(cost_g), np.median(cost_l)
    print(f"\none gradient {g * 1e3:.1f} ms = {g / lp:.2f} log-posterior calls "
          f"({lp * 1e3:.1f} ms); {wt.n_rows} model rows per gradient")
    print(f"\nratio NUTS / DE ensemble, effective samples per second of {target.names[k]}: "
          f"x{nuts_rate / de_rate:.1f}; time to the rule: NUTS {wall / 60:.1f} min against "
          f"DE ~{t_rule / 60:.0f} min (x{t_rule / wall:.1f})")
    return 0


if __name__ == "__main__":
    sys.exit(main())
